"""Bins are round on the store's chart (multiples of the width, or stage boundaries), and a
curve and a coverage table of the same request share them."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from strata13.compile.synthesis.run import CurveRequest, bin_edges_for
from strata13.schemas import timescales

from tests.conftest import run_cli as run

CHART = "ICS2024/12"


def test_width_bins_are_multiples_of_the_width() -> None:
    edges, _ = bin_edges_for(CurveRequest(bin_myr=0.5), 183.47, 181.12, CHART)
    assert edges.tolist() == [183.5, 183.0, 182.5, 182.0, 181.5, 181.0]
    # 0.1 Myr: k × 0.1 exactly as decimals (no 183.29999…)
    edges, _ = bin_edges_for(CurveRequest(bin_myr=0.1), 183.47, 183.12, CHART)
    assert edges.tolist() == [183.5, 183.4, 183.3, 183.2, 183.1]


def test_an_interval_sets_the_ends_and_multiples_fill_it() -> None:
    toarcian = (174.7, 184.2)  # ICS chart v2024/12 (the table shipped in schemas/data)
    edges, _ = bin_edges_for(CurveRequest(bin_myr=2.0), 183.0, 176.0, CHART, toarcian)
    assert edges.tolist() == [184.2, 184.0, 182.0, 180.0, 178.0, 176.0, 174.7]


def test_stage_bins_are_the_chart_boundaries_enclosing_the_data() -> None:
    chart = timescales.load(CHART)
    toarcian, aalenian = chart.find("Toarcian"), chart.find("Aalenian")
    edges, stages = bin_edges_for(CurveRequest(), 183.9, 173.0, CHART)
    assert edges.tolist() == [toarcian.base_ma, toarcian.top_ma, aalenian.top_ma]
    assert [s[0] for s in stages] == ["Aalenian", "Toarcian"]


def test_curve_and_coverage_of_one_request_share_their_bins(
    demo_store: Path, tmp_path: Path
) -> None:
    args = ("--interval", "Toarcian", "--by", "region", "--bin-myr", "0.5", "--store", demo_store)
    assert run("curve", "--out", tmp_path / "c", "--boots", "0", *args).code == 0
    assert run("coverage", "--out", tmp_path / "v", *args).code == 0
    curve = pd.read_csv(tmp_path / "c" / "bins.csv")
    cover = pd.read_csv(tmp_path / "v" / "coverage.csv")
    pairs = set(zip(cover["age_old"], cover["age_young"], strict=True))
    assert set(zip(curve["age_old"], curve["age_young"], strict=True)) <= pairs
    inner = sorted({a for a, _ in pairs} - {184.2}, reverse=True)
    assert inner[0] == 184.0 and np.allclose(np.remainder(inner, 0.5), 0)
