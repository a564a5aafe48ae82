"""The validation report keeps the first cells of a column and rule and counts the rest."""

from __future__ import annotations

from strata13.compile.check.report import MAX_CELL_LINES, Issue, Report, more_cells


def _cell(row: int, letter: str = "B", rule: str = "not a number") -> Issue:
    return Issue("error", "Data", f"{letter}{row}", "Height", "x", rule, "write a number")


def test_cells_past_the_cap_are_counted_in_one_line() -> None:
    rep = Report()
    for row in range(2, 2 + MAX_CELL_LINES + 300):
        rep.add(_cell(row))
    rep.add(_cell(5, letter="C"))  # another column keeps its own lines
    lines = rep.errors
    assert len(lines) == MAX_CELL_LINES + 1 + 1
    summary = [i for i in lines if i.cell == "B"]
    assert len(summary) == 1 and summary[0].count == 300
    assert summary[0].hint.startswith("300 more cells")
    assert rep.count("error") == MAX_CELL_LINES + 300 + 1
    assert "count" not in rep.errors[0].as_dict()  # the CSV/JSON columns are unchanged


def test_a_reader_summary_and_report_overflow_share_one_line() -> None:
    rep = Report()
    for row in range(2, 2 + MAX_CELL_LINES):
        rep.add(_cell(row))
    rep.add(more_cells("error", "Data", "B", "Height", "not a number", 40))
    rep.add(_cell(9999))
    summary = [i for i in rep.errors if i.cell == "B"]
    assert [s.count for s in summary] == [41]
    assert rep.count("error") == MAX_CELL_LINES + 41
    # whole-file and range lines are never capped
    for _ in range(MAX_CELL_LINES + 5):
        rep.add(Issue("warning", "Data", "", "", "", "file", "a note"))
    assert len(rep.warnings) == MAX_CELL_LINES + 5
