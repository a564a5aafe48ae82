"""The store's unit of work: every write to a store is one ``Transaction``.

``with store.transaction("ingest", source_id) as tx:`` takes the writer lock, begins and
migrates the schema. The body reads the live state with :meth:`Transaction.fetch` under the
relation names readers use (``records``, ``sources`` …; the parsed query's table names are
mapped onto the catalog's tables, which DuckLake binds far faster than views) and
writes with :meth:`insert`, :meth:`add_parquet`, :meth:`delete`, :meth:`replace_source`
and :meth:`rederive`; it ends with :meth:`record` (what the commit did) or
:meth:`abandon` (nothing changed: no new version). Leaving the block commits, writes the
commit row and sets :attr:`version`; an exception rolls everything back, and Ctrl-C says
truthfully whether the commit landed. No module outside this package writes SQL against
the catalog.
"""

from __future__ import annotations

import json
import uuid
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from strata13.compile.store.catalog import quote
from strata13.compile.store.reader import Reader
from strata13.compile.store.relations import TABLE_OF, table_for
from strata13.schemas.fields import SCHEMA_VERSION

from strata13.errors import StoreError

if TYPE_CHECKING:
    import duckdb
    import pyarrow as pa
    from strata13.compile.derive.engine import Derived, Settings

# tables written as Parquet files by pyarrow (wide or long; several times faster than an
# INSERT through DuckDB's writer, measured in benchmarks/); the rest take an INSERT
PARQUET_TABLES = frozenset({"analyses", "screen_results"})
# tables a re-derivation replaces for the re-derived sources (the records are written apart)
DERIVED_TABLES = ("age_draws", "screen_results", "run_qc")


