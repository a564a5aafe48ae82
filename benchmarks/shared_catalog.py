"""A store on a PostgreSQL catalog against the same store on its embedded SQLite catalog.

Starts its own PostgreSQL server on a loopback port (tests/pg_server.py, fsync on) unless
STRATA13_BENCH_PG names an administrator's connection string, and measures, in one run:

* ingest of a 100 000-record synthetic sheet (benchmarks/generate.py) into a new store on
  each catalog: PostgreSQL time / SQLite time;
* the interval + polygon query of benchmarks/run.py on a 1 000 000-record store (10 000 000
  with --big), the same Parquet files read through either catalog (the folder's files are
  hard-linked, the catalog moved with ``move-catalog``): PostgreSQL / SQLite;
* 8 concurrent writer processes x 20 ingests each (small sheets, one source per ingest) on
  each catalog: commits per second, lost commits (ingests that reported a version minus the
  versions the store lists; must be 0), duplicate versions, and the 95th percentile of the
  time a writer waited for the lock.

    python benchmarks/shared_catalog.py [--big] [--writers 8] [--ingests 20] [--rows 100000]
"""

from __future__ import annotations

import argparse
import json
import multiprocessing as mp
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))
WORK = HERE / "_work" / "shared"

import generate  # noqa: E402


def _server() -> tuple[str, Path | None]:
    given = os.environ.get("STRATA13_BENCH_PG")
    if given:
        return given, None
    from tests import pg_server

    folder = Path(tempfile.mkdtemp(prefix="s13bench-pg-"))
    return pg_server.start(folder, durable=True), folder


def _database(admin: str) -> str:
    """A new database on the server; the catalog spec naming it (the admin's role)."""
    import uuid

    import psycopg
    from psycopg.conninfo import conninfo_to_dict, make_conninfo

    name = f"bench_{uuid.uuid4().hex[:10]}"
    with psycopg.connect(admin, autocommit=True) as con:
        con.execute(f"CREATE DATABASE {name}")
    params = conninfo_to_dict(admin)
    params["dbname"] = name
    return "postgres:" + make_conninfo("", **{k: str(v) for k, v in params.items()})


def _new_store(where: Path, catalog: str | None) -> Any:
    from strata13.compile import api

    shutil.rmtree(where, ignore_errors=True)
    return api.init_store(where, catalog=catalog)


# ------------------------------------------------------------------ ingest
def case_ingest(admin: str, rows: int) -> dict[str, float]:
    from strata13.compile import api

    sheet, warm = generate.ingest_inputs(rows)
    out = {}
    for name, catalog in (("sqlite", None), ("postgres", _database(admin))):
        store = _new_store(WORK / f"ingest-{name}", catalog)
        api.ingest(store, warm.csv, warm.mapping)
        t = time.perf_counter()
        res = api.ingest(store, sheet.csv, sheet.mapping)
        out[name] = time.perf_counter() - t
        assert res.added == rows, (name, res.added)
        shutil.rmtree(store.path, ignore_errors=True)
    return out


# ------------------------------------------------------------------ query
def case_query(admin: str, records: int, repeat: int = 3) -> dict[str, Any]:
    from run import INTERVAL, POLYGON
    from strata13.compile import api
    from strata13.compile.query.filters import Filters
    from strata13.compile.query.regions import from_geojson

    source = generate.make_store(records, log=lambda m: print(m, file=sys.stderr))
    linked = WORK / f"query-{records}"
    shutil.rmtree(linked, ignore_errors=True)
    subprocess.run(["cp", "-al", str(source), str(linked)], check=True)  # same files
    os.unlink(linked / "catalog.sqlite")
    shutil.copy2(source / "catalog.sqlite", linked / "catalog.sqlite")  # moved, not shared
    api.move_catalog(api.open_store(linked), _database(admin))
    region = from_geojson(POLYGON, "bench-hexagon", "the benchmark polygon")
    filters = Filters(interval=INTERVAL, region=region)
    out: dict[str, Any] = {}
    for name, path in (("sqlite", source), ("postgres", linked)):
        store = api.open_store(path)
        hits = api.query_arrow(store, filters).num_rows  # warm-up
        times = []
        for _ in range(repeat):
            t = time.perf_counter()
            api.query_arrow(store, filters)
            times.append(time.perf_counter() - t)
        out[name] = statistics.median(times)
        out[f"{name}_hits"] = hits
    shutil.rmtree(linked, ignore_errors=True)
    return out


