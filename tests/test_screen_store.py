"""Screening in the store and on the command line: the demo's flags, the long results,
re-screening through the recompute engine (new rules, the untested policy), the screened
filter, the export manifest, the summary and cross-plots, bad rule files, scoped rules.

The demo data are invented: a dolomitised interval in 'Mossaret Cut' (high Mn, low Sr,
light δ18O), a core YC-2 whose δ18O covaries with δ13C, two quillar rows with δ18O 'n.d.'.
"""

from __future__ import annotations

import hashlib
import io
import json
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from strata13.compile import api
from strata13.compile.screening.rules import default_rules_path, load_rules

from tests.conftest import run_cli as run
from tests.conftest import tree_bytes

EXE = [sys.executable, "-m", "strata13"]
OUTCOMES = {"pass", "fail", "warn", "untested", "not applicable"}
# Columns screening must never touch: δ values (harmonised and reported), ages, positions.
DATA_COLUMNS = [
    "record_id",
    "source_id",
    "section_id",
    "sample_id",
    "lat",
    "lon",
    "position_m",
    "age_ma",
    "age_sigma_ma",
    "age_basis",
    "d13c_carb",
    "d13c_carb_reported",
    "d18o_carb",
    "d18o_carb_reported",
    "d13c_org",
    "d13c_org_reported",
    "plate_id",
    "paleolat",
    "paleolon",
    "mn_ppm",
    "sr_ppm",
    "fe_ppm",
]
# Kaufman & Knoll 1995, Precambrian Res. 73:27 (from memory): Mn/Sr < 10 and δ18O ≥ −10 ‰
# VPDB for near-primary δ13C — the default file's two fail rules.
MN_SR_LIMIT = 10.0
D18O_FLOOR = -10.0


