"""The strata13 benchmark runner: our time against a bare baseline, measured in one run.

    python benchmarks/run.py                  # full sizes (several minutes)
    python benchmarks/run.py --quick          # smoke run: 100k rows, 1M records
    python benchmarks/run.py --cases ingest,help --profile

It prints one table (case, size, ours, baseline, ratio, target, verdict) and notes below
it. Cases:

* ingest  — ``api.ingest`` of an N-row × 20-column CSV into a fresh store (in a child
  process, after a warm-up ingest of a 200-row sheet, so imports are not timed), against
  ``pyarrow.csv.read_csv`` + ``pyarrow.parquet.write_table`` of the same file in this
  process. Also the child's peak resident memory (VmHWM). Targets: ratio ≤ 3, ≤ 2 GB.
* query   — ``api.query_arrow`` with an interval and a polygon region on a store of
  N records, against bare DuckDB over the store's Parquet files with the polygon's bounding
  box. Target: ratio ≤ 2.
* help    — ``strata13 --help`` as a subprocess against ``python -c pass``. Target: ours
  ≤ 0.5 s absolute.
* agemodel — ``agemodel.draw_section`` for 1000 draws of 100 000 samples in 200 sections
  (quick: 20 000 samples in 40 sections, the same draws) against as many ``numpy.interp``
  calls on fixed knots (see ``agemodel.py``). Targets: ratio ≤ 3; traced peak memory ≤ 10 %
  of all draws at once.
* start   — ``strata13 query``, ``sources``, ``history`` and ``sql`` on a 5 000-record store
  as subprocesses against a bare duckdb + pandas read of the same Parquet (see
  ``start.py``). Targets: ≤ 0.5 s wall and ≤ 3× the baseline's CPU time.
* sources — 200 sources of 5 000 rows ingested one after another (quick: 20): the last three
  ingests against the first three, and an interval query after all of them against bare
  DuckDB (see ``sources.py``). Targets: ≤ 1.5× and ≤ 2×.
* excursion — the excursion metrics' uncertainty over 500 draws of 100 sections against the
  scalar metrics once per section and draw (see ``excursion.py``). Target: ratio ≤ 0.1.

Inputs come from ``generate.py`` (cached under ``_data/``); scratch stores go to ``_work/``.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import statistics
import subprocess
import sys
import threading
import time
import traceback
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

import generate  # noqa: E402  (sibling module; benchmarks/ is not a package)
import table  # noqa: E402

WORK = HERE / "_work"
RESULT_MARK = "BENCH-RESULT "
GB = 1024**3

INGEST_RATIO_TARGET = 3.0
INGEST_MEMORY_TARGET_GB = 2.0
QUERY_RATIO_TARGET = 2.0
HELP_TARGET_S = 0.5

# The query case's region: an invented irregular hexagon (GeoJSON, lon/lat degrees).
POLYGON: dict[str, Any] = {
    "type": "Polygon",
    "coordinates": [
        [
            [-15.0, 25.0],
            [10.0, 18.0],
            [38.0, 28.0],
            [42.0, 50.0],
            [15.0, 62.0],
            [-12.0, 52.0],
            [-15.0, 25.0],
        ]
    ],
}
INTERVAL = (150.0, 210.0)  # Ma
HEAVY_MODULES = ("pandas", "pandera", "duckdb", "pyarrow", "matplotlib")


@dataclass
class Row:
    """One line of the result table."""

    case: str
    size: str
    ours: str = "—"
    baseline: str = "—"
    ratio: str = "—"
    target: str = "—"
    verdict: str = "—"


@dataclass
class Outcome:
    """The rows and the notes one case produced."""

    rows: list[Row] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


# ------------------------------------------------------------------ formatting


def _secs(s: float) -> str:
    return f"{s * 1000:.0f} ms" if s < 1 else f"{s:.2f} s"


def _count(n: int) -> str:
    if n >= 1_000_000 and n % 1_000_000 == 0:
        return f"{n // 1_000_000}M"
    if n >= 1000 and n % 1000 == 0:
        return f"{n // 1000}k"
    return f"{n:,}"


def _verdict(ok: bool) -> str:
    return "PASS" if ok else "FAIL"


def print_table(rows: list[Row]) -> None:
    """Print the rows as a plain fixed-width table (benchmarks/table.py)."""
    table.print_table([list(vars(r).values()) for r in rows])


def _median_time(fn: Callable[[], Any], repeat: int) -> tuple[float, Any]:
    """Median wall time of ``repeat`` calls and the last call's result."""
    times, out = [], None
    for _ in range(max(1, repeat)):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times), out


