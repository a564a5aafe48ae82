"""Syntheses leave failed and untested records out by default and say so with counts;
`query` and plain `export` keep every record. The counts are checked against a pandas count
of the same records."""

from __future__ import annotations

import io
import json
from pathlib import Path

import pandas as pd
import pytest
from strata13.cli.filters import SYNTHESIS_SCREENED as CLI_DEFAULT
from strata13.compile import api

from strata13.errors import OptionError
from tests.conftest import run_cli as run

ARGS = ("--interval", "Toarcian", "--bin-myr", "0.5", "--boots", "0")


def _records(store: Path, *args: str) -> pd.DataFrame:
    r = run("query", *args, "--format", "csv", "--store", store)
    assert r.code == 0, r.err
    return pd.read_csv(io.StringIO(r.out))


def test_a_curve_leaves_failed_and_untested_records_out_and_says_how_many(
    demo_store: Path, tmp_path: Path
) -> None:
    every = _records(demo_store, "--interval", "Toarcian")
    counts = every["screen"].value_counts()
    assert counts.get("fail", 0) and counts.get("untested", 0)  # the demo has both
    r = run("curve", "--out", tmp_path / "c", *ARGS, "--store", demo_store)
    assert r.code == 0, r.err
    used = int(counts.get("pass", 0) + counts.get("warn", 0))
    said = (
        f"{used} of {len(every)} records used; {counts['fail']} fail, {counts['untested']} "
        "untested left out by --screened pass,warn; --screened all to include"
    )
    assert said in r.err
    m = json.loads((tmp_path / "c" / "curve_manifest.json").read_text())
    assert m["filters"]["screened"] == "pass,warn"
    assert m["screen_left_out"] == {"fail": counts["fail"], "untested": counts["untested"]}
    assert said in m["notes"]


def test_screened_all_includes_them_and_says_so(demo_store: Path, tmp_path: Path) -> None:
    every = _records(demo_store, "--interval", "Toarcian")
    counts = every["screen"].value_counts()
    r = run("curve", "--out", tmp_path / "c", *ARGS, "--screened", "all", "--store", demo_store)
    assert r.code == 0, r.err
    assert (
        f"--screened all: {counts['fail']} fail and {counts['untested']} untested records "
        f"included among {len(every)}"
    ) in r.err
    assert json.loads((tmp_path / "c" / "curve_manifest.json").read_text())["screen_left_out"] == {}


def test_coverage_and_excursion_share_the_default(demo_store: Path, tmp_path: Path) -> None:
    for command in (
        ("coverage", "--interval", "Toarcian", "--bin-myr", "0.5"),
        ("excursion", "--interval", "Toarcian"),
    ):
        r = run(*command, "--store", demo_store)
        assert r.code == 0, r.err
        assert "left out by --screened pass,warn; --screened all to include" in r.err, command


def test_query_keeps_every_record_by_default(demo_store: Path) -> None:
    every = _records(demo_store)
    assert set(every["screen"]) >= {"pass", "fail", "untested"}
    kept = _records(demo_store, "--screened", "pass,fail")
    assert len(kept) == int(every["screen"].isin(["pass", "fail"]).sum())


def test_screened_values_are_checked() -> None:
    assert api.screen_states("pass, warn,pass") == ("pass", "warn")
    assert api.screen_states("all") is None and api.screen_states("pass,all") is None
    with pytest.raises(OptionError, match="not one of"):
        api.screen_states("passed")
    with pytest.raises(OptionError):
        api.screen_states(" , ")


def test_the_command_line_default_is_the_librarys() -> None:
    assert CLI_DEFAULT == api.SYNTHESIS_SCREENED


def test_a_bad_curve_screen_state_is_refused_by_its_own_option_name(
    demo_store: Path, tmp_path: Path
) -> None:
    r = run(
        "export", "--out", tmp_path / "x", "--with-curve", "--curve-screened", "nope",
        "--store", demo_store,
    )  # fmt: skip
    assert r.code == 2 and "--curve-screened 'nope' is not one of" in r.err
    assert not (tmp_path / "x").exists()
