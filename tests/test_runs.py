"""In-house runs corrected: drift within material, check materials judged, run precision,
the accepted values a run uses and their value sets, reference rows and their ranges,
repeated analyses of one sample across runs, and the acid step of a dolostone.

Every number is compared with something outside the code: a closed form worked here,
numpy.linalg.lstsq or statsmodels OLS on the dummy-coded design, pandas' grouped variances,
or the published values of REFERENCE_VALUES.md §1 (quoted where used). Sheets built here
are invented (a fictional lab, section and values).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from strata13.compile import api
from strata13.compile.check.tables import record_id, run_key
from strata13.compile.harmonise import runs
from strata13.schemas.materials import MaterialValue, shipped_materials, sigma_1s

from strata13.errors import DomainError, ValidationFailed
from tests.conftest import run_cli as run
from tests.conftest import tree_bytes

# Published values (REFERENCE_VALUES.md §1), with their sources:
IAEA603 = (2.460, -2.370)  # IAEA-603 characterization paper, k = 1: ±0.010 / ±0.040
NBS18_D13C = -5.014  # IAEA NBS 18 sheet
NBS18_D18O_CIAAW = 0.97001 * 7.20 - 29.99  # +7.20 ‰ VSMOW (CIAAW) through IUPAC: −23.006
NBS18_D18O_IAEA = -23.2  # IAEA NBS 18 sheet, SD 0.1
CO8 = (-5.764, -22.7)  # IAEA-CO-8 sheet; δ13C SD 0.032
CO8_D13C_SD = 0.032
CO9_D13C = -47.321  # IAEA-CO-9 sheet (BaCO3)
USGS44_D13C = -42.08  # Qi et al. 2021, single-anchor VPDB value
ACCEPTED = {
    "d13c": {"IAEA-603": IAEA603[0], "NBS-18": NBS18_D13C, "IAEA-CO-8": CO8[0]},
    "d18o": {"IAEA-603": IAEA603[1], "NBS-18": NBS18_D18O_CIAAW, "IAEA-CO-8": CO8[1]},
}
ORV = "orvanne-lab-2024"


# --- 1. drift, fitted within material ------------------------------------------------------

# Two materials at different mean run positions: A early (and once at the end), B late.
DRIFT_POS = np.array([1.0, 2.0, 3.0, 40.0, 20.0, 21.0, 38.0, 39.0])
DRIFT_MAT = ["A", "A", "A", "A", "B", "B", "B", "B"]
DRIFT_BASE = {"A": 2.0, "B": -5.0}


def test_an_exact_drift_is_recovered_exactly_where_a_pooled_fit_is_biased() -> None:
    b = 0.002  # ‰ per position, exact
    y = np.array([DRIFT_BASE[m] for m in DRIFT_MAT]) + b * DRIFT_POS
    fit = runs.fit_drift(DRIFT_POS, y, DRIFT_MAT)
    assert fit.slope == pytest.approx(b, abs=1e-15)
    assert fit.intercepts == pytest.approx(DRIFT_BASE, abs=1e-12)
    assert fit.sigma == pytest.approx(0.0, abs=1e-12)  # an exact line leaves no residual
    # the fit this replaces: offsets from each material's mean against position (closed
    # form: b × within-material Sxx / total Sxx), biased here by more than 4 %
    offsets = y - np.array([y[np.array(DRIFT_MAT) == m].mean() for m in DRIFT_MAT])
    pooled = np.polyfit(DRIFT_POS, offsets, 1)[0]
    assert abs(pooled / b - 1) > 0.04
    corrected = runs.remove_drift(y, DRIFT_POS, fit.slope)
    for m in DRIFT_BASE:
        assert np.ptp(corrected[np.array(DRIFT_MAT) == m]) < 1e-12


def test_drift_fit_agrees_with_lstsq_and_statsmodels_on_the_dummy_coded_design() -> None:
    rng = np.random.default_rng(8)
    pos = np.concatenate([DRIFT_POS, [5.0, 25.0, 30.0]])
    mats = [*DRIFT_MAT, "C", "C", "C"]
    base = {**DRIFT_BASE, "C": -20.0}
    y = np.array([base[m] for m in mats]) + 0.0013 * pos + rng.normal(0, 0.03, len(pos))
    fit = runs.fit_drift(pos, y, mats)
    # the design: one indicator column per material (its intercept) and the position
    names = sorted(base)
    x = np.column_stack([[float(m == n) for m in mats] for n in names] + [pos])
    coef, *_ = np.linalg.lstsq(x, y, rcond=None)
    assert fit.slope == pytest.approx(coef[-1], abs=1e-12)
    assert fit.intercepts == pytest.approx(dict(zip(names, coef[:-1], strict=True)), abs=1e-12)
    ols = sm.OLS(y, x).fit()  # statsmodels: the slope's standard error
    assert fit.sigma == pytest.approx(ols.bse[-1], rel=1e-9)


def test_drift_needs_a_material_measured_at_two_positions() -> None:
    with pytest.raises(DomainError, match="two or more run positions"):
        runs.fit_drift(np.array([1.0, 2.0, 3.0]), np.array([0.0, 1.0, 2.0]), ["A", "B", "C"])


# --- 2. checks and their tolerance -------------------------------------------------------


def test_material_one_sigma_from_the_stated_uncertainty_and_its_kind() -> None:
    def row(material: str, value_set: str) -> MaterialValue:
        return next(
            m for m in shipped_materials() if (m.material, m.value_set) == (material, value_set)
        )

    # IAEA-CO-8 sheet: δ13C 0.032 (SD) is 1σ; NBS 19: exact by definition, 0
    assert sigma_1s(row("IAEA-CO-8", "IAEA sheet"), "d13c") == 0.032
    assert sigma_1s(row("NBS-19", "VPDB definition"), "d13c") == 0.0
    # CIAAW NBS 18 δ18O +7.20(3) ‰ VSMOW, k = 2: 1σ 0.015 ‰, × 0.97001 onto VPDB (IUPAC)
    got = sigma_1s(row("NBS-18", "CIAAW 2014"), "d18o", "IUPAC-2014")
    assert got == pytest.approx(0.015 * 0.97001, abs=1e-12)
    # IAEA-610: no uncertainty in the table — unknown, never 0
    assert sigma_1s(row("IAEA-610", "IAEA 2021"), "d13c") is None


def _checked_run(offset: float, setting: float | None = None) -> runs.RunQC:
    """A run normalised exactly to IAEA-603 and NBS-18 (slope 1, intercept 0) with the
    check IAEA-CO-8 measured twice, 0.01 ‰ either side of ``offset`` ‰ off its accepted
    δ13C."""
    anchors = {"IAEA-603": ([IAEA603[0]], IAEA603[0]), "NBS-18": ([NBS18_D13C], NBS18_D13C)}
    checks = {"IAEA-CO-8": ([CO8[0] + offset - 0.01, CO8[0] + offset + 0.01], CO8[0])}
    _, _, qc = runs.normalise_run(
        "c1",
        np.array([0.0]),
        anchors,
        checks,
        check_sigmas={"IAEA-CO-8": CO8_D13C_SD},
        check_setting=setting,
    )
    return qc


def test_a_check_off_by_0_291_permil_warns_with_its_offset_and_tolerance() -> None:
    qc = _checked_run(0.291)
    assert qc.slope == pytest.approx(1.0, abs=1e-12)
    assert qc.intercept == pytest.approx(0.0, abs=1e-12)
    # precision by hand: the check's two measurements ±0.01 about their mean, one degree
    # of freedom: SD = √(2 × 0.01² / 1) = 0.01 × √2
    assert qc.precision_1s == pytest.approx(0.01 * np.sqrt(2), abs=1e-12)
    (check,) = qc.checks
    # tolerance 3 × √(0.032² + (0.01√2)²) = 0.1050 ‰ (the common-practice rule)
    tol = 3 * np.sqrt(CO8_D13C_SD**2 + 2 * 0.01**2)
    assert check.tolerance == pytest.approx(tol, abs=1e-12)
    assert check.offset == pytest.approx(0.291, abs=1e-12) and check.n == 2
    assert check.status == "warn" and qc.check_status == "warn"
    assert any("IAEA-CO-8 is +0.291 ‰" in w and f"±{tol:.3f}" in w for w in qc.warnings)
    assert "+0.291" in check.describe() and f"±{tol:.3f}" in check.describe()
    # inside the tolerance it passes; the store's setting replaces the rule
    assert _checked_run(0.10).check_status == "pass"
    wide = _checked_run(0.291, setting=0.3)
    assert wide.check_status == "pass" and wide.checks[0].tolerance == 0.3


def test_a_check_whose_uncertainty_is_unknown_is_untested_not_passed() -> None:
    anchors = {"IAEA-603": ([2.46], 2.46), "NBS-18": ([-5.014], -5.014)}
    _, _, qc = runs.normalise_run(
        "u1",
        np.array([0.0]),
        anchors,
        {"IAEA-610": ([-9.0], -9.109)},
        check_sigmas={"IAEA-610": None},
    )
    assert qc.check_status == "untested" and "states no uncertainty" in qc.checks[0].basis
    # a known 1σ but no replicates: the run's precision is unknown, so untested again
    _, _, qc = runs.normalise_run(
        "u2",
        np.array([0.0]),
        anchors,
        {"IAEA-CO-8": ([-5.7], CO8[0])},
        check_sigmas={"IAEA-CO-8": 0.032},
    )
    assert qc.precision_1s is None and qc.check_status == "untested"
    assert "no replicated reference material" in qc.checks[0].basis


def test_the_check_tolerance_setting_is_checked_and_hashed_on_its_own() -> None:
    from strata13.compile.derive.settings import (
        Settings,
        check_tolerance_permil,
        check_tolerance_policy,
    )

    from strata13.errors import OptionError

    base = Settings()
    assert base.check_tolerance == "from-uncertainty" and check_tolerance_permil(base) is None
    other = base.but(check_tolerance=check_tolerance_policy("0.20"))
    assert check_tolerance_permil(other) == 0.2
    changed = {k for k, h in base.hashes().items() if other.hashes()[k] != h}
    assert changed == {"check_tolerance"} and base.hash() != other.hash()
    for bad in ("0", "-0.1", "wide", "6"):
        with pytest.raises(OptionError):
            check_tolerance_policy(bad)


# --- sheets for the store tests ------------------------------------------------------------

MAPPING = """
[source]
id = "{sid}"
citation = "Brannock Isotope Laboratory: run sheet {sid} (invented)"
kind = "in-house"
[table]
file = "{sid}.csv"
[columns]
"Run" = "run_id"
"Line" = "run_position"
"Identifier" = "sample_id"
"Height (m)" = {{ field = "position", unit = "m" }}
"d13C raw" = {{ field = "d13c_carb", scale = "raw" }}
{d18o_column}{extra_columns}
[run]
{run_block}
[constants]
component = "micrite"
{constants}
[[sections]]
id = "callow-edge"
locality = "callow"
position_kind = "height"
[[localities]]
id = "callow"
lat = 46.2
lon = 12.9
"""


def run_sheet(
    folder: Path,
    sid: str,
    rows: list[list[object]],
    run_block: str = 'anchors = ["IAEA-603", "NBS-18"]\nchecks = ["IAEA-CO-8"]',
    extra: dict[str, str] | None = None,
    constants: str = 'lithology = "limestone"',
    with_d18o: bool = True,
) -> Path:
    """An invented run sheet (Run, Line, Identifier, Height, d13C raw[, d18O raw], extra
    columns) and its mapping; returns the mapping's path."""
    folder.mkdir(parents=True, exist_ok=True)
    extra = extra or {}
    head = ["Run", "Line", "Identifier", "Height (m)", "d13C raw"]
    head += ["d18O raw"] if with_d18o else []
    head += list(extra)
    body = [",".join("" if v is None else str(v) for v in r) for r in rows]
    (folder / f"{sid}.csv").write_text("\n".join([",".join(head), *body]) + "\n", "utf-8")
    text = MAPPING.format(
        sid=sid,
        run_block=run_block,
        constants=constants,
        d18o_column='"d18O raw" = { field = "d18o_carb", scale = "raw" }\n' if with_d18o else "",
        extra_columns="".join(f'"{h}" = {v}\n' for h, v in extra.items()),
    )
    m = folder / f"{sid}.toml"
    m.write_text(text, encoding="utf-8")
    return m


