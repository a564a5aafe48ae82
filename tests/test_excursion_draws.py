"""Uncertainty of the excursion metrics: each check names what it is compared with (a closed
form of linear error propagation, a brute-force loop over the scalar metrics, numpy, or a
simulation whose truth is known). Every section is invented."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from strata13.compile.synthesis import curve, excursion, excursion_draws
from strata13.compile.synthesis.excursion_draws import (
    DRAWN,
    draw_metrics,
    measure,
    resample,
    spread,
    summary,
    with_uncertainty,
)

from strata13.errors import DomainError, OptionError

# Closed form: a Gaussian departure A·exp(−x²/2s²) falls to a fraction f of its peak at
# x = ±s·√(2 ln(1/f)); f = 0.1 gives ±2.146 s.
HALF_WIDTH_10 = math.sqrt(2.0 * math.log(10.0))
TOP = 20.0  # m: the invented sections run from 0 to 20 m, ties at both ends


def _section(
    name: str = "S1",
    step: float = 0.25,
    noise: float = 0.0,
    rng: np.random.Generator | None = None,
    ages: tuple[float, float] = (184.0, 182.0),
    basis: str = "age model",
) -> pd.DataFrame:
    """A negative Gaussian excursion (−3 ‰, s = 1.5 m, centred at 10 m) on a +1 ‰ baseline,
    ages linear from ``ages[0]`` at 0 m to ``ages[1]`` at TOP."""
    x = np.arange(0.0, TOP + step / 2, step)
    v = 1.0 - 3.0 * np.exp(-((x - 10.0) ** 2) / (2 * 1.5**2))
    if noise:
        assert rng is not None
        v = v + rng.normal(0.0, noise, x.size)
    return pd.DataFrame(
        {
            "source_id": "inv",
            "section_id": name,
            "sample_id": [f"{name}-{i}" for i in range(x.size)],
            "position_m": x,
            "position_kind": "height",
            "age_ma": ages[0] + (ages[1] - ages[0]) * x / TOP,
            "age_sigma_ma": 0.0,
            "age_basis": basis,
            "value": v,
        }
    )


def _linear_draws(
    positions: np.ndarray, base: np.ndarray, top: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Stored-style section draws of a linear age model between two drawn tie ages."""
    u = positions / TOP
    return positions, base[:, None] + (top - base)[:, None] * u[None, :]


# ------------------------------------------------------------------ exact limits


def test_zero_width_draws_give_zero_sigma_and_the_central_metric() -> None:
    # Source: the definition (a draw with the central ages and every sample once is the
    # central estimate), and the Gaussian closed form above for where that centre lies.
    df = _section()
    per = excursion.per_section(df)
    zero = curve.sample_age_draws(df, 50, 3)  # σ 0 everywhere: ages held
    for ages in (None, zero):
        md = draw_metrics(df, per, 50, 3, ages, bootstrap=False)
        table = with_uncertainty(per, md)
        row = table.iloc[0]
        for q in DRAWN:
            np.testing.assert_array_equal(md.values[q][0], np.full(50, per[q].iloc[0]))
        for stem, unit in (("onset_age", "myr"), ("recovery_age", "myr"), ("peak_age", "myr")):
            assert row[f"{stem}_sigma_{unit}"] == 0.0
            assert row[f"{stem}_p2_5_ma"] == row[f"{stem}_p97_5_ma"] == row[f"{stem}_ma"]
        assert row["magnitude_sigma_permil"] == 0.0 and row["duration_sigma_myr"] == 0.0
        assert row["onset_found_draws"] == row["recovery_found_draws"] == 50
    # the centre is the closed form's (tolerance as in test_excursion: linear interpolation
    # between samples 0.25 m apart misplaces the crossing by < 0.02 m)
    assert per["onset_position_m"].iloc[0] == pytest.approx(10.0 - 1.5 * HALF_WIDTH_10, abs=0.02)
    assert per["duration_myr"].iloc[0] == pytest.approx(
        2 * 1.5 * HALF_WIDTH_10 * 2.0 / TOP, abs=0.004
    )


