"""Moving a store's catalog between the embedded file and a PostgreSQL database.

A person's store becomes a group's (and back) without losing its history: every row of
every DuckLake catalog table is copied, so every version, its time and its commit message
stay as they were, and the Parquet files do not move. The copy is made under the source's
writer lock, checked table by table (row counts and the snapshot list), and only then does
the store file name the new catalog (an atomic rename). The old catalog is left as it was:
the embedded file is renamed beside the store, a PostgreSQL database is not dropped.
"""

from __future__ import annotations

import json
import os
import time
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

from strata13.compile.store.catalog import (
    Catalog,
    SqliteCatalog,
    attach,
    from_spec,
    quote,
)

from strata13.errors import OptionError, StoreError

if TYPE_CHECKING:
    import duckdb
    from strata13.compile.store.lake import Store

_META_PREFIX = "ducklake_"  # DuckLake's own tables; everything else in the database stays


@dataclass(frozen=True)
class Moved:
    """What a move did: from where to where, how many versions and catalog rows."""

    source: str
    target: str
    versions: int
    rows: int
    tables: int
    left_behind: str  # what is left of the old catalog, for the user to keep or remove


def _raw(catalog: Catalog) -> tuple[str, str]:
    """How DuckDB attaches the catalog's database itself (not as a lake)."""
    if isinstance(catalog, SqliteCatalog):
        return str(catalog.path), "sqlite"
    from strata13.compile.store.postgres import PostgresCatalog

    assert isinstance(catalog, PostgresCatalog)
    return catalog.libpq(), "postgres"


def _tables(con: duckdb.DuckDBPyConnection, db: str) -> dict[str, dict[str, str]]:
    """DuckLake's tables in the attached database ``db``, each with its columns' types."""
    out: dict[str, dict[str, str]] = {}
    for table, column, dtype in con.execute(
        "SELECT table_name, column_name, data_type FROM duckdb_columns() "
        "WHERE database_name = ? AND table_name LIKE 'ducklake\\_%' ESCAPE '\\' "
        "ORDER BY table_name, column_index",
        [db],
    ).fetchall():
        out.setdefault(str(table), {})[str(column)] = str(dtype)
    return out


def _cast(column: str, source_type: str, target_type: str) -> str:
    """A source column as the target's type (SQLite keeps times as text, flags as 0/1)."""
    col = f'"{column}"'
    if source_type == target_type:
        return col
    return f"CAST({col} AS {target_type})"


def _snapshots(con: duckdb.DuckDBPyConnection) -> list[tuple[int, str, str]]:
    return [
        (int(r[0]), str(r[1]), str(r[2]))
        for r in con.execute(
            "SELECT snapshot_id, strftime(snapshot_time AT TIME ZONE 'UTC', '%Y-%m-%d "
            "%H:%M:%S.%f'), coalesce(commit_message, '') FROM lake.snapshots() ORDER BY 1"
        ).fetchall()
    ]


def move_catalog(store: Store, to: str) -> Moved:
    """Copy ``store``'s catalog to ``to`` (``postgres:CONNINFO`` of an empty database, or
    ``embedded``) and make the store use it; the store is unchanged if anything fails."""
    import duckdb
    from strata13.compile.store.extensions import connect
    from strata13.compile.store.lake import DATA, MARKER

    source = store.catalog
    target = from_spec(to, store.path)
    if target.spec() == source.spec():
        raise OptionError(
            f"the store already uses the catalog {source.describe()}.",
            "Name another catalog: --to postgres:CONNINFO or --to embedded.",
        )
    if isinstance(target, SqliteCatalog) and target.path.exists():
        raise StoreError(
            f"{target.path} exists, so the embedded catalog cannot be written there.",
            "Move that file away (it may be a catalog kept from an earlier move) and run "
            "the command again.",
        )
    if not target.is_fresh():
        raise StoreError(
            f"the catalog {target.describe()} already holds a store's versions.",
            "Name an empty database.",
        )
    names = tuple(dict.fromkeys(source.extensions + target.extensions))
    with store.writer("move-catalog") as lake_con:
        before = _snapshots(lake_con)
        lake_con.close()  # the lock stays held; the source file is closed before it moves
        con = connect(names)
        try:
            # DuckLake makes its tables in the new catalog; then the rows are replaced
            attach(con, target, store.path / DATA, read_only=False)
            con.execute("DETACH lake")
            src_path, src_type = _raw(source)
            dst_path, dst_type = _raw(target)
            con.execute(f"ATTACH {quote(src_path)} AS src (TYPE {src_type}, READ_ONLY)")
            con.execute(f"ATTACH {quote(dst_path)} AS dst (TYPE {dst_type})")
            rows, tables = _copy(con)
            con.execute("DETACH src")
            con.execute("DETACH dst")
            attach(con, target, store.path / DATA, read_only=True)
            after = _snapshots(con)
        except duckdb.Error as exc:
            gone = target.unreachable(exc) or source.unreachable(exc)
            raise gone or StoreError(
                f"the catalog could not be copied to {target.describe()} ({exc}).",
                "The store still uses its old catalog; nothing was changed there.",
            ) from None
        finally:
            con.close()
        if after != before:
            raise StoreError(
                f"the copy in {target.describe()} does not list the same versions as the "
                f"store ({len(after)} against {len(before)}), so the store keeps its catalog.",
                "Empty the target database and run the command again.",
            )
        left = _switch(store.path / MARKER, source, target)
    return Moved(source.describe(), target.describe(), len(before) - 1, rows, tables, left)