def read(store: Path, sql: str) -> pd.DataFrame:
    con, _ = api.open_store(store).reader()
    try:
        return con.execute(sql).df()
    finally:
        con.close()


def rows_of(store: Path, view: str, sid: str) -> pd.DataFrame:
    assert "'" not in sid
    return read(store, f"SELECT * FROM {view} WHERE source_id = '{sid}' ORDER BY ALL")


def line(true: float, a: float, b: float) -> float:
    """The invented raw value of a true δ for the run line true = a · raw + b."""
    return (true - b) / a


def standard_rows(run_id: str, start: int, a: float, b: float) -> list[list[object]]:
    """IAEA-603 and NBS-18 twice and IAEA-CO-8 once, exactly on the run's line."""
    out: list[list[object]] = []
    for k, m in enumerate(["IAEA-603", "NBS-18", "IAEA-CO-8", "IAEA-603", "NBS-18"]):
        out.append(
            [
                run_id,
                start + k,
                m,
                None,
                line(ACCEPTED["d13c"][m], a, b),
                line(ACCEPTED["d18o"][m], a, b),
            ]
        )
    return out


@pytest.fixture()
def store(tmp_path: Path) -> Path:
    return api.init_store(tmp_path / "st").path


# --- 3. reference rows and the plausible ranges ------------------------------------------


