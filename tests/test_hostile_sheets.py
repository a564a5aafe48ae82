"""Hostile spreadsheets: a tiny file with a far cell, repeated-cell bombs, damaged archives,
parts and cells, and CSV rows with a bare carriage return or an unclosed quote. Each is one
sentence naming the file (and the cell when known) or a report line, never a crash, and
the used area a survey finds agrees with openpyxl's own reading of the sheet."""

from __future__ import annotations

import resource
import subprocess
import sys
import zipfile
from pathlib import Path

import openpyxl
import pytest
from strata13.compile.read import survey
from strata13.compile.read.readers import read_table

from strata13.errors import InputFileError


def workbook(path: Path, cells: dict[str, object], title: str = "Data") -> Path:
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = title
    for ref, value in {"A1": "Sample", "B1": "Height", "C1": "d13C", "A2": "s1", "B2": 1}.items():
        ws[ref] = value
    ws["C2"] = -1.5
    for ref, value in cells.items():
        ws[ref] = value
    wb.save(path)
    return path


def rewrite(src: Path, dst: Path, part: str, change: object) -> Path:
    """A copy of ``src`` whose ``part`` is changed (bytes -> bytes) or left out (None)."""
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dst, "w", zipfile.ZIP_DEFLATED) as zout:
        for info in zin.infolist():
            data = zin.read(info.filename)
            if info.filename == part:
                if change is None:
                    continue
                data = change(data)  # type: ignore[operator]
            zout.writestr(info, data)
    return dst


def _limited() -> None:
    resource.setrlimit(resource.RLIMIT_AS, (3 << 30, 3 << 30))


def test_a_far_cell_is_refused_naming_it_before_any_grid_is_built(tmp_path: Path) -> None:
    """The issue's file: 4.9 KB, one cell at XFD1048576 (a reader asked 512 GB and aborted).
    Run as a user would, with 3 GB of address space: exit 2 and one sentence."""
    sheet = workbook(tmp_path / "far.xlsx", {"XFD1048576": 1})
    assert sheet.stat().st_size < 6000
    (tmp_path / "far.toml").write_text(
        '[source]\nid = "far-cell-2020"\ncitation = "x (invented)"\n[table]\nfile = "far.xlsx"\n'
        '[columns]\n"Sample" = "sample_id"\n"Height" = { field = "position", unit = "m" }\n'
        '"d13C" = { field = "d13c_carb", scale = "VPDB" }\n[constants]\n'
        'section_id = "s"\nposition_kind = "height"\n',
        encoding="utf-8",
    )
    res = subprocess.run(
        [sys.executable, "-m", "strata13", "ingest", "--map", str(tmp_path / "far.toml")]
        + ["--dry-run", "--store", str(tmp_path / "st")],
        capture_output=True,
        text=True,
        timeout=120,
        preexec_fn=_limited,
    )
    assert res.returncode == 2, res.stderr
    first = res.stderr.splitlines()[0]
    assert first == (
        "error: sheet 'Data' of far.xlsx spans 1,048,576 rows × 16,384 columns "
        "(17,179,869,184 cells, 7 of them filled) because of cell XFD1048576; strata13 "
        "reads at most 10,000,000 cells of a sheet."
    )
    assert "Traceback" not in res.stderr and not (tmp_path / "st").exists()


def test_zz200000_is_refused_and_a_stray_cell_within_the_cap_is_read(tmp_path: Path) -> None:
    with pytest.raises(InputFileError, match=r"because of cell ZZ200000; .*10,000,000 cells"):
        read_table(workbook(tmp_path / "zz.xlsx", {"ZZ200000": 1}))
    raw = read_table(workbook(tmp_path / "stray.xlsx", {"Z5000": "x"}), expected_headers=["Sample"])
    assert raw.letters[:3] == ["A", "B", "C"] and raw.row_numbers.tolist()[0] == 2


def test_a_large_mostly_empty_area_is_refused(tmp_path: Path) -> None:
    """A1048576 under a three-column table: 3.1 million cells, 7 filled (under 1 %)."""
    with pytest.raises(
        InputFileError, match=r"only 7 of them are filled, because of cell A1048576"
    ):
        read_table(workbook(tmp_path / "tall.xlsx", {"A1048576": 1}))