# ------------------------------------------------------------------ ingest


def child_ingest(store_dir: str, mapping: str, warmup: str, profile: str | None) -> dict[str, Any]:
    """In a child process: warm up, then time one ingest into a fresh store."""
    from strata13.compile import api

    work = Path(store_dir)
    for p in (work, work.with_name(work.name + "-warmup")):
        shutil.rmtree(p, ignore_errors=True)
    api.ingest(api.init_store(work.with_name(work.name + "-warmup")), None, warmup)
    store = api.init_store(work)
    phases: list[tuple[str, float]] = []
    sampler = _RssSampler()
    sampler.start()
    t0 = time.perf_counter()

    def progress(msg: str) -> None:
        phases.append((msg, time.perf_counter() - t0))
        sampler.phase = msg

    prof = None
    if profile:
        import cProfile

        prof = cProfile.Profile()
        prof.enable()
    try:
        result = api.ingest(store, None, mapping, progress=progress)
    finally:
        seconds = time.perf_counter() - t0
        sampler.stop()
    if prof is not None:
        prof.disable()
        prof.dump_stats(profile)
    out: dict[str, Any] = {
        "seconds": seconds,
        "phases": phases,
        "vmhwm_kb": _vmhwm_kb(),
        "committed": result.committed,
        "pending": result.pending,
        "version": result.version,
        "phase_peak_kb": sampler.peaks,
    }
    con, _ = store.reader()
    try:
        status: dict[str, dict[str, int]] = {}
        for col in (
            "d13c_carb_status",
            "d18o_carb_status",
            "d13c_org_status",
            "age_status",
            "paleo_status",
            "screen",
        ):
            rows = con.execute(
                f'SELECT "{col}", count(*) FROM records GROUP BY 1 ORDER BY 2 DESC'
            ).fetchall()
            status[col] = {str(k): int(n) for k, n in rows}
        out["status"] = status
    finally:
        con.close()
    return out


class _RssSampler(threading.Thread):
    """Samples this process's resident memory every 20 ms; keeps the peak per phase."""

    def __init__(self) -> None:
        super().__init__(daemon=True)
        self.phase = "start"
        self.peaks: dict[str, int] = {}
        self._halt = threading.Event()
        self._page_kb = os.sysconf("SC_PAGE_SIZE") // 1024

    def run(self) -> None:
        statm = Path("/proc/self/statm")
        if not statm.exists():
            return
        while not self._halt.wait(0.02):
            kb = int(statm.read_text().split()[1]) * self._page_kb
            self.peaks[self.phase] = max(kb, self.peaks.get(self.phase, 0))

    def stop(self) -> None:
        self._halt.set()
        self.join()


