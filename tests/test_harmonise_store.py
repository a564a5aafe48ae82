"""Harmonisation in the store: re-anchoring stated normalisations, in-house runs normalised
run by run, declared offsets, the store's reference-material values (init, scales,
reharmonise), Δ13C, and screens re-run by reharmonise.

The pure arithmetic is unit-tested in test_harmonise.py; here every number is read back from
a store (or the command line) and compared with values worked out independently of the code
(by hand, or with numpy.polyfit) from the published values in REFERENCE_VALUES.md.
Sheets built here are invented (fictional sections and invented lab values).
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from strata13.compile import api

from strata13.errors import ValidationFailed
from strata13.numbers import readable
from tests.conftest import run_cli as run
from tests.conftest import tree_bytes

MF = "mossaret-fennoway-2018"
ORV = "orvanne-lab-2024"
RUN_SHEET = ("orvanne_lab_run_2024.csv", "orvanne_lab_run_2024.toml")

# Published values (REFERENCE_VALUES.md §1–2), each with its source:
NBS19_D13C = 1.95  # IAEA NBS 19 sheet: +1.95 ‰, exact by definition of VPDB
LSVEC_2006 = -46.6  # Coplen et al. 2006 Anal. Chem. 78:2439 (VPDB-LSVEC; withdrawn 2017)
LSVEC_BEFORE_2006 = -46.48  # as used by Qi et al. 2003 (value before 2006)
# IAEA-603 characterization paper (Assonov et al. 2020, authors from memory): +2.460, −2.370
# NBS 18: IAEA sheet δ13C −5.014; δ18O +7.20 ‰ VSMOW (CIAAW, Brand et al. 2014) through the
# IUPAC relation δ18O(VPDB) = 0.97001 δ18O(VSMOW) − 29.99 (CIAAW) = −23.006
# IAEA-CO-8: IAEA sheet δ13C −5.764, δ18O −22.7
ACCEPTED = {
    "d13c": {"IAEA-603": 2.460, "NBS-18": -5.014, "IAEA-CO-8": -5.764},
    "d18o": {"IAEA-603": -2.370, "NBS-18": 0.97001 * 7.20 - 29.99, "IAEA-CO-8": -22.7},
}
# An invented in-house value for IAEA-603 δ13C (not a published number)
USER_IAEA603_D13C = 2.470
MATERIAL_HEADER = (
    "material,kind,value_set,status,d13c,d13c_unc,d13c_unc_kind,d13c_scale,"
    "d18o,d18o_unc,d18o_unc_kind,d18o_scale,valid_from,valid_to,confidence,"
    "source\n"
)


# --- helpers ---------------------------------------------------------------------------


def error_line(stderr: str) -> str:
    lines = [ln for ln in stderr.splitlines() if ln.startswith("error:")]
    assert len(lines) == 1 and "Traceback" not in stderr, stderr
    return lines[0]


def read(store: Path, *statements: str) -> list[pd.DataFrame]:
    """Several SELECTs over the store's views through one read-only connection."""
    con, _ = api.open_store(store).reader()
    try:
        return [con.execute(s).df() for s in statements]
    finally:
        con.close()


def of_source(source: str, view: str = "records") -> str:
    assert "'" not in source
    return f"SELECT * FROM {view} WHERE source_id = '{source}' ORDER BY ALL"


CHAINS = "SELECT chain_id, steps_json FROM chains"


def steps_of(chains: pd.DataFrame, chain_id: str) -> list[dict]:
    hit = chains[chains.chain_id == chain_id]
    assert len(hit) == 1
    return json.loads(hit.steps_json.iloc[0])


def copy_demo(demo_sheets: Path, folder: Path, *names: str) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    for name in names:
        shutil.copy(demo_sheets / name, folder / name)


def latest(store: Path) -> int:
    return api.open_store(store).latest_version()


def two_point_line(
    assumed: tuple[float, float], accepted: tuple[float, float]
) -> tuple[float, float]:
    """Worked by hand: the straight line through (assumed_i, accepted_i)."""
    (x1, x2), (y1, y2) = assumed, accepted
    slope = (y2 - y1) / (x2 - x1)
    return slope, y1 - slope * x1


# Mossaret/Fennoway: the authors assumed NBS-19 = 1.95 and LSVEC = −46.48; the store accepts
# NBS-19 = 1.95 (VPDB definition) and LSVEC = −46.6 (VPDB-LSVEC 2006). Worked by hand from
# the accepted values: slope = −48.55 / −48.43 = 1.0024778…, intercept = 1.95 (1 − slope).
MF_SLOPE, MF_INTERCEPT = two_point_line((NBS19_D13C, LSVEC_BEFORE_2006), (NBS19_D13C, LSVEC_2006))


