"""Output a person can read: numbers to their meaningful digits, terminal tables that never
break a number or a column name, named headers, and data (every table asked for) on stdout
or in files, never half on stderr."""

from __future__ import annotations

import io
import json
import re
import subprocess
import sys
from decimal import ROUND_HALF_EVEN, Decimal
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from strata13.cli import layout, render

from strata13.numbers import readable, readable_sigma, unit_of, with_sigma

EXE = [sys.executable, "-m", "strata13"]
ANSI = re.compile(r"\x1b\[[0-9;]*m")


# --- numbers -------------------------------------------------------------------------------


def test_gum_worked_example() -> None:
    # JCGM 100:2008 (GUM) §7.2.2: m_S = 100.021 47 g with u_c = 0.35 mg — the uncertainty
    # to two significant digits and the value to the same place.
    assert with_sigma(100.02147, 0.00035, "g") == "100.02147 ± 0.00035 g"
    assert readable(100.021473, sigma=0.00035) == "100.02147"
    # a value to its uncertainty's place, zeros kept (they say where the uncertainty starts)
    assert with_sigma(184.2, 0.3 / 1.96, "Ma") == "184.20 ± 0.15 Ma"
    assert with_sigma(183.0, 0.08, "Ma") == "183.000 ± 0.080 Ma"


@given(
    st.floats(-1e4, 1e4, allow_nan=False),
    st.floats(1e-6, 1e3, allow_nan=False, allow_infinity=False),
)
@settings(max_examples=300, deadline=None)
def test_rounding_matches_decimal_quantize(x: float, sigma: float) -> None:
    """The value's digits are Python's decimal rounding at the uncertainty's second
    significant digit (decimal module, half-even as Python's format does)."""
    s = Decimal(repr(sigma))
    place = Decimal(1).scaleb(s.adjusted() - 1)  # the second significant digit of σ
    expected = Decimal(repr(x)).quantize(min(place, Decimal(1)), rounding=ROUND_HALF_EVEN)
    got = Decimal(readable(x, sigma=sigma))
    assert abs(got - expected) <= min(place, Decimal(1))  # binary vs decimal ties only
    assert len(readable_sigma(sigma).replace(".", "").lstrip("0")) in (1, 2, 3, 4)


def test_units_fix_the_decimals_and_nothing_reads_as_zero() -> None:
    assert readable(-0.004831715878587772, unit="‰") == "-0.005"
    assert readable(1.47884, unit="‰") == "1.479"
    assert readable(3.23088, unit="m") == "3.23"
    assert readable(183.2104, unit="Ma") == "183.21"
    assert readable(0.00042, unit="‰") == "0.00042"  # below the resolution: 2 digits
    assert readable(0.0000421, unit="‰") == "4.2e-05"
    assert readable(-0.0001, unit="m") == "-0.0001"
    assert readable(0.996042) == "0.996042"
    assert readable(-0.0) == "0" and readable(-0.0004, unit="Ma") == "-0.0004"
    assert readable(float("nan")) == "" and readable(None, blank="—") == "—"
    assert readable(True) == "yes" and readable(False) == "no"
    assert readable(1234567.0) == "1234570"
    assert with_sigma(183.2, None, "Ma") == "183.2 Ma (no uncertainty given)"


def test_unit_from_a_column_name() -> None:
    cases = {
        "age_ma": "Ma",
        "sigma_ma": "Ma",
        "duration_sigma_myr": "Ma",
        "position_m": "m",
        "d13c_carb": "‰",
        "baseline_sigma_permil": "‰",
        "paleolat": "°",
        "n_eff": None,
        "r": None,
    }
    assert {c: unit_of(c) for c in cases} == cases


# --- the terminal layout -------------------------------------------------------------------

