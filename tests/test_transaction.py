"""The store's unit of work: one transaction per write, the same relation names as readers,
abandon and failure leave the store as it was, and only the store package writes SQL."""

from __future__ import annotations

import re
from pathlib import Path

import pyarrow as pa
import pytest
from strata13.compile import api
from strata13.compile.store.relations import VIEW_NAMES
from strata13.schemas.records import DUPLICATES, arrow_schema

from strata13.errors import StoreError
from tests.test_store import write_source

ROOT = Path(__file__).resolve().parents[1]


def _duplicate(a: str, b: str) -> pa.Table:
    row = {"record_a": a, "record_b": b, "decision": "reject", "note": None}
    row |= {"drop_record_id": None, "decided_utc": "2026-01-01 00:00:00"}
    return pa.Table.from_pylist([row], schema=arrow_schema(DUPLICATES))


def test_a_write_lands_as_one_version_with_its_commit_row(tmp_path: Path) -> None:
    store = api.init_store(tmp_path / "st")
    v = store.latest_version()
    with store.transaction("test", "one pair") as tx:
        tx.insert("duplicates", _duplicate("r1", "r2"))
        # the transaction reads its own writes through the reader's relation name
        assert tx.value("SELECT count(*) FROM duplicates") == 1
        tx.record({"pairs": 1}, "h")
    assert tx.version == v + 1 == store.latest_version()
    last = store.history()[-1]
    assert (last.command, last.detail, last.summary) == ("test", "one pair", {"pairs": 1})


def test_abandon_makes_no_version(tmp_path: Path) -> None:
    store = api.init_store(tmp_path / "st")
    v = store.latest_version()
    with store.transaction("test") as tx:
        tx.insert("duplicates", _duplicate("r1", "r2"))
        tx.abandon()
    assert tx.version is None and store.latest_version() == v
    assert api.sql(store, "SELECT count(*) FROM duplicates").rows == [(0,)]


def test_a_failure_rolls_back_and_removes_its_parquet_files(tmp_path: Path) -> None:
    store = api.init_store(tmp_path / "st")
    api.ingest(store, None, write_source(tmp_path, [("a", 1, "1.0"), ("b", 2, "2.0")]))
    v = store.latest_version()
    files = sorted((store.path / "data").rglob("*.parquet"))
    with pytest.raises(RuntimeError, match="boom"), store.transaction("test") as tx:
        records = tx.fetch("SELECT * FROM records")
        tx.replace_source("records", ["obrien-delta-2019"], records)
        assert len(sorted((store.path / "data").rglob("*.parquet"))) == len(files) + 1
        raise RuntimeError("boom")
    assert store.latest_version() == v
    assert sorted((store.path / "data").rglob("*.parquet")) == files
    assert api.sql(store, "SELECT count(*) FROM records").rows == [(2,)]


def test_a_body_that_says_nothing_does_not_commit(tmp_path: Path) -> None:
    store = api.init_store(tmp_path / "st")
    v = store.latest_version()
    with pytest.raises(StoreError, match="without saying what it did"):
        with store.transaction("test") as tx:
            tx.insert("duplicates", _duplicate("r1", "r2"))
    assert store.latest_version() == v


def test_delete_matches_values_and_lists_and_counts(tmp_path: Path) -> None:
    store = api.init_store(tmp_path / "st")
    with store.transaction("test") as tx:
        for a, b in (("r1", "r2"), ("r3", "r4"), ("r5", "r6")):
            tx.insert("duplicates", _duplicate(a, b))
        assert tx.delete("duplicates", record_a="r1", record_b="r2") == 1
        assert tx.delete("duplicates", record_a=["r3", "r9"]) == 1
        assert tx.delete("duplicates", record_a=[]) == 0
        assert tx.rows("SELECT record_a FROM duplicates") == [("r5",)]
        tx.record({}, "h")


def test_readers_and_the_writer_see_the_same_relation_names(tmp_path: Path) -> None:
    store = api.init_store(tmp_path / "st")
    api.ingest(store, None, write_source(tmp_path, [("a", 1, "1.0")]))
    con, _ = store.reader()
    try:
        views = (  # a Store's reads bind them in the connection's in-memory schema
            "SELECT view_name FROM duckdb_views() "
            "WHERE (temporary OR database_name = 'memory') AND NOT internal"
        )
        read = {r[0] for r in con.execute(views).fetchall()}
        columns = {
            v: [d[0] for d in con.execute(f"SELECT * FROM {v} LIMIT 0").description] for v in read
        }
    finally:
        con.close()
    assert read == set(VIEW_NAMES.values())
    with store.transaction("test") as tx:
        for name in read:  # every reader name reads in the writer, with the reader's columns
            got = tx.fetch(f"SELECT * FROM {name} LIMIT 0").column_names
            assert set(columns[name]) <= set(got), name
        # a name inside a string or a column alias is left alone
        assert tx.rows("SELECT 'records' AS records FROM records") == [("records",)]
        tx.abandon()


def test_only_the_store_package_writes_sql_against_the_catalog() -> None:
    catalog_sql = re.compile(r"\bBEGIN\b|\bCOMMIT\b|\bROLLBACK\b|\blake\.\w")
    offenders = []
    for folder in ("compile", "cli", "schemas", "benchmarks"):
        for path in sorted((ROOT / folder).rglob("*.py")):
            if path.is_relative_to(ROOT / "compile" / "store"):
                continue
            for n, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1):
                if catalog_sql.search(line):
                    offenders.append(f"{path.relative_to(ROOT)}:{n}: {line.strip()}")
    assert offenders == []
