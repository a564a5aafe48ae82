"""Age models from ties: each check names what it is checked against (a closed form, a
general-purpose library, or the definition it tests). All sections and ages are invented."""

from __future__ import annotations

import math
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from strata13.compile.ages import agemodel
from strata13.compile.ages.agemodel import (
    AT_HIATUS,
    EXTRAPOLATED,
    OUTSIDE,
    Accumulation,
    Tie,
    draw_section,
    shared_offsets,
    summarise,
)

from strata13.errors import ConfigError, DomainError, OptionError

N = 4000  # draws for the statistical checks: SE of a σ estimate ≈ σ/√(2N) ≈ 1.1 %


def _two_ties(s1: float = 0.5, s2: float = 0.3) -> list[Tie]:
    return [Tie(0.0, 180.0, s1, "radiometric"), Tie(100.0, 190.0, s2, "radiometric")]


# ------------------------------------------------------------------ monotone in every draw


@st.composite
def sections(draw: st.DrawFn) -> tuple[list[Tie], np.ndarray, str, dict[str, object]]:
    n = draw(st.integers(2, 7))
    gaps = draw(st.lists(st.floats(0.01, 40.0), min_size=n - 1, max_size=n - 1))
    z = np.concatenate([[0.0], np.cumsum(gaps)])
    steps = draw(st.lists(st.floats(0.0, 3.0), min_size=n - 1, max_size=n - 1))
    ages = 150.0 + np.concatenate([[0.0], np.cumsum(steps)])
    sig = draw(st.lists(st.floats(0.0, 2.0), min_size=n, max_size=n))  # often > the gaps
    kind = draw(st.sampled_from(["height", "depth"]))
    keyed = draw(st.lists(st.booleans(), min_size=n, max_size=n))
    ties = [
        Tie(
            float(zi if kind == "depth" else -zi),
            float(a),
            float(s),
            "chart boundary" if k else "radiometric",
            f"key{i}" if k else None,
        )
        for i, (zi, a, s, k) in enumerate(zip(z, ages, sig, keyed, strict=True))
    ]
    ages_distinct = len(set(np.round(ages, 12))) == n
    if n > 2 and draw(st.booleans()) and ages_distinct:  # a hiatus at an interior level
        i = draw(st.integers(1, n - 2))
        older = float((ages[i] + ages[i + 1]) / 2) if ages[i + 1] > ages[i] else None
        if older is not None and older > ages[i]:
            ties.append(Tie(ties[i].position_m, older, 0.2, "radiometric"))
    samples = draw(st.lists(st.floats(-5.0, float(z[-1]) + 5.0), min_size=1, max_size=40))
    pos = np.array(samples if kind == "depth" else [-x for x in samples])
    pos = np.concatenate([pos, [t.position_m for t in ties]])
    opts = {
        "allow_extrapolation": draw(st.booleans()),
        "prior": Accumulation(
            draw(st.sampled_from([0.05, 1.0, 4.0])), draw(st.sampled_from([0.05, 1.0, 7.5]))
        ),
        "max_segments": draw(st.sampled_from([3, 2000])),
    }
    return ties, pos, kind, opts


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(sections(), st.integers(0, 2**32))
def test_every_draw_is_monotone(case: tuple, seed: int) -> None:
    # Definition under test: superposition (age never decreases downward), exactly, in every
    # draw — with dense ties (σ larger than the gaps), shared keys and a hiatus.
    ties, pos, kind, opts = case
    try:
        agemodel.validate_ties(ties, kind)
    except DomainError:
        return  # equal ages at a hiatus level from the strategy: refused by design
    r = draw_section(pos, ties, kind, 64, seed, **opts)
    dated = ~np.isin(r.flags, [OUTSIDE, agemodel.NO_POSITION])
    assert np.isfinite(r.draws[:, dated]).all() and np.isnan(r.draws[:, ~dated]).all()
    z = pos if kind == "depth" else -pos
    d = r.draws[:, dated][:, np.argsort(z[dated], kind="stable")]
    assert (np.diff(d, axis=1) >= 0).all()
    assert (d >= 0).all()