# ------------------------------------------------------------------ concurrent writers
MAPPING = """[source]
id = "{sid}"
citation = "Writer {w}, ingest {k} (invented benchmark data)"
[table]
file = "{csv}"
[columns]
"Sample" = "sample_id"
"Height" = {{ field = "position", unit = "m" }}
"d13C" = {{ field = "d13c_carb", scale = "VPDB" }}
[constants]
section_id = "bench-section-{w}-{k}"
position_kind = "height"
[[localities]]
id = "bench-locality"
lat = 10.0
lon = 20.0
"""


def _writer(store: str, folder: str, w: int, ingests: int, results: Any) -> None:
    """One member: ``ingests`` ingests of small sheets of its own, one source each."""
    from strata13.compile import api
    from strata13.compile.store import postgres

    work = Path(folder)
    got = []
    for k in range(ingests):
        csv = work / f"w{w}-{k}.csv"
        csv.write_text(
            "Sample,Height,d13C\n" + "".join(f"S{w}-{k}-{i},{i},{1 + i / 10}\n" for i in range(10))
        )
        toml = work / f"w{w}-{k}.toml"
        toml.write_text(MAPPING.format(sid=f"bench-w{w}-{k}", w=w, k=k, csv=csv.name))
        postgres.last_lock_wait_s = None
        t = time.perf_counter()
        try:
            version = api.ingest(store, None, toml).version
        except Exception as exc:  # counted, not hidden: a failed ingest is a lost commit
            got.append({"error": str(exc)})
            continue
        took = time.perf_counter() - t
        got.append({"version": version, "seconds": took, "wait": postgres.last_lock_wait_s})
    results.put((w, got))


def _lock_waits_sqlite(store: Path) -> None:
    """The embedded catalog's flock has no server to time it: time it here, in the child."""
    import contextlib

    from strata13.compile.store import catalog as cat
    from strata13.compile.store import postgres

    real = cat.SqliteCatalog.writer_lock

    @contextlib.contextmanager
    def timed(self: Any, command: str, timeout_s: float) -> Any:
        t = time.perf_counter()
        with real(self, command, timeout_s) as lock:
            postgres.last_lock_wait_s = time.perf_counter() - t
            yield lock

    cat.SqliteCatalog.writer_lock = timed  # type: ignore[method-assign]


def _member(store: str, folder: str, w: int, ingests: int, results: Any, sqlite: bool) -> None:
    if sqlite:
        _lock_waits_sqlite(Path(store))
    _writer(store, folder, w, ingests, results)


