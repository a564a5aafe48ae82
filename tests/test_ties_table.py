"""A ties table with headers of its own ([ties_table] columns, units, confidence), `#`
comment lines and a sniffed delimiter; a ties-only dry run says what it would re-date."""

from __future__ import annotations

from pathlib import Path

import pytest
from strata13.compile import api
from strata13.compile.demo import SHEETS, TIES, demo_folder
from strata13.compile.read.mapping import load_mapping

from strata13.errors import ConfigError
from tests.conftest import tree_bytes

MAPPING = """
[source]
id = "kelder-ties-2026"
citation = "Invented, C. 2026. Ties for the Kelder section (invented)."
year = 2026
kind = "in-house"

[ties_table]
file = "kelder_ties.csv"

[ties_table.columns]            # header in the file = tie key (with its unit or level)
"Section" = "section"
"Height (ft)" = { key = "position", unit = "ft" }
"Age" = "age"
"±2σ" = { key = "uncertainty", confidence = "2σ" }
"kind" = "basis"
"Chart" = "chart"
"""
TABLE = """# ties read from the invented Kelder logs
# heights in feet above the base
Section;Height (ft);Age;±2σ;kind;Chart;remark
other-src/kelder;10;183.0;0.2;radiometric;;ignored column
# a comment between rows
other-src/kelder;50;182.5;0.4;correlation;ICS2024/12;
"""


def write(tmp_path: Path, mapping: str = MAPPING, table: str = TABLE) -> Path:
    (tmp_path / "kelder_ties.csv").write_text(table, encoding="utf-8")
    path = tmp_path / "kelder_ties.toml"
    path.write_text(mapping, encoding="utf-8")
    return path


def test_mapped_headers_units_and_confidence(tmp_path: Path) -> None:
    ties = load_mapping(write(tmp_path)).ties
    assert [t["section_id"] for t in ties] == ["kelder", "kelder"]
    # 10 ft = 3.048 m and 50 ft = 15.24 m (1 ft = 0.3048 m exactly); ± 2σ 0.2 -> 1σ 0.1
    assert [t["position_m"] for t in ties] == pytest.approx([3.048, 15.24])
    assert [t["age_sigma_ma"] for t in ties] == pytest.approx([0.1, 0.2])
    assert [t["basis"] for t in ties] == ["radiometric", "correlation"]


@pytest.mark.parametrize(
    ("columns", "message"),
    [
        ('{ "Height (ft)" = "heigth" }', "is not a tie key"),
        ('{ "Height (ft)" = { key = "position", units = "ft" } }', "unknown key 'units'"),
        ('{ "Age" = { key = "age", unit = "Ma" } }', "a unit goes with the position key"),
        ('{ "Depth" = "position" }', "which is not a header of the file"),
    ],
)
def test_bad_column_maps_are_refused(tmp_path: Path, columns: str, message: str) -> None:
    text = MAPPING.split("[ties_table.columns]")[0] + f"columns = {columns}\n"
    with pytest.raises(ConfigError, match=message):
        load_mapping(write(tmp_path, text))


def test_a_ties_only_dry_run_says_what_it_would_redate(tmp_path: Path) -> None:
    sheets = demo_folder() / "sheets"
    store = api.init_store(tmp_path / "s")
    for sheet, mapping in SHEETS:
        api.ingest(store, sheets / sheet, sheets / mapping)
    before = tree_bytes(store.path)
    dry = api.ingest(store, None, sheets / TIES, dry_run=True)
    assert tree_bytes(store.path) == before  # a dry run writes nothing
    assert dry.ties == 7 and dry.redated > 0
    real = api.ingest(store, None, sheets / TIES)
    assert real.redated == dry.redated  # the dry run counted what the commit does


def test_the_demo_ties_table_still_reads() -> None:
    assert len(load_mapping(demo_folder() / "sheets" / TIES).ties) == 7