def test_reference_rows_are_exempt_from_the_sample_ranges_and_samples_keep_them(
    store: Path, tmp_path: Path
) -> None:
    # IAEA-CO-9 (−47.321) anchors a run with IAEA-603; USGS44 (−42.08) is its check: all
    # outside the carbonate δ13C sample range −30 … 20 ‰
    block = 'anchors = ["IAEA-603", "IAEA-CO-9"]\nchecks = ["USGS44"]'
    std = [
        ["K1", 1, "IAEA-603", None, 2.40],
        ["K1", 2, "IAEA-CO-9", None, -47.50],
        ["K1", 3, "USGS44", None, -42.25],
        ["K1", 5, "IAEA-603", None, 2.41],
        ["K1", 6, "IAEA-CO-9", None, -47.49],
    ]
    good = run_sheet(
        tmp_path / "a", "brannock-k1", [*std, ["K1", 4, "CE-1", 1.0, 1.20]], block, with_d18o=False
    )
    r = api.ingest(api.open_store(store), None, good)
    assert (r.committed, r.standards) == (1, 5)
    qc = rows_of(store, "run_qc", "brannock-k1")
    assert qc.anchors.tolist() == ["IAEA-603, IAEA-CO-9"]
    # a sample at −47 ‰ is still refused by the carbonate range
    bad = run_sheet(
        tmp_path / "b", "brannock-k2", [*std, ["K1", 4, "CE-1", 1.0, -47.0]], block, with_d18o=False
    )
    with pytest.raises(ValidationFailed) as err:
        api.ingest(api.open_store(store), None, bad)
    assert [(i.cell, i.rule) for i in err.value.report.errors] == [
        ("E7", "plausible carbonate δ13C range")
    ]
    # a reference row keeps a wide sanity bound: 2410 for 2.41 is a unit slip
    slip = [*std[:3], ["K1", 5, "IAEA-603", None, 2410], std[4], ["K1", 4, "CE-1", 1.0, 1.2]]
    with pytest.raises(ValidationFailed) as err:
        api.ingest(
            api.open_store(store),
            None,
            run_sheet(tmp_path / "c", "brannock-k3", slip, block, with_d18o=False),
        )
    assert [(i.cell, i.rule) for i in err.value.report.errors] == [
        ("E5", "plausible reference-material δ range")
    ]