def _vmhwm_kb() -> int:
    """Peak resident set size of this process in KiB (Linux /proc; ru_maxrss elsewhere)."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1])
    except OSError:
        pass
    import resource

    return int(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)


def _run_child(args: list[str]) -> dict[str, Any]:
    """Run this file as a child with ``args``; its result is the marked JSON line."""
    proc = subprocess.run(
        [sys.executable, str(Path(__file__).resolve()), *args],
        capture_output=True,
        text=True,
        check=False,
    )
    for line in reversed(proc.stdout.splitlines()):
        if line.startswith(RESULT_MARK):
            return json.loads(line[len(RESULT_MARK) :])
    return {"error": f"child exited {proc.returncode}\n{proc.stderr[-4000:]}"}


def _describe_derive(status: dict[str, dict[str, int]]) -> list[str]:
    """Which derive steps the ingest exercised, from the stored status columns."""

    def fmt(col: str) -> str:
        parts = [
            f"{'(no value)' if k == 'None' else k} ×{v:,}" for k, v in status.get(col, {}).items()
        ]
        return "; ".join(parts) or "no values"

    return [
        "derive steps exercised by the ingest (counts from the committed records):",
        f"  harmonise d13c_carb (VPDB -> identity step): {fmt('d13c_carb_status')}",
        f"  harmonise d18o_carb (VSMOW -> IUPAC line):   {fmt('d18o_carb_status')}",
        f"  harmonise d13c_org  (VPDB -> identity step): {fmt('d13c_org_status')}",
        f"  ages (reported on the store chart, no ties): {fmt('age_status')}",
        f"  paleo (no rotation model yet):               {fmt('paleo_status')}",
        f"  screens (the default rule set):              {fmt('screen')}",
    ]


def _top_functions(profile: Path, n: int = 15) -> list[str]:
    """The profile's top functions by own time, one compact line each."""
    import pstats

    st = pstats.Stats(str(profile))
    rows = []
    for (file, line, name), (_cc, nc, tt, ct, _callers) in st.stats.items():  # type: ignore[attr-defined]
        short = "/".join(Path(file).parts[-2:]) if file != "~" else ""
        rows.append((tt, ct, nc, f"{name} ({short}:{line})" if short else name))
    rows.sort(reverse=True)
    out = [f"  {'own s':>7} {'cum s':>7} {'calls':>9}  function"]
    out += [f"  {tt:7.2f} {ct:7.2f} {nc:9d}  {where}" for tt, ct, nc, where in rows[:n]]
    cum = sorted(rows, key=lambda r: r[1], reverse=True)
    strata = [r for r in cum if "compile/" in r[3] or "schemas/" in r[3]][:n]
    out += ["", f"  {'own s':>7} {'cum s':>7} {'calls':>9}  strata13 function (by cumulative)"]
    out += [f"  {tt:7.2f} {ct:7.2f} {nc:9d}  {where}" for tt, ct, nc, where in strata]
    return out


def case_ingest(rows: int, repeat: int, profile: bool) -> Outcome:
    """ingest N x 20 CSV: ours in a child process, baseline pyarrow in this process."""
    import resource

    import pyarrow.csv as pcsv
    import pyarrow.parquet as pq

    sheet, warm = generate.ingest_inputs(rows)
    mb = sheet.csv.stat().st_size / 1e6
    size = f"{rows:,} rows x {sheet.columns} cols ({mb:.0f} MB)"
    case = f"ingest {_count(rows)} x {sheet.columns} CSV"
    out = Outcome()
    WORK.mkdir(exist_ok=True)

    results = []
    for k in range(max(1, repeat)):
        res = _run_child(
            [
                "--child-ingest",
                str(WORK / f"ingest-store-{k}"),
                str(sheet.mapping),
                str(warm.mapping),
            ]
        )
        if "error" in res:
            out.rows.append(Row(case, size, "ERROR", verdict="ERROR"))
            out.notes += ["ingest failed:", *("  " + ln for ln in res["error"].splitlines())]
            return out
        results.append(res)
    rusage_kb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    for scratch in WORK.glob("ingest-store-*"):  # scratch stores are not needed any more
        shutil.rmtree(scratch, ignore_errors=True)

    def baseline() -> None:
        table = pcsv.read_csv(sheet.csv)
        pq.write_table(table, WORK / "baseline.parquet")

    baseline()  # warm the page cache and pyarrow
    base_s = min(_median_time(baseline, 1)[0] for _ in range(3))
    ours_s = statistics.median(r["seconds"] for r in results)
    ratio = ours_s / base_s
    out.rows.append(
        Row(
            case,
            size,
            _secs(ours_s),
            _secs(base_s),
            f"{ratio:.1f}x",
            f"≤ {INGEST_RATIO_TARGET:g}x",
            _verdict(ratio <= INGEST_RATIO_TARGET),
        )
    )
    peak_gb = max(r["vmhwm_kb"] for r in results) * 1024 / GB
    out.rows.append(
        Row(
            "ingest peak memory (child VmHWM)",
            size,
            f"{peak_gb:.2f} GB",
            target=f"≤ {INGEST_MEMORY_TARGET_GB:g} GB",
            verdict=_verdict(peak_gb <= INGEST_MEMORY_TARGET_GB),
        )
    )

    last = results[-1]
    marks = [*last["phases"], ["(done)", last["seconds"]]]
    peaks = last.get("phase_peak_kb", {})
    steps = [
        f"{marks[i][0]} {marks[i + 1][1] - marks[i][1]:.1f} s"
        + (f" (peak RSS {peaks[marks[i][0]] * 1024 / GB:.2f} GB)" if marks[i][0] in peaks else "")
        for i in range(len(marks) - 1)
    ]
    out.notes += [
        f"ingest: ours = median of {len(results)} run(s) of api.ingest into a fresh store, "
        "timed in a child after a 200-row warm-up ingest; baseline = best of 3 "
        "pyarrow.csv.read_csv + pyarrow.parquet.write_table in this process.",
        f"ingest: committed {last['committed']:,} records as version {last['version']}; "
        f"pending {last['pending']}.",
        "ingest phases (from the progress callback): " + "; ".join(steps) + ".",
        f"ingest memory: child VmHWM {peak_gb:.2f} GB; ru_maxrss over children "
        f"{rusage_kb * 1024 / GB:.2f} GB.",
        *_describe_derive(last.get("status", {})),
    ]
    if profile:
        prof_path = WORK / "ingest.prof"
        res = _run_child(
            [
                "--child-ingest",
                str(WORK / "ingest-store-prof"),
                str(sheet.mapping),
                str(warm.mapping),
                "--profile-to",
                str(prof_path),
            ]
        )
        if "error" in res:
            out.notes += ["profiled ingest failed:", res["error"]]
        else:
            for scratch in WORK.glob("ingest-store-*"):
                shutil.rmtree(scratch, ignore_errors=True)
            out.notes += [
                f"cProfile of one ingest ({res['seconds']:.1f} s under the profiler; "
                f"stats in {prof_path}):",
                *_top_functions(prof_path),
            ]
    return out