class Transaction(Reader):
    """An open write to one store; see the module docstring for its life."""

    def __init__(
        self, con: duckdb.DuckDBPyConnection, data_dir: Path, command: str, detail: str = ""
    ) -> None:
        super().__init__(con)
        self.data_dir = data_dir
        self.command = command
        self.detail = detail
        self.version: int | None = None  # set when the commit has landed
        self.abandoned = False
        self._summary: dict[str, Any] | None = None
        self._settings_hash = ""
        self._files: list[Path] = []  # Parquet files added in this transaction

    # ------------------------------------------------------------ reading
    def _sql(self, sql: str) -> str:
        """``sql`` with the readers' relation names mapped onto the catalog's tables."""
        hit = _ON_CATALOG.get(sql)
        if hit is None:
            hit = _ON_CATALOG[sql] = _on_catalog(self.con, sql)
        return hit

    def settings(self) -> dict[str, Any]:
        """The stored settings (one key each, values decoded from JSON)."""
        return {k: json.loads(v) for k, v in self.rows("SELECT key, value_json FROM settings")}

    def latest_version(self) -> int:
        """The newest committed version."""
        return int(self.value("SELECT max(snapshot_id) FROM lake.snapshots()"))

    def next_version(self) -> int:
        """The version this transaction's commit gets (the writer lock makes it safe)."""
        return self.latest_version() + 1

    # ------------------------------------------------------------ writing
    def insert(self, table: str, data: pa.Table) -> None:
        """Append rows to ``table`` by column name (a migrated table may order them apart)."""
        if not data.num_rows:
            return
        name = table_for(table)
        cols = ", ".join(f'"{c}"' for c in data.column_names)
        with self.registered("incoming", data):
            self.con.execute(f"INSERT INTO lake.{name} ({cols}) SELECT {cols} FROM incoming")

    def add_parquet(self, table: str, data: pa.Table) -> None:
        """Append rows to ``table`` as one Parquet file registered in this transaction.

        The file counts only if the commit lands; a file whose transaction does not
        commit is removed, and after a crash it stays an unreferenced orphan, never read.
        """
        import pyarrow.parquet as pq

        if not data.num_rows:
            return
        name = table_for(table)
        order = [r[0] for r in self.con.execute(f"DESCRIBE lake.{name}").fetchall()]
        if set(order) == set(data.column_names):
            data = data.select(order)
        folder = self.data_dir / "main" / name
        folder.mkdir(parents=True, exist_ok=True)
        path = folder / f"strata13-{uuid.uuid4()}.parquet"
        try:
            pq.write_table(data, path, compression="snappy", row_group_size=122_880)
            self.con.execute("CALL ducklake_add_data_files('lake', ?, ?)", [name, str(path)])
        except BaseException:
            path.unlink(missing_ok=True)
            raise
        self._files.append(path)

    def delete(self, table: str, **equal: Any) -> int:
        """Delete the rows of ``table`` whose columns equal the given values (none: all).

        A list value matches any of its items. Returns how many rows went.
        """
        where, params = _where(equal)
        name = table_for(table)
        row = self.con.execute(f"DELETE FROM lake.{name}{where}", params).fetchone()
        return int(row[0]) if row else 0  # DuckDB answers a DELETE with its row count

    def replace_source(
        self, table: str, source_ids: Sequence[str] | None, data: pa.Table | None
    ) -> None:
        """Replace the rows of ``source_ids`` (None: every row) in ``table`` with ``data``."""
        if table_for(table) == "screen_results":  # stored compactly: store/screen_rows.py
            from strata13.compile.store import screen_rows

            screen_rows.replace(self, source_ids, data)
            return
        self.delete_sources(table, source_ids)
        self.append(table, data)

    def delete_sources(self, table: str, source_ids: Sequence[str] | None) -> None:
        """Delete the rows of ``source_ids`` (None: every row) from ``table``."""
        if source_ids is None:
            self.delete(table)
        elif source_ids:
            self.delete(table, source_id=list(source_ids))

    def append(self, table: str, data: pa.Table | None) -> None:
        """Append ``data`` to ``table``: as a Parquet file for the big tables, else rows."""
        if data is None:
            return
        if table_for(table) in PARQUET_TABLES:
            self.add_parquet(table, data)
        else:
            self.insert(table, data)

    def add_chains(self, chains: dict[str, str]) -> None:
        """Store each distinct chain of steps once, keyed by its hash."""
        known = {r[0] for r in self.rows("SELECT chain_id FROM chains")}
        for cid, steps in sorted(chains.items()):
            if cid not in known:
                self.con.execute("INSERT INTO lake.chains VALUES (?, ?)", [cid, steps])

    def write_settings(self, values: dict[str, Any], settings_hash: str) -> None:
        """Replace the stored settings."""
        self.con.execute("DELETE FROM lake.settings")
        for key, value in sorted(values.items()):
            self.con.execute(
                "INSERT INTO lake.settings VALUES (?, ?, ?)",
                [key, json.dumps(value, sort_keys=True), settings_hash],
            )

    def write_derived(self, source_ids: Sequence[str] | None, derived: Derived) -> None:
        """Replace re-derived records and their derived tables for ``source_ids`` (None: all)."""
        self.replace_source("analyses", source_ids, derived.table)
        for name, table in zip(
            DERIVED_TABLES, (derived.draws, derived.screens, derived.run_qc), strict=True
        ):
            self.replace_source(name, source_ids, table)
        self.add_chains(derived.chains)

    def rederive(
        self, sources: Sequence[str], settings: Settings, ties: pa.Table | None = None
    ) -> dict[str, tuple[pa.Table, Derived]]:
        """Re-derive stored ``sources`` from their reported values and write the result.

        Returns {source: (records before, Derived)} so the caller can count what moved.
        """
        from strata13.compile.derive.stored import derive_stored

        out = derive_stored(self, sources, settings, ties)
        for sid, (_, derived) in out.items():
            self.write_derived([sid], derived)
        return out

    # ------------------------------------------------------------ ending
    def record(
        self, summary: dict[str, Any], settings_hash: str, detail: str | None = None
    ) -> None:
        """Say what this unit of work did; the commit row is written as the block ends."""
        self._summary, self._settings_hash = summary, settings_hash
        if detail is not None:
            self.detail = detail

    def abandon(self) -> None:
        """Nothing to commit: roll back when the block ends; no new version."""
        self.abandoned = True

    def _write_commit_row(self) -> int:
        from strata13 import __version__

        if self._summary is None:
            raise StoreError(
                f"the {self.command} transaction ended without saying what it did.",
                "This is a bug in strata13; the store is unchanged.",
            )
        version = self.next_version()
        self.con.execute(
            "INSERT INTO lake.commits VALUES (?, ?, ?, ?, ?, ?, ?)",
            [
                version,
                self.command,
                self.detail,
                __version__,
                SCHEMA_VERSION,
                self._settings_hash,
                json.dumps(self._summary, sort_keys=True),
            ],
        )
        extra = json.dumps(
            {
                "schema_version": SCHEMA_VERSION,
                "tool_version": __version__,
                "settings_hash": self._settings_hash,
            }
        )
        message = quote(f"{self.command} {self.detail}")
        self.con.execute(
            f"CALL lake.set_commit_message('strata13', {message}, extra_info => {quote(extra)})"
        )
        return version

    def _landed(self) -> bool:
        """Whether every file added in this transaction is referenced by the catalog."""
        if not self._files:
            return True
        names: set[str] = set()
        try:
            for table in {p.parent.name for p in self._files}:
                names |= {
                    r[0]
                    for r in self.con.execute(
                        "SELECT data_file FROM ducklake_list_files('lake', ?)", [table]
                    ).fetchall()
                }
        except Exception:  # the catalog cannot be asked: keep the files, they are harmless
            return True
        return all(any(p.name in n for n in names) for p in self._files)

    def _discard_files(self) -> None:
        """Remove the Parquet files of a transaction that did not commit."""
        if not self._landed():
            for p in self._files:
                p.unlink(missing_ok=True)


