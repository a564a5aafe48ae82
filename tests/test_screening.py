"""Diagenetic screening: rule files, censored values, scope, covariance statistics, policy.

Thresholds are checked against REFERENCE_VALUES.md §5 (each test names the source and its
confidence); the statistics against scipy.stats and closed forms.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import stats as sps
from strata13.compile.screening import plots
from strata13.compile.screening.evaluate import evaluate, summarise
from strata13.compile.screening.rules import (
    ATOMIC_MASS,
    Covariance,
    RatioLimit,
    ValueLimit,
    load_rules,
    parse_canonical,
    parse_rules,
)
from strata13.compile.screening.stats import effective_n, lag1_autocorrelation

from strata13.errors import ConfigError

HEADER = '[ruleset]\nname = "t"\nversion = "1"\ndescription = "test rules"\n'
COMMON = (
    'description = "Rule of thumb for a test."\ncitation = "common practice"\nconfidence = "test"\n'
)


def rule(name: str, body: str, severity: str = "fail", scope: str = "") -> str:
    return f'\n[[rule]]\nname = "{name}"\n{COMMON}severity = "{severity}"\n{body}\n' + (
        f"scope = {scope}\n" if scope else ""
    )


def ruleset(*blocks: str):
    return parse_rules(HEADER + "".join(blocks), "test.toml")


def records(n: int | None = None, **cols) -> pa.Table:
    """A record table with defaults for the hierarchy (Early Jurassic bulk carbonate)."""
    n = n if n is not None else len(next(iter(cols.values())))
    base = {
        "record_id": [f"r{i}" for i in range(n)],
        "source_id": ["src"] * n,
        "section_id": ["sec"] * n,
        "age_ma": [183.0] * n,
        "component": ["bulk"] * n,
    }
    base.update(cols)
    return pa.table(base)


def outcomes(table: pa.Table, rs, **kw) -> list[str]:
    res, _, _ = evaluate(table, rs, **kw)
    return res.column("outcome").to_pylist()


def details(table: pa.Table, rs) -> list[str]:
    res, _, _ = evaluate(table, rs)
    return res.column("detail").to_pylist()


MN_BELOW_300 = rule(
    "mn-300", 'kind = "value-limit"\nfield = "mn_ppm"\npass_if = "below"\nlimit = 300\nunit = "ppm"'
)
MN_SR_10 = rule(
    "mn-sr",
    'kind = "ratio-limit"\nnumerator = "mn_ppm"\ndenominator = "sr_ppm"\n'
    'ratio_by = "mass"\npass_if = "below"\nlimit = 10',
)


# --- the shipped defaults --------------------------------------------------------------


def test_default_thresholds_equal_their_cited_values() -> None:
    rs = load_rules()
    spec = {r.name: r.spec for r in rs.rules}
    # Kaufman & Knoll 1995 (REFERENCE_VALUES §5, MEMORY): Mn/Sr < 10, mass ratio
    assert spec["mn-sr-mass"] == RatioLimit("mn_ppm", "sr_ppm", "mass", "below", 10.0)
    # Kaufman & Knoll 1995 (MEMORY): δ18O < −10 ‰ VPDB suspect, so ≥ −10 passes
    assert spec["d18o-floor"] == ValueLimit("d18o_carb", "at_least", -10.0, "‰")
    # Hu et al., Late Ordovician bulk carbonate (VERIFIED): Mn < 300, Sr > 300, Fe < 1000 ppm
    assert spec["mn-bulk"] == ValueLimit("mn_ppm", "below", 300.0, "ppm")
    assert spec["sr-bulk"] == ValueLimit("sr_ppm", "above", 300.0, "ppm")
    assert spec["fe-bulk"] == ValueLimit("fe_ppm", "below", 1000.0, "ppm")
    # Brand & Veizer 1980; Veizer et al. 1999 (MEMORY, low): Mn < ~250, Sr > ~400 ppm
    assert spec["brachiopod-mn"] == ValueLimit("mn_ppm", "below", 250.0, "ppm")
    assert spec["brachiopod-sr"] == ValueLimit("sr_ppm", "above", 400.0, "ppm")
    assert rs.rule("brachiopod-mn").scope.component == ("brachiopod",)
    # Allan & Matthews 1982 (VERIFIED, qualitative); r² ≳ 0.4–0.5 common practice (MEMORY low)
    cov = spec["d13c-d18o-covariance"]
    assert isinstance(cov, Covariance) and 0.4 <= cov.min_r**2 <= 0.5 and cov.alpha == 0.05
    assert rs.rule("d13c-d18o-covariance").severity == "warn"
    assert "common practice" in rs.rule("d13c-d18o-covariance").citation
    # cements excluded: common practice
    assert rs.rule("no-cements").citation == "common practice"
    assert spec["no-cements"].excluded == ("cement",)
    for r in rs.rules:
        # base of the Cambrian 538.8 Ma, ICS chart v2024/12 (REFERENCE_VALUES §6, VERIFIED)
        assert r.scope.age_max_ma == 538.8
        assert "rule of thumb" in r.description.lower()
        assert r.citation and r.confidence
    assert "Kaufman & Knoll 1995" in rs.rule("mn-sr-mass").citation
    assert "common practice" in rs.rule("mn-sr-mass").description


def test_default_file_says_rules_of_thumb_and_hash_is_stable() -> None:
    from strata13.compile.screening.rules import default_rules_path

    text = default_rules_path().read_text(encoding="utf-8")
    assert "RULES OF THUMB" in text and "judgement" in text
    a, b = load_rules(), load_rules()
    assert a.sha256 == b.sha256 and len(a.sha256) == 64
    # the canonical text rebuilds the same rule set (a store keeps it)
    again = parse_canonical(a.canonical_text())
    assert again.sha256 == a.sha256 and again.canonical() == a.canonical()


def test_hash_ignores_comments_and_key_order_but_not_values() -> None:
    one = ruleset(MN_BELOW_300)
    reordered = HEADER + (
        '\n# a comment\n[[rule]]\nunit = "ppm"\nlimit = 300.0\n'
        'pass_if = "below"\nfield = "mn_ppm"\nkind = "value-limit"\n'
        'severity = "fail"\n' + COMMON + 'name = "mn-300"\n'
    )
    assert parse_rules(reordered).sha256 == one.sha256
    assert ruleset(MN_BELOW_300.replace("300", "301")).sha256 != one.sha256


# --- thresholds and the behaviour at the limit -----------------------------------------


@pytest.mark.parametrize(
    "pass_if,value,expected",
    [
        ("below", 299.9, "pass"),
        ("below", 300.0, "fail"),  # at the limit: fails
        ("at_most", 300.0, "pass"),
        ("at_most", 300.1, "fail"),  # at the limit: passes
        ("above", 300.0, "fail"),
        ("above", 300.1, "pass"),  # at the limit: fails
        ("at_least", 300.0, "pass"),
        ("at_least", 299.9, "fail"),  # at the limit: passes
    ],
)
def test_behaviour_exactly_at_the_limit(pass_if: str, value: float, expected: str) -> None:
    # the comparison name states what passes (rules.py PASS_IF)
    rs = ruleset(
        rule(
            "sr",
            f'kind = "value-limit"\nfield = "sr_ppm"\npass_if = "{pass_if}"\n'
            'limit = 300\nunit = "ppm"',
        )
    )
    assert outcomes(records(sr_ppm=[value]), rs) == [expected]


def test_mn_sr_ten_exactly_fails_and_d18o_minus_ten_passes() -> None:
    # Kaufman & Knoll 1995 (MEMORY): "Mn/Sr < 10" passes, so exactly 10 fails;
    # "δ18O < −10 suspect", so exactly −10 passes
    rs = load_rules()
    t = records(mn_ppm=[3000.0, 2999.0], sr_ppm=[300.0, 300.0], d18o_carb=[-10.0, -10.01])
    res, _, _ = evaluate(t, rs)
    got = {(r["rule"], r["record_id"]): r["outcome"] for r in res.to_pylist()}
    assert got[("mn-sr-mass", "r0")] == "fail" and got[("mn-sr-mass", "r1")] == "pass"
    assert got[("d18o-floor", "r0")] == "pass" and got[("d18o-floor", "r1")] == "fail"


def test_limit_units_are_converted_to_the_stored_unit() -> None:
    # 0.03 % = 300 ppm (1 % = 10 000 ppm, mass fraction)
    rs = ruleset(
        rule(
            "mn-pct",
            'kind = "value-limit"\nfield = "mn_ppm"\npass_if = "below"\nlimit = 0.03\nunit = "%"',
        )
    )
    assert outcomes(records(mn_ppm=[299.0, 300.0]), rs) == ["pass", "fail"]


def test_mn_sr_mass_and_molar_worked_example() -> None:
    # Mn 500 ppm, Sr 250 ppm: mass ratio 2.00; molar 2 × 87.62 / 54.938 = 3.1898
    # (IUPAC standard atomic weights, from memory: Mn 54.938, Sr 87.62)
    assert ATOMIC_MASS["Mn"] == 54.938 and ATOMIC_MASS["Sr"] == 87.62
    mass = RatioLimit("mn_ppm", "sr_ppm", "mass", "below", 10)
    molar = RatioLimit("mn_ppm", "sr_ppm", "molar", "below", 10)
    assert 500 / 250 * mass.factor == pytest.approx(2.00, abs=1e-12)
    assert 500 / 250 * molar.factor == pytest.approx(3.19, abs=5e-3)
    assert 500 / 250 * molar.factor == pytest.approx(2 * 87.62 / 54.938, rel=1e-12)
    t = records(mn_ppm=[500.0], sr_ppm=[250.0])
    body = 'kind = "ratio-limit"\nnumerator = "mn_ppm"\ndenominator = "sr_ppm"\n'
    rs = ruleset(
        rule("mass", body + 'ratio_by = "mass"\npass_if = "at_most"\nlimit = 2.0'),
        rule("molar-hi", body + 'ratio_by = "molar"\npass_if = "at_most"\nlimit = 3.19'),
        rule("molar-lo", body + 'ratio_by = "molar"\npass_if = "at_most"\nlimit = 3.189'),
    )
    assert outcomes(t, rs) == ["pass", "pass", "fail"]
    d = details(t, rs)
    assert "= 2 " in d[0] and "= 3.19 " in d[1]


# --- censored values -------------------------------------------------------------------


def test_censored_values_are_bounds() -> None:
    # bdl with DL 5 passes "Mn below 300" (the true value is below 5); '<x' is at most x;
    # '>x' at least x; a bound that cannot decide gives untested, with the reason
    rs = ruleset(MN_BELOW_300)
    t = records(
        mn_ppm=[None, 200.0, 400.0, 400.0, 200.0, None, 300.0],
        mn_qualifier=["bdl", "<", "<", ">", ">", "bdl", "<"],
        mn_dl=[5.0, None, None, None, None, None, None],
    )
    got = outcomes(t, rs)
    assert got == ["pass", "pass", "untested", "fail", "untested", "untested", "untested"]
    d = details(t, rs)
    assert "bdl (DL 5)" in d[0]
    assert "cannot decide" in d[2] and "cannot decide" in d[4] and "cannot decide" in d[6]
    assert "no detection limit" in d[5]


def test_censored_ratio_inputs_decide_when_the_bound_does() -> None:
    rs = ruleset(MN_SR_10)
    t = records(
        mn_ppm=[None, 500.0, 500.0, 500.0, 5000.0],
        mn_qualifier=["bdl", None, None, None, None],
        mn_dl=[5.0, None, None, None, None],
        sr_ppm=[100.0, 5.0, 1000.0, 5.0, 300.0],
        sr_qualifier=[None, "<", ">", ">", "<"],
    )
    # bdl/100 ≤ 0.05 pass; 500/(<5) ≥ 100 fail; 500/(>1000) ≤ 0.5 pass;
    # 500/(>5) in [0, 100] undecided; 5000/(<300) ≥ 16.7 fail
    assert outcomes(t, rs) == ["pass", "fail", "pass", "untested", "fail"]


def test_zero_missing_or_mixed_denominator_is_untested_not_a_crash() -> None:
    rs = ruleset(MN_SR_10)
    t = records(
        mn_ppm=[500.0, 500.0, None, 500.0, 0.0],
        sr_ppm=[0.0, None, 250.0, 250.0, 250.0],
        mn_basis=["leach", "leach", "leach", "leach", "leach"],
        sr_basis=["leach", "leach", "leach", "whole-rock", "leach"],
    )
    assert outcomes(t, rs) == ["untested", "untested", "untested", "untested", "pass"]
    d = details(t, rs)
    assert "zero" in d[0] and "no Sr" in d[1] and "no Mn" in d[2] and "different bases" in d[3]
    assert not any("inf" in x or "nan" in x for x in d)


# --- scope -----------------------------------------------------------------------------


def test_scope_outside_is_not_applicable_and_unknown_is_untested() -> None:
    rs = ruleset(
        rule(
            "mn",
            'kind = "value-limit"\nfield = "mn_ppm"\npass_if = "below"\nlimit = 300\nunit = "ppm"',
            scope='{ age_max_ma = 538.8, component = ["bulk", "micrite"] }',
        )
    )
    t = records(
        mn_ppm=[100.0] * 5,
        age_ma=[183.0, 600.0, None, 183.0, 600.0],
        component=["bulk", "bulk", "bulk", "brachiopod", None],
    )
    # in scope; older than the Cambrian base; no age; other component; outside wins over unknown
    assert outcomes(t, rs) == [
        "pass",
        "not applicable",
        "untested",
        "not applicable",
        "not applicable",
    ]
    d = details(t, rs)
    assert "no age_ma" in d[2] and "component" in d[3]


def test_scope_vocabulary_is_checked_with_did_you_mean() -> None:
    with pytest.raises(ConfigError, match="brachiopd.*Did you mean 'brachiopod'") as e:
        ruleset(
            rule(
                "xy",
                'kind = "allowed-values"\nfield = "component"\nallowed = ["bulk"]',
                scope='{ component = ["brachiopd"] }',
            )
        )
    assert "'xy'" in str(e.value)


# --- overall policy --------------------------------------------------------------------


def test_overall_policy() -> None:
    rs = ruleset(
        MN_BELOW_300,
        rule(
            "sr",
            'kind = "value-limit"\nfield = "sr_ppm"\npass_if = "above"\nlimit = 300\nunit = "ppm"',
            severity="warn",
        ),
    )
    t = records(
        mn_ppm=[100.0, 500.0, 100.0, None, None],
        sr_ppm=[500.0, 500.0, 100.0, 500.0, None],
        age_ma=[183.0, 183.0, 183.0, 183.0, 183.0],
    )
    _, overall, _ = evaluate(t, rs)
    # passes both; fails a fail rule; breaks only a warn rule (stored as warn, not pass);
    # one tested pass beside one untested; nothing tested
    assert overall.column("screen").to_pylist() == ["pass", "fail", "warn", "pass", "untested"]
    assert overall.column("record_id").to_pylist() == t.column("record_id").to_pylist()
    res, _, _ = evaluate(t, rs)
    assert res.to_pylist()[7]["outcome"] == "warn"  # sr rule, record r2


def test_untested_passes_option() -> None:
    scoped = rule(
        "old",
        'kind = "value-limit"\nfield = "mn_ppm"\npass_if = "below"\nlimit = 300\nunit = "ppm"',
        scope="{ age_min_ma = 300.0 }",
    )
    rs = ruleset(MN_BELOW_300, scoped)
    t = records(mn_ppm=[None, None, 500.0], age_ma=[183.0, 400.0, 183.0])
    strict = evaluate(t, rs).overall.column("screen").to_pylist()
    lenient = evaluate(t, rs, untested_passes=True).overall.column("screen").to_pylist()
    assert strict == ["untested", "untested", "fail"]
    assert lenient == ["pass", "pass", "fail"]
    only_na = ruleset(scoped)
    # no applicable rule at all stays untested even when untested counts as passed
    got = evaluate(records(mn_ppm=[1.0]), only_na, untested_passes=True).overall
    assert got.column("screen").to_pylist() == ["untested"]


# --- categorical -----------------------------------------------------------------------


def test_allowed_and_excluded_values() -> None:
    rs = ruleset(
        rule("no-cement", 'kind = "allowed-values"\nfield = "component"\nexcluded = ["cement"]'),
        rule(
            "pres",
            'kind = "allowed-values"\nfield = "preservation"\nallowed = ["good", "excellent"]',
            severity="warn",
        ),
    )
    t = records(component=["bulk", "cement", None], preservation=["Good ", "poor", None])
    assert outcomes(t, rs) == ["pass", "fail", "untested", "pass", "warn", "untested"]


# --- covariance ------------------------------------------------------------------------


def cov_rule(**kw) -> str:
    body = 'kind = "covariance"\n' + "\n".join(
        f"{k} = {str(v).lower() if isinstance(v, bool) else repr(v).replace(chr(39), chr(34))}"
        for k, v in kw.items()
    )
    return rule("cov", body, severity="warn")


def test_covariance_r_and_p_equal_scipy() -> None:
    rng = np.random.default_rng(7)
    n = 40
    x = rng.normal(-4, 1, n)
    y = 0.6 * x + rng.normal(0, 0.8, n)
    t = records(d18o_carb=x, d13c_carb=y, position_m=rng.permutation(n).astype(float))
    ref = sps.pearsonr(x, y)
    _, _, g = evaluate(t, ruleset(cov_rule(lag1_correction=False)))
    row = g.to_pylist()[0]
    assert row["n"] == n and row["n_eff"] == n
    assert row["r"] == pytest.approx(ref.statistic, rel=1e-10)
    assert row["r2"] == pytest.approx(ref.statistic**2, rel=1e-10)
    assert row["p"] == pytest.approx(ref.pvalue, rel=1e-8)


def test_covariance_p_equals_scipy_when_n_eff_equals_n() -> None:
    # an order in which the two series' lag-1 autocorrelations have opposite signs: the
    # correction leaves n_eff = n, so p must be pearsonr's p
    x = np.array([1.0, -1.0] * 10) + np.linspace(0, 0.5, 20)
    y = np.linspace(-2, 2, 20) + 0.9 * x
    assert lag1_autocorrelation(x) * lag1_autocorrelation(y) <= 0
    t = records(d18o_carb=x, d13c_carb=y, position_m=np.arange(20.0))
    row = evaluate(t, ruleset(cov_rule())).groups.to_pylist()[0]
    ref = sps.pearsonr(x, y)
    assert row["n_eff"] == 20
    assert row["r"] == pytest.approx(ref.statistic, rel=1e-10)
    assert row["p"] == pytest.approx(ref.pvalue, rel=1e-8)


def test_n_eff_is_smaller_for_an_autocorrelated_series() -> None:
    # AR(1) with ρ = 0.8 in both δ series, ordered by position (Bretherton et al. 1999,
    # from memory: n_eff = n (1 − ρ1)/(1 + ρ1), ρ1 = ρx·ρy ≈ 0.64 → n_eff ≈ 0.22 n)
    rng = np.random.default_rng(3)
    n = 400

    def ar1(rho: float) -> np.ndarray:
        e = rng.normal(0, 1, n)
        out = np.empty(n)
        out[0] = e[0]
        for i in range(1, n):
            out[i] = rho * out[i - 1] + e[i]
        return out

    x = ar1(0.8)
    y = 0.5 * x + ar1(0.8)
    t = records(d18o_carb=x, d13c_carb=y, position_m=np.arange(n, dtype=float))
    row = evaluate(t, ruleset(cov_rule())).groups.to_pylist()[0]
    assert row["rho1_x"] == pytest.approx(lag1_autocorrelation(x), rel=1e-9)
    assert row["rho1_x"] == pytest.approx(0.8, abs=0.1)
    assert row["n_eff"] < n / 2
    rho = row["rho1_x"] * row["rho1_y"]
    assert row["n_eff"] == pytest.approx(n * (1 - rho) / (1 + rho), rel=1e-9)
    # the p is larger than the uncorrected one
    assert row["p"] >= sps.pearsonr(x, y).pvalue
    # the same records in shuffled position order lose the correction
    shuffled = evaluate(
        t.set_column(
            t.column_names.index("position_m"),
            "position_m",
            pa.array(rng.permutation(n).astype(float)),
        ),
        ruleset(cov_rule()),
    ).groups.to_pylist()[0]
    assert shuffled["n_eff"] > 0.8 * n


def test_effective_n_closed_form() -> None:
    # n (1 − ρ)/(1 + ρ): 100 × 0.5/1.5 = 33.33; ρ ≤ 0 leaves n unchanged
    assert effective_n(np.array([100.0]), np.array([0.5]))[0] == pytest.approx(100 / 3)
    assert effective_n(np.array([100.0]), np.array([-0.3]))[0] == 100.0


def test_small_groups_are_untested_and_strong_covariance_warns() -> None:
    x = np.linspace(-6, -2, 12)
    y = 0.8 * x + np.array([0.05, -0.05] * 6)
    t = records(
        d18o_carb=np.r_[x, x[:5]],
        d13c_carb=np.r_[y, y[:5]],
        section_id=["a"] * 12 + ["b"] * 5,
        position_m=np.r_[np.arange(12.0), np.arange(5.0)],
    )
    res, overall, g = evaluate(t, ruleset(cov_rule(min_n=10)))
    by_group = {r["section_id"]: r for r in g.to_pylist()}
    assert by_group["a"]["outcome"] == "warn" and by_group["b"]["outcome"] == "untested"
    got = res.column("outcome").to_pylist()
    assert got[:12] == ["warn"] * 12 and got[12:] == ["untested"] * 5
    assert "fewer than min_n = 10" in res.column("detail").to_pylist()[12]
    # a warning is kept in the results and stored as warn, not fail
    assert overall.column("screen").to_pylist()[:12] == ["warn"] * 12


def test_groups_by_source_section_and_unit() -> None:
    rng = np.random.default_rng(1)
    n = 24
    t = records(
        d18o_carb=rng.normal(size=n),
        d13c_carb=rng.normal(size=n),
        lithostrat_unit=["A"] * 12 + ["B"] * 11 + [None],
        source_id=["s1"] * n,
        position_m=np.arange(float(n)),
    )
    g = evaluate(t, ruleset(cov_rule(group_by="section-unit", min_n=5))).groups.to_pylist()
    assert sorted((r["lithostrat_unit"], r["n"]) for r in g) == [("A", 12), ("B", 11)]
    assert g[0]["group"] == "s1/sec/A"
    # the same section name in two sources is two groups (datums differ between sources)
    t2 = records(
        d18o_carb=rng.normal(size=n),
        d13c_carb=rng.normal(size=n),
        source_id=["s1"] * 12 + ["s2"] * 12,
        position_m=np.arange(float(n)),
    )
    assert evaluate(t2, ruleset(cov_rule(min_n=5))).groups.num_rows == 2


def test_moving_window_matches_brute_force() -> None:
    rng = np.random.default_rng(5)
    n = 60
    pos = np.round(rng.uniform(0, 30, n), 1)
    sec = np.array(["a", "b"])[rng.integers(0, 2, n)]
    x, y = rng.normal(size=n), rng.normal(size=n)
    t = records(d18o_carb=x, d13c_carb=y, position_m=pos, section_id=list(sec))
    g = evaluate(
        t, ruleset(cov_rule(group_by="window", window_m=8.0, min_n=4, lag1_correction=False))
    ).groups.to_pylist()
    assert len(g) == n
    for row in g:
        m = (sec == row["section_id"]) & (np.abs(pos - row["centre_m"]) <= 4.0)
        assert row["n"] == m.sum()
        if m.sum() >= 3:
            assert row["r"] == pytest.approx(np.corrcoef(x[m], y[m])[0, 1], rel=1e-8, abs=1e-10)


# --- never changes the input -----------------------------------------------------------


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.lists(
        st.tuples(
            st.floats(-15, 10) | st.none(),
            st.floats(-20, 5) | st.none(),
            st.floats(0, 600) | st.none(),
            st.floats(0, 3000) | st.none(),
            st.floats(0, 2000) | st.none(),
            st.sampled_from(["<", ">", "bdl", None]),
            st.floats(-90, 90),
            st.sampled_from(["bulk", "cement", "brachiopod", None]),
            st.floats(0, 50),
        ),
        min_size=0,
        max_size=40,
    )
)
def test_screening_never_changes_the_records(rows) -> None:
    cols = list(zip(*rows, strict=True)) if rows else [[] for _ in range(9)]
    n = len(rows)
    t = pa.table(
        {
            "record_id": pa.array([f"r{i}" for i in range(n)], pa.string()),
            "source_id": pa.array(["s"] * n, pa.string()),
            "section_id": pa.array(["a" if i % 2 else "b" for i in range(n)], pa.string()),
            "d13c_carb": pa.array(cols[0], pa.float64()),
            "d18o_carb": pa.array(cols[1], pa.float64()),
            "age_ma": pa.array(cols[2], pa.float64()),
            "mn_ppm": pa.array(cols[3], pa.float64()),
            "sr_ppm": pa.array(cols[4], pa.float64()),
            "mn_qualifier": pa.array(cols[5], pa.string()),
            "lat": pa.array(cols[6], pa.float64()),
            "component": pa.array(cols[7], pa.string()),
            "position_m": pa.array(cols[8], pa.float64()),
        }
    )
    snapshot = pa.Table.from_pylist(t.to_pylist(), schema=t.schema)
    df = t.to_pandas()
    before = df.copy(deep=True)
    rs = load_rules()
    res, overall, _ = evaluate(t, rs)
    res2, overall2, _ = evaluate(df, rs)
    assert t.equals(snapshot)  # δ values, ages, coordinates, record count: all unchanged
    pd.testing.assert_frame_equal(df, before)
    assert overall.num_rows == n and res.num_rows == n * len(rs.rules)
    assert res.equals(res2) and overall.equals(overall2)
    assert set(res.column("outcome").to_pylist()) <= {
        "pass",
        "fail",
        "warn",
        "untested",
        "not applicable",
    }
    assert all(d for d in res.column("detail").to_pylist())


# --- bad rule files --------------------------------------------------------------------


@pytest.mark.parametrize(
    "text,pattern",
    [
        (
            rule(
                "ab",
                'kind = "value-limit"\nfield = "mn_pmm"\npass_if = "below"\nlimit = 3\n'
                'unit = "ppm"',
            ),
            r"rule 'ab'.*'mn_pmm'.*Did you mean 'mn_ppm'",
        ),
        (
            rule(
                "ab",
                'kind = "value-limit"\nfield = "mn"\npass_if = "below"\nlimit = 3\nunit = "ppm"',
            ),
            r"rule 'ab'.*Did you mean 'mn_ppm' \(the stored column\)",
        ),
        (rule("ab", 'kind = "treshold"\nfield = "mn_ppm"'), r"rule 'ab'.*kind = 'treshold'"),
        (
            rule(
                "ab",
                'kind = "value-limit"\nfield = "mn_ppm"\npass_if = "below"\nlimt = 3\nunit = "ppm"',
            ),
            r"rule 'ab'.*unknown key 'limt'.*Did you mean 'limit'",
        ),
        (
            rule(
                "ab",
                'kind = "value-limit"\nfield = "mn_ppm"\npass_if = "under"\nlimit = 3\n'
                'unit = "ppm"',
            ),
            r"rule 'ab'.*pass_if = 'under'",
        ),
        (
            rule(
                "ab",
                'kind = "ratio-limit"\nnumerator = "mn_ppm"\ndenominator = "sr_pm"\n'
                'ratio_by = "mass"\npass_if = "below"\nlimit = 10',
            ),
            r"rule 'ab'.*denominator = 'sr_pm'.*Did you mean 'sr_ppm'",
        ),
        (
            rule(
                "ab",
                'kind = "ratio-limit"\nnumerator = "mn_ppm"\ndenominator = "d18o_carb"\n'
                'ratio_by = "mass"\npass_if = "below"\nlimit = 10',
            ),
            r"not a concentration",
        ),
        (
            rule(
                "ab",
                'kind = "value-limit"\nfield = "mn_ppm"\npass_if = "below"\nlimit = 3\nunit = "‰"',
            ),
            r"rule 'ab'.*unit = '‰' does not fit mn_ppm",
        ),
        (MN_BELOW_300 + MN_BELOW_300, r"two rules are named 'mn-300'"),
        (MN_BELOW_300.replace('severity = "fail"', 'severity = "error"'), r"severity = 'error'"),
        (MN_BELOW_300.replace('citation = "common practice"\n', ""), r"rule 'mn-300': citation"),
        (MN_BELOW_300.replace('citation = "common practice"', 'citation = " "'), r"citation"),
        (cov_rule(group_by="window"), r"rule 'cov': window_m is missing"),
    ],
)
def test_bad_rule_files_raise_config_error_naming_the_rule(text: str, pattern: str) -> None:
    with pytest.raises(ConfigError, match=pattern) as e:
        parse_rules(HEADER + text, "bad.toml")
    assert e.value.hint and "bad.toml" in str(e.value)


def test_invalid_toml_names_line_and_rule(tmp_path: Path) -> None:
    text = HEADER + MN_BELOW_300 + rule("broken-one", 'kind = "value-limit"\nfield = mn_ppm')
    p = tmp_path / "rules.toml"
    p.write_text(text, encoding="utf-8")
    line = text.splitlines().index("field = mn_ppm") + 1
    with pytest.raises(
        ConfigError,
        match=rf"rules.toml is not valid TOML at line {line} "
        r"\(in rule 'broken-one'\)",
    ):
        load_rules(p)


def test_missing_rule_file_is_an_instruction_error(tmp_path: Path) -> None:
    from strata13.errors import InputFileError

    with pytest.raises(InputFileError):
        load_rules(tmp_path / "nope.toml")


# --- summary and plots -----------------------------------------------------------------


def test_summary_counts_per_source_section_rule_outcome() -> None:
    rs = ruleset(MN_BELOW_300)
    t = records(
        mn_ppm=[100.0, 500.0, 100.0, None],
        section_id=["a", "a", "b", "b"],
        source_id=["s1", "s1", "s1", "s2"],
    )
    res, _, _ = evaluate(t, rs)
    got = summarise(t, res).to_pylist()
    assert got == [
        {"source_id": "s1", "section_id": "a", "rule": "mn-300", "outcome": "fail", "n": 1},
        {"source_id": "s1", "section_id": "a", "rule": "mn-300", "outcome": "pass", "n": 1},
        {"source_id": "s1", "section_id": "b", "rule": "mn-300", "outcome": "pass", "n": 1},
        {"source_id": "s2", "section_id": "b", "rule": "mn-300", "outcome": "untested", "n": 1},
    ]
    # shuffled results (not in record order) give the same counts
    shuffled = res.take(pa.array([3, 1, 0, 2]))
    assert summarise(t, shuffled).to_pylist() == got


def test_cross_plots_one_png_per_section(tmp_path: Path) -> None:
    rng = np.random.default_rng(2)
    n = 30
    t = records(
        d18o_carb=rng.normal(-4, 2, n),
        d13c_carb=rng.normal(1, 1, n),
        section_id=["Sect/../A b"] * 15 + ["B"] * 15,
        position_m=np.arange(float(n)),
        mn_ppm=np.r_[[5000.0] * 3, [100.0] * 27],
        sr_ppm=[300.0] * n,
    )
    rs = ruleset(MN_SR_10, cov_rule(min_n=5))
    res, _, g = evaluate(t, rs)
    files = plots.cross_plots(t, res, g, tmp_path / "plots")
    assert len(files) == 6  # two sections, each as PNG, SVG and PDF
    assert sorted({f.suffix for f in files}) == [".pdf", ".png", ".svg"]
    files = [f for f in files if f.suffix == ".png"]
    for f in files:
        assert f.parent == tmp_path / "plots" and f.suffix == ".png"
        assert f.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        assert "/" not in f.name and ".." not in f.name
    assert plots.safe_name("s", "a/b") != plots.safe_name("s", "a-b")


def test_pandas_input_gives_the_same_results() -> None:
    t = records(mn_ppm=[100.0, 500.0], sr_ppm=[10.0, 20.0])
    a = evaluate(t, load_rules())
    b = evaluate(t.to_pandas(), load_rules())
    assert a.results.equals(b.results) and a.overall.equals(b.overall)
