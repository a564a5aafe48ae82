"""Benchmark of the excursion uncertainty: metrics in every draw, numpy over draws, against
the scalar metrics called once per section and draw.

    python benchmarks/excursion.py                 # 500 draws, 100 sections of 40 samples
    python benchmarks/excursion.py --quick         # 100 draws
    python benchmarks/excursion.py --store PATH    # also time api.excursion on a store
    python benchmarks/excursion.py --calibration   # also the coverage of the 95 % ranges

Ours: ``excursion_draws.draw_metrics`` (age draws from ``curve.sample_age_draws`` and the
stratified resampling of each section's samples), ``with_uncertainty`` and ``summary``,
from the samples table to both result tables. Baseline: what the same numbers cost without
the vectorisation — ``excursion.metrics`` on each drawn record, one call per section and
draw; it is timed on ``BASELINE_DRAWS`` draws and scaled linearly to the draws of ours (it
is linear in the draws: each call is independent). Target: ratio ≤ 0.1.

The samples are synthetic and seeded (every value invented): sections of 40 samples over
0–40 m with a negative excursion of 2–4 ‰ (Gaussian, width 2–4 m) on a baseline, noise
0.2 ‰; 60 % dated by an age model (per-section draws at their positions, one shared
boundary error per draw), 30 % by reported ages (σ 0.05–0.2 Myr), 10 % by stage only.

``--calibration`` runs the coverage simulation behind the numbers in DEVELOPERS.md: for a
grid of sample spacings and noise levels, 300 invented sections with a known excursion
(onset at 20 − 2.146·2 m), each measured with 300 draws with resampling (ages fixed), and
the share of sections whose 95 % range holds the true onset position, recovery position and
magnitude.
"""

from __future__ import annotations

import argparse
import math
import statistics
import sys
import time
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import table  # sibling module: the shared result table (benchmarks/ is on sys.path)
from strata13.compile.synthesis import curve, excursion, excursion_draws

RATIO_TARGET = 0.1
SEED = 13
BASELINE_DRAWS = 20
N_SECTIONS = 100
N_SAMPLES = 40
HALF_WIDTH_10 = math.sqrt(2.0 * math.log(10.0))  # Gaussian at 10 % of its peak: ±2.146 s


def make_samples(
    n_sections: int, n_draws: int, seed: int = SEED
) -> tuple[pd.DataFrame, dict[tuple[str, str], tuple[np.ndarray, np.ndarray]]]:
    """Seeded synthetic samples (one row per sample) and per-section age-model draws."""
    rng = np.random.default_rng(seed)
    shared = rng.normal(0.0, 0.1, n_draws)  # one boundary error per draw, all sections
    frames, draws = [], {}
    for s in range(n_sections):
        pos = np.sort(rng.uniform(0.0, 40.0, N_SAMPLES))
        age = 184.0 - 0.05 * pos
        amp, width = rng.uniform(2.0, 4.0), rng.uniform(2.0, 4.0)
        val = (
            1.5
            - amp * np.exp(-((pos - 20.0) ** 2) / (2 * width**2))
            + rng.normal(0, 0.2, N_SAMPLES)
        )
        kind = "age model" if s % 10 < 6 else "reported" if s % 10 < 9 else "stage only"
        sigma = {"age model": 0.0, "reported": rng.uniform(0.05, 0.2), "stage only": 0.8}[kind]
        key = (f"src-{s // 4:03d}", f"sec-{s:03d}")
        if kind == "age model":
            own = rng.normal(0.0, 0.05, (n_draws, 1))
            draws[key] = (pos, age[None, :] + shared[:, None] + own)
        frames.append(
            pd.DataFrame(
                {
                    "source_id": key[0],
                    "section_id": key[1],
                    "sample_id": [f"s{i}" for i in range(N_SAMPLES)],
                    "position_m": pos,
                    "position_kind": "height",
                    "age_ma": age,
                    "age_sigma_ma": sigma,
                    "age_basis": kind,
                    "value": val,
                }
            )
        )
    return pd.concat(frames, ignore_index=True), draws