# ------------------------------------------------------------------ query


def case_query(records: int, repeat: int) -> Outcome:
    """interval + polygon query: api.query_arrow against bare DuckDB over the Parquet files."""
    import duckdb
    from strata13.compile import api
    from strata13.compile.query.filters import Filters
    from strata13.compile.query.regions import from_geojson

    out = Outcome()
    case = f"interval + polygon query, {_count(records)} records"
    t = time.perf_counter()
    path = generate.make_store(records, log=lambda m: print(m, file=sys.stderr))
    built = time.perf_counter() - t
    if built > 1:
        out.notes.append(
            f"query: store of {records:,} records built in {built:.0f} s (cached for later runs)."
        )
    store = api.open_store(path)
    region = from_geojson(POLYGON, "bench-hexagon", "the benchmark polygon")
    filters = Filters(interval=INTERVAL, region=region)
    ((w, s, e, n),) = region.boxes
    files = path / "data" / "main" / "analyses"
    n_files = len(list(files.rglob("*.parquet")))
    glob = str(files / "**" / "*.parquet")
    sql = (
        "SELECT * FROM read_parquet(?) WHERE age_ma BETWEEN ? AND ? "
        "AND lon BETWEEN ? AND ? AND lat BETWEEN ? AND ?"
    )
    params = [glob, *INTERVAL, w, e, s, n]

    def ours() -> Any:
        return api.query_arrow(store, filters)

    def baseline() -> Any:
        con = duckdb.connect()
        try:
            return con.execute(sql, params).to_arrow_table()
        finally:
            con.close()

    try:
        ours()
        ours_s, ours_t = _median_time(ours, repeat)
    except Exception:
        out.rows.append(Row(case, f"{records:,} records", "ERROR", verdict="ERROR"))
        out.notes += ["query failed:", *("  " + ln for ln in traceback.format_exc().splitlines())]
        return out
    baseline()
    base_s, base_t = _median_time(baseline, repeat)
    exact = int(
        region.contains(
            base_t.column("lon").to_numpy(zero_copy_only=False),
            base_t.column("lat").to_numpy(zero_copy_only=False),
        ).sum()
    )
    ratio = ours_s / base_s
    size = f"{records:,} rec -> {ours_t.num_rows:,} hits"
    out.rows.append(
        Row(
            case,
            size,
            _secs(ours_s),
            _secs(base_s),
            f"{ratio:.1f}x",
            f"≤ {QUERY_RATIO_TARGET:g}x",
            _verdict(ratio <= QUERY_RATIO_TARGET),
        )
    )
    out.notes += [
        f"query: interval {INTERVAL[0]:g}-{INTERVAL[1]:g} Ma, hexagon with bbox "
        f"W{w:g} S{s:g} E{e:g} N{n:g}; median of {repeat} after one warm-up each; "
        f"{n_files} Parquet file(s) in {files.relative_to(path)}.",
        f"query: baseline (bbox only) {base_t.num_rows:,} rows, {exact:,} of them inside the "
        f"polygon; ours {ours_t.num_rows:,} rows"
        + (" (agrees)." if exact == ours_t.num_rows else " — MISMATCH with the exact test."),
        "query: ours also attaches the DuckLake catalog, builds the snapshot views, sorts by "
        "record_id and runs the exact shapely test; the baseline does none of these.",
    ]
    return out


