"""`strata13 demo`: the invented demo compilation, end to end."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from strata13.cli import render


def demo(
    out: Annotated[
        Path, typer.Option("--out", help="Folder for the demo store and export.")
    ] = Path("strata13-demo"),
) -> None:
    """Build a store from the invented demo data, show a broken sheet's report, query, export."""
    from strata13.compile import api

    for kind, payload in api.run_demo(out):
        if kind == "say":
            render.message(payload)
        elif kind == "note":
            render.note(payload)
        elif kind == "report":
            render.report(payload, limit_info=True)
        elif kind == "table":
            cols, rows = payload
            render.table(cols, rows, "table", None, stderr=True)
