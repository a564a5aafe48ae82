"""Benchmark of the age model: Monte Carlo draws against plain interpolation.

    python benchmarks/agemodel.py                  # 1000 draws x 100 000 samples, 200 sections
    python benchmarks/agemodel.py --quick          # 1000 draws x 20 000 samples, 40 sections
    python benchmarks/agemodel.py --draws 100      # the full sections with 100 draws

Ours: ``agemodel.draw_section`` for every section (tie ages drawn with shared boundary
errors, gamma-process bridge between ties, every draw monotone), each section's draws
dropped after it is drawn, as a caller that summarises per section would. Baseline: the same
number of interpolations with no uncertainty at all — ``numpy.interp`` of all sample
positions on the fixed tie knots (sections laid end to end), once per draw. Target: ratio
≤ 3. Peak memory of ours is measured in a separate traced run (tracemalloc; the timed runs
are not traced) and must stay bounded: well under one section-set of draws (n_draws × all
samples × 8 bytes), which is never held at once.

The sections are synthetic and seeded (every value invented): 20–150 m thick, height or
depth, 4–8 ties each (radiometric dates and chart boundaries from one shared pool of eight
boundary keys), a hiatus in every tenth section, samples spread evenly inside the ties.

The quick run is a smaller instance of the same case: the same sections (500 samples each)
and the same 1000 draws, a fifth of them. Fewer draws change the case, not its size: each
section has a fixed setup (tie validation, tie draws, layout, seeding: about 1 ms of numpy
calls on small arrays) that the baseline, one interpolation over all sections at once, does
not have; at 100 draws it is most of ours and the ratio measures it rather than the draws.
A note gives that setup time (ours at one draw) so the two parts can be told apart.
"""

from __future__ import annotations

import argparse
import resource
import statistics
import sys
import time
import tracemalloc
from dataclasses import dataclass
from typing import Any

import numpy as np
import table  # sibling module: the shared result table (benchmarks/ is on sys.path)
from strata13.compile.ages import agemodel

RATIO_TARGET = 3.0
SEED = 13
QUICK = {"n_draws": 1000, "n_samples": 20_000, "n_sections": 40}  # same sections and draws
# An invented pool of shared boundaries: key -> (age Ma, 1σ).
BOUNDARIES = {f"BENCH:b{i}": (176.0 + 2.5 * i, 0.3 + 0.05 * i) for i in range(8)}


@dataclass
class Section:
    """One synthetic section: its ties, samples and position kind."""

    ties: list[agemodel.Tie]
    positions: np.ndarray
    kind: str
    seed: int


def make_sections(n_sections: int, n_samples: int, seed: int = SEED) -> list[Section]:
    """Seeded synthetic sections: every tie on one steady line, so superposition holds."""
    rng = np.random.default_rng(seed)
    out = []
    per = n_samples // n_sections
    for s in range(n_sections):
        thick = rng.uniform(20.0, 150.0)
        young = rng.uniform(175.0, 185.0)
        old = young + rng.uniform(4.0, 12.0)
        kind = "height" if s % 2 else "depth"

        def pos(z: float, thick: float = thick, kind: str = kind) -> float:
            return float(z if kind == "depth" else thick - z)

        ties = [
            agemodel.Tie(pos((a - young) / (old - young) * thick), a, sig, "chart boundary", key)
            for key, (a, sig) in BOUNDARIES.items()
            if young < a < old
        ]
        n_dates = max(2, int(rng.integers(4, 9)) - len(ties))
        z = np.concatenate([[0.0, thick], rng.uniform(0.05, 0.95, n_dates - 2) * thick])
        ties += [
            agemodel.Tie(
                pos(zi),
                float(young + (old - young) * zi / thick),
                float(rng.uniform(0.05, 0.5)),
                "radiometric",
            )
            for zi in z
        ]
        ties = agemodel.validate_ties(ties, kind)
        if s % 10 == 5:  # a hiatus: a second, older tie at an interior level
            k = len(ties) // 2
            gap = (ties[k + 1].age_ma - ties[k].age_ma) / 2
            ties.append(agemodel.Tie(ties[k].position_m, ties[k].age_ma + gap, 0.1, "radiometric"))
        lo, hi = min(t.position_m for t in ties), max(t.position_m for t in ties)
        positions = np.sort(rng.uniform(lo, hi, per))
        out.append(Section(ties, positions, kind, agemodel.section_seed(f"bench/{s}", seed)))
    return out


def run_ours(sections: list[Section], n_draws: int) -> float:
    """Draw every section; return a checksum so the work cannot be skipped."""
    shared = agemodel.shared_offsets(BOUNDARIES, n_draws, SEED)
    total = 0.0
    for sec in sections:
        draws, _ = agemodel.draw_section(
            sec.positions, sec.ties, sec.kind, n_draws, sec.seed, shared
        )
        total += float(draws[-1, -1])
    return total