def case_writers(admin: str, writers: int, ingests: int) -> dict[str, dict[str, Any]]:
    from strata13.compile import api

    out: dict[str, dict[str, Any]] = {}
    for name, catalog in (("sqlite", None), ("postgres", _database(admin))):
        store = _new_store(WORK / f"writers-{name}", catalog)
        start_version = store.latest_version()
        ctx = mp.get_context("spawn")
        results = ctx.Queue()
        folders = []
        procs = []
        for w in range(writers):
            folder = WORK / f"member-{name}-{w}"
            shutil.rmtree(folder, ignore_errors=True)
            folder.mkdir(parents=True)
            folders.append(folder)
            procs.append(
                ctx.Process(
                    target=_member,
                    args=(str(store.path), str(folder), w, ingests, results, name == "sqlite"),
                )
            )
        t = time.perf_counter()
        for p in procs:
            p.start()
        got = [results.get(timeout=3600) for _ in procs]
        wall = time.perf_counter() - t
        for p in procs:
            p.join()
        done = [r for _, rs in got for r in rs if "version" in r]
        errors = [r["error"] for _, rs in got for r in rs if "error" in r]
        versions = [r["version"] for r in done]
        history = [h.version for h in api.history(store)]
        landed = [v for v in history if v > start_version]
        waits = sorted(r["wait"] for r in done if r["wait"] is not None)
        out[name] = {
            "commits": len(done),
            "wall_s": wall,
            "commits_per_s": len(done) / wall,
            "lost": writers * ingests - len(landed),
            "reported_but_missing": len(set(versions) - set(landed)),
            "duplicate_versions": len(versions) - len(set(versions)),
            "errors": errors[:3],
            "p95_wait_s": waits[int(0.95 * (len(waits) - 1))] if waits else float("nan"),
            "median_wait_s": statistics.median(waits) if waits else float("nan"),
            "median_ingest_s": statistics.median(r["seconds"] for r in done) if done else 0,
        }
        shutil.rmtree(store.path, ignore_errors=True)
        for folder in folders:
            shutil.rmtree(folder, ignore_errors=True)
    return out


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0] if __doc__ else None)
    p.add_argument("--big", action="store_true", help="query a 10 000 000-record store")
    p.add_argument("--rows", type=int, default=100_000, help="records of the ingest case")
    p.add_argument("--writers", type=int, default=8)
    p.add_argument("--ingests", type=int, default=20, help="ingests per writer")
    p.add_argument("--cases", default="ingest,query,writers")
    args = p.parse_args(argv)
    cases = set(args.cases.split(","))
    WORK.mkdir(parents=True, exist_ok=True)
    admin, folder = _server()
    report: dict[str, Any] = {}
    try:
        if "ingest" in cases:
            r = case_ingest(admin, args.rows)
            report["ingest"] = r
            print(
                f"ingest {args.rows:,} records: postgres {r['postgres']:.2f} s, sqlite "
                f"{r['sqlite']:.2f} s, ratio {r['postgres'] / r['sqlite']:.2f}x"
            )
        if "query" in cases:
            n = 10_000_000 if args.big else 1_000_000
            r = case_query(admin, n)
            report["query"] = r
            print(
                f"interval + polygon query, {n:,} records ({r['postgres_hits']:,} hits; "
                f"sqlite {r['sqlite_hits']:,}): postgres {r['postgres']:.3f} s, sqlite "
                f"{r['sqlite']:.3f} s, ratio {r['postgres'] / r['sqlite']:.2f}x (median of 3)"
            )
        if "writers" in cases:
            r = case_writers(admin, args.writers, args.ingests)
            report["writers"] = r
            for name, x in r.items():
                print(
                    f"{args.writers} writers x {args.ingests} ingests, {name}: "
                    f"{x['commits']} commits in {x['wall_s']:.1f} s = "
                    f"{x['commits_per_s']:.2f} commits/s; lost {x['lost']}, duplicate "
                    f"versions {x['duplicate_versions']}; lock wait p95 "
                    f"{x['p95_wait_s']:.2f} s (median {x['median_wait_s']:.2f} s); "
                    f"median ingest {x['median_ingest_s']:.2f} s"
                    + (f"; errors: {x['errors']}" if x["errors"] else "")
                )
    finally:
        if folder is not None:
            from tests import pg_server

            pg_server.stop(folder)
            shutil.rmtree(folder, ignore_errors=True)
    (WORK / "report.json").write_text(json.dumps(report, indent=1) + "\n")
    lost = sum(x["lost"] + x["duplicate_versions"] for x in report.get("writers", {}).values())
    return 1 if lost else 0


if __name__ == "__main__":
    sys.exit(main())