# --- 4. drift and checks in the store ----------------------------------------------------


def drifted(rows: list[list[object]], drift: float) -> list[list[object]]:
    """The rows numbered 1, 2, … in order, each raw δ plus ``drift`` × its position."""
    return [
        [r[0], k, r[2], r[3], *(float(v) + drift * k for v in r[4:])]
        for k, r in enumerate(rows, start=1)
    ]


def test_an_exactly_drifting_run_comes_back_to_the_accepted_values(
    store: Path, tmp_path: Path
) -> None:
    a, b, drift = 1.008, 0.25, 0.002  # invented run line and drift (‰ per position)
    std = standard_rows("D1", 0, a, b)
    samples = [
        ["D1", 0, "CE-1", 1.0, line(1.0, a, b), line(-3.0, a, b)],
        ["D1", 0, "CE-2", 2.0, line(-0.5, a, b), line(-2.5, a, b)],
    ]
    rows = drifted([std[0], std[1], *samples, *std[2:]], drift)
    block = 'anchors = ["IAEA-603", "NBS-18"]\nchecks = ["IAEA-CO-8"]\ndrift = true'
    api.ingest(api.open_store(store), None, run_sheet(tmp_path, "brannock-drift", rows, block))
    qc = rows_of(store, "run_qc", "brannock-drift").set_index("isotope")
    rec = rows_of(store, "records", "brannock-drift").set_index("sample_id")
    for iso, want in (
        ("d13c", {"CE-1": 1.0, "CE-2": -0.5}),
        ("d18o", {"CE-1": -3.0, "CE-2": -2.5}),
    ):
        assert qc.loc[iso, "drift_per_position"] == pytest.approx(drift, abs=1e-9)
        assert qc.loc[iso, "check_status"] == "pass"
        # the check comes back exactly: it was drift-corrected like the anchors
        assert json.loads(qc.loc[iso, "residuals_json"])["IAEA-CO-8"] == pytest.approx(0, abs=1e-8)
        for s, v in want.items():
            assert rec.loc[s, f"{iso}_carb"] == pytest.approx(v, abs=1e-8)


def warned_run(folder: Path, sid: str = "brannock-warn") -> Path:
    """Two runs on invented lines; in W2 the check IAEA-CO-8 reads +0.291 ‰ high in δ13C."""
    w1 = standard_rows("W1", 1, 1.01, 0.3)
    w2 = standard_rows("W2", 1, 0.99, -0.2)
    w2[2][4] = line(CO8[0] + 0.291, 0.99, -0.2)
    samples = [
        ["W1", 6, "CE-1", 1.0, line(1.0, 1.01, 0.3), line(-3.0, 1.01, 0.3)],
        ["W2", 6, "CE-2", 2.0, line(0.5, 0.99, -0.2), line(-2.8, 0.99, -0.2)],
    ]
    return run_sheet(folder, sid, [*w1, *w2, *samples])


