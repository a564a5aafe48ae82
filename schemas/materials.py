"""Reference materials and VSMOW–VPDB relations, read from ``data/`` with their sources.

Values are exactly as published; where sources disagree both rows are kept (the
``value_set`` says which publication a row follows) and the store's settings choose.
Superseded and withdrawn values stay, with the years they were in use. Rows marked
``MEMORY`` were not confirmed against a published text and say so.
"""

from __future__ import annotations

import csv
import functools
from dataclasses import dataclass
from functools import cache
from pathlib import Path
from typing import Any

from strata13.suggest import did_you_mean

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
            rows.append(
                MaterialValue(
                    r["material"],
                    r["kind"],
                    r["value_set"],
                    r["status"],
                    _num(r["d13c"]),
                    _num(r["d13c_unc"]),
                    r["d13c_unc_kind"],
                    r["d13c_scale"],
                    _num(r["d18o"]),
                    _num(r["d18o_unc"]),
                    r["d18o_unc_kind"],
                    r["d18o_scale"],
                    _int(r["valid_from"]),
                    _int(r["valid_to"]),
                    r["confidence"],
                    r["source"],
                )
            )
    return rows


@cache
def shipped_materials() -> tuple[MaterialValue, ...]:
    return tuple(load_materials())


@cache
def oxygen_relations() -> dict[str, OxygenRelation]:
    out = {}
    with (DATA / "vsmow_vpdb.csv").open(encoding="utf-8", newline="") as fh:
        for r in csv.DictReader(fh):
            out[r["name"]] = OxygenRelation(
                r["name"],
                r["form"],
                float(r["slope"]),
                float(r["intercept"]),
                r["status"],
                r["confidence"],
                r["source"],
            )
    return out


# ---------------------------------------------------------------- the store's accepted values

ISOTOPES = ("d13c", "d18o")


def _cell(row: dict[str, Any], key: str) -> str:
    return (row.get(key) or "").strip()


def materials_from_text(text: str, origin: str = "materials file") -> list[MaterialValue]:
    """A user's materials table (same columns as the shipped one) from its CSV text.

    Raises ConfigError naming the line on a missing column or a malformed number.
    """
    import io

    from strata13.errors import ConfigError

    reader = csv.DictReader(io.StringIO(text))
    need = {"material", "value_set", "status", "d13c", "d13c_scale", "d18o", "d18o_scale"}
    missing = need - set(reader.fieldnames or [])
    if missing:
        raise ConfigError(
            f"{origin} lacks the column(s) {', '.join(sorted(missing))}.",
            "Use the columns of `strata13 scales --format csv`.",
        )
    rows = []
    for line, r in enumerate(reader, start=2):
        g = functools.partial(_cell, r)
        try:
            rows.append(
                MaterialValue(
                    g("material"),
                    g("kind"),
                    g("value_set") or "user",
                    g("status") or "current",
                    _num(g("d13c")),
                    _num(g("d13c_unc")),
                    g("d13c_unc_kind"),
                    g("d13c_scale"),
                    _num(g("d18o")),
                    _num(g("d18o_unc")),
                    g("d18o_unc_kind"),
                    g("d18o_scale"),
                    _int(g("valid_from")),
                    _int(g("valid_to")),
                    g("confidence") or "user",
                    g("source") or origin,
                )
            )
        except ValueError:
            raise ConfigError(
                f"{origin} line {line}: a number column holds text.",
                "Write values as plain numbers (‰, years).",
            ) from None
        if not rows[-1].material:
            raise ConfigError(f"{origin} line {line} names no material.", "Fill the material.")
    return rows


def _rank(iso: str, user: frozenset[int], m: MaterialValue) -> tuple[int, int, int, int]:
    scale = getattr(m, f"{iso}_scale")
    if getattr(m, f"{iso}_unc_kind") == "exact" and scale == "VPDB":
        pref = -1
    elif (iso == "d18o" and scale == "VSMOW") or (iso == "d13c" and scale == "VPDB"):
        pref = 0
    else:
        pref = 1 if scale == "VPDB" else 2
    mine = 0 if id(m) in user else 1  # the user's own values before the shipped ones
    if m.status == "current":
        return (0, mine, pref, -(m.valid_from or 0))
    return (1, mine, -(m.valid_from or 0), pref)  # no current value: the latest


def default_choice(
    table: list[MaterialValue] | tuple[MaterialValue, ...], n_user: int = 0
) -> dict[str, dict[str, str]]:
    """Which value set the store accepts per material and isotope, unless told otherwise.

    Rule (documented choice): a *current* value first; a value exact by definition on VPDB
    (NBS-19) before all others; for δ13C one on VPDB, for δ18O the CIAAW/IUPAC value (given
    on VSMOW, converted with the store's relation) before a VPDB one; the user's own
    values (the first ``n_user`` rows) before the shipped ones; among equals the first
    listed.
    A material with no current value falls back to its latest superseded or withdrawn
    value, which the re-anchoring step then flags.
    """
    out: dict[str, dict[str, str]] = {}
    user = frozenset(id(m) for m in table[:n_user])
    for iso in ISOTOPES:
        by_mat: dict[str, list[MaterialValue]] = {}
        for m in table:
            if getattr(m, iso) is not None:
                by_mat.setdefault(m.material, []).append(m)
        for mat, vals in by_mat.items():
            rank = functools.partial(_rank, iso, user)
            best = min(vals, key=rank)
            out.setdefault(mat, {})[iso] = best.value_set
    return out


def accepted_value(
    material: str,
    isotope: str,
    table: list[MaterialValue] | tuple[MaterialValue, ...],
    choice: dict[str, dict[str, str]],
    vsmow_relation: str,
) -> tuple[float, MaterialValue]:
    """The store's accepted δ value of ``material`` on VPDB (δ18O on VSMOW converted with
    the store's relation). Raises DomainError for a material the store does not know."""
    from strata13.errors import DomainError

    value_set = choice.get(material, {}).get(isotope)
    hits = [
        m
        for m in table
        if m.material == material and m.value_set == value_set and getattr(m, isotope) is not None
    ]
    if not hits:
        known = sorted({m.material for m in table})
        raise DomainError(
            f"reference material {material!r} has no accepted {isotope} value in "
            "the store's material table." + did_you_mean(material, known),
            "Name a material `strata13 scales` lists, or add it with --materials FILE.",
        )
    m = hits[0]
    v = float(getattr(m, isotope))
    if isotope == "d18o" and m.d18o_scale == "VSMOW":
        a, b = oxygen_relations()[vsmow_relation].to_vpdb()
        v = a * v + b
    return v, m


def store_table(settings: dict[str, Any]) -> tuple[list[MaterialValue], dict[str, dict[str, str]]]:
    """The store's material table (its user file's rows first, then the shipped table) and
    the value set it accepts per material and isotope."""
    user = (
        materials_from_text(settings["materials_csv"], "the store's materials")
        if settings.get("materials_csv")
        else []
    )
    table = [*user, *shipped_materials()]
    return table, settings.get("material_values") or default_choice(table, len(user))