_ON_CATALOG: dict[str, str] = {}  # query text -> the same query on the catalog's tables


def _on_catalog(con: duckdb.DuckDBPyConnection, sql: str) -> str:
    """Rename the base tables a query reads from reader names to ``lake.<table>``.

    The query is parsed by DuckDB (``json_serialize_sql``) and written back from the tree
    (``json_deserialize_sql``), so only real table references change, never text inside
    strings or column names. A query DuckDB cannot parse is returned as it is (running it
    gives the user DuckDB's own error).
    """
    parsed = con.execute("SELECT json_serialize_sql(?)", [sql]).fetchone()
    tree = json.loads(parsed[0]) if parsed else {"error": True}
    if tree.get("error"):
        return sql
    changed = False

    def walk(node: Any) -> None:
        nonlocal changed
        if isinstance(node, dict):
            if (
                node.get("type") == "BASE_TABLE"
                and not node.get("catalog_name")
                and not node.get("schema_name")
                and node.get("table_name") in TABLE_OF
            ):
                node["catalog_name"], node["table_name"] = "lake", TABLE_OF[node["table_name"]]
                changed = True
            for value in node.values():
                walk(value)
        elif isinstance(node, list):
            for value in node:
                walk(value)

    walk(tree)
    if not changed:
        return sql
    written = con.execute("SELECT json_deserialize_sql(?)", [json.dumps(tree)]).fetchone()
    return str(written[0]) if written else sql


def _where(equal: dict[str, Any]) -> tuple[str, list[Any]]:
    parts, params = [], []
    for col, value in equal.items():
        if isinstance(value, (list, tuple, set, frozenset)):
            values = sorted(value)
            parts.append(f'"{col}" IN ({", ".join("?" for _ in values)})' if values else "false")
            params += values
        else:
            parts.append(f'"{col}" IS NOT DISTINCT FROM ?')
            params.append(value)
    return (" WHERE " + " AND ".join(parts) if parts else ""), params