def test_no_draws_leave_every_spread_blank() -> None:
    # Source: the rule that an unknown error is never zero.
    df = _section()
    per = excursion.per_section(df)
    table = with_uncertainty(per, draw_metrics(df, per, 0))
    assert table["draws"].iloc[0] == 0 and table["onset_found_draws"].iloc[0] == 0
    assert table.filter(like="_sigma_").isna().all(axis=None)


# ------------------------------------------------------------------ closed forms


def test_onset_age_sigma_is_the_tie_sigma_propagated_linearly() -> None:
    # Source: the law of propagation of uncertainty (JCGM 100:2008, GUM eq. 10) for an age
    # linear between two independent ties, t(z) = (1 − u)·A0 + u·A1 with u = z / TOP:
    # σ(z)² = (1 − u)²σ0² + u²σ1². The values have no noise and the samples are not
    # resampled, so the onset stays at one level and its age is t at that level; the
    # duration is (A0 − A1)·(u_rec − u_on), σ = (u_rec − u_on)·√(σ0² + σ1²).
    n, s0, s1 = 4000, 0.10, 0.05
    rng = np.random.default_rng(11)
    df = _section()
    key = ("inv", "S1")
    draws = {key: _linear_draws(df["position_m"].to_numpy(), *_ties(rng, n, s0, s1))}
    ages = curve.sample_age_draws(df, n, 0, draws)
    per = excursion.per_section(df)
    row = with_uncertainty(per, draw_metrics(df, per, n, 0, ages, bootstrap=False)).iloc[0]
    u_on = row["onset_position_m"] / TOP
    u_rec = row["recovery_position_m"] / TOP
    want_on = math.hypot((1 - u_on) * s0, u_on * s1)
    want_dur = (u_rec - u_on) * math.hypot(s0, s1)
    # tolerance: the SD of n normal draws has a relative standard error 1/√(2(n − 1)) = 1.1 %;
    # 4 % is more than three of them
    assert row["onset_age_sigma_myr"] == pytest.approx(want_on, rel=0.04)
    assert row["duration_sigma_myr"] == pytest.approx(want_dur, rel=0.04)
    assert row["recovery_age_sigma_myr"] == pytest.approx(
        math.hypot((1 - u_rec) * s0, u_rec * s1), rel=0.04
    )
    # normal draws: the 2.5/97.5 percentiles sit at the centre ∓ 1.960σ (SE of a tail
    # percentile of 4000 normal draws ≈ 0.05σ)
    for side, z in (("p2_5", -1.959964), ("p97_5", 1.959964)):
        assert row[f"onset_age_{side}_ma"] == pytest.approx(
            row["onset_age_ma"] + z * want_on, abs=0.15 * want_on
        )
    assert row["onset_position_sigma_m"] == 0.0  # ages move, the level does not


def _ties(
    rng: np.random.Generator, n: int, s0: float, s1: float, at: tuple[float, float] = (184, 182)
) -> tuple[np.ndarray, np.ndarray]:
    return at[0] + s0 * rng.standard_normal(n), at[1] + s1 * rng.standard_normal(n)


def test_group_mean_sigma_shared_and_independent_errors() -> None:
    # Source: the variance of a mean of two equal-σ terms: σ/√2 when independent, σ when
    # they are one shared error (a chart boundary both sections are tied to moves both in
    # the same draw and is not averaged away).
    n, sig = 4000, 0.1
    rng = np.random.default_rng(5)
    df = pd.concat([_section("A"), _section("B")], ignore_index=True)
    pos = _section()["position_m"].to_numpy()
    base, top = _ties(rng, n, sig, 0.0)
    other, _ = _ties(rng, n, sig, 0.0)
    per = excursion.per_section(df)
    for own_b, want in ((base, sig), (other, sig / math.sqrt(2))):
        draws = {
            ("inv", "A"): _linear_draws(pos, base, top),
            ("inv", "B"): _linear_draws(pos, own_b, top),
        }
        ages = curve.sample_age_draws(df, n, 0, draws)
        md = draw_metrics(df, per, n, 0, ages, bootstrap=False)
        every = summary(per, None, md).iloc[0]
        u = per["onset_position_m"].iloc[0] / TOP
        assert every["onset_age_ma_mean_sigma_myr"] == pytest.approx((1 - u) * want, rel=0.04)
        assert every["onset_age_ma_mean_draws"] == n
        assert every["onset_age_ma_sections_per_draw"] == 2.0
        # the central value is the mean of the sections' centres (excursion.summary)
        assert every["onset_age_ma_mean"] == pytest.approx(per["onset_age_ma"].mean())


