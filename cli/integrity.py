"""`strata13 correct` and `strata13 corrections`: the corrections layer."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from strata13.cli import render
from strata13.cli.common import FormatOpt, OutOpt, SourceOpt, StoreOpt, check_format

LIST_COLUMNS = ["source_id", "section_id", "sample_id", "record_id", "field", "published",
                "corrected", "why", "created_utc", "status"]


def correct(record: Annotated[str | None, typer.Argument(
                help="Record id (or a unique prefix of at least 6 characters).",
                show_default=False)] = None,
            field: Annotated[str | None, typer.Argument(help="Field to correct.",
                                                       show_default=False)] = None,
            value: Annotated[str | None, typer.Argument(help="The corrected value.",
                                                       show_default=False)] = None,
            why: Annotated[str | None, typer.Option(
                "--why", help="Why: what is wrong and how you know (required).",
                show_default=False)] = None,
            file: Annotated[Path | None, typer.Option(
                "--file", help="Many corrections: a CSV with record_id,field,value,why.",
                show_default=False)] = None,
            store: StoreOpt = None) -> None:
    """Record a correction of a published value (kept as data, applied on every
    derivation, kept across re-ingests while the record exists)."""
    from strata13.compile import api
    from strata13.compile.corrections import Correction, read_file
    from strata13.compile.errors import OptionError

    if file is not None:
        if record or field or value or why:
            raise OptionError("give either --file or RECORD FIELD VALUE --why, not both.",
                              "One correction on the command line, many in a file.")
        items = read_file(file)
    else:
        if not (record and field and value is not None):
            raise OptionError("correct needs RECORD FIELD VALUE (or --file FILE).",
                              "Example: strata13 correct 0e0e85f9f1 d13c_carb 1.2 --why "
                              "\"minus sign lost\"")
        items = [Correction(record, field, value, why or "")]
    s = api.open_store(api.store_path(store))
    res = api.correct(s, items)
    render.message(f"{res.added + res.replaced} correction(s) stored as version {res.version}"
                   + (f" ({res.replaced} replacing earlier ones)" if res.replaced else "")
                   + f"; re-derived: {', '.join(res.sources)}")


def corrections(source: SourceOpt = None, fmt: FormatOpt = "table", out: OutOpt = None,
                store: StoreOpt = None) -> None:
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
