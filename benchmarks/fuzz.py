"""The larger hostile-input run: thousands of seeded hostile ingests, counted.

The suite's fuzz test (tests/test_fuzz.py) runs 320 cases of the corpus in
tests/hostile_cases.py; this script runs as many as asked (2 000 by default) from the same
generator and prints the figures the note reports: cases, crashes (a worker killed by a
signal), hangs (a case over the time limit), internal errors or tracebacks, other problems,
and store changes after a refusal. Cases run in batches, each batch in a forked worker with
a fresh store, so a hard crash is counted (and its case named) instead of ending the run.

    python benchmarks/fuzz.py [--cases 2000] [--seed 20] [--batch 100] [--limit 20] [--jobs 2]
"""

from __future__ import annotations

import argparse
import collections
import json
import multiprocessing
import signal
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))


def _batch(seed: int, n: int, first: int, size: int, limit: int, out: Path) -> None:
    """Run cases ``first … first + size`` of ``cases(seed, n)``, one JSON line per case."""
    from strata13.compile import api

    from tests.conftest import tree_bytes
    from tests.hostile_cases import cases, judge

    class TooLong(BaseException):
        """Not an Exception, so the command line's fault handler cannot swallow it."""

    def too_long(signum: int, frame: object) -> None:
        raise TooLong

    signal.signal(signal.SIGALRM, too_long)
    with tempfile.TemporaryDirectory() as tmp, out.open("a", encoding="utf-8") as log:
        store = api.init_store(Path(tmp) / "st").path
        for k, case in enumerate(cases(seed, n)):
            if not first <= k < first + size:
                continue
            log.write(json.dumps({"start": case.name}) + "\n")
            log.flush()
            signal.alarm(limit)
            try:
                o = judge(case, Path(tmp) / case.name, store, tree_bytes)
                row = {"name": o.name, "code": o.code, "problems": o.problems}
                row |= {"committed": o.committed, "seconds": round(o.seconds, 3)}
            except TooLong:
                row = {"name": case.name, "code": None, "problems": ["hang"], "committed": False}
            finally:
                signal.alarm(0)
            log.write(json.dumps(row) + "\n")
            log.flush()


def main() -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--cases", type=int, default=2000)
    p.add_argument("--seed", type=int, default=20)
    p.add_argument("--batch", type=int, default=100)
    p.add_argument("--limit", type=int, default=20, help="seconds before a case is a hang")
    p.add_argument("--jobs", type=int, default=2, help="batches run at once")
    a = p.parse_args()
    start = time.monotonic()
    rows: list[dict[str, object]] = []
    crashes: list[str] = []
    ctx = multiprocessing.get_context("fork")
    with tempfile.TemporaryDirectory() as tmp:
        batches = list(range(0, a.cases, a.batch))
        running: list[tuple[int, multiprocessing.process.BaseProcess, Path]] = []
        while batches or running:
            while batches and len(running) < a.jobs:
                first = batches.pop(0)
                log = Path(tmp) / f"batch-{first}.jsonl"
                job = (a.seed, a.cases, first, a.batch, a.limit, log)
                w = ctx.Process(target=_batch, args=job)
                w.start()
                running.append((first, w, log))
            first, w, log = running.pop(0)
            w.join()
            text = log.read_text(encoding="utf-8") if log.exists() else ""
            lines = [json.loads(x) for x in text.splitlines()]
            rows += [x for x in lines if "name" in x]
            if w.exitcode != 0:
                started = [x["start"] for x in lines if "start" in x]
                last = started[-1] if started else "?"
                crashes.append(f"{last} (worker exit {w.exitcode})")
    seconds = time.monotonic() - start
    kinds = collections.Counter(str(r["name"]).split("-", 1)[1] for r in rows)
    codes = collections.Counter(str(r["code"]) for r in rows)
    problems = [(r["name"], p) for r in rows for p in r["problems"]]  # type: ignore[attr-defined]
    hangs = [n for n, p in problems if p == "hang"]
    internal = [n for n, p in problems if p == "traceback" or str(p).startswith("internal")]
    changed = [n for n, p in problems if "store changed" in str(p)]
    other = [(n, p) for n, p in problems if n not in set(hangs + internal + changed)]
    print(f"cases run: {len(rows)} of {a.cases} (seed {a.seed}) in {seconds:.0f} s")
    print("kinds: " + ", ".join(f"{k} {v}" for k, v in sorted(kinds.items())))
    print("exit codes: " + ", ".join(f"{k}: {v}" for k, v in sorted(codes.items())))
    print(f"committed: {sum(bool(r['committed']) for r in rows)}")
    print(f"crashes: {len(crashes)} {crashes[:5]}")
    print(f"hangs: {len(hangs)} {hangs[:5]}")
    print(f"internal errors or tracebacks: {len(internal)} {internal[:5]}")
    print(f"store changes after a refusal: {len(changed)} {changed[:5]}")
    print(f"other problems: {len(other)} {other[:5]}")
    bad = crashes or hangs or internal or changed or other or len(rows) < a.cases
    return 1 if bad else 0


if __name__ == "__main__":
    raise SystemExit(main())