def test_a_table_away_from_a1_keeps_its_letters_rows_and_formula_cell(tmp_path: Path) -> None:
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Data"
    for ref, v in {"D5": "Sample", "E5": "Height", "F5": "d13C", "D6": "s1", "E6": 1}.items():
        ws[ref] = v
    ws["F6"], ws["D7"], ws["E7"], ws["F7"] = -1.5, "s2", 2, "=1+1"
    wb.save(tmp_path / "o.xlsx")
    raw = read_table(tmp_path / "o.xlsx", expected_headers=["Sample", "Height", "d13C"])
    assert raw.letters == ["D", "E", "F"] and raw.row_numbers.tolist() == [6, 7]
    assert raw.header_row == 5
    found = [(i.cell, i.value) for i in raw.issues if i.rule == "formula without cached value"]
    assert found == [("F7", "=1+1")]
    with pytest.raises(Exception, match=r"header_row = 2 is outside o.xlsx \(Data\), whose cells"):
        read_table(tmp_path / "o.xlsx", header_row=2)


def _openpyxl_area(path: Path) -> tuple[int, int, int, int, int]:
    """Outside reference: the filled cells as openpyxl reads them (first/last row/col, n)."""
    ws = openpyxl.load_workbook(path).active
    cells = [
        (c.row - 1, c.column - 1) for row in ws.iter_rows() for c in row if c.value is not None
    ]
    rows, cols = [r for r, _ in cells], [c for _, c in cells]
    return min(rows), max(rows), min(cols), max(cols), len(cells)


@pytest.mark.parametrize("seed", range(6))
def test_the_survey_agrees_with_openpyxl_on_both_paths(tmp_path: Path, seed: int) -> None:
    import random

    rng = random.Random(seed)
    cells: dict[str, object] = {}
    for _ in range(rng.randint(1, 40)):
        ref = f"{openpyxl.utils.get_column_letter(rng.randint(1, 60))}{rng.randint(1, 3000)}"
        cells[ref] = rng.choice([1.5, "text", -3, "=2*3"])
    path = workbook(tmp_path / "r.xlsx", cells)
    want = _openpyxl_area(path)
    fast = survey.survey_xlsx(path, "Data")
    exact = survey.survey_xlsx(path, "Data", exact=True)
    for s in (fast, exact):
        assert (s.first_row, s.last_row, s.first_col, s.last_col, s.filled) == want
    assert sorted(fast.formulas) == sorted(exact.formulas)
    assert len(fast.formulas) == sum(1 for v in cells.values() if v == "=2*3")


def test_cells_without_references_are_placed_by_order(tmp_path: Path) -> None:
    import re

    src = workbook(tmp_path / "a.xlsx", {"E9": 7})
    bare = rewrite(
        src,
        tmp_path / "b.xlsx",
        "xl/worksheets/sheet1.xml",
        lambda d: re.sub(rb' r="[A-Z]+[0-9]+"', b"", d),
    )
    s = survey.survey_xlsx(bare, "Data")  # falls back to the XML parser
    assert (s.last_row, s.last_col, s.filled, s.far_row_cell) == (8, 2, 7, "A9")
    assert survey.survey_xlsx(src, "Data").far_row_cell == "E9"


def test_an_ods_of_repeated_cells_is_refused_before_the_reader_loads_it(tmp_path: Path) -> None:
    content = (
        '<?xml version="1.0" encoding="UTF-8"?><office:document-content '
        'xmlns:office="urn:oasis:names:tc:opendocument:xmlns:office:1.0" '
        'xmlns:table="urn:oasis:names:tc:opendocument:xmlns:table:1.0" '
        'xmlns:text="urn:oasis:names:tc:opendocument:xmlns:text:1.0"><office:body>'
        '<office:spreadsheet><table:table table:name="Data"><table:table-row>'
        '<table:table-cell office:value-type="string"><text:p>Sample</text:p>'
        "</table:table-cell></table:table-row><table:table-row "
        'table:number-rows-repeated="100000"><table:table-cell office:value-type="float" '
        'office:value="1" table:number-columns-repeated="1000"/></table:table-row>'
        "</table:table></office:spreadsheet></office:body></office:document-content>"
    )
    path = tmp_path / "bomb.ods"
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as z:
        z.writestr("mimetype", "application/vnd.oasis.opendocument.spreadsheet")
        z.writestr("content.xml", content)
    assert path.stat().st_size < 2000
    with pytest.raises(InputFileError, match=r"spans 100,001 rows × 1,000 columns .* cell A100001"):
        read_table(path)