# ------------------------------------------------------------------ --help


def _cli_exe() -> str | None:
    beside = Path(sys.executable).parent / "strata13"
    return str(beside) if beside.is_file() else shutil.which("strata13")


def _subprocess_median(
    cmd: list[str], repeat: int
) -> tuple[float, subprocess.CompletedProcess[str]]:
    """Median wall time of ``repeat`` runs of ``cmd`` after one warm-up run."""
    subprocess.run(cmd, capture_output=True, text=True, check=False)  # warm-up
    times, last = [], None
    for _ in range(max(1, repeat)):
        t = time.perf_counter()
        last = subprocess.run(cmd, capture_output=True, text=True, check=False)
        times.append(time.perf_counter() - t)
    assert last is not None
    return statistics.median(times), last


def case_help(repeat: int) -> Outcome:
    """strata13 --help against python -c pass, both as subprocesses."""
    import importlib.util

    out = Outcome()
    case = "strata13 --help"
    size = f"median of {repeat}"
    exe = _cli_exe()
    try:
        has_app = importlib.util.find_spec("strata13.cli.app") is not None
    except ModuleNotFoundError:
        has_app = False
    if exe is None or not has_app:
        why = "no strata13 on PATH" if exe is None else "strata13.cli.app missing"
        out.rows.append(Row(case, size, "skipped (CLI not present)", verdict="skipped"))
        out.notes.append(f"help: skipped — {why}.")
        return out
    ours_s, proc = _subprocess_median([exe, "--help"], repeat)
    if proc.returncode != 0:
        if "No module named 'strata13.cli" in proc.stderr:
            out.rows.append(Row(case, size, "skipped (CLI not present)", verdict="skipped"))
            return out
        out.rows.append(Row(case, size, "ERROR", verdict="ERROR"))
        out.notes += [
            f"help: `strata13 --help` exited {proc.returncode}:",
            *("  " + ln for ln in proc.stderr.strip().splitlines()[-15:]),
        ]
        return out
    base_s, _ = _subprocess_median([sys.executable, "-c", "pass"], repeat)
    out.rows.append(
        Row(
            case,
            size,
            _secs(ours_s),
            _secs(base_s),
            f"{ours_s / base_s:.1f}x",
            f"≤ {HELP_TARGET_S:g} s",
            _verdict(ours_s <= HELP_TARGET_S),
        )
    )
    probe = (
        "import json, sys\nsys.argv = ['strata13', '--help']\n"
        "from strata13.cli.app import main\n"
        "try:\n    main()\nexcept SystemExit:\n    pass\n"
        f"print({RESULT_MARK!r} + json.dumps(sorted(m for m in {list(HEAVY_MODULES)!r} "
        "if m in sys.modules)))\n"
    )
    p = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, check=False)
    heavy = next(
        (
            json.loads(ln[len(RESULT_MARK) :])
            for ln in p.stdout.splitlines()
            if ln.startswith(RESULT_MARK)
        ),
        None,
    )
    out.notes.append(
        "help: heavy modules imported by --help: "
        + ("could not tell" if heavy is None else ", ".join(heavy) or "none")
        + f" (checked: {', '.join(HEAVY_MODULES)})."
    )
    return out


# ------------------------------------------------------------- library cases

# case -> (sibling module, its size in a quick run, in a full run): each module has
# measure(size, repeat=…), rows(result) and notes(result), and runs on its own too. The
# age model's quick run keeps the full run's draws (see agemodel.py: QUICK).
LIBRARY_CASES = {
    "agemodel": ("agemodel", "quick", 1000),
    "curve": ("curve", 50, 200),
    "excursion": ("excursion", 100, 500),
    "paleo": ("paleo", 100_000, 1_000_000),
    "start": ("start", 5000, 5000),
    "sources": ("sources", 20, 200),
}