def run_fit(
    standards: pd.DataFrame, accepted: dict[str, dict[str, float]] = ACCEPTED
) -> dict[tuple[str, str], tuple[float, float]]:
    """(run, isotope) -> (slope, intercept) by numpy.polyfit of a run's stored anchor
    measurements (rows of the runs view) against the accepted values."""
    out = {}
    for rid, grp in standards.groupby("run_id"):
        anchors = grp[grp.material.isin(["IAEA-603", "NBS-18"])]
        for iso in ("d13c", "d18o"):
            x = anchors[f"{iso}_measured"].to_numpy(float)
            y = np.array([accepted[iso][m] for m in anchors.material])
            slope, intercept = np.polyfit(x, y, 1)
            out[(str(rid), iso)] = (float(slope), float(intercept))
    return out


def run_tables(store: Path, source: str) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """(standards, run_qc indexed by run and isotope, sample records) of one source."""
    std, qc, rec = read(
        store, of_source(source, "runs"), of_source(source, "run_qc"), of_source(source)
    )
    return std, qc.set_index(["run_id", "isotope"]), rec


# --- small invented sources, ingested once into one store ----------------------------------

TINY = """
[source]
id = "{sid}"
citation = "Tamsel quarry 2020, {sid} (invented)"
[table]
file = "{sid}.csv"
[columns]
"Sample" = "sample_id"
"Height" = {{ field = "position", unit = "m" }}
"d13C" = {{ field = "d13c_carb", scale = "VPDB" }}
"{second}" = {{ field = "{second_field}"{second_scale} }}
[constants]
section_id = "Tamsel Quarry"
position_kind = "height"
[[localities]]
id = "tamsel"
lat = 44.1
lon = 9.7
"""
TINY_ROWS = "ta-1,1,-30.0,-2.0\nta-2,2,0.0,-3.1\nta-3,3,2.5,-1.4\n"