def _ours(samples: pd.DataFrame, per: pd.DataFrame, ages: Any, n_draws: int) -> Any:
    md = excursion_draws.draw_metrics(samples, per, n_draws, SEED, ages)
    return excursion_draws.with_uncertainty(per, md), excursion_draws.summary(per, None, md)


def _baseline(samples: pd.DataFrame, ages: Any, n_draws: int) -> int:
    """The scalar metrics of each section in each of ``n_draws`` draws (resampled rows at
    their drawn ages): what a loop over draws costs."""
    rng = np.random.default_rng(SEED)
    parts = list(samples.groupby(["source_id", "section_id"], sort=True).indices.values())
    measured = 0
    for k in range(n_draws):
        a = ages(k)
        for rows in parts:
            pick = np.sort(rng.integers(0, rows.size, rows.size))
            drawn = samples.iloc[rows[pick]].assign(age_ma=a[rows[pick]])
            excursion.metrics(drawn)
            measured += 1
    return measured


def measure(n_draws: int = 500, repeat: int = 3, store: str | None = None) -> dict[str, Any]:
    """Time ours and the (scaled) baseline, median of ``repeat`` interleaved runs."""
    samples, sec_draws = make_samples(N_SECTIONS, n_draws)
    ages = curve.sample_age_draws(samples, n_draws, SEED, sec_draws)
    per = excursion.per_section(samples)
    _ours(samples, per, ages, min(n_draws, 10))  # warm-up
    t_ours, t_base = [], []
    for _ in range(repeat):
        t = time.perf_counter()
        res = _ours(samples, per, ages, n_draws)
        t_ours.append(time.perf_counter() - t)
        t = time.perf_counter()
        _baseline(samples, ages, BASELINE_DRAWS)
        t_base.append((time.perf_counter() - t) * n_draws / BASELINE_DRAWS)
    t = time.perf_counter()
    excursion.per_section(samples)
    t_central = time.perf_counter() - t
    table_, _summ = res
    out = {
        "ours_s": statistics.median(t_ours),
        "baseline_s": statistics.median(t_base),
        "central_s": t_central,
        "draws": n_draws,
        "n_sections": N_SECTIONS,
        "n_samples": len(samples),
        "repeat": repeat,
        "onset_sigma": float(table_["onset_age_sigma_myr"].median()),
        "onset_found": float(table_["onset_found_draws"].mean()),
    }
    if store is not None:
        out["store"] = _time_store(store, n_draws, repeat)
    return out


def _time_store(path: str, n_draws: int, repeat: int) -> dict[str, Any]:
    """``api.excursion`` on a store's Toarcian (no files), with and without draws."""
    from strata13.compile import api

    s = api.open_store(Path(path))
    filters = api.Filters(interval=(174.7, 184.2), screened="pass,warn")
    api.excursion(s, filters, draws=10)  # warm-up
    times = {}
    for label, k in (("no draws", 0), (f"{n_draws} draws", n_draws)):
        runs = []
        for _ in range(repeat):
            t = time.perf_counter()
            res = api.excursion(s, filters, draws=k)
            runs.append(time.perf_counter() - t)
        times[label] = statistics.median(runs)
    return {"times": times, "sections": len(res.per_section)}


