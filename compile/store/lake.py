"""The store: a DuckLake lakehouse (SQLite catalog + Parquet files) in one folder.

Layout of a store folder::

    strata13-store.json   marker: what this folder is (only init/ingest/demo create it)
    catalog.sqlite        DuckLake catalog (WAL journal, busy timeout)
    data/                 Parquet data files (inlining off: all data are Parquet)
    writer.lock           flock target: one writer at a time, released by the kernel on crash

Every write (init, ingest, recompute) is one transaction across all tables; its DuckLake
snapshot id is the store version. Writers take the OS lock *before* attaching and write
from one connection and one thread; readers attach READ_ONLY and pin one snapshot.
"""

from __future__ import annotations

import contextlib
import fcntl
import json
import os
import time
from collections.abc import Iterator
from dataclasses import dataclass
from functools import cache
from pathlib import Path
from typing import TYPE_CHECKING, Any

from strata13.schemas.fields import SCHEMA_VERSION
from strata13.schemas.records import RECORDS_COLUMNS, TABLES

from strata13.errors import NotAStoreError, StoreError

if TYPE_CHECKING:
    import duckdb

MARKER = "strata13-store.json"
CATALOG = "catalog.sqlite"
DATA = "data"
LOCK = "writer.lock"
LOCK_TIMEOUT_S = float(os.environ.get("STRATA13_LOCK_TIMEOUT", "600"))
READ_VIEWS = (
    "analyses",
    "sources",
    "localities",
    "sections",
    "samples",
    "quarantine",
    "regions",
    "chains",
    "settings",
    "commits",
    "runs",
    "age_ties",
    "age_draws",
    "screen_results",
    "run_qc",
    "corrections",
    "duplicates",
)


@cache
def _extension_files() -> dict[str, str | None]:
    """Paths of the signed DuckLake and SQLite extension binaries shipped as wheels."""
    out: dict[str, str | None] = {}
    for name, module in (
        ("ducklake", "duckdb_extension_ducklake"),
        ("sqlite_scanner", "duckdb_extension_sqlite_scanner"),
    ):
        try:
            mod = __import__(module)
            hits = sorted(Path(mod.__file__).parent.glob("extensions/*/*.duckdb_extension"))
            out[name] = str(hits[-1]) if hits else None
        except ImportError:
            out[name] = None
    return out


def connect() -> duckdb.DuckDBPyConnection:
    """An in-memory DuckDB with the DuckLake and SQLite extensions loaded."""
    import duckdb

    con = duckdb.connect(":memory:")
    for name, path in _extension_files().items():
        try:
            if path:
                con.execute(f"LOAD '{path}'")
            else:  # no wheel for this platform: DuckDB's own signed INSTALL
                con.execute(f"INSTALL {name}")
                con.execute(f"LOAD {name}")
        except duckdb.Error as exc:
            raise StoreError(
                f"the DuckDB extension {name} could not be loaded ({exc}).",
                "Install duckdb-extension-ducklake and "
                "duckdb-extension-sqlite-scanner matching your duckdb version.",
            ) from None
    return con


def _q(text: str) -> str:
    return "'" + text.replace("'", "''") + "'"


def is_store(path: Path) -> bool:
    return (path / MARKER).is_file()


@dataclass
class Version:
    version: int
    time: str
    command: str
    detail: str
    summary: dict[str, Any]