def test_a_check_beyond_its_tolerance_warns_at_ingest_and_marks_the_run(
    store: Path, tmp_path: Path
) -> None:
    res = run("ingest", "--map", str(warned_run(tmp_path)), "--store", str(store))
    assert res.returncode == 0, res.stderr
    warned = [ln for ln in res.stderr.splitlines() if ln.startswith("warning:")]
    assert len(warned) == 1 and "run W2 d13c" in warned[0] and "+0.291 ‰" in warned[0]
    qc = rows_of(store, "run_qc", "brannock-warn").set_index(["run_id", "isotope"])
    # the standards sit exactly on their lines, so the precision is 0 and the tolerance is
    # 3 × 0.032 (IAEA-CO-8 sheet, SD): 0.096 ‰
    assert qc.loc[("W2", "d13c"), "check_status"] == "warn"
    detail = qc.loc[("W2", "d13c"), "check_detail"]
    assert "IAEA-CO-8 +0.291 ‰" in detail and "±0.096 ‰" in detail and "common practice" in detail
    assert (qc.check_status.drop(("W2", "d13c")) == "pass").all()
    r = api.ingest(api.open_store(store), None, warned_run(tmp_path), dry_run=True)
    assert len(r.warnings) == 1 and "+0.291" in r.warnings[0]
    # the store's setting overrides the rule: one commit, the run passes, the hash moves
    last_hash = "SELECT settings_hash FROM commits ORDER BY version DESC LIMIT 1"
    h0 = read(store, last_hash).settings_hash.iloc[0]
    res = run("reharmonise", "--check-tolerance", "0.3", "--store", str(store))
    assert res.returncode == 0, res.stderr
    assert "check status of brannock-warn run W2 d13c: warn → pass" in res.stderr
    qc = rows_of(store, "run_qc", "brannock-warn")
    assert set(qc.check_status) == {"pass"}
    assert "the store's check_tolerance setting" in qc.check_detail.iloc[0]
    assert read(store, last_hash).settings_hash.iloc[0] != h0
    bad = run("reharmonise", "--check-tolerance", "wide", "--store", str(store))
    assert bad.returncode == 2 and "from-uncertainty" in bad.stderr


# --- 5. run precision in the records ----------------------------------------------------


def test_run_precision_fills_the_records_precision_and_a_sheets_own_wins(
    demo_store_session: Path, store: Path, tmp_path: Path
) -> None:
    std = rows_of(demo_store_session, "runs", ORV)
    qc = rows_of(demo_store_session, "run_qc", ORV).set_index(["run_id", "isotope"])
    rec = rows_of(demo_store_session, "records", ORV)
    for (rid, iso), q in qc.iterrows():
        # independently: normalise every standard of the run with its stored line, then the
        # pooled within-material variance from pandas (ddof 1), weighted by n − 1
        here = std[std.run_id == rid].copy()
        here["v"] = q.slope * here[f"{iso}_measured"] + q.intercept
        g = here.groupby("material").v.agg(["var", "count"]).query("count > 1")
        pooled = np.sqrt(((g["count"] - 1) * g["var"]).sum() / (g["count"] - 1).sum())
        assert q.precision_1s == pytest.approx(pooled, abs=1e-12)
        got = rec[rec.run_id == rid][f"{iso}_carb_precision"]
        assert len(got) == 6 and np.allclose(got, pooled, atol=1e-12)
        assert rec[rec.run_id == rid][f"{iso}_carb_precision_reported"].isna().all()
    # a sheet that states its own precision keeps it; a blank cell takes the run's
    rows = [*standard_rows("P1", 1, 1.0, 0.0), ["P1", 6, "CE-1", 1.0, 1.0, -3.0, 0.08]]
    rows += [["P1", 7, "CE-2", 2.0, 0.5, -2.9, None]]
    rows = [r + [None] if len(r) == 6 else r for r in rows]
    extra = {"prec13": '{ field = "d13c_carb_precision", unit = "‰" }'}
    api.ingest(api.open_store(store), None, run_sheet(tmp_path, "brannock-prec", rows, extra=extra))
    rec = rows_of(store, "records", "brannock-prec").set_index("sample_id")
    q = rows_of(store, "run_qc", "brannock-prec").set_index("isotope")
    assert rec.loc["CE-1", "d13c_carb_precision"] == 0.08
    assert rec.loc["CE-1", "d13c_carb_precision_reported"] == 0.08
    assert rec.loc["CE-2", "d13c_carb_precision"] == q.loc["d13c", "precision_1s"]
    assert np.isnan(rec.loc["CE-2", "d13c_carb_precision_reported"])
    steps = json.loads(read(store, "SELECT steps_json FROM chains").steps_json.iloc[0])
    rule = next(s for s in steps if s["step"] == "run normalisation")["parameters"]
    assert "a sheet's own precision wins" in rule["precision_rule"]


def test_a_store_from_before_the_precision_split_keeps_the_sheets_precision(
    store: Path, tmp_path: Path
) -> None:
    rows = [*standard_rows("P1", 1, 1.0, 0.0), ["P1", 6, "CE-1", 1.0, 1.0, -3.0, 0.08]]
    rows = [r + [None] if len(r) == 6 else r for r in rows]
    extra = {"prec13": '{ field = "d13c_carb_precision", unit = "‰" }'}
    s = api.open_store(store)
    api.ingest(s, None, run_sheet(tmp_path, "brannock-old", rows, extra=extra))
    with s.writer() as con:  # as a store written before the split: precision as reported
        con.execute("ALTER TABLE lake.analyses DROP COLUMN d13c_carb_precision_reported")
        con.execute("UPDATE lake.analyses SET d13c_carb_precision = 0.08")
    res = run("reharmonise", "--check-tolerance", "0.2", "--store", str(store))  # migrates
    assert res.returncode == 0, res.stderr
    rec = rows_of(store, "records", "brannock-old")
    assert rec.d13c_carb_precision_reported.tolist() == [0.08]
    assert rec.d13c_carb_precision.tolist() == [0.08]


