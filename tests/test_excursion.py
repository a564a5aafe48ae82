"""Excursion metrics per section: each check names what it is checked against (a closed
form, a worked example by hand, or a pandas computation). Every section is invented."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from strata13.compile.synthesis import excursion
from strata13.compile.synthesis.excursion import PER_SECTION_COLUMNS, Window, metrics

from strata13.errors import DomainError

# Closed form: a Gaussian departure A·exp(−x²/2σ²) falls to a fraction f of its peak at
# x = ±σ·√(2 ln(1/f)); f = 0.1 gives ±2.146 σ.
HALF_WIDTH_10 = math.sqrt(2.0 * math.log(10.0))


def _gauss(
    amp: float = -4.0,
    sigma: float = 1.0,
    step: float = 0.2,
    base: float = 0.0,
    centre: float = 10.0,
    kind: str = "height",
) -> pd.DataFrame:
    x = np.arange(-50, 51) * step  # a sample exactly at the peak
    pos = centre + x if kind == "height" else centre - x  # depth: older is deeper
    return pd.DataFrame(
        {
            "position_m": pos,
            "position_kind": kind,
            "age_ma": 183.0 - 0.01 * x,  # linear age model, 0.01 Ma per m
            "value": base + amp * np.exp(-(x**2) / (2 * sigma**2)),
        }
    )


def test_gaussian_closed_form() -> None:
    # Source: closed form above. Tolerance 0.01 m: linear interpolation between samples h =
    # 0.2 m apart misplaces the level by at most h²/8·max|f''| = 0.005 × 1.63 = 0.0081 ‰
    # on [2.0, 2.2] m, and the slope there is |f'| = 4 × 2.146 × 0.1 = 0.858 ‰/m, so the
    # crossing moves by at most 0.0081 / 0.858 = 0.0095 m.
    m = metrics(_gauss())
    assert m.magnitude == pytest.approx(-4.0, abs=0.005)
    assert m.baseline == pytest.approx(0.0, abs=1e-6)
    assert m.peak_position_m == pytest.approx(10.0)
    assert m.onset_position_m - 10.0 == pytest.approx(-HALF_WIDTH_10, abs=0.01)
    assert m.recovery_position_m - 10.0 == pytest.approx(HALF_WIDTH_10, abs=0.01)
    # ages follow the same interpolation fraction through the linear age model
    assert m.onset_age_ma == pytest.approx(183.0 + 0.01 * HALF_WIDTH_10, abs=1e-4)
    assert m.recovery_age_ma == pytest.approx(183.0 - 0.01 * HALF_WIDTH_10, abs=1e-4)
    assert m.n_samples == 101 and m.median_spacing_m == pytest.approx(0.2)
    assert m.flags == ""
    # default window: the oldest 20 % (21 of 101) of the samples
    assert m.baseline_window.startswith("oldest 21 of 101 samples")


def test_worked_example_interpolation() -> None:
    # Source: worked by hand. Baseline 0 (median of the first three), peak −4 at 5 m,
    # threshold 0.4 ‰: onset between 3 m (departure 0) and 4 m (1): 3 + 0.4/1 = 3.4 m;
    # recovery between 6 m (1) and 7 m (0): 6 + (1 − 0.4)/1 = 6.6 m; ages 100 − position.
    df = pd.DataFrame(
        {
            "position_m": np.arange(9.0),
            "age_ma": 100.0 - np.arange(9.0),
            "value": [0, 0, 0, 0, -1, -4, -1, 0, 0],
        }
    )
    m = metrics(df)
    assert (m.baseline, m.magnitude, m.peak_position_m) == (0.0, -4.0, 5.0)
    assert m.onset_position_m == pytest.approx(3.4)
    assert m.recovery_position_m == pytest.approx(6.6)
    assert m.onset_age_ma == pytest.approx(96.6)
    assert m.recovery_age_ma == pytest.approx(93.4)


def test_positive_excursion() -> None:
    # Source: closed form above, with the sign and baseline changed.
    m = metrics(_gauss(amp=3.0, base=1.5))
    assert m.baseline == pytest.approx(1.5, abs=1e-6)
    assert m.magnitude == pytest.approx(3.0, abs=0.005)
    assert m.peak_value == pytest.approx(4.5)
    assert m.onset_position_m - 10.0 == pytest.approx(-HALF_WIDTH_10, abs=0.01)
    assert m.recovery_position_m - 10.0 == pytest.approx(HALF_WIDTH_10, abs=0.01)


def test_direction_auto_and_forced() -> None:
    # Source: the definition: auto follows the larger departure; a forced direction takes
    # the furthest sample on its own side.
    x = np.arange(0.0, 30.0, 0.5)
    v = 1.0 - 2.0 * np.exp(-((x - 10) ** 2) / 2) + 3.0 * np.exp(-((x - 20) ** 2) / 2)
    df = pd.DataFrame({"position_m": x, "age_ma": 190.0 - 0.1 * x, "value": v})
    auto = metrics(df)
    assert auto.magnitude == pytest.approx(3.0, abs=1e-3)
    assert auto.peak_position_m == 20.0
    neg = metrics(df, direction="negative")
    assert neg.magnitude == pytest.approx(-2.0, abs=1e-3)
    assert neg.peak_position_m == 10.0
    assert metrics(df, direction="positive") == auto
    # an exact tie goes to negative and says so
    tie = pd.DataFrame(
        {"position_m": np.arange(9.0), "age_ma": np.nan, "value": [0, 0, 0, 0, -2, 0, 2, 0, 0]}
    )
    m = metrics(tie)
    assert m.magnitude == -2.0 and "direction_ambiguous" in m.flags


def test_depth_section_reverses_order() -> None:
    # Source: the definition (depth grows into the past, so oldest = deepest): a core with
    # the Gaussian's samples given in scrambled order measures like the outcrop.
    h = metrics(_gauss())
    core = _gauss(kind="depth", centre=250.0).sample(frac=1.0, random_state=7)
    d = metrics(core)
    assert d.magnitude == pytest.approx(h.magnitude)
    assert d.onset_position_m - 250.0 == pytest.approx(HALF_WIDTH_10, abs=0.01)  # deeper
    assert d.recovery_position_m - 250.0 == pytest.approx(-HALF_WIDTH_10, abs=0.01)
    assert d.onset_age_ma == pytest.approx(h.onset_age_ma)
    assert d.recovery_age_ma == pytest.approx(h.recovery_age_ma)
    assert d.baseline_window.startswith("oldest 21 of 101 samples (260–256 m)")
    # read as heights, the same numbers put the excursion's order the other way round
    assert metrics(core, position_kind="height").onset_position_m == pytest.approx(
        d.recovery_position_m
    )


def test_flags_never_recovers_and_starts_inside() -> None:
    # Source: the definitions of the flags.
    full = _gauss()
    cut = full[full["position_m"] <= 10.6]  # the record stops on the recovery limb
    m = metrics(cut)
    assert m.flags == "no_recovery" and math.isnan(m.recovery_position_m)
    assert m.onset_position_m == pytest.approx(10.0 - HALF_WIDTH_10, abs=0.01)
    # a post-excursion baseline window (in Ma) on a record that begins inside the event
    late = full[full["position_m"] >= 9.4]
    m = metrics(late, baseline_window=Window(182.95, 182.9, "ma"))
    assert m.flags == "starts_in_excursion" and math.isnan(m.onset_age_ma)
    assert m.recovery_position_m == pytest.approx(10.0 + HALF_WIDTH_10, abs=0.01)
    assert m.baseline_window == "182.95–182.9 Ma (26 samples)"


def test_explicit_window_in_metres() -> None:
    # Source: the closed form again; a window on the flat limb gives the same answer.
    m = metrics(_gauss(), baseline_window=(0.0, 3.0, "m"))
    assert m.baseline == pytest.approx(0.0, abs=1e-6)
    assert m.onset_position_m - 10.0 == pytest.approx(-HALF_WIDTH_10, abs=0.01)


def test_bad_input() -> None:
    # Source: the module's documented contract (raise for wrong requests, flag shortfalls).
    df = _gauss()
    with pytest.raises(DomainError, match="no samples"):
        metrics(df.iloc[:0])
    with pytest.raises(DomainError, match="no samples"):
        excursion.per_section(df.assign(source_id="a", section_id="b").iloc[:0])
    with pytest.raises(DomainError, match="Direction"):
        metrics(df, direction="down")
    with pytest.raises(DomainError, match="between 0 and 1"):
        metrics(df, fraction=1.5)
    with pytest.raises(DomainError, match="unit"):
        metrics(df, baseline_window=(1.0, 2.0, "ft"))
    with pytest.raises(DomainError, match="value"):
        metrics(df.drop(columns="value"))
    short = metrics(df, baseline_window=(0.0, 0.3, "m"))  # two samples in the window
    assert short.flags == "short_baseline" and math.isnan(short.magnitude)
    three = metrics(df.iloc[:3])
    assert three.flags == "too_few_samples" and three.n_samples == 3
    flat = metrics(df.assign(value=1.0))
    assert flat.magnitude == 0.0 and flat.flags == "no_departure"
    holes = df.copy()
    holes.loc[[5, 60], "value"] = np.nan
    m = metrics(holes)
    assert m.n_samples == 99 and "missing_dropped" in m.flags
    ages_only = metrics(df.assign(position_m=np.nan).sample(frac=1.0, random_state=3))
    assert "no_positions" in ages_only.flags and math.isnan(ages_only.onset_position_m)
    assert ages_only.onset_age_ma == pytest.approx(metrics(df).onset_age_ma)


def _compilation() -> pd.DataFrame:
    """Four invented sections in two regions, plus a one-sample section."""
    rng = np.random.default_rng(11)
    parts = []
    for i, (region, amp, centre) in enumerate(
        [
            ("North", -3.0, 183.1),
            ("North", -2.5, 182.9),
            ("South", -4.0, 183.0),
            ("South", -3.5, 183.2),
        ]
    ):
        x = np.arange(0.0, 20.0, 0.25)
        age = 184.0 - 0.1 * x
        v = 2.0 + 0.2 * i + amp * np.exp(-((age - centre) ** 2) / (2 * 0.15**2))
        v = v + rng.normal(0.0, 0.05, x.size)
        parts.append(
            pd.DataFrame(
                {
                    "source_id": f"src-{i % 2}",
                    "section_id": f"S{i}",
                    "region": region,
                    "position_m": x,
                    "position_kind": "height",
                    "age_ma": age,
                    "d13c_carb": v,
                }
            )
        )
    parts.append(
        pd.DataFrame(
            {
                "source_id": ["src-9"],
                "section_id": ["Lone"],
                "region": ["South"],
                "position_m": [1.0],
                "position_kind": ["height"],
                "age_ma": [183.0],
                "d13c_carb": [0.5],
            }
        )
    )
    return pd.concat(parts, ignore_index=True).sample(frac=1.0, random_state=5)


def test_per_section_against_pandas() -> None:
    # Source: the same quantities computed directly with pandas groupby.
    df = _compilation()
    ps = excursion.per_section(df, group_col="region")
    assert list(ps.columns) == list(PER_SECTION_COLUMNS)
    assert list(ps["section_id"]) == ["S0", "S2", "S1", "S3", "Lone"]  # sorted by source
    lone = ps.set_index("section_id").loc["Lone"]
    assert lone["flags"] == "too_few_samples" and lone["n_samples"] == 1
    assert math.isnan(lone["magnitude"])

    ok = df[df["section_id"] != "Lone"].sort_values(["section_id", "position_m"])
    g = ok.groupby("section_id")["d13c_carb"]
    base = g.apply(lambda s: s.iloc[: math.ceil(0.2 * len(s))].median())
    peak = g.min()
    got = ps.set_index("section_id").loc[base.index]
    np.testing.assert_allclose(got["baseline"], base, rtol=0, atol=1e-12)
    np.testing.assert_allclose(got["peak_value"], peak, rtol=0, atol=1e-12)
    np.testing.assert_allclose(got["magnitude"], peak - base, rtol=0, atol=1e-12)
    peak_age = ok.loc[g.idxmin(), ["section_id", "age_ma"]].set_index("section_id")["age_ma"]
    np.testing.assert_allclose(got["peak_age_ma"], peak_age)
    assert (got["n_samples"] == g.size()).all()
    assert (got["onset_age_ma"] > got["peak_age_ma"]).all()  # onset is older than the peak
    assert (got["recovery_age_ma"] < got["peak_age_ma"]).all()
    assert (got["flags"] == "").all()

    sm = excursion.summary(ps)
    assert list(sm["scope"]) == ["all", "group", "group"]
    assert list(sm["group"].iloc[1:]) == ["North", "South"]
    ref = (
        ps.dropna(subset=["magnitude"])
        .groupby("group")[["magnitude", "peak_age_ma", "onset_age_ma"]]
        .agg(["mean", "std", "count"])
    )
    for q in ("magnitude", "peak_age_ma", "onset_age_ma"):
        np.testing.assert_allclose(sm[f"{q}_mean"].iloc[1:], ref[(q, "mean")])
        np.testing.assert_allclose(sm[f"{q}_sd"].iloc[1:], ref[(q, "std")])
        assert list(sm[f"{q}_n"].iloc[1:]) == list(ref[(q, "count")])
        every = ps[q].dropna()
        assert sm[f"{q}_mean"].iloc[0] == pytest.approx(every.mean())
        assert sm[f"{q}_sd"].iloc[0] == pytest.approx(every.std())
        assert sm[f"{q}_n"].iloc[0] == 4
    assert list(sm["n_sections"]) == [5, 2, 3]  # the flagged section counts as a section


def test_per_section_without_groups_and_component_split() -> None:
    # Source: the definition: one row per section and group, groups never mixed.
    df = _compilation()
    ps = excursion.per_section(df)
    assert ps["group"].isna().all() and len(ps) == 5
    sm = excursion.summary(ps)
    assert list(sm["scope"]) == ["all"]
    two = pd.concat(
        [
            df.assign(component="bulk"),
            df.assign(component="organic", d13c_carb=df["d13c_carb"] - 25),
        ]
    )
    split = excursion.per_section(two, group_col="component")
    assert len(split) == 10
    bulk = split[split["group"] == "bulk"].set_index("section_id")["baseline"]
    org = split[split["group"] == "organic"].set_index("section_id")["baseline"]
    np.testing.assert_allclose((bulk - org).dropna(), 25.0)
