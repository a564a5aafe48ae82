"""The store: a DuckLake lakehouse (a catalog + Parquet files) in one folder.

Layout of a store folder::

    strata13-store.json   marker: what this folder is and where its catalog is
    catalog.sqlite        the embedded DuckLake catalog (WAL journal, busy timeout), or
                          none when the marker names a PostgreSQL catalog
    data/                 Parquet data files (inlining off: all data are Parquet)
    writer.lock           flock target of the embedded catalog: one writer at a time,
                          released by the kernel on crash (a PostgreSQL catalog uses an
                          advisory lock on the server instead)

Every write (init, ingest, recompute, correct, overlaps confirm) is one
:meth:`Store.transaction` across all tables; its DuckLake snapshot id is the store version.
Writers take the catalog's writer lock *before* attaching and write from one connection
and one thread; readers attach READ_ONLY and pin one snapshot. The catalog backend sits behind
``catalog.Catalog``; readers and the writer see the same relation names (``relations``).
"""

from __future__ import annotations

import contextlib
import json
import os
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from strata13.compile.store.catalog import (
    CATALOG_FILE,
    LOCK_FILE,
    Catalog,
    WriterLock,
    attach,
    from_spec,
)
from strata13.compile.store.extensions import connect
from strata13.compile.store.files import Orphans
from strata13.compile.store.relations import bind_views
from strata13.compile.store.transaction import Transaction
from strata13.schemas.fields import SCHEMA_VERSION
from strata13.schemas.records import RETYPED, TABLES

from strata13.errors import Interrupted, NotAStoreError, StoreError

if TYPE_CHECKING:
    import duckdb

MARKER = "strata13-store.json"
CATALOG = CATALOG_FILE
DATA = "data"
LOCK = LOCK_FILE
LOCK_TIMEOUT_S = float(os.environ.get("STRATA13_LOCK_TIMEOUT", "600"))
__all__ = ["Store", "Transaction", "Version", "connect", "is_store"]


def is_store(path: Path) -> bool:
    return (path / MARKER).is_file()


@dataclass(frozen=True)
class Compacted:
    """What ``compact`` did: unreferenced files removed, data files merged."""

    orphans: Orphans
    files_before: int  # data files the newest version read before the merge
    files_after: int
    version: int | None  # the ``compact`` version recording the merge (None: no merge)


@dataclass
class Version:
    version: int
    time: str
    command: str
    detail: str
    summary: dict[str, Any]


