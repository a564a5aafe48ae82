"""`strata13 propose-map`: draft a commented mapping file for a sheet nobody has mapped."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from strata13.cli import render


def propose_map(
    sheet: Annotated[Path, typer.Argument(help="The sheet (xlsx, ods, csv, tsv).")],
    sheet_name: Annotated[
        str | None,
        typer.Option(
            "--sheet", help="Sheet name or 1-based number (workbooks).", show_default=False
        ),
    ] = None,
    out: Annotated[
        Path | None,
        typer.Option(
            "--out",
            help="Write the mapping here (never over an existing file).",
            show_default=False,
        ),
    ] = None,
) -> None:
    """Propose a mapping: header row found, columns matched to fields with units and scales,
    cells looked at (decimal commas, missing tokens, censored values, vocabulary terms), and
    FILL IN placeholders for what the sheet cannot say (ingest refuses them until filled)."""
    from strata13.compile import api

    proposal = api.propose_map(sheet, sheet_name, out)
    if out is None:
        typer.echo(proposal.text, nl=False)
    else:
        render.message(f"mapping drafted → {out}")
    for line in proposal.summary():
        render.message(line)