# --- 6. the accepted values a run uses, and their value sets ----------------------------


def d18o_fit(std: pd.DataFrame, nbs18: float) -> dict[str, tuple[float, float]]:
    """run -> δ18O (slope, intercept) by numpy.polyfit of the anchors against IAEA-603
    −2.370 and NBS-18 at ``nbs18``."""
    out = {}
    for rid, g in std[std.material.isin(["IAEA-603", "NBS-18"])].groupby("run_id"):
        y = np.where(g.material == "NBS-18", nbs18, IAEA603[1])
        out[str(rid)] = tuple(float(c) for c in np.polyfit(g.d18o_measured, y, 1))
    return out


def test_ingest_prints_the_accepted_values_with_their_value_set_and_source(
    demo_sheets: Path, tmp_path: Path
) -> None:
    res = run(
        "ingest",
        "--map",
        str(demo_sheets / "orvanne_lab_run_2024.toml"),
        "--store",
        str(tmp_path / "st"),
    )
    assert res.returncode == 0, res.stderr
    lines = [ln for ln in res.stderr.splitlines() if ln.startswith("accepted ")]
    assert len(lines) == 6  # three materials × two isotopes
    nbs18 = next(ln for ln in lines if ln.startswith("accepted d18o NBS-18"))
    # the default: CIAAW +7.20 ‰ VSMOW through IUPAC = −23.006 ‰ VPDB (REFERENCE_VALUES §1)
    assert "-23.006 ‰ VPDB = +7.2 ‰ VSMOW via IUPAC-2014 — CIAAW 2014, current" in nbs18
    assert "chosen by the store's settings" in nbs18 and "Brand et al. 2014" in nbs18


@pytest.mark.parametrize(
    "value_set", ['"IAEA sheet"', '{ "NBS-18" = "IAEA sheet" }'], ids=["one", "per-material"]
)
def test_a_runs_value_set_chooses_the_iaea_sheet_value_of_nbs18(
    demo_store_session: Path, demo_sheets: Path, tmp_path: Path, value_set: str
) -> None:
    folder = tmp_path / "sheets"
    folder.mkdir()
    for name in ("orvanne_lab_run_2024.csv", "orvanne_lab_run_2024.toml"):
        (folder / name).write_bytes((demo_sheets / name).read_bytes())
    m = folder / "orvanne_lab_run_2024.toml"
    text = m.read_text(encoding="utf-8")
    m.write_text(text.replace("drift = false", f"drift = false\nvalue_set = {value_set}"), "utf-8")
    assert m.read_text(encoding="utf-8") != text
    res = run("ingest", "--map", str(m), "--store", str(tmp_path / "st"))
    assert res.returncode == 0, res.stderr
    nbs18 = next(ln for ln in res.stderr.splitlines() if ln.startswith("accepted d18o NBS-18"))
    assert "-23.200 ‰ VPDB — IAEA sheet" in nbs18 and "the mapping's [run] value_set" in nbs18
    co8 = next(ln for ln in res.stderr.splitlines() if ln.startswith("accepted d13c IAEA-603"))
    assert "IAEA 2020" in co8  # IAEA-603 has no "IAEA sheet" row: the store's choice, said
    if value_set.startswith('"'):
        assert "no 'IAEA sheet' d13c value" in co8
    std = rows_of(tmp_path / "st", "runs", ORV)
    qc = rows_of(tmp_path / "st", "run_qc", ORV).set_index(["run_id", "isotope"])
    demo_qc = rows_of(demo_store_session, "run_qc", ORV).set_index(["run_id", "isotope"])
    for rid, (slope, intercept) in d18o_fit(std, NBS18_D18O_IAEA).items():
        assert qc.loc[(rid, "d18o"), "slope"] == pytest.approx(slope, abs=1e-10)
        assert qc.loc[(rid, "d18o"), "intercept"] == pytest.approx(intercept, abs=1e-10)
        # δ13C is untouched: NBS-18 δ13C is the IAEA sheet's −5.014 either way
        assert qc.loc[(rid, "d13c"), "slope"] == pytest.approx(
            demo_qc.loc[(rid, "d13c"), "slope"], abs=1e-12
        )
    chosen = json.loads(qc.loc[("R1", "d18o"), "accepted_json"])["NBS-18"]
    assert (chosen["value_set"], chosen["value_vpdb"]) == ("IAEA sheet", NBS18_D18O_IAEA)


