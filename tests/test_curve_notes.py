"""A curve says when its LOESS window is too small for a stable line and where its band is
hidden; the window size is checked against the closed form k = ⌊span·n⌋."""

from __future__ import annotations

import math
from pathlib import Path

import pandas as pd
from strata13.compile.synthesis.run import MIN_STABLE_WINDOW, CurveRequest, _fit_notes

from tests.conftest import run_cli as run


def test_a_small_window_and_a_hidden_band_are_said() -> None:
    req = CurveRequest(span=0.3, min_sections=5, boots=200)
    n = 11  # ⌊0.3 · 11⌋ = 3 samples per window: the kinked-line case
    assert math.floor(0.3 * n) == 3 < MIN_STABLE_WINDOW
    curve = pd.DataFrame({"band_shown": [True, False, False, True]})
    notes = _fit_notes("g", n, req, curve)
    assert notes[0].startswith("group 'g': span 0.3 covers 3 of 11 samples")
    assert notes[1] == (
        "group 'g': band hidden at 2 of 4 grid ages, where fewer than --min-sections 5 "
        "sections contribute"
    )


def test_a_wide_window_with_a_full_band_says_nothing() -> None:
    req = CurveRequest(span=0.3, min_sections=1, boots=200)
    assert _fit_notes("g", 100, req, pd.DataFrame({"band_shown": [True] * 5})) == []


def test_the_curve_command_prints_the_window_note(demo_store: Path, tmp_path: Path) -> None:
    r = run(
        "curve", "--out", tmp_path / "c", "--interval", "Toarcian", "--source", "quillar-2011",
        "--span", "0.2", "--boots", "0", "--store", demo_store,
    )  # fmt: skip
    assert r.code == 0, r.err
    assert "follows single samples (common practice)" in r.err
    assert "no band (--boots 0)" in r.err
