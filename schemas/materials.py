"""Reference materials and VSMOW–VPDB relations, read from ``data/`` with their sources.

Values are exactly as published; where sources disagree both rows are kept (the
``value_set`` says which publication a row follows) and the store's settings choose.
Superseded and withdrawn values stay, with the years they were in use. Rows marked
``MEMORY`` were not confirmed against a published text and say so.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from functools import cache
from pathlib import Path

DATA = Path(__file__).with_name("data")


@dataclass(frozen=True)
class MaterialValue:
    material: str
    kind: str
    value_set: str
    status: str  # current | superseded | withdrawn
    d13c: float | None
    d13c_unc: float | None
    d13c_unc_kind: str
    d13c_scale: str
    d18o: float | None
    d18o_unc: float | None
    d18o_unc_kind: str
    d18o_scale: str
    valid_from: int | None
    valid_to: int | None
    confidence: str
    source: str


@dataclass(frozen=True)
class OxygenRelation:
    """δ18O VSMOW ↔ VPDB as a published straight line."""

    name: str
    form: str  # vpdb_from_vsmow | vsmow_from_vpdb
    slope: float
    intercept: float
    status: str
    confidence: str
    source: str

    def to_vpdb(self) -> tuple[float, float]:
        """(a, b) with δ18O(VPDB) = a · δ18O(VSMOW) + b."""
        if self.form == "vpdb_from_vsmow":
            return self.slope, self.intercept
        return 1.0 / self.slope, -self.intercept / self.slope


def _num(text: str) -> float | None:
    return float(text) if text.strip() else None


def _int(text: str) -> int | None:
    return int(text) if text.strip() else None


def load_materials(path: Path | None = None) -> list[MaterialValue]:
    """The shipped table, or a user's file of the same shape."""
    rows = []
    with (path or DATA / "reference_materials.csv").open(encoding="utf-8", newline="") as fh:
        for r in csv.DictReader(fh):
            rows.append(MaterialValue(
                r["material"], r["kind"], r["value_set"], r["status"], _num(r["d13c"]),
                _num(r["d13c_unc"]), r["d13c_unc_kind"], r["d13c_scale"], _num(r["d18o"]),
                _num(r["d18o_unc"]), r["d18o_unc_kind"], r["d18o_scale"], _int(r["valid_from"]),
                _int(r["valid_to"]), r["confidence"], r["source"]))
    return rows


@cache
def shipped_materials() -> tuple[MaterialValue, ...]:
    return tuple(load_materials())


@cache
def oxygen_relations() -> dict[str, OxygenRelation]:
    out = {}
    with (DATA / "vsmow_vpdb.csv").open(encoding="utf-8", newline="") as fh:
        for r in csv.DictReader(fh):
            out[r["name"]] = OxygenRelation(r["name"], r["form"], float(r["slope"]),
                                            float(r["intercept"]), r["status"], r["confidence"],
                                            r["source"])
    return out
