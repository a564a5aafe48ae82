"""The validation report: every problem of a sheet, each tied to a cell, a rule and a hint."""

from __future__ import annotations

import csv
import io
import json
from dataclasses import asdict, dataclass, field
from pathlib import Path

SEVERITIES = ("error", "warning", "info")
MAX_CELL_LINES = 200  # per column and rule; the rest are counted in one summary line


@dataclass(frozen=True)
class Issue:
    """One finding. ``cell`` uses the spreadsheet's own numbering (``D17``); empty for a
    finding about the whole file, a column letter alone for a whole column."""

    severity: str  # error | warning | info
    sheet: str
    cell: str
    column: str
    value: str
    rule: str
    hint: str

    count: int = 1  # the cells this line stands for: more than one on a summary line

    def as_dict(self) -> dict[str, str]:
        d = asdict(self)
        del d["count"]
        return d


def more_cells(severity: str, sheet: str, letter: str, column: str, rule: str, n: int) -> Issue:
    """The one summary line for ``n`` further cells of a column with the same problem."""
    hint = f"{n} more cells in this column with the same problem"
    return Issue(severity, sheet, letter, column, "", rule, hint, count=n)


@dataclass
class Report:
    """All findings of one ingest, in sheet order, plus the row accounting."""

    issues: list[Issue] = field(default_factory=list)
    rows_read: int = 0
    rows_blank: int = 0
    rows_valid: int = 0
    rows_rejected: int = 0
    # (severity, sheet, column letter, header, rule) -> cell lines kept / cells past the cap
    _kept: dict[tuple[str, str, str, str, str], int] = field(default_factory=dict, repr=False)
    _more: dict[tuple[str, str, str, str, str], int] = field(default_factory=dict, repr=False)

    COLUMNS = ("severity", "sheet", "cell", "column", "value", "rule", "hint")

    def add(self, issue: Issue) -> None:
        """One finding; past ``MAX_CELL_LINES`` cell lines of one column and rule the rest
        are counted into one summary line, so a sheet with a million bad cells stays
        reportable (the count is exact, the cells are the column's)."""
        letter = _letters(issue.cell)
        key = (issue.severity, issue.sheet, letter, issue.column, issue.rule)
        if issue.count != 1 and letter == issue.cell:
            self.count_more(key, issue.count)  # a summary line: one per column and rule
        elif not letter or letter == issue.cell:
            self.issues.append(issue)  # a whole-file or whole-column line
        elif self.room(key) > 0:
            self._kept[key] = self._kept.get(key, 0) + 1
            self.issues.append(issue)
        else:
            self.count_more(key, 1)

    def room(self, key: tuple[str, str, str, str, str]) -> int:
        """How many more cell lines of this (severity, sheet, letter, header, rule) are kept."""
        return MAX_CELL_LINES - self._kept.get(key, 0)

    def count_more(self, key: tuple[str, str, str, str, str], n: int) -> None:
        self._more[key] = self._more.get(key, 0) + n

    def extend(self, issues: list[Issue]) -> None:
        for issue in issues:
            self.add(issue)

    def _all(self) -> list[Issue]:
        return self.issues + [more_cells(*key, n) for key, n in self._more.items()]

    @property
    def errors(self) -> list[Issue]:
        return [i for i in self._all() if i.severity == "error"]

    @property
    def warnings(self) -> list[Issue]:
        return [i for i in self._all() if i.severity == "warning"]

    def count(self, severity: str) -> int:
        """Problems of one severity, each cell of a summary line counted."""
        return sum(i.count for i in self._all() if i.severity == severity)

    def sorted(self) -> list[Issue]:
        order = {s: k for k, s in enumerate(SEVERITIES)}
        return sorted(
            self._all(),
            key=lambda i: (order.get(i.severity, 9), i.sheet, _cell_key(i.cell), i.rule),
        )

    def to_csv(self) -> str:
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(self.COLUMNS)
        for i in self.sorted():
            w.writerow([getattr(i, c) for c in self.COLUMNS])
        return buf.getvalue()

    def to_json(self) -> str:
        return json.dumps(
            {
                "rows_read": self.rows_read,
                "rows_blank": self.rows_blank,
                "rows_valid": self.rows_valid,
                "rows_rejected": self.rows_rejected,
                "issues": [i.as_dict() for i in self.sorted()],
            },
            ensure_ascii=False,
            indent=1,
        )

    def write(self, path: Path) -> None:
        """CSV or JSON by the file's suffix (JSON for .json, CSV otherwise)."""
        text = self.to_json() if path.suffix.lower() == ".json" else self.to_csv()
        path.write_text(text, encoding="utf-8")


def _letters(cell: str) -> str:
    """The column letters of a single cell such as ``D17`` (empty for a range or none)."""
    if ":" in cell:
        return ""
    return cell.rstrip("0123456789")


def _cell_key(cell: str) -> tuple[int, str]:
    """Sort by row, then column; a range ``E2:E13`` sorts at its first cell."""
    first = cell.split(":", 1)[0]
    letters = "".join(ch for ch in first if ch.isalpha())
    digits = "".join(ch for ch in first if ch.isdigit())
    return (int(digits) if digits else 0, letters.rjust(3))
