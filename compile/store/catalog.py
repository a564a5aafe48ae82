"""Where a store's DuckLake catalog lives, behind one small interface.

The store folder always holds the Parquet data; the catalog (tables, snapshots, file list)
is a database DuckLake attaches. Today that is an embedded SQLite file in the folder; a
shared server catalog is one more class with the same three methods, not edits elsewhere.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Protocol

from strata13.errors import StoreError

if TYPE_CHECKING:
    import duckdb

CATALOG_FILE = "catalog.sqlite"


def quote(text: str) -> str:
    """A SQL string literal (DuckDB's ATTACH takes no bound parameters)."""
    return "'" + text.replace("'", "''") + "'"


class Catalog(Protocol):
    """A DuckLake catalog backend: where it is and how a connection attaches it."""

    def exists(self) -> bool:
        """Whether the catalog is there to be opened."""

    def target(self) -> str:
        """The ``ducklake:…`` address DuckDB's ATTACH takes."""

    def writer_options(self) -> list[str]:
        """ATTACH options a writer needs beyond the data path (journal, timeouts)."""

    def describe(self) -> str:
        """The catalog for messages: a path or a server address without secrets."""


@dataclass(frozen=True)
class SqliteCatalog:
    """The embedded catalog: one SQLite file in the store folder (WAL journal)."""

    path: Path

    def exists(self) -> bool:
        return self.path.is_file()

    def target(self) -> str:
        return "ducklake:sqlite:" + str(self.path)

    def writer_options(self) -> list[str]:
        return ["META_JOURNAL_MODE 'WAL'", "META_BUSY_TIMEOUT 30000"]

    def describe(self) -> str:
        return str(self.path)


def attach(
    con: duckdb.DuckDBPyConnection, catalog: Catalog, data_path: Path, read_only: bool
) -> None:
    """Attach ``catalog`` as ``lake`` on ``con`` with its data in ``data_path``.

    Writers turn data inlining off, so every row lives in Parquet files of the store folder.
    """
    import duckdb

    opts = [f"DATA_PATH {quote(str(data_path) + '/')}", "OVERRIDE_DATA_PATH TRUE"]
    if read_only:
        opts.append("READ_ONLY")
    else:
        opts += ["DATA_INLINING_ROW_LIMIT 0", *catalog.writer_options()]
    try:
        con.execute(f"ATTACH {quote(catalog.target())} AS lake ({', '.join(opts)})")
    except duckdb.Error as exc:
        raise StoreError(
            f"the store catalog {catalog.describe()} could not be opened ({exc}).",
            "Check the folder's permissions; if another program changed the "
            "catalog, restore it from a copy.",
        ) from None