def write_tiny(
    folder: Path,
    sid: str,
    extra: str = "",
    rows: str = TINY_ROWS,
    second: str = "d18O",
    second_field: str = "d18o_carb",
    second_scale: str | None = "VPDB",
) -> Path:
    """A three-row source (Sample, Height, δ13C and one more δ column) with its mapping."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / f"{sid}.csv").write_text(f"Sample,Height,d13C,{second}\n{rows}", encoding="utf-8")
    scale = f', scale = "{second_scale}"' if second_scale else ""
    m = folder / f"{sid}.toml"
    m.write_text(
        TINY.format(sid=sid, second=second, second_field=second_field, second_scale=scale) + extra,
        encoding="utf-8",
    )
    return m


ONE_POINT = '[normalisation.d13c_carb]\nmethod = "one-point"\nanchors = { "NBS-19" = 2.00 }\n'
NORMALISATIONS = {
    # one-point: worked by hand, 1.95 (NBS 19, VPDB definition) − 2.00 assumed = −0.05 ‰
    "tamsel-one-point": ONE_POINT,
    "tamsel-not-stated": '[normalisation.d13c_carb]\nmethod = "not stated"\n',
    # assumed = accepted (NBS 19 1.95, IAEA sheet; LSVEC −46.6, Coplen et al. 2006)
    "tamsel-identity": '[normalisation.d13c_carb]\nmethod = "two-point"\n'
    'anchors = { "NBS-19" = 1.95, "LSVEC" = -46.6 }\n',
}

WORKED_RUN = """
[source]
id = "orvanne-worked-run"
citation = "Orvanne Isotope Laboratory: a worked example run (invented)"
kind = "in-house"
[table]
file = "worked.csv"
[columns]
"Run" = "run_id"
"Line" = "run_position"
"Identifier" = "sample_id"
"Height (m)" = { field = "position", unit = "m" }
"d13C raw" = { field = "d13c_carb", scale = "raw" }
[run]
anchors = ["IAEA-603", "NBS-18"]
checks = ["IAEA-CO-8"]
[constants]
component = "micrite"
[[sections]]
id = "brasken-scar"
locality = "brasken"
position_kind = "height"
[[localities]]
id = "brasken"
lat = 47.3
lon = 11.4
"""
# two lines per standard; a sample at −3.00 and the check IAEA-CO-8 (invented measurements)
WORKED_CSV = (
    "Run,Line,Identifier,Height (m),d13C raw\n"
    "W1,1,IAEA-603,,2.10\nW1,2,NBS-18,,-5.30\nW1,3,BS-1,0.5,-3.00\n"
    "W1,4,IAEA-CO-8,,-6.0426\nW1,5,IAEA-603,,2.10\nW1,6,NBS-18,,-5.30\n"
)


@pytest.fixture(scope="module")
def small_store(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """One store holding the small invented sources below (tests only read it)."""
    folder = tmp_path_factory.mktemp("small")
    store = api.init_store(folder / "st")
    for sid, block in NORMALISATIONS.items():
        api.ingest(store, None, write_tiny(folder, sid, block))
    # values where the one-point change of −0.05 ‰ comes out just under 0.05 in floating
    # point (2.5 − 0.05, 3.0 − 0.05)
    api.ingest(
        store,
        None,
        write_tiny(
            folder, "tamsel-at-precision", ONE_POINT, rows="ta-1,1,2.5,-2.0\nta-2,2,3.0,-3.1\n"
        ),
    )
    # Δ13C: one row with both values, one without carbonate, one without organic δ13C
    api.ingest(
        store,
        None,
        write_tiny(
            folder,
            "tamsel-organic",
            ONE_POINT,
            rows="k1,1,2.0,-27.5\nk2,2,,-26.0\nk3,3,1.5,\n",
            second="d13Corg",
            second_field="d13c_org",
        ),
    )
    (folder / "worked.csv").write_text(WORKED_CSV, encoding="utf-8")
    (folder / "worked.toml").write_text(WORKED_RUN, encoding="utf-8")
    r = api.ingest(store, None, folder / "worked.toml")
    assert (r.committed, r.standards) == (1, 5)
    return store.path


# --- 1. re-anchoring on the demo ---------------------------------------------------------


def test_mossaret_values_follow_the_two_point_line_between_assumed_and_accepted_anchors(
    demo_store_session: Path,
) -> None:
    assert MF_SLOPE == pytest.approx(48.55 / 48.43, abs=1e-15)
    assert MF_INTERCEPT == pytest.approx(-0.0048317, abs=1e-7)
    df, chains = read(demo_store_session, of_source(MF), CHAINS)
    assert len(df) == 42 and df.d13c_carb_reported.notna().all()
    expected = MF_SLOPE * df.d13c_carb_reported + MF_INTERCEPT
    assert np.max(np.abs(df.d13c_carb - expected)) < 1e-12
    change = (df.d13c_carb - df.d13c_carb_reported).abs()
    assert change.max() > 1e-3  # corrected, not copied …
    assert change.max() < 0.05  # … by far less than typical precision near 0 ‰
    assert set(df.d13c_carb_status) == {"harmonised"} and df.d13c_carb_chain.nunique() == 1
    steps = steps_of(chains, df.d13c_carb_chain.iloc[0])
    assert [s["step"] for s in steps] == ["reported on VPDB", "re-anchoring (two-point)"]
    p = steps[1]["parameters"]
    assert dict(zip(p["materials"], p["assumed"], strict=True)) == {
        "NBS-19": NBS19_D13C,
        "LSVEC": LSVEC_BEFORE_2006,
    }
    assert dict(zip(p["materials"], p["accepted"], strict=True)) == {
        "NBS-19": NBS19_D13C,
        "LSVEC": LSVEC_2006,
    }
    assert steps[1]["size_permil"] == pytest.approx(change.max(), abs=1e-12)
    flags = " | ".join(steps[1]["flags"])
    assert "LSVEC" in flags and "withdrawn" in flags
    assert "below typical analytical precision" in flags
    # δ18O: the authors stated no normalisation -> taken as reported, flagged
    assert np.max(np.abs(df.d18o_carb - df.d18o_carb_reported)) == 0
    d18o = steps_of(chains, df.d18o_carb_chain.iloc[0])
    assert len(d18o) == 1 and "normalisation not stated" in d18o[0]["flags"]


def test_explain_prints_both_reanchoring_steps_with_their_numbers(demo_store_session: Path) -> None:
    (df,) = read(demo_store_session, of_source(MF))
    row = df.loc[df.d13c_carb_reported.abs().idxmax()]  # the clearest change
    expected = MF_SLOPE * row.d13c_carb_reported + MF_INTERCEPT
    res = run("explain", row.record_id[:10], "--store", str(demo_store_session))
    assert res.returncode == 0, res.stderr
    lines = res.stdout.splitlines()
    first = next(ln for ln in lines if "1. reported on VPDB" in ln)
    second = next(ln for ln in lines if "2. re-anchoring (two-point)" in ln)
    assert lines.index(first) < lines.index(second)
    assert f"→ {row.d13c_carb_reported:g} ‰" in first
    # to the meaningful digits human text shows (strata13.numbers; --json keeps every digit)
    assert f"→ {readable(expected, unit='‰')} ‰" in second
    assert f"slope={readable(MF_SLOPE)}" in second
    assert "-46.48" in second and "-46.6" in second
    flags = [ln.strip() for ln in lines if ln.strip().startswith("flag:")]
    assert any("withdrawn" in f for f in flags)
    assert any("below typical analytical precision" in f for f in flags)


# --- 2. one-point, not stated, identity (store level) -----------------------------------


@pytest.mark.parametrize(
    "sid,offset,flag",
    [
        ("tamsel-one-point", -0.05, "one-point normalisation"),
        ("tamsel-not-stated", 0.0, "normalisation not stated"),
        ("tamsel-identity", 0.0, None),
    ],
)
def test_stated_normalisations_in_the_store(
    small_store: Path, sid: str, offset: float, flag: str | None
) -> None:
    df, chains = read(small_store, of_source(sid), CHAINS)
    assert sorted(df.d13c_carb_reported) == [-30.0, 0.0, 2.5]
    assert np.max(np.abs(df.d13c_carb - (df.d13c_carb_reported + offset))) < 1e-12
    assert set(df.d13c_carb_status) == {"harmonised"} and df.d13c_carb_chain.nunique() == 1
    steps = steps_of(chains, df.d13c_carb_chain.iloc[0])
    flags = [f for s in steps for f in s["flags"]]
    if flag is not None:
        assert any(flag in f for f in flags), flags
    if sid == "tamsel-one-point":
        assert steps[-1]["step"] == "re-anchoring (one-point)"
        assert steps[-1]["parameters"]["offset"] == pytest.approx(-0.05, abs=1e-12)
    if sid == "tamsel-not-stated":
        assert [s["step"] for s in steps] == ["reported on VPDB"]
    if sid == "tamsel-identity":  # a step of size 0 on a clean line, no weaker flag
        assert steps[-1]["step"] == "re-anchoring (two-point)"
        assert steps[-1]["parameters"]["slope"] == pytest.approx(1.0, abs=1e-15)
        assert steps[-1]["parameters"]["intercept"] == pytest.approx(0.0, abs=1e-14)
        assert steps[-1]["size_permil"] < 1e-12
        assert not any("one-point" in f or "not stated" in f for f in flags)


def test_a_change_equal_to_typical_precision_is_not_called_below_it(small_store: Path) -> None:
    df, chains = read(small_store, of_source("tamsel-at-precision"), CHAINS)
    steps = steps_of(chains, df.d13c_carb_chain.iloc[0])
    assert steps[-1]["size_permil"] == pytest.approx(0.05, abs=1e-12)
    assert not any("below typical analytical precision" in f for f in steps[-1]["flags"])


# --- 3. in-house runs --------------------------------------------------------------------


def test_demo_run_lines_are_least_squares_through_the_stored_standards(
    demo_store_session: Path,
) -> None:
    std, qc, df = run_tables(demo_store_session, ORV)
    fits = run_fit(std)
    assert sorted(qc.index) == [("R1", "d13c"), ("R1", "d18o"), ("R2", "d13c"), ("R2", "d18o")]
    assert len(std) == 10 and std.groupby("run_id").size().to_dict() == {"R1": 5, "R2": 5}
    assert len(df) == 12 and set(df.d13c_carb_scale) == {"raw"}
    for (rid, iso), (slope, intercept) in fits.items():
        q = qc.loc[(rid, iso)]
        assert q.slope == pytest.approx(slope, abs=1e-10)
        assert q.intercept == pytest.approx(intercept, abs=1e-10)
        assert q.n_anchors == 2 and q.anchors == "IAEA-603, NBS-18"
        field = f"{iso}_carb"
        here = df[df.run_id == rid]
        assert len(here) == 6
        assert np.max(np.abs(here[field] - (slope * here[f"{field}_reported"] + intercept))) < 1e-10
        # the check standard: normalised mean − accepted (IAEA-CO-8 sheet: −5.764 / −22.7)
        co8 = std[(std.run_id == rid) & (std.material == "IAEA-CO-8")][f"{iso}_measured"]
        assert len(co8) == 1
        residual = slope * co8.mean() + intercept - ACCEPTED[iso]["IAEA-CO-8"]
        assert json.loads(q.residuals_json)["IAEA-CO-8"] == pytest.approx(residual, abs=1e-10)
    # the two runs really are normalised apart (different lines)
    assert abs(fits[("R1", "d13c")][0] - fits[("R2", "d13c")][0]) > 0.01


def test_ingest_cli_accounts_for_run_standards_and_prints_one_qc_line_per_run_and_isotope(
    tmp_path: Path, demo_sheets: Path
) -> None:
    store = tmp_path / "st"
    res = run(
        "ingest",
        str(demo_sheets / RUN_SHEET[0]),
        "--map",
        str(demo_sheets / RUN_SHEET[1]),
        "--store",
        str(store),
    )
    assert res.returncode == 0, res.stderr
    assert "read 22 rows = 12 committed + 10 run standards + 0 quarantined + 0 blank" in res.stderr
    qc_lines = [ln for ln in res.stderr.splitlines() if ln.startswith("run ")]
    assert len(qc_lines) == 4
    for (rid, iso), (slope, intercept) in run_fit(run_tables(store, ORV)[0]).items():
        want = f"run {rid} {iso}: slope {slope:.4f}, intercept {intercept:+.3f} ‰"
        assert sum(ln.startswith(want) for ln in qc_lines) == 1, (want, qc_lines)


def _bad_run(folder: Path, demo_sheets: Path, case: str) -> Path:
    copy_demo(demo_sheets, folder, *RUN_SHEET)
    sheet = folder / RUN_SHEET[0]
    lines = sheet.read_text(encoding="utf-8").splitlines(keepends=True)
    if case == "one anchor measured":  # R2 without its NBS-18 lines
        kept = [ln for ln in lines if not ln.startswith(("R2,2,NBS-18", "R2,11,NBS-18"))]
    else:  # R2's two anchors measured at the same δ13C: no slope can be drawn
        kept = [
            ",".join([*ln.split(",")[:4], "2.580", *ln.split(",")[5:]])
            if ln.startswith(("R2,1,", "R2,2,", "R2,10,", "R2,11,"))
            else ln
            for ln in lines
        ]
    assert kept != lines
    sheet.write_text("".join(kept), encoding="utf-8")
    return folder / RUN_SHEET[1]


@pytest.mark.parametrize(
    "case,words",
    [("one anchor measured", "at least two anchor"), ("anchors at one value", "slope")],
)
def test_a_run_that_cannot_be_normalised_is_refused_naming_the_run(
    demo_store: Path, demo_sheets: Path, tmp_path: Path, case: str, words: str
) -> None:
    m = _bad_run(tmp_path / "sheets", demo_sheets, case)
    before = tree_bytes(demo_store)
    res = run("ingest", "--map", str(m), "--store", str(demo_store))
    assert res.returncode == 1, res.stderr
    error = error_line(res.stderr)
    assert "'R2'" in error and words in error and "'R1'" not in error
    assert tree_bytes(demo_store) == before


def test_worked_example_run_in_the_store(small_store: Path) -> None:
    # Worked by hand from the accepted values (IAEA-603 +2.460; NBS-18 −5.014, IAEA sheet):
    # measured +2.10 and −5.30 -> slope 7.474 / 7.40 = 1.0100, intercept 2.460 − 1.01 × 2.10
    # = +0.339; raw −3.00 -> −2.691; IAEA-CO-8 at −6.0426 -> −5.764 (its IAEA sheet value)
    std, qc, df = run_tables(small_store, "orvanne-worked-run")
    assert sorted(std.material) == ["IAEA-603", "IAEA-603", "IAEA-CO-8", "NBS-18", "NBS-18"]
    q = qc.loc[("W1", "d13c")]
    assert q.slope == pytest.approx(1.0100, abs=1e-12)
    assert q.intercept == pytest.approx(0.339, abs=1e-12)
    assert json.loads(q.residuals_json)["IAEA-CO-8"] == pytest.approx(0.0, abs=1e-4)
    assert q.slope * -6.0426 + q.intercept == pytest.approx(-5.764, abs=1e-4)
    assert q.warnings is None  # |slope − 1| = 0.01 is inside the 0.05 tolerance
    assert list(df.sample_id) == ["BS-1"]
    assert df.d13c_carb.iloc[0] == pytest.approx(-2.691, abs=1e-12)
    info = api.explain(api.open_store(small_store), df.record_id.iloc[0])
    steps = info["isotopes"]["d13c_carb"]["steps"]
    assert steps[-1]["step"] == "run normalisation"
    assert steps[-1]["value_after"] == pytest.approx(-2.691, abs=1e-12)


# --- 4. bad input --------------------------------------------------------------------------


def test_unknown_normalisation_anchor_is_refused_with_did_you_mean(
    demo_store: Path, tmp_path: Path
) -> None:
    m = write_tiny(
        tmp_path,
        "tamsel-typo",
        '[normalisation.d13c_carb]\nmethod = "two-point"\n'
        'anchors = { "NBS-91" = 1.95, "LSVEC" = -46.48 }\n',
    )
    before = tree_bytes(demo_store)
    res = run("ingest", "--map", str(m), "--store", str(demo_store))
    assert res.returncode == 1, res.stderr
    error = error_line(res.stderr)
    assert "'NBS-91'" in error and "did you mean 'nbs-19'" in error.lower()
    assert tree_bytes(demo_store) == before


def _unknown_run_anchor(folder: Path, demo_sheets: Path) -> Path:
    copy_demo(demo_sheets, folder, *RUN_SHEET)
    m = folder / RUN_SHEET[1]
    text = m.read_text(encoding="utf-8")
    m.write_text(
        text.replace('anchors = ["IAEA-603", "NBS-18"]', 'anchors = ["IAEA-630", "NBS-18"]'),
        encoding="utf-8",
    )
    assert m.read_text(encoding="utf-8") != text
    return m


def test_unknown_run_anchor_is_refused_and_the_store_unchanged(
    demo_store: Path, demo_sheets: Path, tmp_path: Path
) -> None:
    m = _unknown_run_anchor(tmp_path / "sheets", demo_sheets)
    before = tree_bytes(demo_store)
    res = run("ingest", "--map", str(m), "--store", str(demo_store))
    assert res.returncode == 1, res.stderr
    assert tree_bytes(demo_store) == before


def test_unknown_run_anchor_is_named_with_did_you_mean(
    demo_store: Path, demo_sheets: Path, tmp_path: Path
) -> None:
    m = _unknown_run_anchor(tmp_path / "sheets", demo_sheets)
    res = run("ingest", "--map", str(m), "--store", str(demo_store))
    assert res.returncode == 1
    assert "IAEA-630" in res.stderr and "did you mean 'iaea-6" in res.stderr.lower()


def test_delta_column_without_a_scale_is_reported_by_cell(tmp_path: Path) -> None:
    m = write_tiny(tmp_path, "tamsel-no-scale", second_scale=None)
    store = api.init_store(tmp_path / "st")
    before = tree_bytes(store.path)
    with pytest.raises(ValidationFailed) as err:
        api.ingest(store, None, m)
    issues = [(i.cell, i.column, i.rule) for i in err.value.report.errors]
    assert issues == [("D2:D4", "d18O", "scale not stated")]
    res = run("ingest", "--map", str(m), "--store", str(store.path))
    assert res.returncode == 1 and "D2:D4" in res.stdout + res.stderr
    assert "scale not stated" in res.stdout + res.stderr
    assert tree_bytes(store.path) == before


@pytest.mark.parametrize("case", ["run with one anchor", "offset without why"])
def test_mapping_config_errors_are_exit_2(demo_sheets: Path, tmp_path: Path, case: str) -> None:
    if case == "run with one anchor":
        copy_demo(demo_sheets, tmp_path, *RUN_SHEET)
        m = tmp_path / RUN_SHEET[1]
        m.write_text(
            m.read_text(encoding="utf-8").replace(
                'anchors = ["IAEA-603", "NBS-18"]', 'anchors = ["IAEA-603"]'
            ),
            encoding="utf-8",
        )
        words = "[run]"
    else:
        m = write_tiny(tmp_path, "tamsel-offset", "[offsets.d13c_carb]\nvalue = 0.12\n")
        words = "[offsets.d13c_carb]"
    res = run("ingest", "--map", str(m), "--store", str(tmp_path / "st"))
    assert res.returncode == 2, res.stderr
    assert words in error_line(res.stderr)
    assert not (tmp_path / "st").exists()


# --- 5. declared offsets -------------------------------------------------------------------


def test_declared_offset_is_added_after_reanchoring_and_its_why_is_the_last_step(
    demo_store: Path, demo_sheets: Path, tmp_path: Path
) -> None:
    why = "inter-laboratory comparison of 2019 (invented): this lab read 0.12 ‰ low"
    folder = tmp_path / "sheets"
    copy_demo(demo_sheets, folder, "mossaret_fennoway_2018.ods", "mossaret_fennoway_2018.toml")
    m = folder / "mossaret_fennoway_2018.toml"
    m.write_text(
        m.read_text(encoding="utf-8") + f'\n[offsets.d13c_carb]\nvalue = 0.12\nwhy = "{why}"\n',
        encoding="utf-8",
    )
    store = api.open_store(demo_store)
    (before,) = read(demo_store, of_source(MF))
    r = api.ingest(store, None, m)
    assert r.changed == 42 and (r.added, r.removed) == (0, 0)
    df, chains = read(demo_store, of_source(MF), CHAINS)
    before, df = before.set_index("record_id"), df.set_index("record_id")
    # worked by hand: the two-point line (section 1), then + 0.12 ‰
    expected = MF_SLOPE * df.d13c_carb_reported + MF_INTERCEPT + 0.12
    assert np.max(np.abs(df.d13c_carb - expected)) < 1e-12
    assert np.max(np.abs(df.d13c_carb - before.d13c_carb - 0.12)) < 1e-12
    assert (df.d18o_carb == before.d18o_carb).all()  # the offset is δ13C only
    steps = steps_of(chains, df.d13c_carb_chain.iloc[0])
    assert [s["step"] for s in steps][-2:] == [
        "re-anchoring (two-point)",
        "declared per-source offset",
    ]
    assert why in steps[-1]["source"]
    assert steps[-1]["parameters"]["offset_permil"] == 0.12


# --- 6. the store's reference-material values ------------------------------------------


def test_scales_without_a_store_lists_superseded_and_disagreeing_values() -> None:
    res = run("scales", "--format", "json")
    assert res.returncode == 0, res.stderr
    rows = json.loads(res.stdout)["materials"]
    assert all(r["in_store"] is None for r in rows)

    def pick(material: str, iso: str) -> set[tuple]:
        return {
            (r[iso], r["value_set"], r["status"], r[f"{iso}_scale"], r["valid_to"])
            for r in rows
            if r["material"] == material and r[iso] is not None
        }

    # LSVEC: −46.48 before 2006 (Qi et al. 2003); −46.6 from 2006 (Coplen et al. 2006),
    # withdrawn as a δ13C reference material in 2017
    assert pick("LSVEC", "d13c") == {
        (-46.48, "before 2006", "superseded", "VPDB", 2005),
        (-46.6, "VPDB-LSVEC 2006", "withdrawn", "VPDB-LSVEC", 2017),
    }
    # NBS 18 δ18O: −23.2 ‰ VPDB (IAEA sheet) and +7.20 ‰ VSMOW (CIAAW, Brand et al. 2014)
    assert {(v, s) for v, _, _, s, _ in pick("NBS-18", "d18o")} == {
        (-23.2, "VPDB"),
        (7.20, "VSMOW"),
    }
    # IAEA-CO-1 δ13C: +2.48 (CIAAW) and +2.492 (IAEA sheet / Coplen et al. 2006, from memory)
    assert {v for v, *_ in pick("IAEA-CO-1", "d13c")} == {2.48, 2.492}


def marks(store: Path) -> dict[tuple[str, str], str | None]:
    res = run("scales", "--format", "json", "--store", str(store))
    assert res.returncode == 0, res.stderr
    return {
        (r["material"], r["value_set"]): r["in_store"] for r in json.loads(res.stdout)["materials"]
    }


def test_scales_with_a_store_marks_the_accepted_row_per_isotope(demo_store_session: Path) -> None:
    got = marks(demo_store_session)
    assert got[("NBS-19", "VPDB definition")] == "d13c+d18o"
    assert got[("NBS-18", "IAEA sheet")] == "d13c"
    assert got[("NBS-18", "CIAAW 2014")] == "d18o"
    assert got[("LSVEC", "VPDB-LSVEC 2006")] == "d13c"
    assert got[("LSVEC", "before 2006")] == ""
    assert got[("IAEA-603", "IAEA 2020")] == "d13c+d18o"


def user_materials(folder: Path, valid_from: str = "2024") -> Path:
    p = folder / "orvanne_materials.csv"
    p.write_text(
        MATERIAL_HEADER + f"IAEA-603,calcite,Orvanne in-house 2024,current,"
        f"{USER_IAEA603_D13C},,,VPDB,,,,,{valid_from},,invented,"
        "invented in-house value\n",
        encoding="utf-8",
    )
    return p


def user_accepted() -> dict[str, dict[str, float]]:
    acc = {iso: dict(v) for iso, v in ACCEPTED.items()}
    acc["d13c"]["IAEA-603"] = USER_IAEA603_D13C
    return acc


def test_init_with_a_materials_file_normalises_runs_to_the_users_value(
    demo_store_session: Path, demo_sheets: Path, tmp_path: Path
) -> None:
    path = tmp_path / "st"
    res = run("init", "--store", str(path), "--materials", str(user_materials(tmp_path)))
    assert res.returncode == 0, res.stderr
    api.ingest(api.open_store(path), demo_sheets / RUN_SHEET[0], demo_sheets / RUN_SHEET[1])
    std, qc, _ = run_tables(path, ORV)
    demo_qc = run_tables(demo_store_session, ORV)[1]
    for (rid, iso), (slope, intercept) in run_fit(std, user_accepted()).items():
        assert qc.loc[(rid, iso)].slope == pytest.approx(slope, abs=1e-10)
        assert qc.loc[(rid, iso)].intercept == pytest.approx(intercept, abs=1e-10)
        moved = abs(qc.loc[(rid, iso)].slope - demo_qc.loc[(rid, iso)].slope)
        assert moved > 1e-4 if iso == "d13c" else moved < 1e-12  # δ18O keeps IAEA 2020
    got = marks(path)
    assert got[("IAEA-603", "Orvanne in-house 2024")] == "d13c"
    assert got[("IAEA-603", "IAEA 2020")] == "d18o"


def test_a_users_material_row_without_years_is_accepted_before_the_shipped_one(
    tmp_path: Path,
) -> None:
    path = tmp_path / "st"
    res = run(
        "init", "--store", str(path), "--materials", str(user_materials(tmp_path, valid_from=""))
    )
    assert res.returncode == 0, res.stderr
    assert marks(path)[("IAEA-603", "Orvanne in-house 2024")] == "d13c"


def test_reharmonise_with_a_materials_file_is_one_commit_then_zero_changed(
    demo_store: Path, tmp_path: Path
) -> None:
    mats = user_materials(tmp_path)
    v0 = latest(demo_store)
    (before,) = read(demo_store, "SELECT record_id, d13c_carb FROM records")
    res = run("reharmonise", "--materials", str(mats), "--store", str(demo_store))
    assert res.returncode == 0, res.stderr
    assert latest(demo_store) == v0 + 1
    # only the in-house run's 12 δ13C values rest on IAEA-603
    assert f"reharmonised {len(before)} records as version {v0 + 1}" in res.stderr
    assert "d13c_carb: 12 values changed" in res.stderr and "d18o_carb" not in res.stderr
    after, std, qc = read(
        demo_store,
        "SELECT record_id, source_id, d13c_carb FROM records",
        of_source(ORV, "runs"),
        of_source(ORV, "run_qc"),
    )
    after = after.set_index("record_id")
    moved = (
        after.d13c_carb - before.set_index("record_id").d13c_carb.reindex(after.index)
    ).abs() > 1e-12
    assert set(after.source_id[moved]) == {ORV} and int(moved.sum()) == 12
    qc = qc.set_index(["run_id", "isotope"])
    for (rid, iso), (slope, _) in run_fit(std, user_accepted()).items():
        assert qc.loc[(rid, iso)].slope == pytest.approx(slope, abs=1e-10)
    again = run("reharmonise", "--materials", str(mats), "--store", str(demo_store))
    assert again.returncode == 0 and "0 changed" in again.stderr
    assert latest(demo_store) == v0 + 1


@pytest.mark.parametrize("case", ["missing column", "text in a number column"])
def test_malformed_materials_file_is_exit_2_and_changes_nothing(tmp_path: Path, case: str) -> None:
    bad = tmp_path / "bad.csv"
    if case == "missing column":
        bad.write_text(
            MATERIAL_HEADER.replace("d13c_scale,", "") + "IAEA-603,calcite,x,"
            "current,2.47,,,,,,,,,invented,invented\n",
            encoding="utf-8",
        )
    else:
        bad.write_text(
            MATERIAL_HEADER + "IAEA-603,calcite,x,current,two point four seven,,,"
            "VPDB,,,,,,,invented,invented\n",
            encoding="utf-8",
        )
    fresh = tmp_path / "fresh"
    res = run("init", "--store", str(fresh), "--materials", str(bad))
    assert res.returncode == 2, res.stderr
    assert "bad.csv" in error_line(res.stderr) and not fresh.exists()
    store = api.init_store(tmp_path / "st")
    before = tree_bytes(store.path)
    res = run("reharmonise", "--materials", str(bad), "--store", str(store.path))
    assert res.returncode == 2, res.stderr
    assert "bad.csv" in error_line(res.stderr)
    assert tree_bytes(store.path) == before


# --- 7. Δ13C -------------------------------------------------------------------------------


def test_big_delta_is_carbonate_minus_organic_where_both_exist(demo_store_session: Path) -> None:
    (df,) = read(
        demo_store_session, "SELECT source_id, d13c_carb, d13c_org, big_delta_13c FROM records"
    )
    both = df.d13c_carb.notna() & df.d13c_org.notna()
    ystrel = df.source_id == "ystrel-cores-2021"
    assert ystrel.sum() == 49 and both[ystrel].all()  # the Ystrel cores carry both
    # Δ13C = δ13C carb − δ13C org (definition; common practice)
    assert np.max(np.abs(df.big_delta_13c[both] - (df.d13c_carb - df.d13c_org)[both])) < 1e-12
    assert df.big_delta_13c[~both].isna().all() and (~both).sum() > 0


def test_big_delta_uses_harmonised_values_and_is_null_when_one_is_missing(
    small_store: Path,
) -> None:
    (df,) = read(small_store, of_source("tamsel-organic"))
    got = df.set_index("sample_id").big_delta_13c
    # from the harmonised values, worked by hand: (2.0 − 0.05) − (−27.5) = 29.45
    assert got["k1"] == pytest.approx(29.45, abs=1e-12)
    assert got[["k2", "k3"]].isna().all()


# --- 8. reharmonise re-runs screens ---------------------------------------------------------


def test_reharmonise_rescreens_so_stored_screens_match_a_fresh_evaluation(
    demo_store: Path, tmp_path: Path
) -> None:
    from strata13.compile.derive.engine import Settings
    from strata13.compile.derive.screens import rule_set
    from strata13.compile.screening.evaluate import evaluate

    # One invented bulk sample whose δ18O (+20.605 ‰ VSMOW) lands either side of the
    # default −10 ‰ VPDB floor depending on the relation: IUPAC 0.97001 × 20.605 − 29.99
    # = −10.0029 (Brand et al. 2014); Coplen et al. 1983 (20.605 − 30.91) / 1.03091
    # = −9.9960 (from memory). Worked by hand.
    m = write_tiny(tmp_path, "vennick-2020", second_scale="VSMOW")
    (tmp_path / "vennick-2020.csv").write_text(  # the sheet, with an age column
        "Sample,Height,d13C,d18O,Age\nvx-1,1,1.2,20.605,183.0\n", encoding="utf-8"
    )
    m.write_text(
        m.read_text(encoding="utf-8").replace(
            "[constants]",
            '"Age" = "age"\n[constants]\ncomponent = "bulk"\nage_time_scale = "ICS2024/12"',
        ),
        encoding="utf-8",
    )
    store = api.open_store(demo_store)
    api.ingest(store, None, m)
    floor = (
        "SELECT s.outcome FROM screen_results s JOIN records r USING (record_id) "
        "WHERE r.sample_id = 'vx-1' AND s.rule = 'd18o-floor'"
    )
    assert read(demo_store, floor)[0].outcome.tolist() == ["fail"]
    res = api.reharmonise(store, vsmow_constants="Coplen-1983")
    assert res.version is not None and res.screen_changed >= 1
    now, stored, recs = read(
        demo_store,
        floor,
        "SELECT record_id, rule, outcome FROM screen_results",
        "SELECT * FROM records",
    )
    assert now.outcome.tolist() == ["pass"]
    settings = Settings.from_stored(store.settings())
    rules = rule_set(settings)
    fresh = evaluate(recs, rules, bool(settings.screen_untested_passes))
    want = fresh.overall.to_pandas().set_index("record_id").screen.astype(str)
    have = recs.set_index("record_id").screen.astype(str)
    assert have.sort_index().equals(want.sort_index())
    key = ["record_id", "rule"]
    fresh_long = fresh.results.to_pandas()[[*key, "outcome"]].astype(str)
    assert len(stored) == len(fresh_long) == len(recs) * len(rules.rules)
    pd.testing.assert_frame_equal(
        stored.astype(str).sort_values(key).reset_index(drop=True),
        fresh_long.sort_values(key).reset_index(drop=True),
    )