COLUMNS = [
    "record_id",
    "source_id",
    "section_id",
    "position_m",
    "age_ma",
    "d13c_carb",
    "note",
    "citation",
]
ROWS = [
    [
        "8bca75c0a1396f347ae3",
        "mossaret-fennoway-2018",
        "Fennoway Bluff",
        "3.94",
        "183.83",
        "-1.479",
        "a note on the sample",
        "Pell, I., Sarrow, D. & Quint, A. 2018. Two sections. Invented Letters 12: 55-70.",
    ],
    [
        "2cf27ca02b91ef136025",
        "quillar-2011",
        "quillar-ridge",
        "12.0396",
        "183.445",
        "1.068",
        "",
        "Invented, E. 2011. Quillar Ridge isotopes. Invented Journal 7: 10-30.",
    ],
]


def _whole(lines: list[str], words: list[str]) -> None:
    """Every word stands whole on one line (a line may hold it among others)."""
    for w in words:
        if w:
            assert any(re.search(rf"(^|\s){re.escape(w)}(\s|$)", ln) for ln in lines), w


@pytest.mark.parametrize("width", [200, 140, 120, 100, 80, 60, 40, 24])
def test_nothing_breaks_at_any_width(width: int) -> None:
    lines, left_out = layout.lay_out(COLUMNS, ROWS, width)
    text = [t for t, _ in lines]
    shown = [c for c in COLUMNS if c not in left_out]
    vertical = text[0].startswith("── 1 of 2")
    for line in text:
        assert len(line) <= width or vertical, (width, line)
    _whole(text, shown)  # no header broken
    for row in ROWS:  # no number or identifier broken
        _whole(text, [v for c, v in zip(COLUMNS, row, strict=True) if c in shown and " " not in v])
        for c, v in zip(COLUMNS, row, strict=True):  # text wraps only at its spaces
            if c in shown and " " in v:
                _whole(text, v.split())


def test_wide_enough_one_line_per_row_narrower_shortened_then_vertical() -> None:
    full = sum(max(len(c), *(len(r[j]) for r in ROWS)) for j, c in enumerate(COLUMNS))
    lines, left = layout.lay_out(COLUMNS, ROWS, full + 2 * 7)
    assert left == [] and len(lines) == 2 + len(ROWS)
    lines, left = layout.lay_out(COLUMNS, ROWS, 100)
    assert left and left == COLUMNS[-len(left) :]  # from the right
    note = layout.left_out_note(left, len(COLUMNS))
    assert all(c in note for c in left) and "--format csv" in note
    lines, left = layout.lay_out(COLUMNS, ROWS, 30)
    assert left == [] and lines[0][0].startswith("── 1 of 2")
    names = [t.split()[0] for t, _ in lines if t and not t.startswith((" ", "──"))]
    assert names == COLUMNS * 2  # every column of every row in the vertical view


