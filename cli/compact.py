"""`strata13 compact`: remove the data files no version references and merge small ones."""

from __future__ import annotations

from typing import Annotated

import typer
from strata13.cli import render
from strata13.cli.common import StoreOpt


def compact(
    dry_run: Annotated[
        bool, typer.Option("--dry-run", help="List the files that would go; change nothing.")
    ] = False,
    merge: Annotated[
        bool,
        typer.Option("--merge/--no-merge", help="Also merge the small data files ingests leave."),
    ] = True,
    store: StoreOpt = None,
) -> None:
    """Remove Parquet files that no version references (left by a writer killed before its
    commit) and merge small data files. Every version stays readable with the same rows."""
    from strata13.compile import api

    done = api.compact(api.open_store(api.store_path(store)), dry_run, merge)
    found = done.orphans
    size = f"{found.size / 1e6:.2f} MB" if found.size >= 1e5 else f"{found.size} bytes"
    if not found.files:
        render.message("no unreferenced data files; nothing to remove.")
    elif dry_run:
        for p in found.files:
            render.message(f"  {p}")
        render.message(f"dry run: {len(found.files)} unreferenced data files ({size}) would go.")
    else:
        render.message(
            f"removed {len(found.files)} data files no version referenced ({size}); "
            "every version is still readable."
        )
    if done.version is not None:
        render.message(
            f"merged the data files the newest version reads: {done.files_before} → "
            f"{done.files_after}, recorded as version {done.version}; every version reads "
            "the same rows."
        )
    elif merge and not dry_run:
        render.message(f"the newest version reads {done.files_after} data files; none merged.")
    elif dry_run:
        render.message(f"the newest version reads {done.files_after} data files.")
