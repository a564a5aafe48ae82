"""`strata13 excursion` with uncertainty on the demo store: the new columns and their units,
CSV and Parquet alike, the manifest's draws and seed, repeats byte for byte, --draws 0 and
--no-bootstrap, refusals. The demo data are invented."""

from __future__ import annotations

import io
import json
import re
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from strata13.cli import synthesis as cli_synthesis
from strata13.compile.synthesis import excursion_draws

from tests.conftest import Ran
from tests.conftest import run_cli as run

ARGS = ("--interval", "Toarcian", "--direction", "negative", "--by", "region")


def ok(*args: object) -> Ran:
    r = run(*args)
    assert r.code == 0, r.err
    assert "Traceback" not in r.err
    return r


@pytest.fixture(scope="module")
def store(demo_store_session: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    dst = tmp_path_factory.mktemp("excursion") / "compilation"
    shutil.copytree(demo_store_session, dst)
    return dst


@pytest.fixture(scope="module")
def outs(store: Path, tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path, Ran]:
    """The same default request written twice."""
    base = tmp_path_factory.mktemp("excursion_out")
    a, b = base / "a", base / "b"
    r = ok("excursion", *ARGS, "--out", a, "--store", store)
    ok("excursion", *ARGS, "--out", b, "--store", store)
    return a, b, r


def test_the_cli_default_is_the_library_default() -> None:
    # --help imports no numpy, so the CLI repeats the number: the two must agree
    assert cli_synthesis.EXCURSION_DRAWS == excursion_draws.DEFAULT_DRAWS


def test_tables_carry_every_spread_with_units_in_csv_and_parquet(
    outs: tuple[Path, Path, Ran],
) -> None:
    out, _, r = outs
    per = pd.read_csv(out / "excursion_sections.csv")
    assert list(per.columns) == excursion_draws.per_section_columns()
    pq = pd.read_parquet(out / "excursion_sections.parquet")
    assert list(pq.columns) == list(per.columns)
    num = pq.select_dtypes("number").columns  # (flags "" reads back from CSV as NaN)
    np.testing.assert_allclose(pq[num].to_numpy(float), per[num].to_numpy(float), rtol=1e-5)
    assert (per["draws"] == 500).all()
    for m in ("onset", "peak", "recovery"):
        has = per[f"{m}_age_ma"].notna()
        assert has.sum() >= 6
        sub = per[has]
        assert (sub[f"{m}_age_sigma_myr"] > 0).all()  # the demo's ages are uncertain
        assert (sub[f"{m}_age_p2_5_ma"] < sub[f"{m}_age_p97_5_ma"]).all()
        assert sub[f"{m}_found_draws"].between(1, 500).all()
    # the duration is onset − recovery in Myr (the CSV keeps 6 significant digits: ages to
    # 0.001 Ma, so the difference of two rounded ages is good to 0.001 Myr)
    both = per["duration_myr"].notna()
    np.testing.assert_allclose(
        per.loc[both, "duration_myr"],
        per.loc[both, "onset_age_ma"] - per.loc[both, "recovery_age_ma"],
        atol=1.1e-3,
    )
    summ = pd.read_csv(out / "excursion_summary.csv")
    assert list(summ.columns) == excursion_draws.summary_columns()
    assert (summ["onset_age_ma_mean_sigma_myr"] > 0).all()
    assert (summ["magnitude_mean_draws"] == 500).all()
    cols = pd.read_csv(out / "excursion_columns.csv")
    assert set(cols["column"]) == set(per.columns) | set(summ.columns)
    assert cols.set_index("column").loc["onset_age_sigma_myr", "unit"] == "Myr"
    assert cols.set_index("column").loc["magnitude_sigma_permil", "unit"] == "‰"
    # a metric some draws missed says so, with counts
    missed = per[(per["recovery_found_draws"] < 500) & per["recovery_age_ma"].notna()]
    for name in missed["section_id"]:
        assert re.search(rf"{re.escape(str(name))} \([^)]*\)[^;]*recovery \d+", r.err)


def test_manifest_records_draws_seed_and_method_and_files_repeat(
    outs: tuple[Path, Path, Ran],
) -> None:
    a, b, _ = outs
    man = json.loads((a / "manifest.json").read_text(encoding="utf-8"))
    assert man["parameters"]["draws"] == 500 and man["parameters"]["seed"] == 0
    assert man["parameters"]["bootstrap"] is True
    unc = man["uncertainty"]
    assert unc["draws"] == 500 and unc["seed"] == 0
    assert unc["ages"]["age model draws"] > 0 and unc["ages"]["stored_per_section"] == 1000
    assert "--draws 500 --seed 0" in man["command"] and "--no-bootstrap" not in man["command"]
    for name in (
        "excursion_sections.csv",
        "excursion_sections.parquet",
        "excursion_summary.csv",
        "excursion_columns.csv",
        "excursion.png",
    ):
        assert (a / name).read_bytes() == (b / name).read_bytes(), name
    # The vector files repeat up to sub-pixel float noise in matplotlib's layout: a CI run
    # once saw one SVG coordinate differ in its sixth decimal (the PNGs were identical).
    # So the SVG is compared with its numbers to 0.01 pt (clip ids aside) and the PDF by
    # its size.
    svg_a, svg_b = ((d / "excursion.svg").read_text(encoding="utf-8") for d in (a, b))
    assert _rounded(svg_a) == _rounded(svg_b)
    pdf_a, pdf_b = ((d / "excursion.pdf").stat().st_size for d in (a, b))
    assert abs(pdf_a - pdf_b) <= 16


def _rounded(svg: str) -> str:
    """Numbers to 0.01 pt, and clip-path ids (a hash of the clipped path) made neutral."""
    svg = re.sub(r"\bp[0-9a-f]{10}\b", "p-clip", svg)
    return re.sub(r"-?\d+\.\d+", lambda m: f"{float(m.group()):.2f}", svg)


def test_another_seed_gives_other_draws_and_no_draws_blank_spreads(
    store: Path, outs: tuple[Path, Path, Ran]
) -> None:
    first = pd.read_csv(outs[0] / "excursion_sections.csv")
    r = ok("excursion", *ARGS, "--seed", "1", "--format", "csv", "--store", store)
    other = pd.read_csv(io.StringIO(r.out))
    assert not np.allclose(first["onset_age_sigma_myr"], other["onset_age_sigma_myr"])
    # the centres do not depend on the draws
    pd.testing.assert_series_equal(first["onset_age_ma"], other["onset_age_ma"], rtol=1e-5)
    r = ok("excursion", *ARGS, "--draws", "0", "--format", "csv", "--store", store)
    none = pd.read_csv(io.StringIO(r.out))
    assert none.filter(like="_sigma_").isna().all(axis=None)
    assert (none["onset_found_draws"] == 0).all() and (none["draws"] == 0).all()
    assert "--draws 0: no uncertainty" in r.err


def test_no_bootstrap_varies_the_ages_only(store: Path, tmp_path: Path) -> None:
    out = tmp_path / "ages-only"
    r = ok("excursion", *ARGS, "--no-bootstrap", "--draws", "100", "--out", out, "--store", store)
    per = pd.read_csv(out / "excursion_sections.csv")
    # positions come from the samples alone: without resampling they do not move
    assert (per["onset_position_sigma_m"].dropna() == 0).all()
    assert (per["magnitude_sigma_permil"].dropna() == 0).all()
    assert (per["onset_age_sigma_myr"].dropna() > 0).all()
    assert "--no-bootstrap" in r.err
    man = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    assert man["parameters"]["bootstrap"] is False and "--no-bootstrap" in man["command"]


@pytest.mark.parametrize("bad", ["-5", "20000"])
def test_bad_draws_are_refused_and_nothing_is_written(
    store: Path, tmp_path: Path, bad: str
) -> None:
    out = tmp_path / "ex"
    r = run("excursion", *ARGS, "--draws", bad, "--out", out, "--store", store)
    assert r.code == 2 and "--draws" in r.err and "hint:" in r.err
    assert "Traceback" not in r.err and not out.exists()


def test_help_shows_the_new_options() -> None:
    r = run("excursion", "--help")
    assert r.code == 0
    text = re.sub(r"\s+", " ", r.out)
    for flag in ("--draws", "--seed", "--no-bootstrap"):
        assert flag in text
    assert "500" in text