# ------------------------------------------------------------------ brute force


@pytest.mark.parametrize("kind", ["height", "depth", "none"])
def test_draws_equal_the_scalar_metrics_of_each_drawn_record(kind: str) -> None:
    # Source: brute force — each draw rebuilt as a table of its drawn samples at their drawn
    # ages and measured by the scalar excursion.metrics, one call per draw.
    rng = np.random.default_rng(7)
    df = _section(step=0.5, noise=0.25, rng=rng)
    if kind == "depth":
        df["position_m"] = 300.0 - df["position_m"]
        df["position_kind"] = "depth"
    prep = excursion.prepare(df)
    assert not isinstance(prep, excursion.Metrics)
    inside = excursion.baseline_members(prep, None)
    n_draws = 300
    picks = resample(inside, n_draws, rng)
    if kind == "none":  # ages only: ordered by each draw's ages, kept in order by a shift
        ages = prep.age[None, :] + rng.normal(0.0, 0.2, (n_draws, 1))
        pos = np.full(prep.pos.size, np.nan)
    else:  # each age drawn on its own (reported ages with σ): order along the section kept
        ages = prep.age[None, :] + rng.normal(0.0, 0.05, (n_draws, prep.age.size))
        pos = prep.pos
    got = measure(prep.val, pos, ages, picks, inside, has_pos=kind != "none", sign=-1.0)
    for d in range(n_draws):
        rows = picks[d]
        frame = pd.DataFrame(
            {
                "position_m": pos[rows],
                "position_kind": "depth" if kind == "depth" else "height",
                "age_ma": ages[d, rows],
                "value": prep.val[rows],
            }
        )
        m = excursion.metrics(frame, direction="negative")
        for q in DRAWN:
            want, have = getattr(m, q), got[q][d]
            assert (math.isnan(want) and math.isnan(have)) or want == pytest.approx(
                have, abs=1e-9
            ), (d, q)


def test_resample_is_stratified_and_in_order() -> None:
    # Source: the definition; the within-stratum frequencies against their expectation
    # (binomial: n_draws · size / size = n_draws per sample, SD √(n_draws(1 − 1/size))).
    inside = np.zeros(40, bool)
    inside[:8] = True
    picks = resample(inside, 2000, np.random.default_rng(1))
    assert picks.shape == (2000, 40)
    assert (np.diff(picks, axis=1) >= 0).all()
    assert ((picks < 8).sum(axis=1) == 8).all()
    counts = np.bincount(picks.ravel(), minlength=40)
    for part, size in ((counts[:8], 8), (counts[8:], 32)):
        sd = math.sqrt(2000 * (1 - 1 / size))
        assert np.abs(part - 2000).max() < 5 * sd


def test_spread_matches_numpy() -> None:
    # Source: numpy's nanstd (ddof=1) and nanpercentile (linear) on the same rows.
    rng = np.random.default_rng(2)
    x = rng.normal(size=(30, 41))
    x[rng.random(x.shape) < 0.3] = np.nan
    x[4, 1:] = np.nan  # one value: σ undefined
    x[5] = np.nan  # none found
    n, sd, lo, hi = spread(x)
    ok = n >= 2
    np.testing.assert_allclose(sd[ok], np.nanstd(x[ok], axis=1, ddof=1), rtol=1e-12)
    has = n > 0
    np.testing.assert_allclose(lo[has], np.nanpercentile(x[has], 2.5, axis=1), rtol=1e-12)
    np.testing.assert_allclose(hi[has], np.nanpercentile(x[has], 97.5, axis=1), rtol=1e-12)
    assert n[5] == 0 and math.isnan(sd[4]) and math.isnan(lo[5]) and lo[4] == hi[4] == x[4, 0]


# ------------------------------------------------------------------ calibration


