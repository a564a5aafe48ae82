"""Small-store start: a read command on a 5 000-record store against a bare DuckDB read.

    python benchmarks/start.py [--records 5000] [--repeat 7]

Ours: ``strata13 query``, ``sources``, ``history`` and ``sql`` on a store made by ingesting
one generated sheet (benchmarks/generate.py), each as a subprocess, as a user runs them.
Baseline: a subprocess that imports duckdb and pandas and reads the store's records Parquet
into a DataFrame, the least a script reading the same data does. Runs are interleaved so a
load change hits both; each command is timed in wall seconds and in the child's CPU seconds
(user + system, from ``getrusage``), which a busy machine disturbs far less than wall time.
Targets (issue 18): wall ≤ 0.5 s and ≤ 3× the baseline.
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import statistics
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

import generate  # noqa: E402
import table  # noqa: E402

WALL_TARGET_S = 0.5
RATIO_TARGET = 3.0
COMMANDS = {
    "query": ["query", "--interval", "150-210", "--format", "csv"],
    "sources": ["sources"],
    "history": ["history"],
    "sql": ["sql", "SELECT section_id, count(*) FROM records GROUP BY 1"],
}


def _env() -> dict[str, str]:
    """The child's environment: bytecode caching on, as an installed tool has it."""
    env = dict(os.environ)
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    return env


def _timed(cmd: list[str]) -> tuple[float, float]:
    """(wall, child CPU) seconds of one run; the command must succeed."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t = time.perf_counter()
    p = subprocess.run(cmd, capture_output=True, text=True, env=_env(), check=False)
    wall = time.perf_counter() - t
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if p.returncode != 0:
        raise RuntimeError(f"{' '.join(cmd[:3])} … exited {p.returncode}: {p.stderr[-400:]}")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu


def make_store(records: int) -> Path:
    """A store holding one generated sheet of ``records`` rows (rebuilt each run)."""
    from strata13.compile import api

    folder = generate.DATA / f"start_{records}"
    sheet = generate.make_sheet(records, folder, "sheet")
    store = HERE / "_work" / f"start_{records}"
    shutil.rmtree(store, ignore_errors=True)
    store.parent.mkdir(parents=True, exist_ok=True)
    api.init_store(store)
    api.ingest(store, None, sheet.mapping)
    return store


def measure(records: int = 5000, repeat: int = 7) -> dict[str, Any]:
    store = make_store(records)
    exe = shutil.which("strata13") or str(Path(sys.executable).with_name("strata13"))
    glob = str(store / "data" / "main" / "analyses" / "*.parquet")
    bare = [
        sys.executable,
        "-c",
        f"import duckdb, pandas\nduckdb.sql(\"SELECT * FROM read_parquet('{glob}')\").df()",
    ]
    runs = {name: [exe, *args, "--store", str(store)] for name, args in COMMANDS.items()}
    runs["baseline"] = bare
    for cmd in runs.values():  # warm-up: bytecode written, files in the page cache
        _timed(cmd)
    walls: dict[str, list[float]] = {k: [] for k in runs}
    cpus: dict[str, list[float]] = {k: [] for k in runs}
    for _ in range(repeat):
        for name, cmd in runs.items():
            w, c = _timed(cmd)
            walls[name].append(w)
            cpus[name].append(c)
    return {
        "records": records,
        "repeat": repeat,
        "wall": {k: statistics.median(v) for k, v in walls.items()},
        "cpu": {k: statistics.median(v) for k, v in cpus.items()},
        "load": os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan"),
    }


def rows(res: dict[str, Any]) -> list[tuple[str, ...]]:
    wall, cpu = res["wall"], res["cpu"]
    out = []
    for name in COMMANDS:
        ratio = cpu[name] / cpu["baseline"]
        ok = wall[name] <= WALL_TARGET_S and ratio <= RATIO_TARGET
        out.append(
            (
                f"start: strata13 {name}",
                f"{res['records']:,} records",
                f"{wall[name]:.2f} s ({cpu[name]:.2f} s CPU)",
                f"{wall['baseline']:.2f} s ({cpu['baseline']:.2f} s CPU)",
                f"{ratio:.1f}x CPU",
                f"≤ {WALL_TARGET_S:g} s, ≤ {RATIO_TARGET:g}x",
                "PASS" if ok else "FAIL",
            )
        )
    return out


def notes(res: dict[str, Any]) -> list[str]:
    return [
        f"start: median of {res['repeat']} interleaved subprocess runs after one warm-up each; "
        "the ratio is of CPU seconds (user + system of the child); baseline = python -c "
        "'import duckdb, pandas; read the records Parquet into a DataFrame'.",
        f"start: load average {res['load']:.1f} during the run (wall times grow with it).",
    ]


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description="strata13 small-store start benchmark.")
    p.add_argument("--records", type=int, default=5000)
    p.add_argument("--repeat", type=int, default=7)
    args = p.parse_args(argv)
    res = measure(args.records, args.repeat)
    return table.report(rows(res), notes(res))


if __name__ == "__main__":
    sys.exit(main())