def test_an_unknown_value_set_is_refused_with_did_you_mean_and_nothing_written(
    demo_store: Path, demo_sheets: Path, tmp_path: Path
) -> None:
    folder = tmp_path / "sheets"
    folder.mkdir()
    for name in ("orvanne_lab_run_2024.csv", "orvanne_lab_run_2024.toml"):
        (folder / name).write_bytes((demo_sheets / name).read_bytes())
    m = folder / "orvanne_lab_run_2024.toml"
    base = m.read_text(encoding="utf-8")
    before = tree_bytes(demo_store)
    m.write_text(base.replace("drift = false", 'drift = false\nvalue_set = "IAEA shet"'), "utf-8")
    res = run("ingest", "--map", str(m), "--store", str(demo_store))
    assert res.returncode == 1 and "Did you mean 'IAEA sheet'" in res.stderr, res.stderr
    m.write_text(
        base.replace("drift = false", 'drift = false\nvalue_set = { "NBS-19" = "IAEA sheet" }'),
        "utf-8",
    )
    res = run("ingest", "--map", str(m), "--store", str(demo_store))
    assert res.returncode == 2 and "not one of the run's anchors or checks" in res.stderr
    assert tree_bytes(demo_store) == before


def test_scales_disagree_says_which_value_sets_differ_and_by_how_much(
    demo_store_session: Path,
) -> None:
    res = run("scales", "--disagree", "--format", "json")
    assert res.returncode == 0, res.stderr
    rows = {(r["material"], r["isotope"], r["value_set"]): r for r in json.loads(res.stdout)}
    ciaaw, iaea = rows[("NBS-18", "d18o", "CIAAW 2014")], rows[("NBS-18", "d18o", "IAEA sheet")]
    # NBS 18 δ18O: −23.2 ‰ (IAEA sheet) vs +7.20 ‰ VSMOW (CIAAW) = −23.006 ‰ VPDB by IUPAC
    assert ciaaw["accepted"] and not iaea["accepted"]
    assert ciaaw["value"] == pytest.approx(NBS18_D18O_CIAAW, abs=1e-6)
    assert iaea["minus_accepted"] == pytest.approx(NBS18_D18O_IAEA - NBS18_D18O_CIAAW, abs=1e-6)
    # IAEA-CO-9 δ18O: −15.6 (IAEA) vs +15.04 ‰ VSMOW (CIAAW) = −15.40 ‰ VPDB
    co9 = rows[("IAEA-CO-9", "d18o", "IAEA sheet")]["minus_accepted"]
    assert co9 == pytest.approx(-15.6 - (0.97001 * 15.04 - 29.99), abs=1e-6)
    # LSVEC δ13C: two scales, said in words
    assert "two scales" in rows[("LSVEC", "d13c", "before 2006")]["note"]
    # materials whose values agree are not listed (IAEA-603 has one value set)
    assert not any(m == "IAEA-603" for m, _, _ in rows)
    with_store = run("scales", "--disagree", "--format", "json", "--store", str(demo_store_session))
    assert with_store.returncode == 0 and json.loads(with_store.stdout) == json.loads(res.stdout)


# --- 7. one sample in two runs ------------------------------------------------------------


def test_a_sample_measured_in_two_runs_is_two_analyses_keyed_by_run_and_position(
    store: Path, tmp_path: Path
) -> None:
    sid = "brannock-twice"
    r1 = [*standard_rows("T1", 1, 1.0, 0.0), ["T1", 6, "CE-1", 1.0, 1.00, -3.0]]
    r2 = [*standard_rows("T2", 1, 1.0, 0.0), ["T2", 6, "CE-1", 1.0, 1.04, -3.1]]
    api.ingest(api.open_store(store), None, run_sheet(tmp_path / "a", sid, [*r1, *r2]))
    rec = rows_of(store, "records", sid).sort_values("replicate")
    assert rec.sample_id.tolist() == ["CE-1", "CE-1"] and rec.replicate.tolist() == [1, 2]
    assert rec.run_id.tolist() == ["T1", "T2"] and rec.run_position.tolist() == [6.0, 6.0]
    assert rec.d13c_carb.tolist() == pytest.approx([1.00, 1.04], abs=1e-9)
    ids = {r: record_id(sid, "callow-edge", "CE-1", run_key(r, 6.0)) for r in ("T1", "T2")}
    assert dict(zip(rec.run_id, rec.record_id, strict=True)) == ids
    # a run added before them renumbers the replicates but keeps every analysis's id
    r0 = [*standard_rows("T0", 1, 1.0, 0.0), ["T0", 6, "CE-1", 1.0, 0.98, -3.0]]
    res = api.ingest(api.open_store(store), None, run_sheet(tmp_path / "b", sid, [*r0, *r1, *r2]))
    assert (res.added, res.removed) == (1, 0)
    rec = rows_of(store, "records", sid).set_index("run_id")
    assert rec.loc[["T1", "T2"], "record_id"].tolist() == [ids["T1"], ids["T2"]]
    assert rec.replicate.to_dict() == {"T0": 1, "T1": 2, "T2": 3}
    # the same sample twice at one run position is still a duplicate, named by its run
    twice = [*r1, ["T1", 6, "CE-1", 1.0, 1.01, -3.0]]
    with pytest.raises(ValidationFailed) as err:
        api.ingest(api.open_store(store), None, run_sheet(tmp_path / "c", sid, twice))
    (issue,) = err.value.report.errors
    assert issue.rule == "duplicate record" and "run T1 position 6" in issue.hint


