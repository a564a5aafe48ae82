"""A curve says when its LOESS window is too small for a stable line and where its band is
hidden; the window size is checked against the closed form k = ⌊span·n⌋."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
from strata13.compile.synthesis.curve import window_reach
from strata13.compile.synthesis.run import MIN_STABLE_WINDOW, CurveRequest, _fit_notes

from tests.conftest import run_cli as run


def test_a_small_window_and_a_hidden_band_are_said() -> None:
    req = CurveRequest(span=0.3, min_sections=5, boots=200)
    n = 11  # ⌊0.3 · 11⌋ = 3 samples per window: the kinked-line case
    assert math.floor(0.3 * n) == 3 < MIN_STABLE_WINDOW
    ages = np.arange(n, dtype=float)  # one sample per Myr, 0 … 10 Ma
    curve = pd.DataFrame({"age": [0.0, 5.0, 10.0, 5.5], "band_shown": [True, False, False, True]})
    notes = _fit_notes("g", ages, req, curve)
    # 3rd-nearest sample: 2 Myr from ages 0 and 10 (the ends), 1 from 5, 1.5 from 5.5
    assert notes[0] == (
        "group 'g': span 0.3 = windows of 3 of 11 samples, reaching ± 1.75 Myr "
        "(median; 1–2 Myr along the curve)"
    )
    assert notes[1].startswith("group 'g': span 0.3 covers 3 of 11 samples")
    assert notes[2] == (
        "group 'g': band hidden at 2 of 4 grid ages, where fewer than --min-sections 5 "
        "sections contribute"
    )


def test_a_wide_window_with_a_full_band_states_only_the_span() -> None:
    req = CurveRequest(span=0.3, min_sections=1, boots=200)
    curve = pd.DataFrame({"age": np.linspace(0, 99, 5), "band_shown": [True] * 5})
    notes = _fit_notes("g", np.arange(100.0), req, curve)
    assert len(notes) == 1 and notes[0].startswith("group 'g': span 0.3 = windows of 30 of 100")


def test_window_reach_equals_a_brute_force_kth_nearest_distance() -> None:
    # reference: sorted absolute distances, the k-th smallest (plain numpy sort per age)
    rng = np.random.default_rng(3)
    ages = rng.uniform(170, 190, 500)
    grid = np.linspace(170, 190, 37)
    k = math.floor(0.25 * 500)
    want = [np.sort(np.abs(ages - g))[k - 1] for g in grid]
    assert np.allclose(window_reach(ages, grid, 0.25), want, rtol=0, atol=1e-12)


def test_the_curve_command_prints_the_window_note(demo_store: Path, tmp_path: Path) -> None:
    r = run(
        "curve", "--out", tmp_path / "c", "--interval", "Toarcian", "--source", "quillar-2011",
        "--span", "0.2", "--boots", "0", "--store", demo_store,
    )  # fmt: skip
    assert r.code == 0, r.err
    assert "follows single samples (common practice)" in r.err
    assert "no band (--boots 0)" in r.err
    assert "span 0.2 = windows of" in r.err and "Myr" in r.err
