"""One set of relation names for every reader and the writer.

Modules outside the store read ``records``, ``sources``, ``age_ties`` … and never the
catalog's own tables. A reader gets temp views of these names pinned to one snapshot; a
writer's queries name the same relations and see the open transaction (the transaction maps
the names onto the catalog tables), so code that reads before it writes needs no second
spelling of its SQL. The writer's ``records`` also has ``row_hash``.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from strata13.compile.store import screen_rows
from strata13.schemas.records import RECORDS_COLUMNS, RETYPED, TABLES

if TYPE_CHECKING:
    import duckdb

# catalog table -> the name readers and the writer see (the only renamed one is records)
VIEW_NAMES: dict[str, str] = {
    "analyses": "records",
    "sources": "sources",
    "localities": "localities",
    "sections": "sections",
    "samples": "samples",
    "quarantine": "quarantine",
    "regions": "regions",
    "chains": "chains",
    "settings": "settings",
    "commits": "commits",
    "runs": "runs",
    "age_ties": "age_ties",
    "age_draws": "age_draws",
    "screen_results": "screen_results",
    "run_qc": "run_qc",
    "corrections": "corrections",
    "duplicates": "duplicates",
}
READ_VIEWS = tuple(VIEW_NAMES)
TABLE_OF: dict[str, str] = {view: table for table, view in VIEW_NAMES.items()}


def table_for(name: str) -> str:
    """The catalog table behind a relation name (either spelling is accepted)."""
    return TABLE_OF.get(name, name)


def _columns(table: str) -> list[str]:
    """A reader view's columns (``records`` leaves out the re-ingest diff's ``row_hash``)."""
    return RECORDS_COLUMNS if table == "analyses" else [c for c, _ in TABLES[table]]


# catalog tables no view is named after, read only inside another view
HIDDEN = ("screen_common",)  # the compact screen results' common outcomes (screen_rows.py)


def tables_at(con: duckdb.DuckDBPyConnection, version: int) -> set[str]:
    """The tables that existed at ``version`` (later schema versions add tables)."""
    names = set()
    for name in (*READ_VIEWS, *HIDDEN):
        try:
            con.execute(f"SELECT 1 FROM lake.{name} AT (VERSION => {int(version)}) LIMIT 0")
        except Exception:  # duckdb.Error: the table did not exist at that version
            continue
        names.add(name)
    return names


def _columns_now(con: duckdb.DuckDBPyConnection) -> dict[str, set[str]]:
    """Every lake table with its columns as the connection sees them now (one query)."""
    out: dict[str, set[str]] = {}
    for table, column in con.execute(
        "SELECT table_name, column_name FROM duckdb_columns() WHERE database_name = 'lake'"
    ).fetchall():
        out.setdefault(str(table), set()).add(str(column))
    return out


def _columns_at(con: duckdb.DuckDBPyConnection, version: int) -> dict[str, set[str]]:
    """Every lake table that existed at ``version`` with its columns then (a query each)."""
    return {
        table: {
            r[0]
            for r in con.execute(
                f"DESCRIBE SELECT * FROM lake.{table} AT (VERSION => {int(version)})"
            ).fetchall()
        }
        for table in sorted(tables_at(con, version))
    }


def _column(table: str, col: str, sqltype: str, present: bool) -> str:
    """One view column: as stored, NULL of its type when the version lacks it, or cast to
    today's type when its type changed since (``records.RETYPED``)."""
    if not present:
        return f'CAST(NULL AS {sqltype}) AS "{col}"'
    if (table, col) in RETYPED:
        return f'CAST("{col}" AS {sqltype}) AS "{col}"'
    return f'"{col}"'


def bind_views(
    con: duckdb.DuckDBPyConnection, version: int, latest: bool = False, shared: bool = False
) -> None:
    """Create a reader's views over ``lake``, all pinned to ``version``: temp views of the
    connection, or with ``shared`` views in its in-memory schema, which its cursors see.

    A version written before a column existed shows it as NULL, and a column whose type
    changed is cast to today's type: the views always have today's columns, so old
    versions stay readable. For the ``latest`` version the catalog's own column list is
    read in one query; an older version is probed table by table. (A writer reads the same
    names without views: ``transaction``.)
    """
    import duckdb

    at = f" AT (VERSION => {int(version)})"
    kind = "VIEW memory.main." if shared else "TEMP VIEW "
    present = _columns_now(con) if latest else _columns_at(con, version)
    statements = []
    for table, view in VIEW_NAMES.items():
        wanted = _columns(table)
        types = dict(TABLES[table])
        have = present.get(table)
        if have is None:  # a table added after this version: empty, typed
            cols = ", ".join(f'CAST(NULL AS {types[c]}) AS "{c}"' for c in wanted)
            statements.append(f"CREATE OR REPLACE {kind}{view} AS SELECT {cols} WHERE false")
            continue
        cols = ", ".join(_column(table, c, types[c], c in have) for c in wanted)
        body = f"SELECT {cols} FROM lake.{table}{at}"
        if table == "screen_results" and screen_rows.COMMON in present:
            body = screen_rows.view_sql(cols, at)
        statements.append(f"CREATE OR REPLACE {kind}{view} AS {body}")
    try:
        con.execute("BEGIN")  # one read transaction: one catalog load for all the views
        for sql in statements:
            con.execute(sql)
        con.execute("COMMIT")
    except duckdb.Error:
        con.execute("ROLLBACK")
        if not latest:
            raise
        # a writer changed the schema after ``version`` was read: probe that version
        bind_views(con, version, latest=False, shared=shared)


def snapshot_time(con: duckdb.DuckDBPyConnection, version: int) -> str | None:
    """When ``version`` was committed (UTC text), or None for an unknown version."""
    row = con.execute(
        "SELECT CAST(snapshot_time AS VARCHAR) FROM lake.snapshots() WHERE snapshot_id = ?",
        [version],
    ).fetchone()
    return None if row is None else str(row[0])