# --- 8. the acid step of a dolostone --------------------------------------------------------


def test_a_dolostone_without_mineralogy_stays_pending_in_d18o_only(
    store: Path, tmp_path: Path
) -> None:
    sid = "brannock-dolo"
    samples = [
        ["L1", 6, "CE-1", 1.0, 1.0, -3.0, "dolostone", None],
        ["L1", 7, "CE-2", 2.0, 1.1, -3.1, "dolostone", "calcite"],
        ["L1", 8, "CE-3", 3.0, 1.2, -3.2, "limestone", None],
        ["L1", 9, "CE-4", 4.0, 1.3, -3.3, "dolostone", "dolomite"],
    ]
    rows = [[*r, None, None] for r in standard_rows("L1", 1, 1.0, 0.0)] + samples
    extra = {"Lithology": '"lithology"', "Mineralogy": '"mineralogy"'}
    r = api.ingest(
        api.open_store(store), None, run_sheet(tmp_path, sid, rows, extra=extra, constants="")
    )
    assert r.pending.get("d18o_carb") == 2 and "d13c_carb" not in r.pending
    rec = rows_of(store, "records", sid).set_index("sample_id")
    assert rec.d13c_carb.notna().all()  # acid fractionation does not touch δ13C
    assert rec.loc["CE-1", "d18o_carb_status"].startswith("pending: a dolostone with no mineralogy")
    assert "state mineralogy" in rec.loc["CE-1", "d18o_carb_status"]
    assert np.isnan(rec.loc["CE-1", "d18o_carb"]) and pd.isna(rec.loc["CE-1", "d18o_carb_chain"])
    assert np.isnan(rec.loc["CE-1", "d18o_carb_precision"])  # no derived value, no precision
    assert rec.loc["CE-2", "d18o_carb"] == pytest.approx(-3.1, abs=1e-9)  # stated calcite
    assert rec.loc["CE-3", "d18o_carb"] == pytest.approx(-3.2, abs=1e-9)  # a limestone
    assert "dolomite against calcite standards" in rec.loc["CE-4", "d18o_carb_status"]


def test_drift_without_run_positions_refuses_for_a_standard_and_pends_a_sample(
    store: Path, tmp_path: Path
) -> None:
    block = 'anchors = ["IAEA-603", "NBS-18"]\nchecks = ["IAEA-CO-8"]\ndrift = true'
    std = drifted(standard_rows("N1", 0, 1.0, 0.0), 0.001)
    samples = [["N1", 7, "CE-1", 1.0, 1.0, -3.0], ["N1", None, "CE-2", 2.0, 1.1, -3.1]]
    r = api.ingest(
        api.open_store(store),
        None,
        run_sheet(tmp_path / "a", "brannock-n1", [*std, *samples], block),
    )
    assert r.pending.get("d13c_carb") == 1 and r.pending.get("d18o_carb") == 1
    rec = rows_of(store, "records", "brannock-n1").set_index("sample_id")
    assert rec.loc["CE-2", "d13c_carb_status"].startswith("pending: drift correction needs")
    assert rec.loc["CE-1", "d13c_carb_status"] == "harmonised"
    std[1][1] = None  # NBS-18 without its position: the drift cannot be fitted honestly
    before = tree_bytes(store)
    m = run_sheet(tmp_path / "b", "brannock-n2", [*std, samples[0]], block)
    res = run("ingest", "--map", str(m), "--store", str(store))
    assert res.returncode == 1 and "run position of every standard" in res.stderr
    assert "'N1'" in res.stderr and tree_bytes(store) == before


def test_an_anchor_without_a_value_of_the_isotope_is_refused_naming_the_source(
    store: Path, tmp_path: Path
) -> None:
    # USGS44 has a δ13C value only (Qi et al. 2021): it cannot anchor a δ18O column
    block = 'anchors = ["IAEA-603", "USGS44"]'
    rows = [
        ["U1", 1, "IAEA-603", None, 2.46, -2.37],
        ["U1", 2, "USGS44", None, -42.08, -20.0],
        ["U1", 3, "CE-1", 1.0, 1.0, -3.0],
    ]
    before = tree_bytes(store)
    m = run_sheet(tmp_path, "brannock-u1", rows, block)
    res = run("ingest", "--map", str(m), "--store", str(store))
    assert res.returncode == 1, res.stderr
    assert "source brannock-u1, [run] d18o" in res.stderr and "'USGS44'" in res.stderr
    assert tree_bytes(store) == before
