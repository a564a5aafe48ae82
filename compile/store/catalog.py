"""Where a store's DuckLake catalog lives, behind one small interface.

The store folder always holds the Parquet data; the catalog (tables, snapshots, file list)
is a database DuckLake attaches. The default is an embedded SQLite file in the folder
(``SqliteCatalog``); a group shares one store through a PostgreSQL catalog
(``postgres.PostgresCatalog``). Each backend says how a connection attaches it, which
extensions that needs, and how writers take turns (``writer_lock``): the store's code above
this interface is the same for both.
"""

from __future__ import annotations

import contextlib
import fcntl
import os
import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Protocol

from strata13.compile.store.extensions import EMBEDDED

from strata13.errors import OptionError, StoreError

if TYPE_CHECKING:
    import duckdb

CATALOG_FILE = "catalog.sqlite"
LOCK_FILE = "writer.lock"
POSTGRES_PREFIX = "postgres:"
EMBEDDED_SPEC = "embedded"  # what `move-catalog --to` calls the SQLite file in the folder


def quote(text: str) -> str:
    """A SQL string literal (DuckDB's ATTACH takes no bound parameters)."""
    return "'" + text.replace("'", "''") + "'"


class WriterLock(Protocol):
    """The writer lock while it is held."""

    def still_held(self) -> bool:
        """Whether this writer still holds the lock (checked just before a commit)."""


class Catalog(Protocol):
    """A DuckLake catalog backend: where it is, how a connection attaches it, how writers
    take turns."""

    @property
    def extensions(self) -> tuple[str, ...]:
        """The DuckDB extensions a connection to it loads."""

    def exists(self) -> bool:
        """Whether the catalog is there to be opened."""

    def target(self) -> str:
        """The ``ducklake:…`` address DuckDB's ATTACH takes."""

    def writer_options(self) -> list[str]:
        """ATTACH options a writer needs beyond the data path (journal, timeouts)."""

    def describe(self) -> str:
        """The catalog for messages: a path or a server address without secrets."""

    def spec(self) -> str:
        """What the store file says about the catalog (never a password)."""

    def writer_lock(
        self, command: str, timeout_s: float
    ) -> contextlib.AbstractContextManager[WriterLock]:
        """Hold the one writer lock of this catalog for the block, waiting at most
        ``timeout_s`` seconds (StoreError naming the holder after that)."""

    def is_fresh(self) -> bool:
        """Whether the catalog holds no committed version (init may use it)."""

    def unreachable(self, exc: BaseException) -> StoreError | None:
        """The sentence for a failure that is the catalog going away (None: not that)."""


@dataclass(frozen=True)
class _FileLock:
    def still_held(self) -> bool:
        return True  # the kernel holds a flock until the process ends


@dataclass(frozen=True)
class SqliteCatalog:
    """The embedded catalog: one SQLite file in the store folder (WAL journal); writers
    take turns with a flock on ``writer.lock`` beside it (released by the kernel on a
    crash)."""

    path: Path
    extensions: tuple[str, ...] = EMBEDDED

    def exists(self) -> bool:
        return self.path.is_file()

    def target(self) -> str:
        return "ducklake:sqlite:" + str(self.path)

    def writer_options(self) -> list[str]:
        return ["META_JOURNAL_MODE 'WAL'", "META_BUSY_TIMEOUT 30000"]

    def describe(self) -> str:
        return str(self.path)

    def spec(self) -> str:
        return self.path.name

    def is_fresh(self) -> bool:
        return not self.exists()

    def unreachable(self, exc: BaseException) -> StoreError | None:
        return None

    @contextlib.contextmanager
    def writer_lock(self, command: str, timeout_s: float) -> Iterator[WriterLock]:
        fd = os.open(self.path.parent / LOCK_FILE, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            deadline = time.monotonic() + timeout_s
            while True:
                try:
                    fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                    break
                except BlockingIOError:
                    if time.monotonic() > deadline:
                        raise StoreError(
                            f"another strata13 process has been writing to "
                            f"{self.path.parent} for over {timeout_s:g} s.",
                            "Wait for it to finish, or check for a hung process.",
                        ) from None
                    time.sleep(0.05)
            yield _FileLock()
        finally:
            with contextlib.suppress(OSError):
                fcntl.flock(fd, fcntl.LOCK_UN)
            os.close(fd)


def from_spec(spec: str | None, folder: Path) -> Catalog:
    """The catalog a store file (or ``--catalog``) names: ``postgres:CONNINFO`` or the
    embedded file (None, "embedded" or the file's name)."""
    if spec is None or spec in (CATALOG_FILE, EMBEDDED_SPEC, ""):
        return SqliteCatalog(folder / CATALOG_FILE)
    if spec.startswith(POSTGRES_PREFIX):
        from strata13.compile.store.postgres import PostgresCatalog

        return PostgresCatalog.from_conninfo(spec[len(POSTGRES_PREFIX) :])
    raise OptionError(
        f"the catalog {spec!r} is neither {EMBEDDED_SPEC!r} nor postgres:CONNINFO.",
        "Example: --catalog 'postgres:host=db.example.org dbname=group_store' "
        "or --catalog postgres:SERVICE_NAME.",
    )


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
        gone = catalog.unreachable(exc)
        if gone is not None:
            raise gone from None
        raise StoreError(
            f"the store catalog {catalog.describe()} could not be opened ({exc}).",
            "Check the folder's permissions; if another program changed the "
            "catalog, restore it from a copy.",
        ) from None