def _damaged(tmp_path: Path) -> dict[str, tuple[Path, str]]:
    ok = workbook(tmp_path / "ok.xlsx", {})
    part = "xl/worksheets/sheet1.xml"
    (tmp_path / "notzip.xlsx").write_bytes(b"PK\x03\x04" + b"\x00" * 200)
    data = bytearray(ok.read_bytes())
    with zipfile.ZipFile(ok) as zf:
        info = zf.getinfo(part)
    at = info.header_offset + 30 + len(info.filename) + 20  # inside the compressed data
    data[at] ^= 0xFF
    (tmp_path / "crc.xlsx").write_bytes(bytes(data))
    return {
        "not a zip": (tmp_path / "notzip.xlsx", "it is not a valid zip archive"),
        "no sheet part": (
            rewrite(ok, tmp_path / "np.xlsx", part, None),
            "the sheet 'Data' has no worksheet part (xl/worksheets/sheet1.xml)",
        ),
        "empty sheet part": (
            rewrite(ok, tmp_path / "ep.xlsx", part, lambda d: b""),
            "sheet 'Data': its XML is empty or broken",
        ),
        "cut XML": (
            rewrite(ok, tmp_path / "cut.xlsx", part, lambda d: d[: len(d) // 2]),
            "the XML of xl/worksheets/sheet1.xml is broken",
        ),
        "bad float": (
            rewrite(ok, tmp_path / "bf.xlsx", part, lambda d: d.replace(b"<v>-1.5", b"<v>-1.5x")),
            "cell C2 of sheet 'Data' is stored as a number but holds '-1.5x'",
        ),
        "damaged data": (tmp_path / "crc.xlsx", "xl/worksheets/sheet1.xml"),
        "no workbook": (
            rewrite(ok, tmp_path / "nw.xlsx", "xl/workbook.xml", None),
            "could not be read as a spreadsheet",
        ),
    }


def test_damaged_workbooks_are_one_sentence_naming_what_is_wrong(tmp_path: Path) -> None:
    for what, (path, said) in _damaged(tmp_path).items():
        with pytest.raises(InputFileError) as err:
            read_table(path)
        msg = err.value.message
        assert msg.startswith(f"{path.name} could not be read as a spreadsheet: "), what
        assert said in msg and msg.endswith(".") and "\n" not in msg, (what, msg)
        assert err.value.exit_code == 2


def test_parts_declared_too_large_to_unpack_are_refused(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    path = workbook(tmp_path / "w.xlsx", {})
    monkeypatch.setattr(survey, "MAX_PART_BYTES", 100)
    with pytest.raises(InputFileError, match=r"it unpacks to .* more than strata13 reads\.$"):
        read_table(path)


def test_a_bare_carriage_return_is_a_report_line_and_no_row_splits(tmp_path: Path) -> None:
    p = tmp_path / "cr.csv"
    p.write_bytes(b"Sample,Height,d13C\ns1,1,-1.5\ns2\r,2,-1.2\ns3,3,-1.0\n")
    raw = read_table(p, expected_headers=["Sample"])
    assert raw.column(0).to_pylist() == ["s1", "s3"] and raw.row_numbers.tolist() == [2, 4]
    assert [(i.severity, i.cell, i.rule) for i in raw.issues] == [
        ("error", "A3", "carriage return")
    ]
    assert raw.rejected_rows == 1
    p.write_bytes(b"Sample,Height,d13C\rs1,1,-1.5\rs2,2,-1.2\r")  # classic Mac line ends
    assert read_table(p, expected_headers=["Sample"]).column(0).to_pylist() == ["s1", "s2"]


def test_an_unclosed_quote_is_reported_as_such(tmp_path: Path) -> None:
    p = tmp_path / "q.csv"
    p.write_text('Sample,Height,d13C\ns1,1,-1.5\n"s2,2,-1.2\ns3,3,-1.0\n', encoding="utf-8")
    raw = read_table(p, expected_headers=["Sample"])
    assert raw.column(0).to_pylist() == ["s1", "s3"]
    assert [(i.cell, i.rule, i.value) for i in raw.issues] == [
        ("A3", "unclosed quote", '"s2,2,-1.2')
    ]
    p.write_text('Sample,Height,d13C\ns1,12" core,-1.5\n', encoding="utf-8")  # an inch mark
    assert read_table(p, expected_headers=["Sample"]).column(1).to_pylist() == ['12" core']