def test_age_range_covers_the_true_onset_age_95_percent_of_the_time() -> None:
    # Source: a simulation whose truth is known. Each of 400 invented sections has true tie
    # ages (184, 182 Ma); its "measured" ties are the truth plus normal errors (σ 0.10 and
    # 0.08 Myr), and its age draws are normal around the measured ties with those σ —
    # a calibrated age model. The 95 % range of the onset age must cover the true onset age
    # (from the true ties) in 95 % of the sections: binomial SE √(0.95·0.05/400) = 1.1 %,
    # tolerance ±3.5 % (three SE).
    m, n_draws, s0, s1 = 400, 400, 0.10, 0.08
    rng = np.random.default_rng(2024)
    frames, draws, truth = [], {}, []
    for i in range(m):
        b0, b1 = 184.0 + s0 * rng.standard_normal(), 182.0 + s1 * rng.standard_normal()
        sec = _section(f"R{i:03d}", step=0.5, ages=(b0, b1))
        frames.append(sec)
        draws[("inv", f"R{i:03d}")] = _linear_draws(
            sec["position_m"].to_numpy(), *_ties(rng, n_draws, s0, s1, (b0, b1))
        )
    df = pd.concat(frames, ignore_index=True)
    per = excursion.per_section(df)
    ages = curve.sample_age_draws(df, n_draws, 0, draws)
    table = with_uncertainty(per, draw_metrics(df, per, n_draws, 0, ages, bootstrap=False))
    u = table["onset_position_m"].to_numpy() / TOP
    truth = 184.0 + (182.0 - 184.0) * u  # the true ages at the (noise-free) onset level
    covered = (table["onset_age_p2_5_ma"] <= truth) & (truth <= table["onset_age_p97_5_ma"])
    assert abs(covered.mean() - 0.95) <= 0.035


# ------------------------------------------------------------------ counts and refusals


def test_a_recovery_missing_from_some_draws_is_counted() -> None:
    # Source: the probability that one given sample of a stratum of m is never drawn in m
    # draws with replacement, (1 − 1/m)^m; here the recovery rests on the last sample alone.
    df = _section(step=0.5)
    df = df[df["position_m"] <= 12.0].copy()
    df.loc[df.index[-1], "value"] = 1.0  # only the last sample is back near the baseline
    per = excursion.per_section(df)
    assert per["flags"].iloc[0] == "" and np.isfinite(per["recovery_age_ma"].iloc[0])
    n_draws = 2000
    table = with_uncertainty(per, draw_metrics(df, per, n_draws, 4))
    row = table.iloc[0]
    k = max(3, math.ceil(0.2 * len(df)))
    m_rest = len(df) - k
    p_found = 1 - (1 - 1 / m_rest) ** m_rest
    found = row["recovery_found_draws"]
    assert abs(found / n_draws - p_found) < 4 * math.sqrt(p_found * (1 - p_found) / n_draws)
    assert row["onset_found_draws"] == n_draws and row["draws"] == n_draws


def test_bad_requests_are_refused() -> None:
    df = _section()
    per = excursion.per_section(df)
    for bad in (-1, 10_001, 2.5, True):
        with pytest.raises(OptionError, match="--draws"):
            draw_metrics(df, per, bad)  # type: ignore[arg-type]
    with pytest.raises(DomainError, match="does not list"):
        draw_metrics(pd.concat([df, _section("S2")]), per, 10)
    with pytest.raises(DomainError, match="do not belong"):
        with_uncertainty(pd.concat([per, per]), draw_metrics(df, per, 10))


def test_column_notes_name_every_column_with_a_unit() -> None:
    # Source: the tables themselves: every column is described once, spreads with a unit.
    notes = excursion_draws.column_notes()
    df = _section()
    per = excursion.per_section(df)
    md = draw_metrics(df, per, 5)
    cols = list(with_uncertainty(per, md).columns)
    assert notes[notes["table"] == "per section"]["column"].tolist() == cols
    assert notes[notes["table"] == "summary"]["column"].tolist() == list(
        summary(per, None, md).columns
    )
    spreads = notes[notes["column"].str.contains("_sigma_|_p2_5|_p97_5")]
    assert spreads["unit"].isin(["‰", "m", "Ma", "Myr"]).all()