def baseline_inputs(sections: list[Section]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """All positions and tie knots on one axis, sections end to end (1 km apart)."""
    xs, xp, fp = [], [], []
    for i, sec in enumerate(sections):
        sign = 1.0 if sec.kind == "depth" else -1.0
        off = 1000.0 * i + (0.0 if sec.kind == "depth" else 500.0)
        xs.append(off + sign * sec.positions)
        ties = agemodel.validate_ties(sec.ties, sec.kind)
        xp.append(off + sign * np.array([t.position_m for t in ties]))
        fp.append(np.array([t.age_ma for t in ties]))
    return np.sort(np.concatenate(xs)), np.concatenate(xp), np.concatenate(fp)


def run_baseline(xs: np.ndarray, xp: np.ndarray, fp: np.ndarray, n_draws: int) -> float:
    total = 0.0
    for _ in range(n_draws):
        total += float(np.interp(xs, xp, fp)[-1])
    return total


def _interleaved(fns: list[Any], repeat: int) -> list[float]:
    """Median wall time of each function, the runs interleaved so load changes hit both."""
    times: list[list[float]] = [[] for _ in fns]
    for _ in range(repeat):
        for fn, bucket in zip(fns, times, strict=True):
            t = time.perf_counter()
            fn()
            bucket.append(time.perf_counter() - t)
    return [statistics.median(b) for b in times]


def measure(
    n_draws: int | str = 1000,
    n_samples: int = 100_000,
    n_sections: int = 200,
    repeat: int = 3,
) -> dict[str, Any]:
    """Time ours and the baseline (median of ``repeat`` interleaved runs after a warm-up) and
    trace the memory of ours; ``n_draws="quick"`` takes the sizes of ``QUICK``."""
    if n_draws == "quick":
        return measure(**QUICK, repeat=repeat)  # type: ignore[arg-type]
    assert isinstance(n_draws, int)
    sections = make_sections(n_sections, n_samples)
    xs, xp, fp = baseline_inputs(sections)
    run_ours(sections[:5], min(n_draws, 50))  # warm-up: imports, scipy.special
    run_baseline(xs, xp, fp, 5)
    ours, base = _interleaved(
        [lambda: run_ours(sections, n_draws), lambda: run_baseline(xs, xp, fp, n_draws)], repeat
    )
    tracemalloc.start()
    run_ours(sections, n_draws)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    t = time.perf_counter()
    one = sections[0]
    draws, _ = agemodel.draw_section(
        one.positions,
        one.ties,
        one.kind,
        n_draws,
        one.seed,
        agemodel.shared_offsets(BOUNDARIES, n_draws, SEED),
    )
    agemodel.summarise(draws)
    summarise_s = (time.perf_counter() - t) * n_sections
    setup = _interleaved([lambda: run_ours(sections, 1)], repeat)[0]
    n_ties = sum(len(s.ties) for s in sections)
    return {
        "ours_s": ours,
        "baseline_s": base,
        "ratio": ours / base,
        "peak_bytes": peak,
        "full_bytes": n_draws * len(xs) * 8,
        "maxrss_kb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss,
        "n_draws": n_draws,
        "n_samples": len(xs),
        "n_sections": n_sections,
        "n_ties": n_ties,
        "summarise_s_est": summarise_s,
        "setup_s": setup,
        "repeat": repeat,
    }


def rows(res: dict[str, Any]) -> list[tuple[str, ...]]:
    """The table rows: (case, size, ours, baseline, ratio, target, verdict)."""
    size = f"{res['n_draws']:,} draws x {res['n_samples']:,} samples, {res['n_sections']} sections"
    ok = res["ratio"] <= RATIO_TARGET
    mem_ok = res["peak_bytes"] <= 0.1 * res["full_bytes"]
    return [
        (
            "age model draws",
            size,
            f"{res['ours_s']:.2f} s",
            f"{res['baseline_s']:.2f} s",
            f"{res['ratio']:.1f}x",
            f"≤ {RATIO_TARGET:g}x",
            "PASS" if ok else "FAIL",
        ),
        (
            "age model peak memory (tracemalloc)",
            size,
            f"{res['peak_bytes'] / 2**20:.0f} MB",
            "—",
            "—",
            f"≤ {0.1 * res['full_bytes'] / 2**20:.0f} MB",
            "PASS" if mem_ok else "FAIL",
        ),
    ]


def notes(res: dict[str, Any]) -> list[str]:
    return [
        f"agemodel: ours = median of {res['repeat']} runs (interleaved with the baseline's) of "
        "draw_section over every section "
        f"({res['n_ties']} ties); baseline = {res['n_draws']} numpy.interp calls over all "
        f"{res['n_samples']:,} positions with fixed knots; both after a warm-up.",
        f"agemodel: traced peak {res['peak_bytes'] / 2**20:.0f} MB against "
        f"{res['full_bytes'] / 2**20:.0f} MB for all draws at once; process ru_maxrss "
        f"{res['maxrss_kb'] / 1024:.0f} MB.",
        f"agemodel: summarise (median, σ, 2.5/97.5 %) adds about {res['summarise_s_est']:.1f} s "
        "for all sections (not in the ratio).",
        f"agemodel: fixed setup per section (ours at one draw) "
        f"{res['setup_s'] / res['n_sections'] * 1e3:.2f} ms, "
        f"{res['setup_s'] / res['ours_s']:.0%} of ours at {res['n_draws']} draws.",
    ]


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description="strata13 age-model benchmark.")
    p.add_argument(
        "--quick", action="store_true", help="20 000 samples in 40 sections (1000 draws)"
    )
    p.add_argument("--draws", type=int, help="draws per section (on the full sections)")
    p.add_argument("--repeat", type=int, default=3, help="timed runs of each side")
    args = p.parse_args(argv)
    if args.draws:
        res = measure(args.draws, repeat=args.repeat)
    else:
        res = measure("quick" if args.quick else 1000, repeat=args.repeat)
    return table.report(rows(res), notes(res))


if __name__ == "__main__":
    sys.exit(main())