def test_dense_ties_do_not_starve() -> None:
    # Common practice (why sequential truncation, not rejection): 30 ties 0.1 Ma apart with
    # 1σ = 1 Ma would reject almost every draw; here every draw is produced and ordered.
    ties = [Tie(float(i), 180.0 + 0.1 * i, 1.0, "radiometric") for i in range(30)]
    pos = np.linspace(0, 29, 300)
    r = draw_section(pos, ties, "depth", 500, 1)
    assert np.isfinite(r.draws).all()
    assert (np.diff(r.draws, axis=1) >= 0).all()


# ------------------------------------------------------------------ spread at and between ties


def test_spread_and_median_at_the_ties() -> None:
    # Definition: at a tie the draws are the tie's N(age, σ) (far from its neighbours, so
    # truncation is negligible); tolerance 5 % for σ (SE 1.1 %), 0.1σ for the median.
    r = draw_section([0.0, 100.0], _two_ties(), "depth", N, 11)
    s = summarise(r.draws)
    assert s.sigma == pytest.approx([0.5, 0.3], rel=0.05)
    assert abs(s.median[0] - 180.0) < 0.05 and abs(s.median[1] - 190.0) < 0.03


@pytest.mark.parametrize("w", [0.25, 0.5, 0.255, 0.505])
def test_spread_between_ties(w: float) -> None:
    # Closed form of error propagation (linear interpolation between independent ties):
    # σ(w) ≥ sqrt((1−w)²σ₁² + w²σ₂²), the steady-accumulation lower bound. And the exact
    # gamma-bridge closed form: the fraction of time elapsed at w is Beta(βwL, β(1−w)L)
    # (Dirichlet aggregation), var = w(1−w)/(βL+1), so by the law of total variance
    # σ² = (1−w)²σ₁² + w²σ₂² + E[D²]·w(1−w)/(βL+1), E[D²] = (μ₂−μ₁)² + σ₁² + σ₂².
    # 25.5 m and 50.5 m lie inside 1 m segments, where the one-jump bridge keeps that σ.
    s1, s2, length = 0.5, 0.3, 100.0
    r = draw_section([w * length], _two_ties(s1, s2), "depth", N, 12)
    sigma = summarise(r.draws).sigma[0]
    linear = math.sqrt((1 - w) ** 2 * s1**2 + w**2 * s2**2)
    assert sigma >= linear
    d2 = 10.0**2 + s1**2 + s2**2
    beta = Accumulation().shape_per_m
    exact = math.sqrt(linear**2 + d2 * w * (1 - w) / (beta * length + 1))
    assert sigma == pytest.approx(exact, rel=0.05)