class Store:
    """One store folder. Open it with :meth:`open` or create it with :meth:`create`."""

    def __init__(self, path: Path) -> None:
        self.path = path.resolve()
        self._pending_files: list[Path] = []  # added in the open transaction

    # ------------------------------------------------------------ creation and opening
    @classmethod
    def open(cls, path: Path) -> Store:
        if not is_store(path):
            what = "does not exist" if not path.exists() else "is not a strata13 store"
            raise NotAStoreError(
                f"{path} {what}.",
                "Create one with `strata13 init --store DIR` or name an "
                "existing store with --store (or STRATA13_STORE).",
            )
        try:
            marker = json.loads((path / MARKER).read_text(encoding="utf-8"))
            ok = isinstance(marker, dict) and marker.get("format") == "strata13 store"
        except (json.JSONDecodeError, UnicodeDecodeError, OSError):
            ok = False
        if not ok:
            raise NotAStoreError(
                f"{path / MARKER} is damaged, so {path} cannot be trusted as a store.",
                "Restore the folder from a copy.",
            )
        if str(marker.get("schema_version")) > SCHEMA_VERSION:
            raise StoreError(
                f"{path} was written by a newer strata13 (schema "
                f"{marker.get('schema_version')}; this one reads {SCHEMA_VERSION}).",
                "Upgrade strata13 to use this store.",
            )
        if not (path / CATALOG).is_file():
            raise StoreError(f"{path} has no catalog ({CATALOG}).", "Restore it from a copy.")
        return cls(path)

    @classmethod
    def create(
        cls,
        path: Path,
        settings: dict[str, Any],
        settings_hash: str,
        regions: list[tuple[str, str, str]] | None = None,
        made_by: str = "init",
    ) -> Store:
        """Make a new store folder with every table, the settings and (optional) regions.

        The store is built in a hidden sibling folder and renamed into place, so a store
        folder either does not exist or is complete; two processes creating the same store
        at once get one store (the loser raises StoreError and can open the winner's).
        """
        import shutil
        import uuid

        if is_store(path):
            raise StoreError(
                f"{path} is already a strata13 store.", "Use it as it is, or choose another folder."
            )
        if path.exists() and (not path.is_dir() or any(path.iterdir())):
            raise StoreError(
                f"{path} exists and is not an empty folder.",
                "Choose a new or empty folder for the store.",
            )
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.parent / f".{path.name}.creating-{uuid.uuid4().hex[:12]}"
        tmp.mkdir()
        try:
            store = cls(tmp)
            (tmp / DATA).mkdir()
            with store.writer() as con:
                con.execute("BEGIN")
                for name, columns in TABLES.items():
                    cols = ", ".join(f'"{c}" {t}' for c, t in columns)
                    con.execute(f"CREATE TABLE lake.{name} ({cols})")
                store.write_settings(con, settings, settings_hash)
                for name, geojson, src in regions or []:
                    con.execute("INSERT INTO lake.regions VALUES (?, ?, ?)", [name, geojson, src])
                store._record_commit(
                    con, "init", "", settings_hash, {"regions": len(regions or [])}
                )
                con.execute("COMMIT")
            (tmp / MARKER).write_text(
                json.dumps(
                    {
                        "format": "strata13 store",
                        "schema_version": SCHEMA_VERSION,
                        "catalog": CATALOG,
                        "data": DATA + "/",
                        "made_by": made_by,
                    },
                    indent=1,
                )
                + "\n"
            )
            try:
                os.rename(tmp, path)  # atomic; replaces an empty folder, fails on a full one
            except OSError:
                raise StoreError(
                    f"{path} was created by another process meanwhile.",
                    "Run the command again; it will use that store.",
                ) from None
        except BaseException:
            shutil.rmtree(tmp, ignore_errors=True)
            raise
        return cls(path)

    # ------------------------------------------------------------ connections
    def _attach(self, con: duckdb.DuckDBPyConnection, read_only: bool) -> None:
        import duckdb

        catalog = self.path / CATALOG
        data = str(self.path / DATA) + "/"
        opts = [f"DATA_PATH {_q(data)}", "OVERRIDE_DATA_PATH TRUE"]
        if read_only:
            opts.append("READ_ONLY")
        else:
            opts += [
                "DATA_INLINING_ROW_LIMIT 0",
                "META_JOURNAL_MODE 'WAL'",
                "META_BUSY_TIMEOUT 30000",
            ]
        try:
            target = _q("ducklake:sqlite:" + str(catalog))
            con.execute(f"ATTACH {target} AS lake ({', '.join(opts)})")
        except duckdb.Error as exc:
            raise StoreError(
                f"the store catalog {catalog} could not be opened ({exc}).",
                "Check the folder's permissions; if another program changed the "
                "catalog, restore it from a copy.",
            ) from None

    @contextlib.contextmanager
    def writer(self) -> Iterator[duckdb.DuckDBPyConnection]:
        """Exclusive writer: flock first, then attach read-write; one connection, one thread."""
        lock_path = self.path / LOCK
        fd = os.open(lock_path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            deadline = time.monotonic() + LOCK_TIMEOUT_S
            while True:
                try:
                    fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                    break
                except BlockingIOError:
                    if time.monotonic() > deadline:
                        raise StoreError(
                            f"another strata13 process has been writing to {self.path}"
                            f" for over {LOCK_TIMEOUT_S:g} s.",
                            "Wait for it to finish, or check for a hung process.",
                        ) from None
                    time.sleep(0.05)
            con = connect()
            self._pending_files = []
            try:
                self._attach(con, read_only=False)
                yield con
            except BaseException:
                with contextlib.suppress(Exception):
                    con.execute("ROLLBACK")
                if not self._landed(con):  # files of a transaction that did not commit
                    for p in self._pending_files:
                        p.unlink(missing_ok=True)
                raise
            finally:
                self._pending_files = []
                con.close()
        finally:
            with contextlib.suppress(OSError):
                fcntl.flock(fd, fcntl.LOCK_UN)
            os.close(fd)

    def reader(self, version: int | None = None) -> tuple[duckdb.DuckDBPyConnection, int]:
        """A read-only connection whose views all show one snapshot (the latest or ``version``)."""
        import duckdb

        con = connect()
        self._attach(con, read_only=True)
        latest = self._latest(con)
        v = latest if version is None else version
        if version is not None and not (1 <= version <= latest):
            con.close()
            raise StoreError(
                f"version {version} does not exist; this store has versions 1 to {latest}.",
                "See `strata13 history`.",
            )
        try:
            tables = self._tables_at(con, v)
            for name in READ_VIEWS:
                # a version written before a column existed shows it as NULL: the views
                # always have today's columns, so old versions stay readable
                wanted = RECORDS_COLUMNS if name == "analyses" else [c for c, _ in TABLES[name]]
                types = dict(TABLES[name])
                view = "records" if name == "analyses" else name
                if name not in tables:  # a table added after this version: empty, typed
                    cols = ", ".join(f'CAST(NULL AS {types[c]}) AS "{c}"' for c in wanted)
                    con.execute(f"CREATE TEMP VIEW {view} AS SELECT {cols} WHERE false")
                    continue
                have = {
                    r[0]
                    for r in con.execute(
                        f"DESCRIBE SELECT * FROM lake.{name} AT (VERSION => {int(v)})"
                    ).fetchall()
                }
                cols = ", ".join(
                    f'"{c}"' if c in have else f'CAST(NULL AS {types[c]}) AS "{c}"' for c in wanted
                )
                con.execute(
                    f"CREATE TEMP VIEW {view} AS SELECT {cols} FROM lake.{name} "
                    f"AT (VERSION => {int(v)})"
                )
        except duckdb.Error as exc:
            con.close()
            raise StoreError(
                f"version {v} of the store cannot be read ({exc}).",
                "The version may predate the store's tables; see `strata13 history`.",
            ) from None
        return con, v

    def _landed(self, con: duckdb.DuckDBPyConnection) -> bool:
        """Whether every file added in this writer session is referenced by the catalog."""
        if not self._pending_files:
            return True
        names: set[str] = set()
        try:
            for table in {p.parent.name for p in self._pending_files}:
                names |= {
                    r[0]
                    for r in con.execute(
                        "SELECT data_file FROM ducklake_list_files('lake', ?)", [table]
                    ).fetchall()
                }
        except Exception:  # the catalog cannot be asked: keep the files, they are harmless
            return True
        return all(any(str(p.name) in n for n in names) for p in self._pending_files)

    @staticmethod
    def _tables_at(con: duckdb.DuckDBPyConnection, version: int) -> set[str]:
        """The tables that existed at ``version`` (later schema versions add tables)."""
        names = set()
        for name in READ_VIEWS:
            try:
                con.execute(f"SELECT 1 FROM lake.{name} AT (VERSION => {int(version)}) LIMIT 0")
            except Exception:  # duckdb.Error: the table did not exist at that version
                continue
            names.add(name)
        return names

    @staticmethod
    def _latest(con: duckdb.DuckDBPyConnection) -> int:
        return int(con.execute("SELECT max(snapshot_id) FROM lake.snapshots()").fetchone()[0])

    def latest_version(self) -> int:
        con = connect()
        try:
            self._attach(con, read_only=True)
            return self._latest(con)
        finally:
            con.close()

    def migrate(self, con: duckdb.DuckDBPyConnection) -> list[str]:
        """Add the columns today's schema has and the store's tables lack (inside the
        caller's transaction, under the writer lock). Returns what was added."""
        added = []
        existing = {
            r[0]
            for r in con.execute(
                "SELECT table_name FROM duckdb_tables() WHERE database_name = 'lake'"
            ).fetchall()
        }
        for name, columns in TABLES.items():
            if name not in existing:
                cols = ", ".join(f'"{c}" {t}' for c, t in columns)
                con.execute(f"CREATE TABLE lake.{name} ({cols})")
                added.append(name)
                continue
            have = {r[0]: r[1] for r in con.execute(f"DESCRIBE lake.{name}").fetchall()}
            for col, sqltype in columns:
                if col in have and have[col] != sqltype:
                    raise StoreError(
                        f"{self.path}: column {name}.{col} is {have[col]} but this "
                        f"strata13 writes {sqltype}.",
                        "The store was made by an incompatible development "
                        "version; export what you need and build a new store.",
                    )
                if col not in have:
                    con.execute(f'ALTER TABLE lake.{name} ADD COLUMN "{col}" {sqltype}')
                    added.append(f"{name}.{col}")
        return added

    def add_chains(self, con: duckdb.DuckDBPyConnection, chains: dict[str, str]) -> None:
        """Store each distinct chain of steps once, keyed by its hash."""
        known = {r[0] for r in con.execute("SELECT chain_id FROM lake.chains").fetchall()}
        for cid, steps in sorted(chains.items()):
            if cid not in known:
                con.execute("INSERT INTO lake.chains VALUES (?, ?)", [cid, steps])

    def add_parquet(self, con: duckdb.DuckDBPyConnection, table: str, data: Any) -> None:
        """Add an Arrow table to ``table`` inside the open transaction.

        The Parquet file is written by pyarrow into the store's data folder and registered
        with ``ducklake_add_data_files`` (transactional: it counts only if the commit lands).
        pyarrow writes this wide, mostly sparse table several times faster than an INSERT
        through DuckDB's writer (measured in benchmarks/). A file whose transaction does not
        commit is removed; after a crash it stays as an unreferenced orphan, never read.
        """
        import uuid

        import pyarrow.parquet as pq

        folder = self.path / DATA / "main" / table
        folder.mkdir(parents=True, exist_ok=True)
        path = folder / f"strata13-{uuid.uuid4()}.parquet"
        try:
            pq.write_table(data, path, compression="snappy", row_group_size=122_880)
            con.execute("CALL ducklake_add_data_files('lake', ?, ?)", [table, str(path)])
        except BaseException:
            path.unlink(missing_ok=True)
            raise
        self._pending_files.append(path)

    def _record_commit(
        self,
        con: duckdb.DuckDBPyConnection,
        command: str,
        detail: str,
        settings_hash: str,
        summary: dict[str, Any],
    ) -> int:
        """Write the commits row and commit message; returns the version this commit gets."""
        from strata13 import __version__

        version = self._latest(con) + 1  # the writer lock makes this prediction safe
        con.execute(
            "INSERT INTO lake.commits VALUES (?, ?, ?, ?, ?, ?, ?)",
            [
                version,
                command,
                detail,
                __version__,
                SCHEMA_VERSION,
                settings_hash,
                json.dumps(summary, sort_keys=True),
            ],
        )
        extra = json.dumps(
            {
                "schema_version": SCHEMA_VERSION,
                "tool_version": __version__,
                "settings_hash": settings_hash,
            }
        )
        con.execute(
            f"CALL lake.set_commit_message('strata13', {_q(command + ' ' + detail)}, "
            f"extra_info => {_q(extra)})"
        )
        return version

    # ------------------------------------------------------------ reading helpers
    @staticmethod
    def read_settings(
        con: duckdb.DuckDBPyConnection, relation: str = "lake.settings"
    ) -> dict[str, Any]:
        """The settings table as a dict (one key each, values decoded from JSON)."""
        rows = con.execute(f"SELECT key, value_json FROM {relation}").fetchall()
        return {k: json.loads(v) for k, v in rows}

    @staticmethod
    def write_settings(
        con: duckdb.DuckDBPyConnection, values: dict[str, Any], settings_hash: str
    ) -> None:
        """Replace the settings table (inside the caller's transaction)."""
        con.execute("DELETE FROM lake.settings")
        for key, value in sorted(values.items()):
            con.execute(
                "INSERT INTO lake.settings VALUES (?, ?, ?)",
                [key, json.dumps(value, sort_keys=True), settings_hash],
            )

    def settings(self, version: int | None = None) -> dict[str, Any]:
        con, _ = self.reader(version)
        try:
            return self.read_settings(con, "settings")
        finally:
            con.close()

    def history(self) -> list[Version]:
        con, _ = self.reader()
        try:
            snaps = dict(
                con.execute(
                    "SELECT snapshot_id, CAST(snapshot_time AS VARCHAR) FROM lake.snapshots()"
                ).fetchall()
            )
            rows = con.execute(
                "SELECT version, command, detail, summary_json FROM commits ORDER BY version"
            ).fetchall()
        finally:
            con.close()
        return [
            Version(int(v), str(snaps.get(v, ""))[:19], c, d, json.loads(s or "{}"))
            for v, c, d, s in rows
        ]
