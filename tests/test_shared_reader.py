"""One Store's reads share a connection and still always show the version they should."""

from __future__ import annotations

from pathlib import Path

from strata13.compile import api
from strata13.compile.store.lake import Store


def _commit(store: Store) -> int:
    """An empty unit of work: a new version holding only its commit row."""
    with store.transaction("test", "shared reader") as tx:
        tx.record({"test": 1}, "")
    assert tx.version is not None
    return tx.version


def _latest(store: Store) -> int:
    con, v = store.reader()
    try:
        assert con.execute("SELECT count(*) FROM records").fetchone()[0] > 0
        return v
    finally:
        con.close()


def test_a_second_read_reuses_the_first_connection(demo_store: Path) -> None:
    store = api.open_store(demo_store)
    first = _latest(store)
    base = store._readers[None][0]
    assert _latest(store) == first
    assert store._readers[None][0] is base  # the same connection, a new cursor


def test_a_write_through_the_store_is_seen_by_its_next_read(demo_store: Path) -> None:
    store = api.open_store(demo_store)
    before = _latest(store)
    assert _commit(store) == before + 1
    assert _latest(store) == before + 1


def test_a_write_by_another_process_is_seen_by_the_next_latest_read(demo_store: Path) -> None:
    store = api.open_store(demo_store)
    before = _latest(store)
    other = Store.open(demo_store)  # another process's view of the same folder
    assert _commit(other) == before + 1
    assert _latest(store) == before + 1
    con, v = store.reader(before)  # a pinned version stays pinned
    try:
        assert v == before
    finally:
        con.close()


def test_sql_does_not_lock_the_reads_that_follow(demo_store: Path) -> None:
    store = api.open_store(demo_store)
    n = _latest(store)
    res = api.sql(store, "SELECT count(*) AS n FROM records")
    assert res.rows[0][0] > 0
    # the sandbox turned external access off on its own connection only
    assert api.query_arrow(store).num_rows > 0
    assert _latest(store) == n
