"""`strata13 move-catalog`: put a store's catalog on a PostgreSQL server, or back in a file."""

from __future__ import annotations

from typing import Annotated

import typer
from strata13.cli import render
from strata13.cli.common import StoreOpt


def move_catalog(
    to: Annotated[
        str,
        typer.Option(
            "--to",
            help="The new catalog: postgres:CONNINFO (an empty database; a libpq connection "
            "string or service name, no password in it) or 'embedded' (a file in the store "
            "folder).",
            show_default=False,
        ),
    ],
    store: StoreOpt = None,
) -> None:
    """Copy the store's catalog, every version with it, to a new place and use it from now
    on; the data files stay where they are and the old catalog is kept."""
    from strata13.compile import api

    moved = api.move_catalog(api.open_store(api.store_path(store)), to)
    render.message(
        f"moved the catalog from {moved.source} to {moved.target}: {moved.versions} "
        f"versions, {moved.rows} catalog rows in {moved.tables} tables, checked; "
        f"{moved.left_behind}."
    )
