"""Readers keep exact cell coordinates and decode real-world CSVs."""

from __future__ import annotations

from pathlib import Path

import openpyxl
from strata13.compile.read.readers import col_letter, read_table


def test_col_letters() -> None:
    assert [col_letter(i) for i in (0, 25, 26, 27, 701, 702)] == ["A", "Z", "AA", "AB", "ZZ", "AAA"]


def test_empty_column_a_merged_cells_and_formula_get_exact_references(tmp_path: Path) -> None:
    wb = openpyxl.Workbook()
    ws = wb.active
    ws["B1"] = "A title"
    ws.merge_cells("B1:D1")
    ws["B3"], ws["C3"], ws["D3"] = "Sample", "d13C", "Section"
    ws["B4"], ws["C4"], ws["D4"] = "S1", "=1+1", "North"
    ws.merge_cells("D4:D5")
    ws["B5"], ws["C5"] = "S2", -1.5
    wb.save(tmp_path / "t.xlsx")
    raw = read_table(tmp_path / "t.xlsx", expected_headers=["Sample", "d13C", "Section"])
    assert raw.header_row == 3 and raw.letters == ["B", "C", "D"]
    assert raw.row_numbers.tolist() == [4, 5]
    assert raw.column(2).to_pylist() == ["North", "North"]  # merged range filled
    by_rule = {i.rule: i.cell for i in raw.issues}
    assert by_rule["formula without cached value"] == "C4"
    assert by_rule["title row"] == "B1"
    assert any(i.rule == "merged cell" and i.cell == "D4" for i in raw.issues)


def test_cp1252_semicolon_comma_decimals(tmp_path: Path) -> None:
    text = "Probe;Höhe (m);d13C (‰)\nA1;1,5;−2,3\nA2;2,0;1,1\n".replace("−", "-")
    (tmp_path / "x.csv").write_bytes(text.encode("cp1252"))
    raw = read_table(tmp_path / "x.csv", expected_headers=["Probe"])
    assert raw.headers == ["Probe", "Höhe (m)", "d13C (‰)"]
    assert raw.column(2).to_pylist() == ["-2,3", "1,1"]
    assert any(i.rule == "encoding" and i.value == "cp1252" for i in raw.issues)
