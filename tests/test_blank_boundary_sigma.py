"""A chart boundary whose error the chart leaves blank is never exact: its 1σ is borrowed
from the nearest chart that states one (and says so), set by the store, or refused."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from strata13.compile import api
from strata13.schemas import timescales

from strata13.errors import DomainError, OptionError


def test_a_blank_error_is_borrowed_from_the_nearest_chart_that_states_one() -> None:
    own = timescales.load("ICS2020").by_key("toarcian")
    assert own.sigma_ma is None  # the 2020 table leaves this error blank
    got = timescales.boundary_sigma("ICS2020", "toarcian")
    assert got.borrowed_from == "ICS2023/09"  # next to 2020 in the shipped order
    lender = timescales.load("ICS2023/09").by_key("toarcian")
    # the lender states ± 0.3 Myr at 95 %: 1σ = 0.3 / 1.959964 (normal quantile, closed form)
    assert lender.uncertainty_ma == 0.3
    # (the tables keep 1σ to 5 decimals)
    assert got.sigma_ma == pytest.approx(0.3 / 1.959964, abs=1e-5)
    stated = timescales.boundary_sigma("ICS2024/12", "toarcian")
    assert stated.borrowed_from is None
    assert stated.sigma_ma == pytest.approx(0.3 / 1.959964, abs=1e-5)


def _chart_boundary_steps(store: Path) -> list[dict]:
    rows = api.sql(
        api.open_store(store),
        "SELECT DISTINCT c.steps_json FROM records r JOIN chains c ON c.chain_id = r.age_chain",
    ).rows
    steps = []
    for (text,) in rows:
        for step in json.loads(text):
            for tie in step.get("ties", []):
                if tie["method"].startswith("chart boundary"):
                    steps.append(tie)
    return steps


def test_redating_the_demo_to_ics2020_leaves_no_boundary_tie_exact(demo_store: Path) -> None:
    store = api.open_store(demo_store)
    api.redate(store, "ICS2020")
    ties = _chart_boundary_steps(demo_store)
    assert ties and all(t["sigma_ma"] > 0 for t in ties)
    borrowed = [t for t in ties if "borrowed from" in t.get("sigma_from", "")]
    assert borrowed  # the 2020 chart states no error for these boundaries
    _, rows, _ = api.stages(None, "ICS2020", "Toarcian")
    assert rows[0]["sigma_from"].startswith("borrowed from") and rows[0]["sigma_ma"] > 0


def test_the_store_can_state_a_sigma_or_refuse(demo_store: Path) -> None:
    store = api.open_store(demo_store)
    api.redate(store, "ICS2020", blank_boundary_sigma="0.5")
    assert {t["sigma_ma"] for t in _chart_boundary_steps(demo_store) if "sigma_from" in t} == {0.5}
    version = store.latest_version()
    with pytest.raises(DomainError, match="refuses blank boundary errors"):
        api.redate(store, blank_boundary_sigma="refuse")
    assert store.latest_version() == version  # nothing written
    with pytest.raises(OptionError):
        api.redate(store, blank_boundary_sigma="-1")


def test_explain_says_where_a_borrowed_sigma_came_from(demo_store: Path) -> None:
    from tests.conftest import run_cli

    store = api.open_store(demo_store)
    api.redate(store, "ICS2020")
    rid = api.sql(
        store,
        "SELECT r.record_id FROM records r JOIN chains c ON c.chain_id = r.age_chain "
        "WHERE c.steps_json LIKE '%borrowed from%' ORDER BY 1 LIMIT 1",
    ).rows[0][0]
    info = api.explain(store, rid)
    ties = [t for s in info["age_steps"] for t in s.get("ties", [])]
    assert any("borrowed from" in t.get("sigma_from", "") for t in ties)
    out = run_cli("explain", rid, "--store", demo_store)
    assert out.code == 0 and "borrowed from ICS2023/09" in out.out
