"""Compact screen results: what the store keeps, and the long form the view gives back."""

from __future__ import annotations

import random
from pathlib import Path

import duckdb
import pyarrow as pa
import pyarrow.parquet as pq
from strata13.compile.store import screen_rows
from strata13.schemas.records import SCREEN_RESULTS, arrow_schema


def _results(seed: int) -> tuple[pa.Table, dict[str, int]]:
    """Long results for 3 sources × 4 rules with mixed outcomes; rule r3 of source s2 has
    no row for one record (a rule that did not cover every record keeps all its rows)."""
    rng = random.Random(seed)
    rows, counts = [], {}
    for s, n in (("s0", 40), ("s1", 7), ("s2", 25)):
        counts[s] = n
        for k in range(n):
            for rule in ("r0", "r1", "r2", "r3"):
                if s == "s2" and rule == "r3" and k == 0:
                    continue
                outcome = rng.choice(["pass", "pass", "pass", "not applicable", "warn", "fail"])
                detail = None if outcome in ("pass", "not applicable") else f"{rng.random():.3f}"
                if rule == "r2":  # untested with one shared reason
                    outcome, detail = "untested", "no Mn value"
                rows.append((f"{s}-{k}", rule, outcome, detail, s))
    cols = [c for c, _ in SCREEN_RESULTS]
    table = pa.table({c: [r[i] for r in rows] for i, c in enumerate(cols)})
    return table.cast(arrow_schema(SCREEN_RESULTS)), counts


def _long_form(kept: pa.Table, common: pa.Table, counts: dict[str, int]) -> set[tuple]:
    """The view's SQL run over tables holding ``kept``, ``common`` and the records."""
    con = duckdb.connect()
    con.execute("ATTACH ':memory:' AS lake")
    records = pa.table(
        {
            "record_id": [f"{s}-{k}" for s, n in counts.items() for k in range(n)],
            "source_id": [s for s, n in counts.items() for _ in range(n)],
        }
    )
    for name, table in (("analyses", records), ("screen_results", kept), ("screen_common", common)):
        con.register("t", table)
        con.execute(f"CREATE TABLE lake.{name} AS SELECT * FROM t")
        con.unregister("t")
    cols = ", ".join(f'"{c}"' for c, _ in SCREEN_RESULTS)
    rows = con.execute(screen_rows.view_sql(cols, "")).fetchall()
    assert len(rows) == len(set(rows))
    return set(rows)


def test_the_view_gives_back_exactly_the_long_form() -> None:
    for seed in range(5):
        results, counts = _results(seed)
        kept, common = screen_rows.split(results, counts)
        original = {tuple(r.values()) for r in results.to_pylist()}
        assert _long_form(kept, common, counts) == original
        assert kept.num_rows < results.num_rows  # something was made common
        assert kept.schema == results.schema
        made_common = {(r["source_id"], r["rule"]) for r in common.to_pylist()}
        assert ("s2", "r3") not in made_common  # did not cover every record of s2
        assert ("s0", "r2") in made_common  # untested with one shared detail


def test_a_source_whose_count_is_unknown_keeps_every_row() -> None:
    results, counts = _results(1)
    kept, common = screen_rows.split(results, {"s0": counts["s0"]})
    assert {r["source_id"] for r in common.to_pylist()} == {"s0"}
    assert kept.num_rows == results.num_rows - sum(
        1
        for r in results.to_pylist()
        if (r["source_id"], r["rule"], r["outcome"], r["detail"])
        in {(c["source_id"], c["rule"], c["outcome"], c["detail"]) for c in common.to_pylist()}
    )


def test_the_demo_store_keeps_fewer_rows_than_it_shows(demo_store: Path) -> None:
    from strata13.compile import api

    store = api.open_store(demo_store)
    con, _ = store.reader()
    try:
        shown = con.execute("SELECT count(*) FROM screen_results").fetchone()[0]
        n_records = con.execute("SELECT count(*) FROM records").fetchone()[0]
        n_rules = con.execute("SELECT count(DISTINCT rule) FROM screen_results").fetchone()[0]
        stored = con.execute("SELECT count(*) FROM lake.screen_results").fetchone()[0]
    finally:
        con.close()
    assert shown == n_records * n_rules
    assert stored < shown / 2
    files = list((demo_store / "data" / "main" / "screen_results").rglob("*.parquet"))
    assert sum(pq.ParquetFile(f).metadata.num_rows for f in files) >= stored
