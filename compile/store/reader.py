"""Reading through the relation names every reader and the writer share."""

from __future__ import annotations

import contextlib
from collections.abc import Iterator, Sequence
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import duckdb
    import pyarrow as pa


class Reader:
    """SELECTs over ``records``, ``sources``, ``age_ties`` … on one bound connection.

    A reader connection (``Store.reader``) pins one version; a transaction's shows the
    live state it is writing.
    """

    def __init__(self, con: duckdb.DuckDBPyConnection) -> None:
        self.con = con

    def _sql(self, sql: str) -> str:
        """The SQL to run for ``sql`` (a reader's views take the names as they are)."""
        return sql

    def fetch(self, sql: str, params: Sequence[Any] = ()) -> pa.Table:
        """Run a SELECT; the result as Arrow."""
        return self.con.execute(self._sql(sql), list(params)).to_arrow_table()

    def rows(self, sql: str, params: Sequence[Any] = ()) -> list[tuple[Any, ...]]:
        """Run a SELECT; the result as Python tuples."""
        return self.con.execute(self._sql(sql), list(params)).fetchall()

    def value(self, sql: str, params: Sequence[Any] = ()) -> Any:
        """The first column of the first row (None when there is no row)."""
        row = self.con.execute(self._sql(sql), list(params)).fetchone()
        return None if row is None else row[0]

    @contextlib.contextmanager
    def registered(self, name: str, table: pa.Table) -> Iterator[None]:
        """``table`` visible to the SELECTs as ``name`` for the block (joins, diffs)."""
        self.con.register(name, table)
        try:
            yield
        finally:
            self.con.unregister(name)
