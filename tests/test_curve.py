"""Composite curves: each check names what it is checked against (a closed form, pandas,
numpy, statsmodels, a worked example, or the definition it tests). All data are invented."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from strata13.compile.synthesis.curve import (
    average_replicates,
    bin_edges,
    bin_stats,
    curve,
    curves,
    loess,
    robustness,
    sample_age_draws,
    weighted_quantile,
)

from strata13.errors import DomainError, OptionError

GRID = np.linspace(198.0, 172.0, 53)


def trend(age: np.ndarray) -> np.ndarray:
    """An invented δ13C history: a positive excursion near 185 Ma on a gentle slope."""
    return 0.05 * (age - 185.0) + 2.5 * np.exp(-(((age - 185.0) / 3.0) ** 2))


def make_samples(
    n_sections: int = 12,
    per: int = 40,
    seed: int = 3,
    sigma: float = 0.3,
    offsets: dict[str, float] | None = None,
    span_myr: float = 18.0,
) -> pd.DataFrame:
    """Invented sections, each over its own age window, two sections per source."""
    rng = np.random.default_rng(seed)
    rows = []
    for s in range(n_sections):
        src = f"src-{chr(97 + s // 2)}"
        top = rng.uniform(172.0, 198.0 - span_myr)
        ages = np.sort(rng.uniform(top, top + span_myr, per))
        vals = trend(ages) + rng.normal(0.0, sigma, per) + (offsets or {}).get(src, 0.0)
        for i, (a, v) in enumerate(zip(ages, vals, strict=True)):
            rows.append(
                {
                    "source_id": src,
                    "section_id": f"sec-{s:02d}",
                    "sample_id": f"s{i}",
                    "age_ma": a,
                    "age_sigma_ma": 0.4,
                    "age_basis": "reported",
                    "value": v,
                    "component": "bulk" if s % 3 else "brachiopod",
                    "setting": "ramp",
                }
            )
    return pd.DataFrame(rows)


# ------------------------------------------------------------------ replicates


def test_triplicate_counts_once() -> None:
    # closed form: the mean of −1.02, −0.98, −1.00 is −1.00
    df = pd.DataFrame(
        {
            "source_id": ["p"] * 5,
            "section_id": ["A"] * 5,
            "sample_id": ["1", "1", "1", "2", "2"],
            "replicate": [1, 2, 3, 1, 2],
            "d13c_carb": [-1.02, -0.98, -1.00, 0.5, np.nan],
            "age_ma": [180.0, 180.0, 180.0, 181.0, 181.0],
            "component": ["bulk"] * 5,
        }
    )
    out = average_replicates(df, "d13c_carb").set_index("sample_id")
    assert len(out) == 2
    assert out.loc["1", "value"] == pytest.approx(-1.00, abs=1e-12)
    assert out.loc["1", "n_replicates"] == 3
    assert out.loc["2", "value"] == 0.5 and out.loc["2", "n_replicates"] == 1
    assert out.loc["1", "age_ma"] == 180.0 and out.loc["1", "component"] == "bulk"


# ------------------------------------------------------------------ bins


def test_bin_edges() -> None:
    # closed form: 10 Myr in 2.5 Myr bins, either order; a remainder shortens the last bin
    assert bin_edges(190, 180, 2.5).tolist() == [190, 187.5, 185, 182.5, 180]
    assert bin_edges(180, 190, 2.5).tolist() == [190, 187.5, 185, 182.5, 180]
    assert bin_edges(190, 183, 3).tolist() == [190, 187, 184, 183]
    with pytest.raises(OptionError, match="wider than the interval"):
        bin_edges(190, 185, 6)


def test_section_weighted_worked_example() -> None:
    # worked example: 100 samples at +2 ‰ (section A), 5 at 0 ‰ (section B) in one bin
    df = pd.DataFrame(
        {
            "source_id": "p",
            "section_id": ["A"] * 100 + ["B"] * 5,
            "age_ma": np.linspace(180.1, 189.9, 105),
            "value": [2.0] * 100 + [0.0] * 5,
        }
    )
    row = bin_stats(df, [190, 180]).iloc[0]
    assert row["mean"] == pytest.approx(1.0, abs=1e-12)
    assert (row["n_sections"], row["n_samples"]) == (2, 105)
    # midpoint rule by hand: B's zeros sit at p = 0.05…0.45, A's first 2 at p = 0.5025
    assert row["median"] == pytest.approx(2.0 * 0.05 / 0.0525, abs=1e-12)
    assert (row["q25"], row["q75"], row["p2_5"], row["p97_5"]) == (0.0, 2.0, 0.0, 2.0)
    samples = bin_stats(df, [190, 180], weight="samples").iloc[0]
    assert samples["mean"] == pytest.approx((200.0) / 105, abs=1e-12)


def test_sample_weighted_bins_equal_pandas() -> None:
    # pandas groupby on the same samples (bins by pd.cut, closed on the young side)
    df = make_samples()
    edges = [199, 194, 190.5, 186, 183, 177, 171, 170]  # the last bin is empty
    ours = bin_stats(df, edges, weight="samples")
    cut = pd.cut(df["age_ma"], sorted(edges), right=False)
    g = df.groupby(cut, observed=False)["value"]
    ref = pd.DataFrame(
        {
            "n_samples": g.size(),
            "median": g.median(),
            "mean": g.mean(),
            "q25": g.quantile(0.25),
            "q75": g.quantile(0.75),
            "p2_5": g.quantile(0.025),
            "p97_5": g.quantile(0.975),
        }
    ).iloc[::-1]
    assert ours["age_old"].tolist() == sorted(edges, reverse=True)[:-1]
    assert ours["n_samples"].tolist() == ref["n_samples"].tolist()
    for col in ("median", "mean", "q25", "q75", "p2_5", "p97_5"):
        np.testing.assert_allclose(ours[col], ref[col], rtol=0, atol=1e-12)
    secs = df.groupby(cut, observed=False)["section_id"].nunique().iloc[::-1]
    assert ours["n_sections"].tolist() == secs.tolist()
    # section-weighted mean = mean of the section means (pandas, two groupbys)
    sec = bin_stats(df, edges)
    ref_mean = (
        df.groupby([cut, "section_id"], observed=True)["value"]
        .mean()
        .groupby(level=0, observed=False)
        .mean()
        .iloc[::-1]
    )
    np.testing.assert_allclose(sec["mean"], ref_mean, rtol=0, atol=1e-12)


def test_weighted_quantile_definition() -> None:
    # numpy: with equal weights the midpoint rule is percentile(method="hazen")
    v = np.random.default_rng(0).normal(size=17)
    qs = [0.0, 0.025, 0.25, 0.5, 0.75, 0.975, 1.0]
    np.testing.assert_allclose(
        weighted_quantile(v, np.full(17, 0.3), qs),
        np.percentile(v, np.array(qs) * 100, method="hazen"),
        rtol=0,
        atol=1e-12,
    )
    # closed form: values 0 and 1 with weights 3 and 1 sit at p = 0.375 and 0.875
    assert weighted_quantile([1.0, 0.0], [1.0, 3.0], [0.3, 0.625, 0.9]).tolist() == [0.0, 0.5, 1.0]


# ------------------------------------------------------------------ LOESS


@pytest.mark.parametrize(("n", "span"), [(200, 0.3), (60, 0.1), (800, 0.05), (40, 1.0)])
def test_loess_equals_statsmodels(n: int, span: float) -> None:
    # reference: statsmodels.nonparametric.lowess(y, x, frac=span, it=0, xvals=grid)
    from statsmodels.nonparametric.smoothers_lowess import lowess

    rng = np.random.default_rng(n)
    x = rng.uniform(172.0, 198.0, n)
    y = trend(x) + rng.normal(0.0, 0.3, n)
    grid = np.linspace(170.0, 200.0, 91)  # also a little outside the data
    ref = lowess(y, x, frac=span, it=0, xvals=grid)
    np.testing.assert_allclose(loess(x, y, grid, span), ref, rtol=0, atol=1e-8)


def test_loess_weights_equal_weighted_least_squares() -> None:
    # reference: statsmodels WLS of y on (1, x − g) over the k nearest x, weights tricube × w
    import statsmodels.api as sm

    rng = np.random.default_rng(5)
    x = rng.uniform(0.0, 10.0, 120)
    y = np.cos(x) + rng.normal(0.0, 0.2, 120)
    w = rng.choice([0.0, 0.5, 1.0, 3.0], 120)
    grid = np.linspace(-0.5, 10.5, 23)
    k = int(0.25 * 120)
    ref = []
    for g in grid:
        near = np.argsort(np.abs(x - g))[:k]
        h = np.abs(x[near] - g).max()
        tri = np.clip(1 - (np.abs(x[near] - g) / h) ** 3, 0, 1) ** 3
        design = np.column_stack([np.ones(k), x[near] - g])
        ref.append(sm.WLS(y[near], design, weights=tri * w[near]).fit().params[0])
    np.testing.assert_allclose(loess(x, y, grid, 0.25, w), ref, rtol=0, atol=1e-9)


def test_loess_undefined_and_flat_windows() -> None:
    # definition: no positive weight in a window -> NaN; all weight at one age -> its mean
    x = np.arange(10.0)
    y = np.arange(10.0) ** 2
    w = np.r_[np.zeros(5), np.ones(5)]
    out = loess(x, y, [0.0, 9.0], 0.3, w)  # k = 3: windows {0,1,2} and {7,8,9}
    # closed form: at 9 only 8 and 9 have weight (7 sets the radius): the line through them
    assert math.isnan(out[0]) and out[1] == pytest.approx(81.0, abs=1e-9)
    ties = loess(np.r_[np.full(5, 3.0), 9.0], np.r_[1, 2, 3, 4, 5, 9.0], [3.0], 0.9)
    assert ties[0] == pytest.approx(3.0, abs=1e-12)  # the five tied samples' mean


# ------------------------------------------------------------------ curves


def test_curve_fit_is_loess_and_reproducible() -> None:
    df = make_samples()
    a = curve(df, GRID, 0.3, boots=50, seed=7)
    b = curve(df, GRID, 0.3, boots=50, seed=7)
    c = curve(df, GRID, 0.3, boots=50, seed=8)
    pd.testing.assert_frame_equal(a, b)
    assert not np.allclose(a["lo"], c["lo"], equal_nan=True)
    # the fit is the LOESS of all samples with 1/n per sample of a section (definition)
    n = df.groupby("section_id")["value"].transform("size").to_numpy()
    np.testing.assert_allclose(
        a["fit"], loess(df["age_ma"], df["value"], GRID, 0.3, 1 / n), rtol=0, atol=1e-12
    )
    # statsmodels lowess when every sample counts once
    from statsmodels.nonparametric.smoothers_lowess import lowess

    s = curve(df, GRID, 0.3, boots=0, weight="samples")
    ref = lowess(df["value"], df["age_ma"], frac=0.3, it=0, xvals=GRID)
    np.testing.assert_allclose(s["fit"], ref, rtol=0, atol=1e-8)
    assert list(a.columns) == ["age", "fit", "lo", "hi", "n_sections", "band_shown"]
    shown = a[a["band_shown"]]
    assert len(shown) and (shown["lo"] <= shown["hi"]).all()


def test_one_section_band_collapses() -> None:
    # definition: every bootstrap draw picks the one section once, so each replicate is the fit
    df = make_samples(n_sections=1, per=60)
    out = curve(df, GRID, 0.4, boots=30, seed=1, min_sections=1)
    shown = out[out["band_shown"]]
    assert len(shown) > 10
    np.testing.assert_allclose(shown["lo"], shown["fit"], rtol=0, atol=1e-9)
    np.testing.assert_allclose(shown["hi"], shown["fit"], rtol=0, atol=1e-9)


def test_min_sections_hides_band() -> None:
    # brute force: sections with a sample nearer than the k-th nearest distance
    df = make_samples(n_sections=8, span_myr=6.0, seed=11)
    out = curve(df, GRID, 0.15, boots=20, seed=0, min_sections=3)
    x, sec = df["age_ma"].to_numpy(), df["section_id"].to_numpy()
    k = int(0.15 * len(df))
    for g, n_sec in zip(GRID, out["n_sections"], strict=True):
        d = np.abs(x - g)
        h = np.sort(d)[k - 1]
        assert n_sec == len(set(sec[d < h]))
    hidden = out["n_sections"] < 3
    assert hidden.any() and (~hidden).any()
    assert not out.loc[hidden, "band_shown"].any()
    assert out.loc[hidden, ["lo", "hi"]].isna().all().all()
    assert out.loc[~hidden, "band_shown"].all()


def test_age_draws_widen_the_band() -> None:
    df = make_samples(seed=21)
    df["age_sigma_ma"] = 1.5
    df.loc[df["section_id"] == "sec-03", "age_basis"] = "stage only"
    plain = curve(df, GRID, 0.3, boots=60, seed=2, min_sections=1)
    draws = sample_age_draws(df, 60, seed=4)
    aged = curve(df, GRID, 0.3, boots=60, seed=2, min_sections=1, age_draws=draws)
    assert np.nanmean(aged["hi"] - aged["lo"]) > 1.2 * np.nanmean(plain["hi"] - plain["lo"])
    np.testing.assert_array_equal(aged["fit"], plain["fit"])  # the fit uses central ages
    # definition: fixed "draws" (the central ages) give the one-pass bootstrap's band exactly
    fixed = np.tile(df["age_ma"].to_numpy(), (5, 1))
    same = curve(df, GRID, 0.3, boots=60, seed=2, min_sections=1, age_draws=fixed)
    np.testing.assert_allclose(same[["lo", "hi"]], plain[["lo", "hi"]], rtol=0, atol=1e-9)


def test_sample_age_draws() -> None:
    # closed forms: uniform over ±√3σ has SD σ; section draws are read at the positions
    df = pd.DataFrame(
        {
            "source_id": "p",
            "section_id": ["A", "A", "B", "C"],
            "age_ma": [180.0, 181.0, 185.0, 190.0],
            "age_sigma_ma": [0.5, 0.5, 2.0, 1.0],
            "age_basis": ["age model", "age model", "stage only", "reported"],
            "position_m": [3.0, 1.0, 0.0, 0.0],
        },
        index=[9, 9, 9, 9],
    )
    sec_draws = np.array([[179.0, 181.5], [179.5, 182.0], [180.0, 182.5]], dtype=np.float32)
    draws = sample_age_draws(
        df, 4000, seed=1, section_draws={("p", "A"): (np.array([1.0, 3.0]), sec_draws)}
    )
    d = np.array([draws(k) for k in range(4000)])
    assert d[5, 0] == sec_draws[5 % 3, 1] and d[5, 1] == sec_draws[5 % 3, 0]
    half = math.sqrt(3.0) * 2.0
    assert d[:, 2].min() >= 185 - half and d[:, 2].max() <= 185 + half
    assert d[:, 2].std() == pytest.approx(2.0, rel=0.05)
    assert d[:, 3].std() == pytest.approx(1.0, rel=0.05)
    np.testing.assert_array_equal(draws(4000 + 7), draws(7))  # cycles and is reproducible


def test_curves_per_group() -> None:
    df = make_samples(n_sections=12)
    out = curves(df, "component", GRID, 0.4, boots=20, seed=3, min_sections=2)
    assert list(out.columns[:2]) == ["component", "age"]
    for comp, part in out.groupby("component"):
        one = curve(df[df["component"] == comp], GRID, 0.4, boots=20, seed=3, min_sections=2)
        np.testing.assert_allclose(
            part[["fit", "lo", "hi"]], one[["fit", "lo", "hi"]], rtol=0, atol=1e-12
        )
    tiny = df[(df["section_id"] == "sec-00")].head(2)
    skipped = curves(
        pd.concat([df[df["component"] == "bulk"], tiny]), "component", GRID, 0.3, boots=5
    )
    assert skipped.attrs["skipped"][0][0] == ("brachiopod",)
    assert set(skipped["component"]) == {"bulk"}


def test_robustness_names_offset_source() -> None:
    # worked example: source src-c reads 1 ‰ high; leaving it out changes the curve most
    df = make_samples(n_sections=12, seed=9, offsets={"src-c": 1.0})
    grid = np.linspace(192.0, 178.0, 29)  # where every source has data (no edge effects)
    rob = robustness(df, grid, 0.3, leave="source")
    assert rob.influence.iloc[0]["left_out"] == "src-c"
    assert list(rob.influence.columns[:4]) == [
        "left_out",
        "max_abs_change",
        "rms_change",
        "n_samples",
    ]
    assert rob.influence.iloc[0]["n_samples"] == 80
    assert len(rob.curves) == 6 * grid.size
    by_section = robustness(df, grid, 0.3, leave="section")
    assert {s.split("/")[0] for s in by_section.influence["left_out"][:2]} == {"src-c"}


# ------------------------------------------------------------------ bad input


def test_bad_input() -> None:
    df = make_samples(n_sections=2, per=5)
    empty = df.iloc[:0]
    with pytest.raises(DomainError, match="no samples"):
        curve(empty, GRID, 0.3)
    with pytest.raises(DomainError, match="no samples"):
        bin_stats(empty, [190, 180])
    with pytest.raises(DomainError, match="no samples"):
        average_replicates(empty.assign(d13c_carb=[]), "d13c_carb")
    for span in (0.0, -0.2, 1.5):
        with pytest.raises(OptionError, match="outside"):
            curve(df, GRID, span)
    with pytest.raises(DomainError, match="at least 3"):
        curve(df, GRID, 0.2)  # 2 of 10 samples
    with pytest.raises(DomainError, match="at least 3"):
        loess([1.0, 2.0], [1.0, 2.0], [1.5], 1.0)
    with pytest.raises(OptionError, match="bootstrap"):
        curve(df, GRID, 0.5, boots=-1)
    with pytest.raises(OptionError, match="neither"):
        bin_stats(df, [190, 180], weight="records")
    with pytest.raises(DomainError, match="age draw"):
        curve(df, GRID, 0.5, boots=2, age_draws=np.zeros((2, 3)))