class Store:
    """One store folder. Open it with :meth:`open` or create it with :meth:`create`."""

    def __init__(self, path: Path, catalog: Catalog | None = None) -> None:
        self.path = path.resolve()
        self.catalog = catalog or from_spec(_marker_catalog(self.path), self.path)
        self._lock: WriterLock | None = None  # the writer lock while a writer holds it
        # shared read connections by requested version (None: the latest), see reader()
        self._readers: dict[int | None, tuple[duckdb.DuckDBPyConnection, int]] = {}

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
        catalog = from_spec(marker.get("catalog"), path.resolve())
        if not catalog.exists():
            raise StoreError(
                f"{path} has no catalog ({catalog.describe()}).", "Restore it from a copy."
            )
        return cls(path, catalog)

    @classmethod
    def create(
        cls,
        path: Path,
        settings: dict[str, Any],
        settings_hash: str,
        regions: list[tuple[str, str, str]] | None = None,
        made_by: str = "init",
        catalog: str | None = None,
    ) -> Store:
        """Make a new store folder with every table, the settings and (optional) regions;
        ``catalog`` names a PostgreSQL catalog (``postgres:CONNINFO``, an empty database)
        instead of the embedded file.

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
        chosen = from_spec(catalog, path.resolve())  # a bad --catalog: before the disk
        if not chosen.is_fresh():
            raise StoreError(
                f"the catalog {chosen.describe()} already holds a store's versions.",
                "Name an empty database for a new store; a store folder that already "
                "uses this catalog can be shared as it is.",
            )
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.parent / f".{path.name}.creating-{uuid.uuid4().hex[:12]}"
        tmp.mkdir()
        try:
            store = cls(tmp, from_spec(catalog, tmp.resolve()))
            (tmp / DATA).mkdir()
            with store.transaction("init") as tx:  # migrating an empty catalog makes every table
                if tx.latest_version() > 0:  # another init reached the same database first
                    raise StoreError(
                        f"the catalog {chosen.describe()} was given a store by another "
                        "process meanwhile.",
                        "Name an empty database for a new store.",
                    )
                tx.write_settings(settings, settings_hash)
                for name, geojson, src in regions or []:
                    tx.insert(
                        "regions",
                        _row_table(
                            "regions", {"name": name, "geojson": geojson, "source_file": src}
                        ),
                    )
                tx.record({"regions": len(regions or [])}, settings_hash)
            (tmp / MARKER).write_text(
                json.dumps(
                    {
                        "format": "strata13 store",
                        "schema_version": SCHEMA_VERSION,
                        "catalog": store.catalog.spec(),
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
        except BaseException as exc:
            from strata13.compile import interrupts

            renamed = not tmp.exists() and is_store(path)  # the rename was ours and done
            shutil.rmtree(tmp, ignore_errors=True)
            interrupts.forget(tmp.resolve())
            if renamed:
                interrupts.landed(path.resolve(), 1)
            if interrupts.is_interrupt(exc):
                raise Interrupted(interrupts.verdict(), renamed) from None
            raise
        from strata13.compile import interrupts

        interrupts.forget(tmp.resolve())
        interrupts.landed(path.resolve(), 1)
        return cls(path)

    @property
    def made_by(self) -> str | None:
        """What created this store ("init", "ingest", "demo"), from its marker."""
        try:
            marker = json.loads((self.path / MARKER).read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return None
        made = marker.get("made_by") if isinstance(marker, dict) else None
        return str(made) if made else None

    # ------------------------------------------------------------ connections
    @contextlib.contextmanager
    def writer(self, command: str = "write") -> Iterator[duckdb.DuckDBPyConnection]:
        """The exclusive writer connection: the catalog's writer lock first, then attach
        read-write.

        Only :meth:`transaction` should use it; one connection, one thread.
        """
        self._drop_readers()
        with self.catalog.writer_lock(command, LOCK_TIMEOUT_S) as lock:
            named = _marker_catalog(self.path)
            if named is not None and named != self.catalog.spec():
                raise StoreError(
                    f"the store's catalog moved to {named} while this "
                    "command waited for the writer lock, so nothing was written.",
                    "Run the command again.",
                )
            con = connect(self.catalog.extensions)
            self._lock = lock
            try:
                attach(con, self.catalog, self.path / DATA, read_only=False)
                yield con
            finally:
                self._lock = None
                con.close()
                self._drop_readers()  # reads made while writing saw the version before

    @contextlib.contextmanager
    def transaction(self, command: str, detail: str = "") -> Iterator[Transaction]:
        """One unit of work: lock, begin, migrate, yield the writes, commit or roll back.

        The body ends with ``tx.record(summary, settings_hash)`` or ``tx.abandon()``;
        after the block ``tx.version`` is the new version (None when abandoned). Ctrl-C
        raises :class:`Interrupted` saying truthfully whether the commit landed.
        """
        from strata13.compile import interrupts

        committing = False
        with self.writer(command) as con:
            con.execute("BEGIN")
            tx = Transaction(con, self.path / DATA, command, detail)
            started = tx.latest_version()  # under the lock: only this writer can move it
            try:
                self.migrate(con)
                yield tx
                if tx.abandoned:
                    con.execute("ROLLBACK")
                    return
                interrupts.check()  # a Ctrl-C a library swallowed still stops the commit
                version = tx._write_commit_row()
                if self._lock is not None and not self._lock.still_held():
                    raise StoreError(
                        f"the writer lock of {self.catalog.describe()} was lost before the "
                        "commit (its connection was cut), so nothing was written.",
                        "Run the command again.",
                    )
                committing = True
                con.execute("COMMIT")
                interrupts.landed(self.path, version)
                tx.version = version
                many = command != "compact" and _many_files(con)
            except BaseException as exc:
                with contextlib.suppress(Exception):
                    con.execute("ROLLBACK")
                if not interrupts.is_interrupt(exc):
                    tx._discard_files()
                    gone = self.catalog.unreachable(exc)
                    if gone is None and self._lock is not None and not self._lock.still_held():
                        gone = StoreError(
                            f"the writer lock of {self.catalog.describe()} was lost (its "
                            f"connection was cut) while {command} was writing ({exc}).",
                            "Nothing was written; run the command again.",
                        )
                    if gone is None:
                        raise
                    raise self._lost(gone, started, committing) from None
                raise self._interrupted(tx, started) from None
        if tx.version is not None and many:
            self._merge_quietly()

    def _merge_quietly(self) -> None:
        """The automatic merge after a write that left the newest version reading more than
        ``files.AUTO_MERGE_FILES`` data files (common practice: a few large files read
        faster than many small ones); maintenance only, so a merge that cannot run now
        (another writer holds the lock, a full disk) leaves the store as committed and the
        next write tries again."""
        import duckdb

        with contextlib.suppress(StoreError, duckdb.Error, OSError):
            self.compact(merge=True)

    def _lost(self, gone: StoreError, started: int, committing: bool) -> StoreError:
        """The catalog went away mid-write: before the commit nothing was written; during
        it, the server decided, and the sentence says what it can tell."""
        if not committing:
            return gone
        try:
            now = self.latest_version()
        except StoreError:
            return StoreError(
                f"the connection to {self.catalog.describe()} was lost during the commit, "
                "so whether it landed cannot be told yet.",
                "When the server is back, `strata13 history` shows whether it landed; "
                "the store holds either the previous version or the new one, never half.",
            )
        if now > started:
            return StoreError(
                f"the connection to {self.catalog.describe()} was lost as the commit "
                f"ended; it landed as version {now}.",
                "See `strata13 history`.",
            )
        return gone

    def _interrupted(self, tx: Transaction, started: int) -> Interrupted:
        """The truth after Ctrl-C in a transaction: compare the latest version (the lock is
        still held) with the one the transaction started from."""
        from strata13.compile import interrupts

        try:
            now = self.latest_version()
        except BaseException:  # the catalog cannot be asked: say what the files say
            now = started + (1 if tx._files and tx._landed() else 0)
        if now > started:
            interrupts.landed(self.path, now)
            return Interrupted(f"interrupted: the commit landed as version {now}", True)
        tx._discard_files()
        return Interrupted("interrupted: nothing was written", False)

    def compact(self, dry_run: bool = False, merge: bool = True) -> Compacted:
        """Remove the Parquet files in the data folder that no version references (left by
        writers killed between writing a file and committing) and, with ``merge``, merge
        the small data files every ingest leaves. Every version stays readable, with the
        same rows: only files the catalog never listed go, and DuckLake's merge keeps old
        versions pointing into the merged files. Runs under the writer lock, so the files of
        a transaction still in flight are never touched. A merge is recorded in the history
        as a ``compact`` version (DuckLake's merge itself is the version before it, with
        the same data)."""
        from strata13.compile.store.files import live_files, merge_small_files, orphans

        data = (self.path / DATA).resolve()
        with self.writer("compact") as con:
            found = orphans(con)
            mine = [p for p in found.files if p.resolve().is_relative_to(data)]
            size = _size(mine)
            if not dry_run:
                for p in mine:
                    p.unlink(missing_ok=True)
            n = live_files(con)
            before, after = (n, n) if dry_run or not merge else merge_small_files(con)
        version = None
        if after < before:
            with self.transaction("compact", "data files merged") as tx:
                merged = {"data_files_before": before, "data_files_after": after}
                tx.record({**merged, "merge_version": tx.latest_version()}, "")
            version = tx.version
        return Compacted(Orphans(mine, size), before, after, version)

    def reader(
        self, version: int | None = None, *, fresh: bool = False
    ) -> tuple[duckdb.DuckDBPyConnection, int]:
        """A read-only connection whose views all show one snapshot (the latest or ``version``).

        The first read opens, attaches and binds the views once; later reads of the same
        Store get a cursor of that connection (DuckDB shares attached catalogs and the
        in-memory schema between cursors), so a command that reads several times pays for
        the start once. A read of the latest version checks the catalog's newest snapshot
        and rebinds when another writer moved it; a write through this Store drops the
        shared connection. ``fresh`` gives a connection of its own (the ``sql`` sandbox locks
        its connection's configuration, which must not reach later reads).
        """
        if fresh:
            return self._open_reader(version, shared=False)
        hit = self._readers.get(version)
        if hit is not None:
            con, v = hit
            if version is not None or self._latest(con) == v:
                return con.cursor(), v
            self._drop_readers()
        con, v = self._open_reader(version, shared=True)
        self._readers[version] = (con, v)
        return con.cursor(), v

    def _drop_readers(self) -> None:
        """Close the shared read connections (after a write they may show an old version)."""
        for con, _ in self._readers.values():
            con.close()
        self._readers.clear()

    def _open_reader(
        self, version: int | None, shared: bool
    ) -> tuple[duckdb.DuckDBPyConnection, int]:
        """A new read-only connection with the views bound (``shared``: in its in-memory
        schema, visible to its cursors; else as temp views of this connection alone)."""
        import duckdb

        con = connect(self.catalog.extensions)
        try:
            attach(con, self.catalog, self.path / DATA, read_only=True)
        except BaseException:
            con.close()
            raise
        latest = self._latest(con)
        v = latest if version is None else version
        if version is not None and not (1 <= version <= latest):
            con.close()
            raise StoreError(
                f"version {version} does not exist; this store has versions 1 to {latest}.",
                "See `strata13 history`.",
            )
        try:
            bind_views(con, v, latest=v == latest, shared=shared)
        except duckdb.Error as exc:
            con.close()
            raise StoreError(
                f"version {v} of the store cannot be read ({exc}).",
                "The version may predate the store's tables; see `strata13 history`.",
            ) from None
        return con, v

    @staticmethod
    def _latest(con: duckdb.DuckDBPyConnection) -> int:
        row = con.execute("SELECT max(snapshot_id) FROM lake.snapshots()").fetchone()
        return int(row[0]) if row else 0

    def latest_version(self) -> int:
        con = connect(self.catalog.extensions)
        try:
            attach(con, self.catalog, self.path / DATA, read_only=True)
            return self._latest(con)
        finally:
            con.close()

    def migrate(self, con: duckdb.DuckDBPyConnection) -> list[str]:
        """Add the columns today's schema has and the store's tables lack, and convert the
        columns whose type changed (``records.RETYPED``: the values cast to today's type),
        inside the caller's transaction, under the writer lock. Returns what was changed."""
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
                if col in have and have[col] == RETYPED.get((name, col)) != sqltype:
                    _retype(con, name, col, sqltype)
                    added.append(f"{name}.{col} ({have[col]} → {sqltype})")
                elif col in have and have[col] != sqltype:
                    raise StoreError(
                        f"{self.path}: column {name}.{col} is {have[col]} but this "
                        f"strata13 writes {sqltype}.",
                        "The store was made by an incompatible development "
                        "version; export what you need and build a new store.",
                    )
                if col not in have:
                    con.execute(f'ALTER TABLE lake.{name} ADD COLUMN "{col}" {sqltype}')
                    added.append(f"{name}.{col}")
            if name == "analyses":
                _keep_reported_precision(con, have)
        return added

    # ------------------------------------------------------------ reading helpers
    @staticmethod
    def read_settings(
        con: duckdb.DuckDBPyConnection, relation: str = "lake.settings"
    ) -> dict[str, Any]:
        """The settings table as a dict (one key each, values decoded from JSON)."""
        rows = con.execute(f"SELECT key, value_json FROM {relation}").fetchall()
        out = {k: json.loads(v) for k, v in rows}
        if out.get("time_scale_table"):  # a user's chart: its name loads from here on
            from strata13.schemas.timescales import use_table

            use_table(out["time_scale_table"], "the store's chart table")
        return out

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


def _marker_catalog(path: Path) -> str | None:
    """The catalog the folder's marker names (None: the embedded file, as before markers
    named it)."""
    try:
        marker = json.loads((path / MARKER).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    spec = marker.get("catalog") if isinstance(marker, dict) else None
    return str(spec) if spec else None


def _size(files: list[Path]) -> int:
    total = 0
    for p in files:
        try:
            total += p.stat().st_size
        except OSError:
            continue
    return total


def _retype(con: duckdb.DuckDBPyConnection, table: str, col: str, sqltype: str) -> None:
    """Give ``col`` its new type, every value cast (DuckLake alters only to wider types, so
    the column is renamed, recreated, filled and the old one dropped; earlier versions keep
    their own)."""
    old = f"{col}__before_retype"
    con.execute(f'ALTER TABLE lake.{table} RENAME COLUMN "{col}" TO "{old}"')
    con.execute(f'ALTER TABLE lake.{table} ADD COLUMN "{col}" {sqltype}')
    con.execute(f'UPDATE lake.{table} SET "{col}" = CAST("{old}" AS {sqltype})')
    con.execute(f'ALTER TABLE lake.{table} DROP COLUMN "{old}"')


def _row_table(table: str, row: dict[str, Any]) -> Any:
    """One row as an Arrow table typed like ``table``."""
    import pyarrow as pa
    from strata13.schemas.records import arrow_schema

    return pa.Table.from_pylist([row], schema=arrow_schema(TABLES[table]))


def _keep_reported_precision(con: duckdb.DuckDBPyConnection, had: dict[str, str]) -> None:
    """Stores written before the reported/derived split of analytical precision kept the
    sheet's precision in ``{d}_precision``; the migration that adds
    ``{d}_precision_reported`` copies it there, so re-deriving keeps what the sheet said."""
    from strata13.schemas.fields import DELTA_FIELDS

    for d in DELTA_FIELDS:
        old, new = f"{d}_precision", f"{d}_precision_reported"
        if old in had and new not in had:
            con.execute(f'UPDATE lake.analyses SET "{new}" = "{old}" WHERE "{old}" IS NOT NULL')


def _many_files(con: duckdb.DuckDBPyConnection) -> bool:
    """Whether the newest version reads more data files than ``files.AUTO_MERGE_FILES``,
    asked on the writer's own connection right after its commit (no second attach)."""
    import duckdb
    from strata13.compile.store import files

    try:
        return files.live_files(con) > files.AUTO_MERGE_FILES
    except duckdb.Error:  # maintenance only: never a reason for a landed write to fail
        return False
