"""`strata13 query` and `strata13 sql`: records by filters, or read-only SQL over the views."""

from __future__ import annotations

from typing import Annotated

import typer
from strata13.cli import render
from strata13.cli.common import (
    FormatOpt,
    OutOpt,
    StoreOpt,
    check_format,
)
from strata13.cli.filters import NO_FILTERS, FilterArgs, filter_options

BRIEF = [
    "record_id",
    "source_id",
    "section_id",
    "sample_id",
    "position_m",
    "age_ma",
    "component",
    "d13c_carb",
    "d18o_carb",
    "screen",
]
BRIEF_SAMPLES = [
    "source_id",
    "section_id",
    "sample_id",
    "n_analyses",
    "position_m",
    "age_ma",
    "d13c_carb",
    "d13c_carb_sd",
    "d18o_carb",
    "d18o_carb_sd",
    "screen",
]


@filter_options
def query(
    filters: FilterArgs = NO_FILTERS,
    fmt: FormatOpt = "table",
    out: OutOpt = None,
    all_columns: Annotated[
        bool,
        typer.Option("--all-columns", help="Every column of the records view in table output."),
    ] = False,
    per_sample: Annotated[
        bool,
        typer.Option(
            "--per-sample",
            help="One row per sample: the mean of its analyses with their number and SD.",
        ),
    ] = False,
    store: StoreOpt = None,
) -> None:
    """Records for a time bin, a region, materials and sources."""
    from strata13.compile import api

    check_format(fmt, out, api.store_path(store))
    s = api.open_store(api.store_path(store))
    chosen = filters.build(s)
    tbl = api.query_arrow(s, chosen)
    n_records = tbl.num_rows
    if per_sample:
        tbl = api.per_sample(tbl)
    if fmt == "table" and not all_columns:
        tbl = tbl.select(BRIEF_SAMPLES if per_sample else BRIEF)
    if tbl.num_rows == 0:
        render.message("no records match.")
    render.arrow_out(tbl, fmt, out)
    if tbl.num_rows:
        render.note(
            f"{render.plural(tbl.num_rows, 'sample')} from {render.plural(n_records, 'record')}"
            if per_sample
            else render.plural(tbl.num_rows, "record")
        )


def sql(
    statement: Annotated[str, typer.Argument(help="One SELECT (or EXPLAIN) over the views.")],
    fmt: FormatOpt = "table",
    out: OutOpt = None,
    timeout: Annotated[
        float, typer.Option("--timeout", help="Seconds before the query is stopped.")
    ] = 30.0,
    max_rows: Annotated[int, typer.Option("--max-rows", help="Row cap.")] = 100_000,
    max_mb: Annotated[
        float, typer.Option("--max-mb", help="Cap on the answer's size in MiB (Arrow bytes).")
    ] = 64.0,
    store: StoreOpt = None,
) -> None:
    """Read-only SQL over the views records, sources, localities, sections, samples, …"""
    from strata13.compile import api

    check_format(fmt, out, api.store_path(store))
    res = api.sql(api.open_store(api.store_path(store)), statement, timeout, max_rows, max_mb)
    render.table(res.columns, res.rows, fmt, out)
    if res.cut_by == "rows":
        render.message(f"only the first {max_rows} rows are shown (--max-rows).")
    elif res.cut_by == "bytes":
        render.message(
            f"only the first {len(res.rows)} rows are shown: the answer reached "
            f"{max_mb:g} MiB (--max-mb)."
        )
    elif not res.rows:
        render.message("no rows.")
