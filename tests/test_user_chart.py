"""A chart table of the user's own as a store's time scale (init and redate), named by its
file hash, loadable in any later process from the store's settings."""

from __future__ import annotations

import hashlib
import json
import subprocess
import sys
from pathlib import Path

import pytest
from strata13.compile import api
from strata13.schemas import timescales

from strata13.errors import ConfigError, OptionError

SHIPPED = timescales.TABLES / "ics2024-12.csv"
# an invented working chart: the shipped v2024/12 with the Toarcian base moved to 184.6 Ma
# and its error stated as ± 0.4 Myr at 95 %
NAME = "orvanne-working-chart"


def user_chart(tmp_path: Path, version: str = NAME, toarcian: str | None = None) -> Path:
    text = SHIPPED.read_text(encoding="utf-8")
    text = text.replace("# version: ICS2024/12", f"# version: {version}")
    old = "Toarcian,stage,Lower Jurassic,184.2,0.3,95%,0.15306,false,toarcian,"
    assert old in text
    text = text.replace(
        old, toarcian or "Toarcian,stage,Lower Jurassic,184.6,0.4,95%,,false,toarcian,"
    )
    path = tmp_path / "working-chart.csv"
    path.write_text(text, encoding="utf-8")
    return path


def boundary_ties(store: Path) -> list[dict]:
    rows = api.sql(
        api.open_store(store),
        "SELECT DISTINCT c.steps_json FROM records r JOIN chains c ON c.chain_id = r.age_chain",
    ).rows
    return [
        tie
        for (text,) in rows
        for step in json.loads(text)
        for tie in step.get("ties", [])
        if tie["method"].startswith("chart boundary")
    ]


def test_redate_onto_a_user_chart_names_it_by_hash_and_uses_its_boundaries(
    demo_store: Path, tmp_path: Path
) -> None:
    chart = user_chart(tmp_path)
    digest = hashlib.sha256(chart.read_bytes()).hexdigest()[:12]
    store = api.open_store(demo_store)
    api.redate(store, str(chart))
    settings = store.settings()
    assert settings["time_scale"] == f"{NAME}@{digest}"
    assert settings["time_scale_table"] == chart.read_text(encoding="utf-8")
    scales = {r[0] for r in api.sql(store, "SELECT DISTINCT time_scale FROM records").rows}
    assert f"{NAME}@{digest}" in scales and "ICS2024/12" not in scales
    toarcian = [t for t in boundary_ties(demo_store) if "'Toarcian'" in t["tie"]]
    assert toarcian
    # a chart-boundary tie takes the boundary's age on the store's chart, and its error:
    # ± 0.4 Myr at 95 % is 1σ = 0.4 / 1.959964 (normal quantile, closed form)
    assert {t["age_ma"] for t in toarcian} == {184.6}
    assert all(t["sigma_ma"] == pytest.approx(0.4 / 1.959964, abs=1e-5) for t in toarcian)


def test_a_later_process_reads_the_store_on_its_own_chart(demo_store: Path, tmp_path: Path) -> None:
    api.redate(api.open_store(demo_store), str(user_chart(tmp_path)))
    ran = subprocess.run(
        [sys.executable, "-m", "strata13", "stages", "--store", str(demo_store)]
        + ["--interval", "Toarcian"],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert ran.returncode == 0, ran.stderr
    assert NAME in ran.stdout + ran.stderr and "184.6" in ran.stdout


def test_redate_back_to_a_shipped_chart_drops_the_table(demo_store: Path, tmp_path: Path) -> None:
    store = api.open_store(demo_store)
    api.redate(store, str(user_chart(tmp_path)))
    api.redate(store, "ICS2024/12")
    settings = store.settings()
    assert settings["time_scale"] == "ICS2024/12" and "time_scale_table" not in settings
    assert {t["age_ma"] for t in boundary_ties(demo_store) if "'Toarcian'" in t["tie"]} == {184.2}


def test_init_takes_a_user_chart(tmp_path: Path) -> None:
    chart = user_chart(tmp_path)
    store = api.init_store(tmp_path / "s", time_scale=str(chart))
    assert store.settings()["time_scale"].startswith(NAME + "@")


def test_a_table_named_after_a_shipped_chart_or_with_bad_rows_is_refused(tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match="name of a chart strata13 knows"):
        api.init_store(tmp_path / "a", time_scale=str(user_chart(tmp_path, "ICS2024/12")))
    assert not (tmp_path / "a").exists()
    bad = user_chart(
        tmp_path, toarcian="Toarcian,stage,Lower Jurassic,many,0.4,95%,,false,toarcian,"
    )
    with pytest.raises(ConfigError, match=r"working-chart.csv, line \d+"):
        api.init_store(tmp_path / "b", time_scale=str(bad))
    with pytest.raises(OptionError, match="not a shipped time scale"):
        api.init_store(tmp_path / "c", time_scale="GTS2020")
