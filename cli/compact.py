"""`strata13 compact`: remove the data files no version of the store references."""

from __future__ import annotations

from typing import Annotated

import typer
from strata13.cli import render
from strata13.cli.common import StoreOpt


def compact(
    dry_run: Annotated[
        bool, typer.Option("--dry-run", help="List the files that would go; remove nothing.")
    ] = False,
    store: StoreOpt = None,
) -> None:
    """Remove Parquet files that no version references (left by a writer killed before its
    commit). Every version stays readable; no new version is made."""
    from strata13.compile import api

    found = api.compact(api.open_store(api.store_path(store)), dry_run)
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
