"""Benchmark of the composite curve: a section bootstrap against as many plain LOESS fits.

    python benchmarks/curve.py              # 200 bootstrap draws, 100 000 samples, 200 sections
    python benchmarks/curve.py --quick      # 50 draws (smoke run)

Ours: ``curve.curve`` of all samples (section weighting) with ``boots`` whole-section
bootstrap draws, from the samples table to the result table. Two cases: the bootstrap
alone (replicates share the full data's windows: one pass over them and a matrix
product), and the bootstrap with an age draw per replicate (``sample_age_draws`` from
per-section age-model draws, reported and stage-only ages; every replicate refits on its
own ages). Baseline: ``curve.loess`` of the same samples with the same weights, called
``boots`` times — what a bootstrap costs when each replicate is one LOESS fit. Target:
ratio ≤ 1.5 for both cases.

The samples are synthetic and seeded (every value invented): 200 sections of 500 samples,
each over its own 6–20 Myr window of 172–198 Ma; an invented δ13C history plus a section
offset and noise; 60 % of the sections dated by an age model (200 float32 draws per section
at its positions, one shared boundary error per draw), 30 % by reported ages (σ 0.3–1 Myr),
10 % by stage only (σ 1.5 Myr).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from typing import Any

import numpy as np
import pandas as pd
import table  # sibling module: the shared result table (benchmarks/ is on sys.path)
from strata13.compile.synthesis import curve

RATIO_TARGET = 1.5
SEED = 13
SPAN = 0.1
GRID = np.linspace(198.0, 172.0, 201)  # Ma, every 0.13 Myr


def make_samples(
    n_sections: int, n_samples: int, n_draws: int, seed: int = SEED
) -> tuple[pd.DataFrame, dict[tuple[str, str], tuple[np.ndarray, np.ndarray]]]:
    """Seeded synthetic samples (one row per sample) and per-section age-model draws."""
    rng = np.random.default_rng(seed)
    per = n_samples // n_sections
    shared = rng.normal(0.0, 0.3, n_draws)  # one boundary error per draw, all sections
    frames, draws = [], {}
    for s in range(n_sections):
        length = rng.uniform(6.0, 20.0)
        young = rng.uniform(172.0, 198.0 - length)
        pos = np.sort(rng.uniform(0.0, 100.0, per))
        age = young + length * (1.0 - pos / 100.0)  # heights: older below
        val = (
            0.05 * (age - 185.0)
            + 2.5 * np.exp(-(((age - 185.0) / 3.0) ** 2))
            + rng.normal(0.0, 0.5)
            + rng.normal(0.0, 0.3, per)
        )
        kind = "age model" if s % 10 < 6 else "reported" if s % 10 < 9 else "stage only"
        sigma = {"age model": 0.0, "reported": rng.uniform(0.3, 1.0), "stage only": 1.5}[kind]
        key = (f"src-{s // 4:03d}", f"sec-{s:03d}")
        if kind == "age model":
            own = rng.normal(0.0, 0.2, (n_draws, 1))
            draws[key] = (pos, (age[None, :] + shared[:, None] + own).astype(np.float32))
        frames.append(
            pd.DataFrame(
                {
                    "source_id": key[0],
                    "section_id": key[1],
                    "sample_id": [f"s{i}" for i in range(per)],
                    "position_m": pos,
                    "age_ma": age,
                    "age_sigma_ma": sigma,
                    "age_basis": kind,
                    "value": val,
                }
            )
        )
    return pd.concat(frames, ignore_index=True), draws


def _interleaved(fns: list[Any], repeat: int) -> list[float]:
    """Median wall time of each function, the runs interleaved so load changes hit all."""
    times: list[list[float]] = [[] for _ in fns]
    for _ in range(repeat):
        for fn, bucket in zip(fns, times, strict=True):
            t = time.perf_counter()
            fn()
            bucket.append(time.perf_counter() - t)
    return [statistics.median(b) for b in times]


def measure(
    boots: int = 200, n_samples: int = 100_000, n_sections: int = 200, repeat: int = 3
) -> dict[str, Any]:
    """Time both cases of ours and the baseline (median of ``repeat`` interleaved runs)."""
    samples, sec_draws = make_samples(n_sections, n_samples, boots)
    ages = curve.sample_age_draws(samples, boots, SEED, sec_draws)
    x = samples["age_ma"].to_numpy()
    y = samples["value"].to_numpy()
    w = 1.0 / samples.groupby(["source_id", "section_id"])["value"].transform("size").to_numpy()

    def ours() -> Any:
        return curve.curve(samples, GRID, SPAN, boots=boots, seed=SEED)

    def ours_aged() -> Any:
        return curve.curve(samples, GRID, SPAN, boots=boots, seed=SEED, age_draws=ages)

    def baseline() -> float:
        total = 0.0
        for _ in range(boots):
            total += float(np.nansum(curve.loess(x, y, GRID, SPAN, w)))
        return total

    # Warm-up (imports, caches), and a check that both sides fit the same curve.
    first = curve.curve(samples, GRID, SPAN, boots=5, seed=SEED)
    gap = float(np.nanmax(np.abs(first["fit"].to_numpy() - curve.loess(x, y, GRID, SPAN, w))))
    curve.curve(samples, GRID, SPAN, boots=5, seed=SEED, age_draws=ages)
    t_ours, t_aged, t_base = _interleaved([ours, ours_aged, baseline], repeat)
    out = ours_aged()
    return {
        "ours_s": t_ours,
        "aged_s": t_aged,
        "baseline_s": t_base,
        "boots": boots,
        "n_samples": len(samples),
        "n_sections": n_sections,
        "repeat": repeat,
        "window": out.attrs["window"],
        "grid": GRID.size,
        "fit_gap": gap,
        "band_shown": int(out["band_shown"].sum()),
        "width": float(np.nanmedian(out["hi"] - out["lo"])),
        "width_plain": float(np.nanmedian((r := ours())["hi"] - r["lo"])),
    }


def rows(res: dict[str, Any]) -> list[tuple[str, ...]]:
    """The table rows: (case, size, ours, baseline, ratio, target, verdict)."""
    size = f"{res['boots']} draws x {res['n_samples']:,} samples, {res['n_sections']} sections"
    out = []
    for case, key in (
        ("curve, section bootstrap", "ours_s"),
        ("curve, section bootstrap + age draws", "aged_s"),
    ):
        ratio = res[key] / res["baseline_s"]
        out.append(
            (
                case,
                size,
                f"{res[key]:.2f} s",
                f"{res['baseline_s']:.2f} s",
                f"{ratio:.2f}x",
                f"≤ {RATIO_TARGET:g}x",
                "PASS" if ratio <= RATIO_TARGET else "FAIL",
            )
        )
    return out


def notes(res: dict[str, Any]) -> list[str]:
    return [
        f"curve: ours = median of {res['repeat']} runs (interleaved with the baseline's) of "
        f"curve.curve at {res['grid']} grid ages, span {SPAN} (window {res['window']:,} "
        f"samples), section weighting; baseline = {res['boots']} curve.loess calls on the "
        "same samples and weights; all after a warm-up.",
        f"curve: ours and one loess call agree to {res['fit_gap']:.1e} ‰; median band width "
        f"{res['width_plain']:.3f} ‰ without and {res['width']:.3f} ‰ with age draws "
        f"({res['band_shown']} of {res['grid']} grid ages show a band).",
    ]


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description="strata13 composite-curve benchmark.")
    p.add_argument("--quick", action="store_true", help="50 bootstrap draws instead of 200")
    p.add_argument("--boots", type=int, help="bootstrap draws (overrides the size)")
    p.add_argument("--repeat", type=int, default=3, help="timed runs of each side")
    args = p.parse_args(argv)
    res = measure(args.boots or (50 if args.quick else 200), repeat=args.repeat)
    return table.report(rows(res), notes(res))


if __name__ == "__main__":
    sys.exit(main())