def _beta_sd(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """SD of Beta(a, b): Var = a·b / ((a+b)²(a+b+1)) (the Beta distribution's closed form)."""
    return np.sqrt(a * b / ((a + b) ** 2 * (a + b + 1)))


@pytest.mark.parametrize("prior", [Accumulation(), Accumulation(2.0, 0.5), Accumulation(0.4, 2.0)])
def test_sigma_between_fixed_ties_is_the_gamma_bridge_and_unimodal(prior: Accumulation) -> None:
    # Closed form of the gamma bridge (Dirichlet increments): with two exact ties 10 m apart
    # (n equal segments of the prior's length), the fraction of the interval's time elapsed
    # at depth z is Beta(βz, β(L−z)), β = shape / segment_m, so σ_age(z) = (A₂−A₁)·SD of
    # that Beta — at segment edges (where the draws follow the Beta law itself; checked
    # with scipy.stats.kstest) and between them (where the one-jump bridge keeps the first
    # two moments). Tolerance: 4 Monte Carlo standard errors of each sample variance,
    # SE(s²) = sqrt((m₄ − s⁴)/N) from the draws themselves.
    from scipy import stats

    length, young, old, n = 10.0, 180.0, 182.0, 20_000
    ties = [Tie(0.0, young, 0.0, "radiometric"), Tie(length, old, 0.0, "radiometric")]
    z = np.linspace(0.05, length - 0.05, 199)
    d = draw_section(z, ties, "depth", n, 21, prior=prior).draws
    beta = prior.shape_per_m
    want = (old - young) * _beta_sd(beta * z, beta * (length - z))
    dev = d - d.mean(axis=0)
    var = (dev**2).sum(axis=0) / (n - 1)
    se = np.sqrt(((dev**4).mean(axis=0) - var**2) / n)
    assert np.all(np.abs(var - want**2) < 4 * se)
    # unimodal: no position lies below the highest σ on both its sides (no local dip)
    sd = np.sqrt(var)
    left, right = np.maximum.accumulate(sd), np.maximum.accumulate(sd[::-1])[::-1]
    dip = np.minimum(left, right) - sd
    assert dip.max() < 0.01 * sd.max()
    edges = np.flatnonzero(np.isclose(z / prior.segment_m, np.round(z / prior.segment_m)))
    for i in edges[:: max(1, len(edges) // 4)]:
        frac = (d[:, i] - young) / (old - young)
        law = stats.beta(beta * z[i], beta * (length - z[i]))
        assert stats.kstest(frac, law.cdf).pvalue > 0.001, z[i]


def test_shape_per_metre_not_the_cut_sets_sigma() -> None:
    # Gamma-process property (shape ∝ length): σ at a point depends on the shape per metre
    # only; 1 per 1 m and 5 per 5 m (both one per metre) agree at 50 m and at 52.5 m.
    sig = [
        summarise(draw_section([50.0, 52.5], _two_ties(), "depth", N, 3, prior=p).draws).sigma
        for p in (Accumulation(1.0, 1.0), Accumulation(5.0, 5.0))
    ]
    assert sig[0] == pytest.approx(sig[1], rel=0.06)


def test_the_prior_is_checked() -> None:
    # The prior's sanity bounds (agemodel.PRIOR_RANGES): one sentence naming where, and what
    # the value means, for anything else.
    for key, bad in (("shape", 0.0), ("shape", -1), ("segment_m", float("nan")), ("shape", True)):
        with pytest.raises(OptionError) as err:
            agemodel.prior_value(key, bad, "--x", OptionError)
        assert "--x" in str(err.value) and key in err.value.hint
    with pytest.raises(ConfigError, match="from 0.001 to 1000"):
        agemodel.prior_value("segment_m", "1 m", "map.toml: section 's' accumulation", ConfigError)
    assert agemodel.prior_value("shape", 2, "--x", OptionError) == 2.0


def test_position_error_adds_through_the_rate() -> None:
    # First-order error propagation (Taylor 1997, An Introduction to Error Analysis §3.11):
    # σ² = σ_age² + (rate·σ_pos)²; neighbouring rates 0.1 Ma/m, σ_pos 2 m -> 0.2 Ma.
    ties = [
        Tie(0.0, 180.0, 0.3, "radiometric"),
        Tie(50.0, 185.0, 0.3, "radiometric", None, 2.0),
        Tie(100.0, 190.0, 0.3, "radiometric"),
    ]
    sigma = summarise(draw_section([50.0], ties, "depth", N, 4).draws).sigma[0]
    assert sigma == pytest.approx(math.hypot(0.3, 0.2), rel=0.05)


# ------------------------------------------------------------------ shared boundary errors


def test_shared_boundary_correlates_sections_and_radiometric_ties_do_not() -> None:
    # Definition of a shared error: two sections tied to one boundary key move together at it
    # (Pearson r near 1, numpy.corrcoef); their own radiometric ties are independent
    # (|r| < 0.1; the SE of r for N = 4000 is 0.016).
    key = "ICS2024/12:toarcian"
    a = [
        Tie(100.0, 180.0, 0.3, "radiometric"),
        Tie(50.0, 184.2, 0.5, "chart boundary", key),
        Tie(0.0, 190.0, 0.3, "radiometric"),
    ]
    b = [
        Tie(0.0, 181.0, 0.4, "radiometric"),
        Tie(20.0, 184.2, 0.5, "chart boundary", key),
        Tie(60.0, 189.0, 0.4, "radiometric"),
    ]
    shared = shared_offsets([key], N, seed=5)
    ra = draw_section([100.0, 50.0], a, "height", N, agemodel.section_seed("src/A"), shared)
    rb = draw_section([0.0, 20.0], b, "depth", N, agemodel.section_seed("src/B"), shared)
    assert np.corrcoef(ra.draws[:, 1], rb.draws[:, 1])[0, 1] > 0.99
    assert abs(np.corrcoef(ra.draws[:, 0], rb.draws[:, 0])[0, 1]) < 0.1


def test_shared_offsets_depend_only_on_key_and_seed() -> None:
    # Determinism by construction (SHA-256 of seed and key): asked alone or with others, in
    # any order, the vector is the same; another seed gives another vector.
    one = shared_offsets(["b"], 100, seed=7)["b"]
    many = shared_offsets(["c", "b", "a"], 100, seed=7)
    assert np.array_equal(one, many["b"])
    assert not np.array_equal(one, shared_offsets(["b"], 100, seed=8)["b"])
    assert abs(one.mean()) < 0.4 and 0.7 < one.std() < 1.3


def test_missing_shared_offsets_are_refused() -> None:
    ties = [Tie(0.0, 180.0, 0.3, "chart boundary", "k1"), Tie(9.0, 185.0, 0.3, "radiometric")]
    with pytest.raises(DomainError, match="k1"):
        draw_section([1.0], ties, "depth", 10, 1, {"other": np.zeros(10)})


# ------------------------------------------------------------------ hiatus, outside, seeds


def test_hiatus_is_a_jump_and_its_level_takes_the_older_age() -> None:
    # Definition of a hiatus: two ties at one level; ages jump across it in every draw.
    ties = [
        Tie(0.0, 180.0, 0.2, "radiometric"),
        Tie(50.0, 183.0, 0.2, "radiometric"),
        Tie(50.0, 186.0, 0.2, "radiometric"),
        Tie(100.0, 190.0, 0.2, "radiometric"),
    ]
    pos = np.array([49.999, 50.0, 50.001])
    r = draw_section(pos, ties, "depth", 2000, 2)
    assert list(r.flags) == ["", AT_HIATUS, ""]
    jump = r.draws[:, 2] - r.draws[:, 0]
    assert (jump > 1.0).all() and np.median(jump) == pytest.approx(3.0, abs=0.1)
    assert np.median(r.draws[:, 1]) == pytest.approx(186.0, abs=0.05)


def test_outside_the_ties_nan_unless_extrapolation_is_allowed() -> None:
    # Definition of the flags; extrapolation carries the adjacent interval's drawn rate, so
    # the spread grows with distance beyond the tie (closed form: σ² = σ_tie² + d²σ_rate²).
    pos = np.array([-20.0, -5.0, 50.0, 105.0])
    off = draw_section(pos, _two_ties(), "depth", 500, 6)
    assert np.isnan(off.draws[:, [0, 1, 3]]).all() and np.isfinite(off.draws[:, 2]).all()
    assert list(off.flags) == [OUTSIDE, OUTSIDE, "", OUTSIDE]
    on = draw_section(pos, _two_ties(), "depth", 500, 6, allow_extrapolation=True)
    assert np.isfinite(on.draws).all()
    assert list(on.flags) == [EXTRAPOLATED, EXTRAPOLATED, "", EXTRAPOLATED]
    assert (np.diff(on.draws, axis=1) >= 0).all()
    s = summarise(on.draws)
    assert s.sigma[0] > s.sigma[1] > 0
    assert s.median[0] == pytest.approx(180.0 - 20 * 0.1, abs=0.1)


def test_reproducible_with_a_seed_and_independent_of_chunking() -> None:
    # Determinism by construction (seeded numpy streams, consumed draw by draw).
    pos = np.linspace(0, 100, 37)
    a = draw_section(pos, _two_ties(), "depth", 300, 9)
    b = draw_section(pos, _two_ties(), "depth", 300, 9, chunk_draws=7)
    c = draw_section(pos, _two_ties(), "depth", 300, 10)
    assert np.array_equal(a.draws, b.draws)
    assert not np.array_equal(a.draws, c.draws)
    # segments of shapes other than 1 (a 0.5 m rest, a prior of shape 2) use another stream
    ties = [*_two_ties(), Tie(100.5, 190.2, 0.1, "radiometric")]
    prior = Accumulation(2.0, 1.0)
    d = draw_section(pos, ties, "depth", 300, 9, prior=prior)
    e = draw_section(pos, ties, "depth", 300, 9, prior=prior, chunk_draws=13)
    assert np.array_equal(d.draws, e.draws)


def test_height_and_depth_are_mirror_images() -> None:
    # Definition of the two position kinds: height h above a datum is depth −h below it.
    ties = _two_ties()
    mirrored = [Tie(-t.position_m, t.age_ma, t.age_sigma_ma, t.basis) for t in ties]
    pos = np.linspace(-10, 110, 25)
    d = draw_section(pos, ties, "depth", 200, 4, allow_extrapolation=True)
    h = draw_section(-pos, mirrored, "height", 200, 4, allow_extrapolation=True)
    assert np.array_equal(d.draws, h.draws)


# ------------------------------------------------------------------ refusals


def test_ties_inverted_within_their_errors_are_kept_in_order_by_the_draws() -> None:
    # The rule (common practice): an older tie above a younger one contradicts only beyond
    # 2σ of the age difference, 2·sqrt(σ₁² + σ₂²). 0.3 Myr with σ 0.3 and 0.2 (limit 0.72) is
    # not a contradiction: the truncated draws put the two in order in every draw.
    ties = [Tie(4.0, 183.1, 0.2, "radiometric"), Tie(10.0, 183.4, 0.3, "radiometric")]
    ordered = agemodel.validate_ties(ties, "height")
    assert [t.position_m for t in ordered] == [10.0, 4.0]
    r = draw_section([10.0, 7.0, 4.0], ties, "height", 2000, 3)
    assert np.isfinite(r.draws).all() and (np.diff(r.draws, axis=1) >= 0).all()
    limit = 2 * math.hypot(0.3, 0.2)
    for gap, ok in ((limit - 0.01, True), (limit + 0.01, False)):
        pair = [Tie(4.0, 183.1, 0.2, "radiometric"), Tie(10.0, 183.1 + gap, 0.3, "radiometric")]
        if ok:
            agemodel.validate_ties(pair, "height")
        else:
            with pytest.raises(DomainError, match="beyond the ties' errors"):
                agemodel.validate_ties(pair, "height")


def test_inverted_ties_are_refused_naming_both() -> None:
    # 2.1 Myr older above, beyond 2·sqrt(0.3² + 0.5²) = 1.17 Myr: refused, both ties named
    # with their positions, ages, σ and sources
    ties = [
        Tie(10.0, 185.2, 0.3, "radiometric", note="ash A", source="src-a"),
        Tie(4.0, 183.1, 0.5, "radiometric", note="ash B", source="src-b"),
    ]
    with pytest.raises(DomainError) as err:
        agemodel.validate_ties(ties, "height")
    text = str(err.value)
    assert all(s in text for s in ("185.2", "183.1", "10 m", "4 m", "height", "± 0.3", "± 0.5"))
    assert all(s in text for s in ("ash A", "ash B", "src-a", "src-b", "1.166"))
    assert err.value.hint
    agemodel.validate_ties(ties, "depth")  # the same ties read as depths are in order


@pytest.mark.parametrize(
    "ties,words",
    [
        ([Tie(0.0, 180.0, 0.1, "radiometric")], "two ties"),
        (
            [Tie(0.0, 180.0, 0.1, "radiometric"), Tie(0.0, 181.0, 0.1, "radiometric")],
            "two different positions",
        ),
        (
            [Tie(0.0, 180.0, 0.1, "chart boundary"), Tie(5.0, 181.0, 0.1, "radiometric")],
            "without a boundary key",
        ),
        (
            [
                Tie(0.0, 180.0, 0.1, "radiometric"),
                Tie(5.0, 181.0, 0.1, "radiometric"),
                Tie(5.0, 181.0, 0.2, "radiometric"),
            ],
            "same age",
        ),
        (
            [Tie(0.0, 180.0, 0.1, "radiometric"), Tie(5.0, 181.0, float("nan"), "radiometric")],
            "missing",
        ),
        ([Tie(0.0, 180.0, 0.1, "radiometric"), Tie(5.0, 181.0, 0.1, "varve")], "unknown basis"),
    ],
)
def test_unusable_ties_are_refused(ties: list[Tie], words: str) -> None:
    with pytest.raises(DomainError, match=words):
        agemodel.validate_ties(ties, "depth")


# ------------------------------------------------------------------ helpers


def test_truncated_normal_matches_scipy() -> None:
    # General-purpose library: scipy.stats.truncnorm.ppf, including far upper and lower tails.
    from scipy.stats import truncnorm

    u = np.linspace(0.001, 0.999, 25)
    for a, b in [(-1.0, 2.0), (5.0, np.inf), (-np.inf, -6.0), (8.0, 9.0), (-np.inf, np.inf)]:
        ours = agemodel._truncated_normal(
            10.0, 2.0, np.full_like(u, 10 + 2 * a), np.full_like(u, 10 + 2 * b), u
        )
        assert ours == pytest.approx(10 + 2 * truncnorm.ppf(u, a, b), abs=1e-7)


def test_stage_only_is_uniform_over_the_stage() -> None:
    # Closed form of the uniform distribution, checked with scipy.stats.uniform: the mean is
    # the midpoint and σ = span/√12.
    from scipy.stats import uniform

    got = agemodel.stage_only(184.2, 174.7)
    assert got.age_ma == pytest.approx(uniform(174.7, 9.5).mean())
    assert got.age_sigma_ma == pytest.approx(uniform(174.7, 9.5).std())
    assert got.basis == "stage only" and got.flag
    with pytest.raises(DomainError):
        agemodel.stage_only(180.0, 180.0)


def test_summarise_matches_numpy_and_leaves_undated_samples_nan() -> None:
    # General-purpose library: numpy.percentile and numpy.std on the same columns.
    rng = np.random.default_rng(0)
    d = rng.normal(180, 1, (501, 6))
    d[:, 4] = np.nan
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        s = summarise(d)
    ok = [0, 1, 2, 3, 5]
    assert s.median[ok] == pytest.approx(np.median(d[:, ok], axis=0))
    assert s.lo95[ok] == pytest.approx(np.percentile(d[:, ok], 2.5, axis=0))
    assert s.hi95[ok] == pytest.approx(np.percentile(d[:, ok], 97.5, axis=0))
    assert s.sigma[ok] == pytest.approx(np.std(d[:, ok], axis=0, ddof=1))
    assert np.isnan([s.median[4], s.sigma[4], s.lo95[4], s.hi95[4]]).all()


# ------------------------------------------------------------------ figure


def test_plot_is_deterministic_labelled_and_legend_clear(tmp_path: Path) -> None:
    # matplotlib's own geometry: the legend's box does not meet the axes' box.
    from strata13.compile.ages import plot as agemodel_plot

    ties = [
        Tie(0.0, 181.0, 0.3, "radiometric"),
        Tie(30.0, 184.5, 0.4, "chart boundary", "k"),
        Tie(30.0, 186.0, 0.3, "radiometric"),
        Tie(80.0, 190.0, 0.5, "radiometric"),
    ]
    pos = np.linspace(-5, 85, 60)
    r = draw_section(pos, ties, "depth", 300, 1, allow_extrapolation=True)
    s = summarise(r.draws)
    paths = [
        agemodel_plot.plot_section(
            ties, pos, s, "depth", "Core B (invented)", tmp_path / f"{i}.png", flags=r.flags
        )
        for i in (1, 2)
    ]
    assert [p.suffix for p in paths[0]] == [".png", ".svg", ".pdf"]
    first = paths[0][0].read_bytes()
    assert first[:8] == b"\x89PNG\r\n\x1a\n"
    for a, b in zip(paths[0], paths[1], strict=True):  # the same input, the same bytes
        assert a.read_bytes() == b.read_bytes()
    fig = agemodel_plot.figure(ties, pos, s, "depth", "Core B", flags=r.flags)
    ax = fig.axes[0]
    assert ax.get_xlabel() == "Age (Ma)" and ax.get_ylabel() == "Depth (m)"
    assert ax.yaxis_inverted() and ax.xaxis_inverted()  # depth down, older to the left
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    legend = fig.legends[0].get_window_extent(renderer)
    assert not legend.overlaps(ax.get_tightbbox(renderer))


def test_agemodel_imports_no_matplotlib() -> None:
    # DESIGN.md: heavy libraries are imported lazily.
    code = (
        "import sys; import strata13.compile.ages.agemodel, strata13.compile.ages.plot; "
        "print('matplotlib' in sys.modules)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