def run_process(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([*EXE, *args], capture_output=True, text=True, timeout=300)


def frame(store: Path, statement: str) -> pd.DataFrame:
    res = api.sql(api.open_store(store), statement)
    assert not res.truncated
    return pd.DataFrame(res.rows, columns=res.columns)


def records(store: Path, columns: str = "*") -> pd.DataFrame:
    return frame(store, f"SELECT {columns} FROM records ORDER BY record_id")


def results(store: Path) -> pd.DataFrame:
    return frame(
        store,
        "SELECT s.record_id, s.rule, s.outcome, r.source_id, r.section_id "
        "FROM screen_results s JOIN records r USING (record_id)",
    )


def outcome_table(store: Path) -> pd.DataFrame:
    """record_id × rule -> outcome."""
    return results(store).pivot(index="record_id", columns="rule", values="outcome")


def n_versions(store: Path) -> int:
    return len(api.history(api.open_store(store)))


def stored_settings(store: Path) -> dict[str, object]:
    df = frame(store, "SELECT key, value_json FROM settings")
    return {k: json.loads(v) for k, v in zip(df["key"], df["value_json"], strict=True)}


def changed_count(stderr: str) -> int:
    m = re.search(r"(\d+) overall results? changed", stderr)
    assert m, stderr
    return int(m.group(1))


def error_line(stderr: str, hint: bool = True) -> str:
    """The one error line (one line, no traceback; a hint line after it when ``hint``)."""
    lines = [ln for ln in stderr.splitlines() if ln.startswith("error:")]
    assert len(lines) == 1, stderr
    assert "Traceback" not in stderr
    assert not hint or "hint:" in stderr, stderr
    return lines[0]


def strict_rules(folder: Path, mn_sr: float = 1) -> Path:
    """The default rules with only the Mn/Sr limit changed (10 -> ``mn_sr``)."""
    text = default_rules_path().read_text(encoding="utf-8")
    new, n = re.subn(r"(?m)^limit = 10$", f"limit = {mn_sr:g}", text)
    assert n == 1  # the Mn/Sr rule is the only one with limit 10
    path = folder / "strict.toml"
    path.write_text(new, encoding="utf-8")
    return path


def mn_sr_expected(df: pd.DataFrame, limit: float) -> pd.Series:
    """pass / fail from Mn/Sr (mass, both in ppm) computed by hand; untested without both."""
    ratio = df["mn_ppm"] / df["sr_ppm"]
    out = pd.Series(np.where(ratio < limit, "pass", "fail"), index=df.index)
    return out.where(ratio.notna(), "untested")


# --- 1. the demo's flags ---------------------------------------------------------------


def test_demo_dolomitised_rows_fail_nd_rows_untested_covarying_core_warns(demo_store: Path) -> None:
    rec = records(
        demo_store,
        "record_id, source_id, section_id, sample_id, component, "
        "mn_ppm, mn_qualifier, sr_ppm, sr_qualifier, d13c_carb, "
        "d18o_carb, screen",
    ).set_index("record_id")
    out = outcome_table(demo_store).loc[rec.index]
    assert set(rec["screen"]) == {"pass", "warn", "fail", "untested"}

    # The dolomitised interval: Mossaret Cut rows with Mn 2400–2850 ppm are exactly the fails.
    mos = rec[rec["section_id"] == "Mossaret Cut"]
    dolo = mos[mos["mn_ppm"].between(2400, 2850)]
    assert len(dolo) == 4
    assert dolo["sr_ppm"].between(160, 190).all() and (dolo["d18o_carb"] <= -10.8).all()
    assert set(rec.index[rec["screen"] == "fail"]) == set(dolo.index)
    assert (out.loc[dolo.index, "mn-sr-mass"] == "fail").all()
    assert (out.loc[dolo.index, "d18o-floor"] == "fail").all()

    # Both fail rules agree with the cited thresholds computed by hand on every record
    # (all demo components are in scope; the demo's censored Mn values have no Sr beside
    # them and its Sr is never censored, so a plain ratio decides).
    assert rec["sr_qualifier"].isna().all()
    assert rec.loc[rec["mn_qualifier"].notna(), "sr_ppm"].isna().all()
    assert (out["mn-sr-mass"] == mn_sr_expected(rec, MN_SR_LIMIT)).all()
    d18o = np.where(rec["d18o_carb"] >= D18O_FLOOR, "pass", "fail")
    assert (
        out["d18o-floor"]
        == pd.Series(d18o, index=rec.index).where(rec["d18o_carb"].notna(), "untested")
    ).all()

    # The quillar rows with δ18O 'n.d.' (two, one of them re-published by the 2022
    # compilation without δ18O) are untested (not pass), and nothing else is.
    nd = rec[
        rec["source_id"].isin(["quillar-2011", "orvanne-compilation-2022"])
        & rec["d18o_carb"].isna()
    ]
    assert len(nd) == 3
    assert set(rec.index[rec["screen"] == "untested"]) == set(nd.index)
    assert (out.loc[nd.index, "d18o-floor"] == "untested").all()
    assert not (out.loc[nd.index] == "pass").any().any()

    # YC-2 covaries: every YC-2 record warns on the covariance rule, no other section does.
    cov = out["d13c-d18o-covariance"]
    yc2 = rec.index[rec["section_id"] == "YC-2"]
    assert len(yc2) >= 10 and (cov.loc[yc2] == "warn").all()
    assert set(rec.index[cov == "warn"]) == set(yc2)
    # Cross-check with scipy: only YC-2 has Pearson r ≥ 0.7 between δ18O and δ13C
    # (threshold: common practice; meaning: Allan & Matthews 1982, Sedimentology 29:797).
    from scipy.stats import pearsonr

    for section, g in rec.dropna(subset=["d18o_carb", "d13c_carb"]).groupby("section_id"):
        r = pearsonr(g["d18o_carb"], g["d13c_carb"]).statistic
        assert (r >= 0.7) == (section == "YC-2"), (section, r)

    # Warnings never fail a record: YC-2 (warn, nothing failing) is stored as warn, and so
    # is every record whose worst outcome is a warning (its evidence is tested).
    assert (rec.loc[yc2, "screen"] == "warn").all()
    warned = out.index[(out == "warn").any(axis=1) & ~(out == "fail").any(axis=1)]
    assert len(warned) > 20
    assert (rec.loc[warned, "screen"] == "warn").all()


# --- 2. the long results ---------------------------------------------------------------


def test_screen_results_one_row_per_record_and_rule_and_overall_follows(demo_store: Path) -> None:
    rules = load_rules()  # a default store holds the shipped rule set
    assert stored_settings(demo_store)["screen_rules_sha256"] == rules.sha256
    rec = records(demo_store, "record_id, screen").set_index("record_id")["screen"]
    res = frame(demo_store, "SELECT record_id, rule, outcome FROM screen_results")
    assert len(res) == len(rec) * len(rules.rules)
    assert not res.duplicated(["record_id", "rule"]).any()
    assert set(res["rule"]) == {r.name for r in rules.rules}
    assert set(res["record_id"]) == set(rec.index)
    assert set(res["outcome"]) <= OUTCOMES
    # The overall column re-derived from the long form and the rule set's [[evidence]]:
    # any fail -> fail; else the evidence for the component not tested -> untested; else
    # any warn -> warn; else pass (untested and not-applicable are never a pass).
    comp = records(demo_store, "record_id, component").set_index("record_id")["component"]
    wide = res.pivot(index="record_id", columns="rule", values="outcome")
    decided = wide.isin(["pass", "warn", "fail"])

    def expected_state(rid: str) -> str:
        row, ok = wide.loc[rid], decided.loc[rid]
        if (row == "fail").any():
            return "fail"
        entry = next((e for e in rules.evidence if comp[rid] in e.components), None)
        met = all(ok[list(g)].any() for g in entry.requires) if entry else ok.any()
        if not met:
            return "untested"
        return "warn" if (row == "warn").any() else "pass"

    expected = pd.Series({rid: expected_state(rid) for rid in wide.index})
    assert (rec.sort_index() == expected.sort_index()).all()
    assert set(expected) == {"pass", "warn", "fail", "untested"}


# --- 3. re-screening through the recompute engine --------------------------------------


def test_screen_with_the_same_rules_changes_nothing(demo_store: Path, tmp_path: Path) -> None:
    before, versions = tree_bytes(demo_store), n_versions(demo_store)
    res = run("screen", "--store", str(demo_store))
    assert res.returncode == 0, res.stderr
    assert "0 changed" in res.stderr
    # The same rules in a file without its comments: the same rule set (hash of content).
    bare = tmp_path / "bare.toml"
    bare.write_text(
        "\n".join(
            ln
            for ln in default_rules_path().read_text("utf-8").splitlines()
            if not ln.lstrip().startswith("#")
        ),
        encoding="utf-8",
    )
    res = run("screen", "--rules", str(bare), "--store", str(demo_store))
    assert res.returncode == 0, res.stderr
    assert "0 changed" in res.stderr
    assert n_versions(demo_store) == versions
    assert tree_bytes(demo_store) == before


def test_stricter_rules_make_one_version_and_change_only_the_flags(
    demo_store: Path, tmp_path: Path
) -> None:
    cols = ", ".join(DATA_COLUMNS)
    data_before = records(demo_store, cols)
    screen_before = records(demo_store, "record_id, screen").set_index("record_id")["screen"]
    versions = n_versions(demo_store)
    strict = strict_rules(tmp_path)

    res = run_process("screen", "--rules", str(strict), "--store", str(demo_store))
    assert res.returncode == 0, res.stderr
    history = api.history(api.open_store(demo_store))
    assert len(history) == versions + 1 and history[-1].command == "screen"
    assert stored_settings(demo_store)["screen_rules_sha256"] == load_rules(strict).sha256

    screen_after = records(demo_store, "record_id, screen").set_index("record_id")["screen"]
    assert changed_count(res.stderr) == int((screen_after != screen_before).sum()) > 0
    fails_before = set(screen_before.index[screen_before == "fail"])
    fails_after = set(screen_after.index[screen_after == "fail"])
    assert fails_after > fails_before
    # Mn/Sr < 1 as "well preserved" (Nagarajan et al. 2008, Rev. Mex. Cienc. Geol. 25:225),
    # computed by hand.
    rec = records(demo_store, "record_id, mn_ppm, sr_ppm").set_index("record_id")
    out = outcome_table(demo_store).loc[rec.index]
    assert (out["mn-sr-mass"] == mn_sr_expected(rec, 1.0)).all()

    # Screening never changes a δ value, an age, a coordinate or the record count.
    pd.testing.assert_frame_equal(records(demo_store, cols), data_before)

    # Back to the default rules: one more version, the original flags exactly.
    res = run("screen", "--rules", str(default_rules_path()), "--store", str(demo_store))
    assert res.returncode == 0, res.stderr
    assert n_versions(demo_store) == versions + 2
    assert changed_count(res.stderr) == int((screen_after != screen_before).sum())
    restored = records(demo_store, "record_id, screen").set_index("record_id")["screen"]
    pd.testing.assert_series_equal(restored, screen_before)


# --- 4. the untested policy ------------------------------------------------------------


def test_untested_passes_is_a_store_setting_and_fails_restores(demo_store: Path) -> None:
    before = records(demo_store, "record_id, screen").set_index("record_id")["screen"]
    out = outcome_table(demo_store).loc[before.index]
    untested = before.index[before == "untested"]
    # Records that become pass: untested overall with at least one applicable rule untested.
    turning = untested[(out.loc[untested] == "untested").any(axis=1)]
    assert len(turning) == 3  # the three records without δ18O

    res = run("screen", "--untested", "passes", "--store", str(demo_store))
    assert res.returncode == 0, res.stderr
    assert changed_count(res.stderr) == len(turning)
    assert stored_settings(demo_store)["screen_untested_passes"] is True
    after = records(demo_store, "record_id, screen").set_index("record_id")["screen"]
    assert (after.loc[turning] == "pass").all()
    others = before.index.difference(turning)
    pd.testing.assert_series_equal(after.loc[others], before.loc[others])

    # The setting stays with the store: a plain re-screen keeps it (nothing to change).
    versions = n_versions(demo_store)
    res = run("screen", "--store", str(demo_store))
    assert res.returncode == 0 and "0 changed" in res.stderr
    assert n_versions(demo_store) == versions

    res = run("screen", "--untested", "fails", "--store", str(demo_store))
    assert res.returncode == 0, res.stderr
    assert stored_settings(demo_store)["screen_untested_passes"] is False
    restored = records(demo_store, "record_id, screen").set_index("record_id")["screen"]
    pd.testing.assert_series_equal(restored, before)

    snapshot = tree_bytes(demo_store)
    res = run_process("screen", "--untested", "maybe", "--store", str(demo_store))
    assert res.returncode == 2
    assert "maybe" in error_line(res.stderr)
    assert tree_bytes(demo_store) == snapshot


# --- 5. the screened filter ------------------------------------------------------------


@pytest.mark.parametrize("status", ["pass", "fail", "untested", "all"])
def test_query_screened_counts_equal_sql(demo_store: Path, status: str) -> None:
    res = run("query", "--screened", status, "--format", "json", "--store", str(demo_store))
    assert res.returncode == 0, res.stderr
    rows = json.loads(res.stdout) if res.stdout.strip() else []
    where = "" if status == "all" else f" WHERE screen = '{status}'"
    expected = int(frame(demo_store, f"SELECT count(*) AS n FROM records{where}")["n"][0])
    assert expected > 0 and len(rows) == expected
    if status != "all":
        assert {r["screen"] for r in rows} == {status}


def test_query_screened_bogus_is_exit_2(demo_store: Path) -> None:
    res = run_process("query", "--screened", "bogus", "--store", str(demo_store))
    assert res.returncode == 2 and res.stdout == ""
    line = error_line(res.stderr, hint=False)
    assert "bogus" in line and "untested" in line


def test_query_screened_bogus_error_has_a_hint(demo_store: Path) -> None:
    res = run_process("query", "--screened", "bogus", "--store", str(demo_store))
    assert res.returncode == 2 and "bogus" in res.stderr
    error_line(res.stderr, hint=True)


# --- 6. the export manifest ------------------------------------------------------------


def test_export_manifest_names_the_rule_set_and_its_hash_not_its_text(
    demo_store: Path, tmp_path: Path
) -> None:
    rules = load_rules()
    res = run("export", "--out", str(tmp_path / "ex"), "--store", str(demo_store))
    assert res.returncode == 0, res.stderr
    text = (tmp_path / "ex" / "manifest.json").read_text(encoding="utf-8")
    settings = json.loads(text)["settings"]
    assert settings["screen_rules_sha256"] == rules.sha256
    assert settings["screen_rules_name"] == f"{rules.name} {rules.version}"
    # The hash is that of the rule text the store keeps (so the export can be re-screened).
    stored = stored_settings(demo_store)["screen_rules"]
    assert hashlib.sha256(str(stored).encode("utf-8")).hexdigest() == rules.sha256
    assert "screen_rules" not in settings
    for rule in rules.rules:
        assert rule.description not in text and rule.citation not in text
    assert len(text) < len(str(stored))


def test_export_as_of_reports_the_rules_of_that_version(demo_store: Path, tmp_path: Path) -> None:
    store = api.open_store(demo_store)
    version = n_versions(demo_store)
    strict = strict_rules(tmp_path)
    assert api.screen(store, strict).version == version + 1
    api.export(store, tmp_path / "old", as_of=version)
    api.export(store, tmp_path / "new")
    manifest = {
        k: json.loads((tmp_path / k / "manifest.json").read_text("utf-8")) for k in ("old", "new")
    }
    assert manifest["old"]["settings"]["screen_rules_sha256"] == load_rules().sha256
    assert manifest["new"]["settings"]["screen_rules_sha256"] == load_rules(strict).sha256
    fails = {
        k: int((pd.read_parquet(tmp_path / k / "records.parquet")["screen"] == "fail").sum())
        for k in manifest
    }
    assert fails["new"] > fails["old"] == 4


# --- 7. summary and cross-plots --------------------------------------------------------


def test_summary_csv_counts_match_a_groupby_of_the_results(demo_store: Path) -> None:
    versions = n_versions(demo_store)
    res = run("screen", "--summary", "--format", "csv", "--store", str(demo_store))
    assert res.returncode == 0, res.stderr
    got = pd.read_csv(io.StringIO(res.stdout))
    keys = ["source_id", "section_id", "rule", "outcome"]
    assert list(got.columns) == [*keys, "n"]
    expected = results(demo_store).groupby(keys).size().rename("n").reset_index()
    pd.testing.assert_frame_equal(
        got.sort_values(keys).reset_index(drop=True),
        expected.sort_values(keys).reset_index(drop=True),
        check_dtype=False,
    )
    assert got["n"].sum() == len(records(demo_store, "record_id")) * len(load_rules().rules)
    assert n_versions(demo_store) == versions  # a summary is a read


def test_plot_writes_one_readable_png_per_section(demo_store: Path, tmp_path: Path) -> None:
    import matplotlib.image as mpimg

    out = tmp_path / "plots"
    res = run("screen", "--plot", str(out), "--store", str(demo_store))
    assert res.returncode == 0, res.stderr
    sections = frame(demo_store, "SELECT DISTINCT source_id, section_id FROM records")
    files = sorted(out.glob("*.png"))
    assert len(files) == len(sections) >= 6
    # nothing but the figures: each a PNG with its SVG and PDF beside it
    stems = [p.stem for p in files]
    assert sorted(p.name for p in out.iterdir()) == sorted(
        f"{s}.{ext}" for s in stems for ext in ("pdf", "png", "svg")
    )
    for f in files:
        img = mpimg.imread(f)
        assert img.ndim == 3 and img.shape[0] > 100 and img.shape[1] > 100
        assert float(img[..., :3].std()) > 0  # not a blank image


# --- 8. bad rule files ----------------------------------------------------------------


def _bad_rules(folder: Path, case: str) -> tuple[Path, list[str]]:
    """A broken copy of the default rules and words its error must contain."""
    text = default_rules_path().read_text(encoding="utf-8")
    path = folder / f"{case}.toml"
    if case == "unknown-field":
        text = text.replace('ratio_by = "mass"', 'ratio_bye = "mass"', 1)
        words = ["ratio_bye", "mn-sr-mass", "Did you mean 'ratio_by'"]
    elif case == "unknown-kind":
        text = text.replace('kind = "allowed-values"', 'kind = "cement-detector"', 1)
        words = ["cement-detector", "no-cements", "kind"]
    elif case == "invalid-toml":
        lines = text.splitlines()
        i = lines.index('field = "fe_ppm"')
        lines[i] = 'field = "fe_ppm'  # unterminated string
        text = "\n".join(lines)
        words = [f"line {i + 1}", "TOML"]
    else:
        return folder / "no-such-rules.toml", ["no-such-rules.toml", "does not exist"]
    path.write_text(text, encoding="utf-8")
    return path, words


CASES = ["unknown-field", "unknown-kind", "invalid-toml", "missing-file"]


@pytest.mark.parametrize("case", CASES)
def test_bad_rule_file_is_exit_2_with_one_clear_error_and_store_unchanged(
    demo_store: Path, tmp_path: Path, case: str
) -> None:
    path, words = _bad_rules(tmp_path, case)
    before = tree_bytes(demo_store)
    res = run_process("screen", "--rules", str(path), "--store", str(demo_store))
    assert res.returncode == 2
    line = error_line(res.stderr)
    for w in words:
        assert w in line, (w, line)
    assert tree_bytes(demo_store) == before


@pytest.mark.parametrize("case", CASES)
def test_init_with_bad_rules_creates_nothing(tmp_path: Path, case: str) -> None:
    path, words = _bad_rules(tmp_path, case)
    res = run("init", "--rules", str(path), "--store", str(tmp_path / "new"))
    assert res.returncode == 2
    assert words[0] in error_line(res.stderr)
    assert not (tmp_path / "new").exists()
    empty = tmp_path / "empty"
    empty.mkdir()
    res = run("init", "--rules", str(path), "--store", str(empty))
    assert res.returncode == 2 and list(empty.iterdir()) == []


# --- 9. scoped rules -------------------------------------------------------------------

AGE_RULES = """
[ruleset]
name = "age-window"
version = "1"
description = "One d18O floor scoped to part of the Early Jurassic (test rule set)."

[[rule]]
name = "d18o-floor-window"
kind = "value-limit"
description = "Rule of thumb: d18O carb at least -10 permil VPDB; scoped by age for a test."
citation = "Kaufman & Knoll 1995, Precambrian Research 73:27 (from memory)"
confidence = "MEMORY"
severity = "fail"
field = "d18o_carb"
pass_if = "at_least"
limit = -10
unit = "‰"
scope = {{ age_min_ma = {lo!r}, age_max_ma = {hi!r} }}
"""


def test_age_scoped_rule_marks_records_outside_not_applicable(
    demo_store: Path, tmp_path: Path
) -> None:
    rec = records(demo_store, "record_id, age_ma, d18o_carb").set_index("record_id")
    ages = rec["age_ma"].dropna().sort_values()
    assert ages.min() < 182.5 and ages.max() > 183.5 and rec["age_ma"].notna().all()
    # Bounds at two records' exact ages: the scope is inclusive at both ends.
    lo = float(ages[ages >= 182.5].iloc[0])
    hi = float(ages[ages <= 183.5].iloc[-1])
    path = tmp_path / "age.toml"
    path.write_text(AGE_RULES.format(lo=lo, hi=hi), encoding="utf-8")
    res = run("screen", "--rules", str(path), "--store", str(demo_store))
    assert res.returncode == 0, res.stderr

    out = frame(demo_store, "SELECT record_id, rule, outcome FROM screen_results")
    assert len(out) == len(rec) and set(out["rule"]) == {"d18o-floor-window"}
    out = out.set_index("record_id")["outcome"].loc[rec.index]
    inside = rec["age_ma"].between(lo, hi)
    assert 0 < inside.sum() < len(rec)
    assert (out[~inside] == "not applicable").all()
    expected = pd.Series(
        np.where(rec["d18o_carb"] >= D18O_FLOOR, "pass", "fail"), index=rec.index
    ).where(rec["d18o_carb"].notna(), "untested")
    assert (out[inside] == expected[inside]).all()
    assert out[rec["age_ma"] == lo].iloc[0] != "not applicable"
    assert out[rec["age_ma"] == hi].iloc[0] != "not applicable"
    # Not applicable is no evidence of preservation: those records are untested overall.
    screen = records(demo_store, "record_id, screen").set_index("record_id")["screen"]
    assert (screen[~inside] == "untested").all()
    assert (screen[inside] == out[inside]).all()  # one rule: its outcome is the overall
