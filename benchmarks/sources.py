"""Many sources: does an ingest cost the same in a store of 200 sources as in an empty one?

    python benchmarks/sources.py [--sources 200] [--rows 5000]

After a warm-up ingest into a throwaway store (imports, extensions), ingests ``--sources``
generated sheets of ``--rows`` rows each (benchmarks/generate.py, one source each, distinct
seeds) one after another into one store, in this process, and compares the median of the
first three ingests with the median of the last three (target, issue 18: within 1.5×).
Then an interval query over the whole store against a bare DuckDB read of the same Parquet
with the same interval, and the number of data files the store holds.
"""

from __future__ import annotations

import argparse
import shutil
import statistics
import sys
import time
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

import generate  # noqa: E402
import table  # noqa: E402

RATIO_TARGET = 1.5
QUERY_RATIO_TARGET = 2.0
INTERVAL = (150.0, 210.0)


def measure(n_sources: int = 200, rows: int = 5000, repeat: int = 3) -> dict[str, Any]:
    import duckdb
    from strata13.compile import api
    from strata13.compile.query.filters import Filters

    folder = generate.DATA / f"sources_{rows}"
    sheets = [
        generate.make_sheet(rows, folder, f"src{k:03d}", seed=generate.SEED + 100 + k)
        for k in range(n_sources)
    ]
    path = HERE / "_work" / f"sources_{n_sources}x{rows}"
    for old in (path, path.with_name(path.name + "-warmup")):
        shutil.rmtree(old, ignore_errors=True)
    path.parent.mkdir(parents=True, exist_ok=True)
    warm = generate.make_sheet(generate.WARMUP_ROWS, folder, "warmup", seed=generate.SEED + 1)
    api.ingest(api.init_store(path.with_name(path.name + "-warmup")), None, warm.mapping)
    store = api.init_store(path)
    times = []
    for sheet in sheets:
        t = time.perf_counter()
        api.ingest(store, None, sheet.mapping)
        times.append(time.perf_counter() - t)
    files = list((path / "data").rglob("*.parquet"))
    filters = Filters(interval=INTERVAL)
    glob = str(path / "data" / "main" / "analyses" / "**" / "*.parquet")
    # past 400 files a write merges them (DuckLake's merged files carry an internal
    # snapshot column): read by name and leave that column out
    bare_sql = (
        "SELECT COLUMNS(c -> NOT starts_with(c, '_ducklake')) "
        "FROM read_parquet(?, union_by_name = true) WHERE age_ma BETWEEN ? AND ?"
    )

    def ours() -> int:
        return int(api.query_arrow(store, filters).num_rows)

    def bare() -> int:
        con = duckdb.connect()
        try:
            return int(con.execute(bare_sql, [glob, *INTERVAL]).to_arrow_table().num_rows)
        finally:
            con.close()

    hits = ours(), bare()
    q_ours, q_bare = [], []
    for _ in range(repeat):
        for fn, bucket in ((ours, q_ours), (bare, q_bare)):
            t = time.perf_counter()
            fn()
            bucket.append(time.perf_counter() - t)
    k = min(3, len(times))
    return {
        "sources": n_sources,
        "rows": rows,
        "first": statistics.median(times[:k]),
        "last": statistics.median(times[-k:]),
        "times": times,
        "files": len(files),
        "query": statistics.median(q_ours),
        "bare": statistics.median(q_bare),
        "hits": hits,
        "repeat": repeat,
    }


def rows(res: dict[str, Any]) -> list[tuple[str, ...]]:
    ratio = res["last"] / res["first"]
    q_ratio = res["query"] / res["bare"]
    size = f"{res['sources']} sources x {res['rows']:,} rows"
    return [
        (
            "ingest: last 3 vs first 3",
            size,
            f"{res['last']:.2f} s",
            f"{res['first']:.2f} s",
            f"{ratio:.2f}x",
            f"≤ {RATIO_TARGET:g}x",
            "PASS" if ratio <= RATIO_TARGET else "FAIL",
        ),
        (
            "interval query after all sources",
            f"{res['sources'] * res['rows']:,} records -> {res['hits'][0]:,} hits",
            f"{res['query'] * 1000:.0f} ms",
            f"{res['bare'] * 1000:.0f} ms",
            f"{q_ratio:.1f}x",
            f"≤ {QUERY_RATIO_TARGET:g}x",
            "PASS" if q_ratio <= QUERY_RATIO_TARGET else "FAIL",
        ),
    ]


def notes(res: dict[str, Any]) -> list[str]:
    t = res["times"]
    tenth = max(1, len(t) // 10)
    steps = ", ".join(
        f"#{i + 1} {statistics.median(t[i : i + tenth]):.2f} s" for i in range(0, len(t), tenth)
    )
    return [
        f"sources: ingest times along the way (median of each tenth): {steps}.",
        f"sources: {res['files']} Parquet files in the store after {res['sources']} ingests; "
        f"ours and bare DuckDB agree on hits: {res['hits'][0] == res['hits'][1]} "
        f"({res['hits'][0]:,} vs {res['hits'][1]:,}); query median of {res['repeat']}.",
    ]


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description="strata13 many-sources benchmark.")
    p.add_argument("--sources", type=int, default=200)
    p.add_argument("--rows", type=int, default=5000)
    p.add_argument("--repeat", type=int, default=3)
    args = p.parse_args(argv)
    res = measure(args.sources, args.rows, args.repeat)
    return table.report(rows(res), notes(res))


if __name__ == "__main__":
    sys.exit(main())