def _copy(con: duckdb.DuckDBPyConnection) -> tuple[int, int]:
    """Replace every DuckLake table of ``dst`` with the rows of ``src``, in one
    transaction, each count checked; (rows, tables) copied."""
    src, dst = _tables(con, "src"), _tables(con, "dst")
    missing = sorted(set(src) - set(dst))
    if any(not t.startswith("ducklake_inlined_data_") for t in missing):
        raise StoreError(
            f"the new catalog lacks DuckLake tables the store has ({', '.join(missing)}).",
            "Use the same DuckLake version on both sides (pip install -U strata13).",
        )
    total = 0
    con.execute("BEGIN")
    for table in sorted(dst):
        con.execute(f"DELETE FROM dst.{table}")
    for table, scols in sorted(src.items()):
        if table in missing:  # inlined rows (none in a strata13 store): copied as they are
            con.execute(f"CREATE TABLE dst.{table} AS SELECT * FROM src.{table}")
            dcols = scols
        else:
            dcols = dst[table]
        cols = [c for c in dcols if c in scols]
        names = ", ".join(f'"{c}"' for c in cols)
        select = ", ".join(_cast(c, scols[c], dcols[c]) for c in cols)
        if table not in missing:
            con.execute(f"INSERT INTO dst.{table} ({names}) SELECT {select} FROM src.{table}")
        n = _count(con, f"src.{table}")
        if _count(con, f"dst.{table}") != n:
            con.execute("ROLLBACK")
            raise StoreError(
                f"the copy of {table} has a different number of rows than the store's.",
                "The store keeps its catalog; run the command again.",
            )
        total += n
    con.execute("COMMIT")
    return total, len(src)


def _count(con: duckdb.DuckDBPyConnection, relation: str) -> int:
    row = con.execute(f"SELECT count(*) FROM {relation}").fetchone()
    return int(row[0]) if row else 0


def _switch(marker_path: Path, source: Catalog, target: Catalog) -> str:
    """Name ``target`` in the store file (atomic); set the old embedded file aside."""
    marker = json.loads(marker_path.read_text(encoding="utf-8"))
    marker["catalog"] = target.spec()
    tmp = marker_path.with_name(f".{marker_path.name}.{os.getpid()}")
    tmp.write_text(json.dumps(marker, indent=1) + "\n", encoding="utf-8")
    os.replace(tmp, marker_path)
    if isinstance(source, SqliteCatalog):
        stamp = time.strftime("%Y%m%dT%H%M%SZ", time.gmtime())
        kept = source.path.with_name(f"catalog-before-move-{stamp}.sqlite")
        os.replace(source.path, kept)
        for suffix in ("-wal", "-shm"):
            side = source.path.with_name(source.path.name + suffix)
            if side.exists():
                os.replace(side, kept.with_name(kept.name + suffix))
        return f"the old catalog file is kept as {kept.name}"
    return f"the old catalog is still in {source.describe()} (drop it when it is not needed)"