def case_library(name: str, repeat: int, quick: bool) -> Outcome:
    """A library benchmark (age-model draws, curve bootstrap, paleo reconstruction)."""
    import importlib

    module, small, full = LIBRARY_CASES[name]
    bench = importlib.import_module(module)
    res = bench.measure(small if quick else full, repeat=repeat)
    return Outcome([Row(*r) for r in bench.rows(res)], bench.notes(res))


# ------------------------------------------------------------------ main


def _environment() -> str:
    import duckdb
    import pyarrow

    load = f", load average {os.getloadavg()[0]:.1f}" if hasattr(os, "getloadavg") else ""
    return (
        f"python {platform.python_version()}, duckdb {duckdb.__version__}, pyarrow "
        f"{pyarrow.__version__}, {os.cpu_count()} CPUs, {platform.machine()}{load}"
    )


def main(argv: list[str] | None = None) -> int:
    """Parse options, run the chosen cases, print the table and the notes."""
    p = argparse.ArgumentParser(description="strata13 benchmarks: ours vs a bare baseline.")
    p.add_argument(
        "--quick",
        action="store_true",
        help=f"smoke sizes: {generate.QUICK_ROWS:,} rows, {generate.QUICK_RECORDS:,} records",
    )
    p.add_argument(
        "--cases",
        default="ingest,query,help,agemodel,curve,excursion,paleo",
        help="comma list of ingest, query, help, agemodel, curve, excursion, paleo (default: all)",
    )
    p.add_argument("--rows", type=int, help="ingest sheet rows (overrides the size)")
    p.add_argument("--records", type=int, help="query store records (overrides the size)")
    p.add_argument(
        "--repeat",
        type=int,
        default=0,
        help="timed runs per case (default: ingest 1, query 3, help 5, "
        "agemodel, curve, excursion and paleo 3)",
    )
    p.add_argument(
        "--profile",
        action="store_true",
        help="also profile one ingest with cProfile and list the hotspots",
    )
    p.add_argument(
        "--child-ingest", nargs=3, metavar=("STORE", "MAPPING", "WARMUP"), help=argparse.SUPPRESS
    )
    p.add_argument("--profile-to", help=argparse.SUPPRESS)
    args = p.parse_args(argv)

    if args.child_ingest:
        try:
            res = child_ingest(*args.child_ingest, profile=args.profile_to)
        except Exception:
            res = {"error": traceback.format_exc()}
        print(RESULT_MARK + json.dumps(res))
        return 0

    cases = [c.strip() for c in args.cases.split(",") if c.strip()]
    unknown = set(cases) - {"ingest", "query", "help", *LIBRARY_CASES}
    if unknown:
        p.error(f"unknown case(s): {', '.join(sorted(unknown))}")
    rows = args.rows or (generate.QUICK_ROWS if args.quick else generate.FULL_ROWS)
    records = args.records or (generate.QUICK_RECORDS if args.quick else generate.FULL_RECORDS)
    print(
        f"strata13 benchmarks ({'quick' if args.quick else 'full'}): {_environment()}", flush=True
    )
    outcomes: list[Outcome] = []
    for c in cases:
        t = time.perf_counter()
        print(f"running {c} …", file=sys.stderr, flush=True)
        if c == "ingest":
            outcomes.append(case_ingest(rows, args.repeat or 1, args.profile))
        elif c == "query":
            outcomes.append(case_query(records, args.repeat or 3))
        elif c in LIBRARY_CASES:
            outcomes.append(case_library(c, args.repeat or 3, args.quick))
        else:
            outcomes.append(case_help(args.repeat or 5))
        print(f"  {c} done in {time.perf_counter() - t:.0f} s", file=sys.stderr, flush=True)
    print()
    print_table([r for o in outcomes for r in o.rows])
    notes = [n for o in outcomes for n in o.notes]
    if notes:
        print()
        print("\n".join(notes))
    failed = any(r.verdict in ("FAIL", "ERROR") for o in outcomes for r in o.rows)
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
