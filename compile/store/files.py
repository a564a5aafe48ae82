"""The store's Parquet files: which ones a version reads, and which ones no version reads.

A version reads the data and delete files the catalog lists as live at that snapshot; the
`sql` sandbox allows exactly those paths, so superseded versions and the files of
transactions killed mid-commit stay unreadable to it. Files no version references (a
writer killed between writing a file and committing leaves one) are what ``compact``
removes; the catalog is read with DuckLake's own orphan finder under the writer lock, so
the files of a transaction still in flight are never mistaken for orphans.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import duckdb

# the attached catalog's own tables (DuckLake names its metadata database this way)
_META = "__ducklake_metadata_lake"


def _live(table: str, version: int) -> str:
    v = int(version)
    return (
        f"(SELECT * FROM {_META}.{table} WHERE begin_snapshot <= {v} "
        f"AND (end_snapshot IS NULL OR end_snapshot > {v}))"
    )


def version_files(con: duckdb.DuckDBPyConnection, data_dir: Path, version: int) -> list[str]:
    """Absolute paths of every data and delete file the store's tables read at ``version``.

    Paths follow the DuckLake layout: a relative file path hangs off its table's path,
    which hangs off its schema's path, which hangs off the data folder. The version is an
    integer literal: a bound parameter makes the SQLite scan take a second.
    """
    rows = con.execute(
        f"""
        WITH files AS (
            SELECT table_id, path, path_is_relative FROM {_live("ducklake_data_file", version)}
            UNION ALL
            SELECT table_id, path, path_is_relative FROM {_live("ducklake_delete_file", version)}
        )
        SELECT s.path, s.path_is_relative, t.path, t.path_is_relative, f.path,
               f.path_is_relative
        FROM files f
        JOIN {_live("ducklake_table", version)} t USING (table_id)
        JOIN {_live("ducklake_schema", version)} s ON s.schema_id = t.schema_id
        """
    ).fetchall()
    out = []
    for schema_path, schema_rel, table_path, table_rel, file_path, file_rel in rows:
        schema = data_dir / str(schema_path) if schema_rel else Path(str(schema_path))
        table = schema / str(table_path) if table_rel else Path(str(table_path))
        out.append(str(table / str(file_path) if file_rel else Path(str(file_path))))
    return sorted(set(out))


@dataclass(frozen=True)
class Orphans:
    """Parquet files in the data folder that no version of the store references."""

    files: list[Path]
    size: int  # bytes

    def __len__(self) -> int:
        return len(self.files)


def orphans(con: duckdb.DuckDBPyConnection) -> Orphans:
    """The orphaned files, found by DuckLake (call under the writer lock)."""
    rows = con.execute(
        "SELECT * FROM ducklake_delete_orphaned_files('lake', dry_run => true, cleanup_all => true)"
    ).fetchall()
    files = sorted(Path(str(r[0])) for r in rows)
    return Orphans(files, sum(p.stat().st_size for p in files if p.is_file()))


# a store whose latest version reads more data files than this merges them after a write
AUTO_MERGE_FILES = 400


def live_files(con: duckdb.DuckDBPyConnection) -> int:
    """How many data files the newest version reads."""
    row = con.execute(
        f"SELECT count(*) FROM {_META}.ducklake_data_file WHERE end_snapshot IS NULL"
    ).fetchone()
    return int(row[0]) if row else 0


def merge_small_files(con: duckdb.DuckDBPyConnection) -> tuple[int, int]:
    """Merge each table's small data files with DuckLake's own merge, which keeps every
    version readable (old versions read their rows from the merged files), then remove
    the files no version reads any more. Returns the live files (before, after); call
    under the writer lock, outside a transaction (DuckLake makes the merge a version of
    its own, holding the same data as the one before)."""
    before = live_files(con)
    con.execute("CALL ducklake_merge_adjacent_files('lake')").fetchall()
    con.execute("CALL ducklake_cleanup_old_files('lake', cleanup_all => true)").fetchall()
    return before, live_files(con)
