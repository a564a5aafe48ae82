"""`overlaps`, `correct`, `corrections` and `coverage`: the compilation's integrity."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from strata13.cli import render
from strata13.cli.common import (
    FormatOpt,
    OutOpt,
    StoreOpt,
    WidthOpt,
    check_format,
    command_line,
)
from strata13.cli.filters import (
    NO_FILTERS,
    SYNTHESIS_SCREENED,
    FilterArgs,
    SourceOpt,
    filter_options,
)

PAIR_COLUMNS = [
    "record_a",
    "source_a",
    "record_b",
    "source_b",
    "locality",
    "position_a_m",
    "position_b_m",
    "d13c_a",
    "d13c_b",
    "score",
    "decision",
    "reasons",
]


def overlaps(
    source: Annotated[
        str | None,
        typer.Option("--source", help="Only pairs involving this source.", show_default=False),
    ] = None,
    confirm: Annotated[
        Path | None,
        typer.Option(
            "--confirm",
            help="Store decisions: a CSV with record_a,record_b,decision (confirm|reject),note.",
            show_default=False,
        ),
    ] = None,
    position_tol: Annotated[
        float, typer.Option("--position-tol", help="Position tolerance (m).")
    ] = 0.5,
    value_tol: Annotated[
        float, typer.Option("--value-tol", help="δ tolerance (‰, harmonised).")
    ] = 0.15,
    fmt: FormatOpt = "table",
    out: OutOpt = None,
    store: StoreOpt = None,
) -> None:
    """Probable duplicates between sources — same or nearby locality, position and
    harmonised value within tolerances — scored and explained; --confirm stores your
    decisions (confirmed duplicates are then counted once; nothing is deleted)."""
    from strata13.compile import api

    path = api.store_path(store)
    check_format(fmt, out, path, allowed=("table", "csv", "json"))
    s = api.open_store(path)
    if confirm is not None:
        version, n_conf, n_rej = api.confirm_overlaps(s, confirm)
        render.message(
            f"stored {n_conf} confirmed and {n_rej} rejected pair(s) as version "
            f"{version}; confirmed duplicates are counted once from now on "
            "(--keep-duplicates keeps both)."
        )
        return
    pairs = api.overlaps(s, source, position_tol_m=position_tol, value_tol_permil=value_tol)
    if not len(pairs):
        render.message("no probable duplicates between sources.")
    render.table(PAIR_COLUMNS, pairs[PAIR_COLUMNS].itertuples(index=False, name=None), fmt, out)
    if len(pairs):
        render.note(
            f"{len(pairs)} pair(s); decide with --confirm FILE "
            "(columns record_a,record_b,decision,note)"
        )


@filter_options(screened=SYNTHESIS_SCREENED)
def coverage(
    filters: FilterArgs = NO_FILTERS,
    by: Annotated[
        str,
        typer.Option(
            "--by",
            help="region | paleolat-band[:DEG] (bands of DEG degrees, a divisor of 180; "
            "default 30).",
        ),
    ] = "region",
    bin_myr: Annotated[
        float | None,
        typer.Option(
            "--bin-myr",
            help="Bin width (default: the stages of the store's chart).",
            show_default=False,
        ),
    ] = None,
    fmt: FormatOpt = "table",
    out: Annotated[
        Path | None,
        typer.Option(
            "--out",
            help="Folder for coverage.csv and the heatmap (PNG, SVG, PDF).",
            show_default=False,
        ),
    ] = None,
    width: WidthOpt = "double",
    store: StoreOpt = None,
) -> None:
    """Samples and sections per time bin × region (or paleolatitude band) × component,
    empty cells included: where the curve is well founded and where it is not."""
    from strata13.compile import api

    from strata13.errors import OptionError

    if by.split(":", 1)[0] not in ("region", "paleolat-band"):
        raise OptionError(
            f"--by {by!r} is not region or paleolat-band[:DEG].", "Example: --by paleolat-band:15"
        )
    path = api.store_path(store)
    check_format(fmt, None, path, allowed=("table", "csv", "json"))
    api.check_width(width)
    if out is not None:
        api.output_dir(out, option="--out", stores=[path])
    s = api.open_store(path)
    command = None
    if out is not None:
        given = {"by": by, "bin_myr": bin_myr, "width": width}
        command = command_line("coverage", s.path, filters.given() | given)
    table, files, notes = api.coverage(
        s, filters.build(s), by, bin_myr, out, command=command, width=width
    )
    for note in notes:
        render.note(note)
    render.table(list(table.columns), table.itertuples(index=False, name=None), fmt, None)
    empty = int((table["n_samples"] == 0).sum())
    render.note(f"{len(table)} cells, {empty} empty")
    for name, sha in sorted(files.items()):
        render.note(f"  {name}  sha256 {sha[:16]}…")


LIST_COLUMNS = [
    "source_id",
    "section_id",
    "sample_id",
    "record_id",
    "field",
    "published",
    "corrected",
    "why",
    "created_utc",
    "status",
]


def correct(
    record: Annotated[
        str | None,
        typer.Argument(
            help="Record id (or a unique prefix of at least 6 characters).", show_default=False
        ),
    ] = None,
    field: Annotated[
        str | None, typer.Argument(help="Field to correct.", show_default=False)
    ] = None,
    value: Annotated[
        str | None, typer.Argument(help="The corrected value.", show_default=False)
    ] = None,
    why: Annotated[
        str | None,
        typer.Option(
            "--why", help="Why: what is wrong and how you know (required).", show_default=False
        ),
    ] = None,
    file: Annotated[
        Path | None,
        typer.Option(
            "--file",
            help="Many corrections: a CSV with record_id,field,value,why.",
            show_default=False,
        ),
    ] = None,
    store: StoreOpt = None,
) -> None:
    """Record a correction of a published value (kept as data, applied on every
    derivation, kept across re-ingests while the record exists)."""
    from strata13.compile import api

    from strata13.errors import OptionError

    if file is not None:
        if record or field or value or why:
            raise OptionError(
                "give either --file or RECORD FIELD VALUE --why, not both.",
                "One correction on the command line, many in a file.",
            )
        items = api.read_corrections(file)
    else:
        if not (record and field and value is not None):
            raise OptionError(
                "correct needs RECORD FIELD VALUE (or --file FILE).",
                'Example: strata13 correct 0e0e85f9f1 d13c_carb 1.2 --why "minus sign lost"',
            )
        items = [api.Correction(record, field, value, why or "")]
    s = api.open_store(api.store_path(store))
    res = api.correct(s, items)
    render.message(
        f"{res.added + res.replaced} correction(s) stored as version {res.version}"
        + (f" ({res.replaced} replacing earlier ones)" if res.replaced else "")
        + f"; re-derived: {', '.join(res.sources)}"
    )


def corrections(
    source: SourceOpt = None, fmt: FormatOpt = "table", out: OutOpt = None, store: StoreOpt = None
) -> None:
    """List the corrections (what was published, what it should be, why), ready to send to
    the authors; orphaned ones name records that a re-ingest removed."""
    from strata13.compile import api

    path = api.store_path(store)
    check_format(fmt, out, path, allowed=("table", "csv", "json"))
    rows = api.corrections(api.open_store(path), list(source or []))
    if not rows:
        render.message("no corrections.")
    render.table(LIST_COLUMNS, [[r[c] for c in LIST_COLUMNS] for r in rows], fmt, out)
    orphans = sum(r["status"] == "orphaned" for r in rows)
    if orphans:
        render.note(f"{orphans} orphaned: their records are no longer in the store")