def calibrate(n_sections: int = 300, n_draws: int = 300) -> list[str]:
    """Coverage of the 95 % ranges (resampling on, ages fixed) on invented sections with a
    known excursion, for a few spacings and noise levels."""
    lines = []
    truth = {
        "onset_position": 20.0 - HALF_WIDTH_10 * 2.0,
        "recovery_position": 20.0 + HALF_WIDTH_10 * 2.0,
        "magnitude": -3.0,
    }
    for noise in (0.1, 0.3):
        for step in (0.5, 1.0):
            rng = np.random.default_rng(SEED)
            frames = []
            for m in range(n_sections):
                x = np.arange(0.0, 40.01, step) + rng.uniform(0.0, step)
                v = 1.0 - 3.0 * np.exp(-((x - 20.0) ** 2) / 8.0) + rng.normal(0, noise, x.size)
                frames.append(
                    pd.DataFrame(
                        {
                            "source_id": "cal",
                            "section_id": f"c{m:04d}",
                            "position_m": x,
                            "position_kind": "height",
                            "age_ma": 190.0 - 0.05 * x,
                            "value": v,
                        }
                    )
                )
            df = pd.concat(frames, ignore_index=True)
            per = excursion.per_section(df, direction="negative")
            md = excursion_draws.draw_metrics(df, per, n_draws, SEED, direction="negative")
            tab = excursion_draws.with_uncertainty(per, md)
            parts = []
            for stem, want in truth.items():
                unit = "permil" if stem == "magnitude" else "m"
                lo, hi = tab[f"{stem}_p2_5_{unit}"], tab[f"{stem}_p97_5_{unit}"]
                centre = tab[stem if stem == "magnitude" else f"{stem}_m"]
                sd = tab[f"{stem}_sigma_{unit}"]
                parts.append(
                    f"{stem} {((lo <= want) & (want <= hi)).mean():.2f} "
                    f"(σ/true SD {sd.mean() / centre.std():.2f})"
                )
            lines.append(
                f"calibration, spacing {step:g} m, noise {noise:g} ‰: 95 % range covers the "
                "truth in: " + "; ".join(parts)
            )
    return lines


def rows(res: dict[str, Any]) -> list[tuple[str, ...]]:
    """The table row: (case, size, ours, baseline, ratio, target, verdict)."""
    size = f"{res['draws']} draws x {res['n_sections']} sections ({res['n_samples']:,} samples)"
    ratio = res["ours_s"] / res["baseline_s"]
    return [
        (
            "excursion uncertainty",
            size,
            f"{res['ours_s']:.2f} s",
            f"{res['baseline_s']:.1f} s",
            f"{ratio:.3f}x",
            f"≤ {RATIO_TARGET:g}x",
            "PASS" if ratio <= RATIO_TARGET else "FAIL",
        )
    ]


def notes(res: dict[str, Any]) -> list[str]:
    out = [
        f"excursion: ours = median of {res['repeat']} runs of draw_metrics + with_uncertainty "
        f"+ summary; baseline = excursion.metrics per section and draw, timed on "
        f"{BASELINE_DRAWS} draws and scaled to {res['draws']}; the central metrics alone "
        f"(per_section) take {res['central_s']:.2f} s.",
        f"excursion: median onset-age 1σ {res['onset_sigma']:.3f} Myr; onset found in "
        f"{res['onset_found']:.1f} of {res['draws']} draws on average.",
    ]
    if "store" in res:
        t = res["store"]["times"]
        out.append(
            f"excursion on the store ({res['store']['sections']} rows): "
            + ", ".join(f"{k} {v:.2f} s" for k, v in t.items())
            + " (api.excursion, Toarcian, no files)."
        )
    return out + list(res.get("calibration", []))


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description="strata13 excursion-uncertainty benchmark.")
    p.add_argument("--quick", action="store_true", help="100 draws instead of 500")
    p.add_argument("--draws", type=int, help="draws (overrides the size)")
    p.add_argument("--repeat", type=int, default=3, help="timed runs of each side")
    p.add_argument("--store", help="also time api.excursion on this store's Toarcian")
    p.add_argument("--calibration", action="store_true", help="also the coverage simulation")
    args = p.parse_args(argv)
    res = measure(args.draws or (100 if args.quick else 500), args.repeat, args.store)
    if args.calibration:
        res["calibration"] = calibrate()
    return table.report(rows(res), notes(res))


if __name__ == "__main__":
    sys.exit(main())