class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_a_terminal_table_names_its_headers_and_rounds(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    out = _Terminal()
    monkeypatch.setattr(sys, "stdout", out)
    monkeypatch.setenv("COLUMNS", "200")
    render.table(
        ["name", "sigma_ma", "approximate", "d13c_carb"],
        [["Toarcian", 0.15306122448979592, False, -0.004831715878587772]],
    )
    text = ANSI.sub("", out.getvalue())
    assert "0.153" in text and "0.15306" not in text
    assert " no " in text + " " and "False" not in text
    assert "-0.005" in text and "-0.0048317" not in text


# --- where tables go -----------------------------------------------------------------------

PARTS = [
    render.Part("outcomes", ["rule", "n"], [["mn-bulk", 5]], "outcomes"),
    render.Part("covariance", ["rule", "r"], [["d13c-d18o", 0.996042]], "covariance"),
]


def test_several_tables_in_json_are_one_document(capsys: pytest.CaptureFixture[str]) -> None:
    render.tables(PARTS, "json", None)
    cap = capsys.readouterr()
    assert json.loads(cap.out) == {
        "outcomes": [{"rule": "mn-bulk", "n": 5}],
        "covariance": [{"rule": "d13c-d18o", "r": 0.996042}],
    }
    assert cap.err == ""


def test_csv_to_stdout_holds_the_first_and_says_where_the_rest_is(
    capsys: pytest.CaptureFixture[str],
) -> None:
    render.tables(PARTS, "csv", None)
    cap = capsys.readouterr()
    assert cap.out == "rule,n\nmn-bulk,5\n"
    assert "d13c-d18o" not in cap.err and "covariance" in cap.err and "json" in cap.err


def test_out_file_gets_its_siblings(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "summary.csv"
    render.tables(PARTS, "csv", out)
    assert out.read_text(encoding="utf-8") == "rule,n\nmn-bulk,5\n"
    assert (tmp_path / "summary-covariance.csv").read_text(encoding="utf-8") == (
        "rule,r\nd13c-d18o,0.996042\n"
    )
    assert capsys.readouterr().out == ""


def test_piped_table_holds_every_part(capsys: pytest.CaptureFixture[str]) -> None:
    render.tables(PARTS, "table", None)
    cap = capsys.readouterr()
    assert cap.out == "rule\tn\nmn-bulk\t5\n\nrule\tr\nd13c-d18o\t0.996042\n"


def test_screen_summary_keeps_its_tables_off_stderr(demo_store_session: Path) -> None:
    store = ["--store", str(demo_store_session)]
    res = subprocess.run(
        [*EXE, "screen", "--summary", "--format", "json", *store], capture_output=True, text=True
    )
    assert res.returncode == 0, res.stderr
    doc = json.loads(res.stdout)
    assert set(doc) == {"outcomes", "covariance"} and doc["covariance"]
    assert "n_eff" not in res.stderr and "source_id" not in res.stderr
    res = subprocess.run([*EXE, "scales", "--format", "csv"], capture_output=True, text=True)
    assert res.returncode == 0 and res.stdout.startswith("material,")
    assert "IUPAC-2014" not in res.stderr  # the relations table is data, not a message


def test_stages_in_a_narrow_terminal(tmp_path: Path) -> None:
    """A real command on a pseudo-terminal: at 60 columns the chart's table keeps every
    number and header whole (shortened with a note, or one record per block)."""
    import os
    import pty

    main, child = pty.openpty()
    env = dict(os.environ, COLUMNS="60", NO_COLOR="1")
    proc = subprocess.run(
        [*EXE, "stages", "--interval", "Toarcian"],
        stdout=child,
        stderr=subprocess.PIPE,
        env=env,
        cwd=tmp_path,
        timeout=120,
    )
    os.close(child)
    chunks = []
    while True:
        try:
            data = os.read(main, 65536)
        except OSError:
            break
        if not data:
            break
        chunks.append(data)
    os.close(main)
    text = ANSI.sub("", b"".join(chunks).decode("utf-8")).replace("\r", "")
    assert proc.returncode == 0, proc.stderr
    lines = text.splitlines()
    assert all(len(ln) <= 60 for ln in lines), lines  # prose wraps at spaces too
    _whole(lines, ["Toarcian", "184.2", "174.7", "0.153", "sigma_ma"])
    assert "columns left out to fit the terminal" in text  # and the note says what went
    assert "±" not in text and "1σ" not in text and "False" not in text


def test_no_rows_in_a_narrow_terminal_names_the_columns() -> None:
    lines, left = layout.lay_out(COLUMNS, [], 20)
    assert left == [] and lines == [(f"no rows (columns: {', '.join(COLUMNS)})", False)]
    lines, left = layout.lay_out(["a", "b"], [], 20)
    assert [t for t, _ in lines] == ["a  b", "─  ─"]


def test_signed_and_fixed_places() -> None:
    assert readable(0.327, unit="‰", signed=True) == "+0.327"
    assert readable(-8.3e-05, unit="‰", sigma=0.004, signed=True) == "-0.0001"
    assert readable(0.0, unit="‰", signed=True) == "0"
    assert readable(0.994812, decimals=4) == "0.9948"
    assert readable(-0.00001, decimals=3) == "0.000"  # no minus before a zero
