"""Cell cleaning: each real-sheet convention read deliberately (worked examples)."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from strata13.compile.read.cleaning import CellContext, parse_coordinate, parse_numbers


def parse(values: list[str | None], decimal: str = "auto"):
    ctx = CellContext("S", "col", "D", np.arange(2, 2 + len(values)))
    return parse_numbers(pa.array(values, pa.string()), ctx, decimal)


@pytest.mark.parametrize(
    "text,expected",
    [
        ("−2.35", -2.35),  # U+2212 minus
        ("–0.5", -0.5),  # en dash used as minus
        ("+1.25", 1.25),
        ("-2,35", -2.35),  # comma decimal
        ("1,234.5", 1234.5),  # thousands comma with decimal point
        ("1.234,5", 1234.5),  # European grouping
        ("1 234", 1234.0),  # space grouping
        ("2.1 ‰", 2.1),
    ],
)
def test_numbers(text: str, expected: float) -> None:
    p = parse([text])
    assert p.values[0].as_py() == pytest.approx(expected)
    assert not p.bad.any()


def test_missing_and_censored_tokens() -> None:
    p = parse(["n.d.", "bdl", "<0.05", ">200", "—", None])
    assert p.values.to_pylist() == [None, None, 0.05, 200.0, None, None]
    assert p.qualifier.to_pylist() == [None, "bdl", "<", ">", None, None]
    assert not p.bad.any()


def test_ambiguous_comma_alone_is_an_error_but_settled_by_the_column_or_mapping() -> None:
    alone = parse(["1,234", "5"])
    assert alone.bad.tolist() == [True, False]
    assert any(i.rule == "ambiguous comma" and i.severity == "error" for i in alone.issues)
    settled = parse(["1,234", "-2,5"])  # the column uses decimal commas
    assert settled.values.to_pylist() == [1.234, -2.5]
    assert any(i.rule == "ambiguous comma" and i.severity == "warning" for i in settled.issues)
    declared = parse(["1,234"], decimal=".")
    assert declared.values.to_pylist() == [1234.0]


def test_date_and_junk_are_errors_with_cells() -> None:
    p = parse(["1.0", "2021-03-04", "abc"])
    assert p.bad.tolist() == [False, True, True]
    cells = {i.cell: i.rule for i in p.issues if i.severity == "error"}
    assert cells == {"D3": "date in numeric column", "D4": "not a number"}


@pytest.mark.parametrize(
    "text,axis,expected",
    [
        ("45°12'30\"N", "lat", 45 + 12 / 60 + 30 / 3600),  # worked example, DMS -> decimal
        ("12 30 S", "lat", -12.5),
        ("W 10°30′", "lon", -10.5),
        ("−12,5", "lon", -12.5),
    ],
)
def test_coordinates(text: str, axis: str, expected: float) -> None:
    assert parse_coordinate(text, axis) == pytest.approx(expected)


@pytest.mark.parametrize("text", ["45°70'N", "12 E", "N -45", "north"])
def test_bad_coordinates_raise(text: str) -> None:
    with pytest.raises(ValueError):
        parse_coordinate(text, "lat")


@settings(max_examples=200, deadline=None)
@given(st.lists(st.one_of(st.none(), st.text(max_size=12)), min_size=1, max_size=30))
def test_junk_never_crashes_and_every_cell_is_accounted(values: list[str | None]) -> None:
    p = parse(values)
    assert len(p.values) == len(values) == len(p.bad)
    # a cell is a value, empty/missing, censored, or reported bad — never silently lost
    for i, v in enumerate(values):
        if v is not None and v.strip() and p.values[i].as_py() is None and not p.bad[i]:
            assert p.qualifier[i].as_py() == "bdl" or any(
                x.rule in ("missing token",) for x in p.issues
            )
