"""`strata13 sources` and `strata13 history`: what the store holds, and every version."""

from __future__ import annotations

import json

from strata13.cli import render
from strata13.cli.common import FormatOpt, OutOpt, StoreOpt, check_format


def sources(store: StoreOpt = None, fmt: FormatOpt = "table", out: OutOpt = None) -> None:
    """List the sources in the store with their record and quarantine counts."""
    from strata13.compile import api

    check_format(fmt, out, api.store_path(store))
    rows = api.sources(api.open_store(api.store_path(store)))
    cols = [
        "source_id",
        "kind",
        "year",
        "n_records",
        "quarantined",
        "ingested_version",
        "file_name",
        "citation",
    ]
    if not rows:
        render.message("the store holds no sources yet.")
    render.table(cols, [[r[c] for c in cols] for r in rows], fmt, out)


def history(store: StoreOpt = None, fmt: FormatOpt = "table", out: OutOpt = None) -> None:
    """List every version of the store: when, what command, what changed."""
    from strata13.compile import api

    check_format(fmt, out, api.store_path(store))
    versions = api.history(api.open_store(api.store_path(store)))
    render.table(
        ["version", "time_utc", "command", "detail", "summary"],
        [
            [v.version, v.time, v.command, v.detail, json.dumps(v.summary, sort_keys=True)]
            for v in versions
        ],
        fmt,
        out,
    )
