"""A censored concentration is stored one way however the sheet spells it: "<5" and "bdl"
with a stated detection limit of 5 are the same statement (value 5, qualifier "<",
detection limit 5, in the stored unit); "bdl" with no limit stays unknown."""

from __future__ import annotations

from pathlib import Path

from strata13.compile import api

MAPPING = """
[source]
id = "censor-test"
citation = "Invented, D. 2026. Censored cells (invented)."
year = 2026

[table]
file = "c.csv"

[columns]
"Sample" = "sample_id"
"Height (m)" = "position"
"d13C" = { field = "d13c_carb", scale = "VPDB" }
"Mn" = { field = "mn", unit = "UNIT", detection_limit = DL }

[constants]
section_id = "c-1"
component = "bulk"
position_kind = "height"
lat = 45.0
lon = 10.0
"""
SHEET = "Sample,Height (m),d13C,Mn\nA,1,1.0,<5\nB,2,1.1,bdl\nC,3,1.2,120\n"


def stored(tmp_path: Path, unit: str, dl: str, sheet: str = SHEET) -> list[tuple]:
    (tmp_path / "c.csv").write_text(sheet, encoding="utf-8")
    m = tmp_path / "c.toml"
    m.write_text(MAPPING.replace("UNIT", unit).replace("DL", dl), encoding="utf-8")
    api.ingest(tmp_path / "s", None, m)
    return api.sql(
        api.open_store(tmp_path / "s"),
        "SELECT sample_id, mn_ppm, mn_qualifier, mn_dl FROM records ORDER BY 1",
    ).rows


def test_less_than_and_bdl_with_a_limit_are_stored_alike(tmp_path: Path) -> None:
    rows = stored(tmp_path, "ppm", "5")
    assert rows == [("A", 5.0, "<", 5.0), ("B", 5.0, "<", 5.0), ("C", 120.0, None, None)]


def test_the_limit_is_converted_like_the_values(tmp_path: Path) -> None:
    # 0.0005 wt% = 5 ppm (1 % = 10 000 ppm); "<0.0005" and bdl at that limit alike
    sheet = SHEET.replace("<5", "<0.0005").replace("120", "0.012")
    rows = stored(tmp_path, "%", "0.0005", sheet)
    assert [(r[0], round(r[1], 9), r[2], round(r[3], 9) if r[3] else r[3]) for r in rows] == [
        ("A", 5.0, "<", 5.0),
        ("B", 5.0, "<", 5.0),
        ("C", 120.0, None, None),
    ]
