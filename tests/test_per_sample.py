"""`query --per-sample`: replicate analyses averaged to one row per sample with their
number and SD, checked against pandas' groupby (mean, std with ddof = 1)."""

from __future__ import annotations

import io
from pathlib import Path

import pandas as pd
import pyarrow as pa
from strata13.compile import api
from strata13.compile.query.samples import per_sample

from tests.conftest import run_cli as run

MAPPING = """
[source]
id = "replicates-test"
citation = "Invented, F. 2026. Replicates (invented)."
year = 2026

[table]
file = "r.csv"

[columns]
"Sample" = "sample_id"
"Rep" = "replicate"
"Height (m)" = "position"
"d13C" = { field = "d13c_carb", scale = "VPDB" }
"d18O" = { field = "d18o_carb", scale = "VPDB" }

[constants]
section_id = "r-1"
component = "bulk"
position_kind = "height"
lat = 45.0
lon = 10.0
"""
SHEET = """Sample,Rep,Height (m),d13C,d18O
A,1,1.0,1.00,-2.0
A,2,1.0,1.20,-2.2
A,3,1.0,1.10,
B,1,2.0,0.50,-3.0
C,1,3.0,,-1.0
"""


def test_replicates_average_like_pandas(tmp_path: Path) -> None:
    (tmp_path / "r.csv").write_text(SHEET, encoding="utf-8")
    (tmp_path / "r.toml").write_text(MAPPING, encoding="utf-8")
    api.ingest(tmp_path / "s", None, tmp_path / "r.toml")
    store = api.open_store(tmp_path / "s")
    recs = api.query_arrow(store)
    got = per_sample(recs).to_pandas().set_index("sample_id")
    df = recs.to_pandas()
    g = df.groupby("sample_id")
    for col in ("d13c_carb", "d18o_carb"):
        want_mean, want_sd, want_n = g[col].mean(), g[col].std(ddof=1), g[col].count()
        pd.testing.assert_series_equal(got[col], want_mean, check_names=False)
        pd.testing.assert_series_equal(got[f"{col}_sd"], want_sd, check_names=False)
        assert (got[f"{col}_n"] == want_n).all()
    assert got.loc["A", "n_analyses"] == 3 and got.loc["A", "d18o_carb_n"] == 2
    # one analysis has no spread: empty, never 0
    assert pd.isna(got.loc["B", "d13c_carb_sd"]) and pd.isna(got.loc["C", "d13c_carb"])

    r = run("query", "--per-sample", "--format", "csv", "--store", tmp_path / "s")
    assert r.code == 0 and "3 samples from 5 records" in r.err
    table = pd.read_csv(io.StringIO(r.out))
    assert list(table["sample_id"]) == ["A", "B", "C"]


def test_disagreeing_text_is_listed_not_hidden() -> None:
    t = pa.table(
        {
            "source_id": ["s", "s"],
            "section_id": ["x", "x"],
            "sample_id": ["A", "A"],
            "d13c_carb": [1.0, 2.0],
            "screen": ["pass", "warn"],
        }
    )
    out = per_sample(t).to_pylist()[0]
    assert out["screen"] == "pass; warn" and out["d13c_carb"] == 1.5
