"""The validation report: every problem of a sheet, each tied to a cell, a rule and a hint."""

from __future__ import annotations

import csv
import io
import json
from dataclasses import asdict, dataclass, field
from pathlib import Path

SEVERITIES = ("error", "warning", "info")


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

    def as_dict(self) -> dict[str, str]:
        return asdict(self)


@dataclass
class Report:
    """All findings of one ingest, in sheet order, plus the row accounting."""

    issues: list[Issue] = field(default_factory=list)
    rows_read: int = 0
    rows_blank: int = 0
    rows_valid: int = 0
    rows_rejected: int = 0

    COLUMNS = ("severity", "sheet", "cell", "column", "value", "rule", "hint")

    def add(self, issue: Issue) -> None:
        self.issues.append(issue)

    def extend(self, issues: list[Issue]) -> None:
        self.issues.extend(issues)

    @property
    def errors(self) -> list[Issue]:
        return [i for i in self.issues if i.severity == "error"]

    @property
    def warnings(self) -> list[Issue]:
        return [i for i in self.issues if i.severity == "warning"]

    def sorted(self) -> list[Issue]:
        order = {s: k for k, s in enumerate(SEVERITIES)}
        return sorted(
            self.issues,
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


def _cell_key(cell: str) -> tuple[int, str]:
    """Sort by row, then column; a range ``E2:E13`` sorts at its first cell."""
    first = cell.split(":", 1)[0]
    letters = "".join(ch for ch in first if ch.isalpha())
    digits = "".join(ch for ch in first if ch.isdigit())
    return (int(digits) if digits else 0, letters.rjust(3))
