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


# ------------------------------------------------------- uncertainties, choices, disagreement

ONE_SIGMA_KINDS = ("SD", "k=1", "1σ", "1s")  # the stated number is 1σ
TWO_SIGMA_KINDS = ("k=2", "2σ", "2s")  # an expanded uncertainty with coverage factor 2


def sigma_1s(m: MaterialValue, isotope: str, vsmow_relation: str | None = None) -> float | None:
    """The 1σ of ``m``'s value of ``isotope`` (‰, on VPDB when a relation converts it):
    0 for a value exact by definition, half of a k = 2 uncertainty, None when the table
    states none or states it in a form not listed here (never guessed as 0)."""
    unc = getattr(m, f"{isotope}_unc")
    kind = getattr(m, f"{isotope}_unc_kind").strip()
    if kind == "exact":
        return 0.0
    if unc is None:
        return None
    if kind in ONE_SIGMA_KINDS:
        sigma = float(unc)
    elif kind in TWO_SIGMA_KINDS:
        sigma = float(unc) / 2.0
    else:
        return None
    if isotope == "d18o" and m.d18o_scale == "VSMOW" and vsmow_relation is not None:
        sigma *= abs(oxygen_relations()[vsmow_relation].to_vpdb()[0])
    return sigma


def value_sets(table: list[MaterialValue] | tuple[MaterialValue, ...], material: str) -> list[str]:
    """The value sets the table holds for ``material``, in table order."""
    return list(dict.fromkeys(m.value_set for m in table if m.material == material))


def run_choice(
    materials: list[str],
    named: str | dict[str, str] | None,
    table: list[MaterialValue] | tuple[MaterialValue, ...],
    choice: dict[str, dict[str, str]],
) -> tuple[dict[str, dict[str, str]], dict[tuple[str, str], str]]:
    """The value set per material and isotope a run uses, and who chose each.

    ``named`` is the mapping's ``[run] value_set``: one name for every material of the run
    or a name per material. A material and isotope the name has no value for keeps the
    store's choice, and says so.
    """
    out = {m: dict(v) for m, v in choice.items()}
    why: dict[tuple[str, str], str] = {}
    for mat in materials:
        wanted = named.get(mat) if isinstance(named, dict) else named
        for iso in ISOTOPES:
            have = any(
                m.material == mat and m.value_set == wanted and getattr(m, iso) is not None
                for m in table
            )
            if wanted is not None and have:
                out.setdefault(mat, {})[iso] = wanted
                why[(mat, iso)] = "chosen by the mapping's [run] value_set"
            elif wanted is not None:
                why[(mat, iso)] = f"chosen by the store's settings (no {wanted!r} {iso} value)"
            else:
                why[(mat, iso)] = "chosen by the store's settings"
    return out, why


def disagreements(
    table: list[MaterialValue] | tuple[MaterialValue, ...],
    choice: dict[str, dict[str, str]],
    vsmow_relation: str,
) -> list[dict[str, Any]]:
    """Per material and isotope with two or more published values that differ: each value
    as the store would use it (δ18O on VSMOW converted to VPDB with ``vsmow_relation``;
    δ13C on its own scale, VPDB or VPDB-LSVEC), its 1σ, and how far it lies from the value
    the store (or the default choice) accepts."""
    out = []
    for iso in ISOTOPES:
        by_mat: dict[str, list[MaterialValue]] = {}
        for m in table:
            if getattr(m, iso) is not None:
                by_mat.setdefault(m.material, []).append(m)
        for mat, rows in by_mat.items():
            chosen = choice.get(mat, {}).get(iso)
            values = [
                (accepted_value(mat, iso, [r], {mat: {iso: r.value_set}}, vsmow_relation)[0], r)
                for r in rows
            ]
            if len({round(v, 6) for v, _ in values}) < 2:
                continue
            ref = next((v for v, r in values if r.value_set == chosen), None)
            ref_scale = next(
                (getattr(r, f"{iso}_scale") for v, r in values if r.value_set == chosen), None
            )
            for v, r in values:
                scale = getattr(r, f"{iso}_scale")
                out.append(
                    {
                        "material": mat,
                        "isotope": iso,
                        "value_set": r.value_set,
                        "status": r.status,
                        "published": getattr(r, iso),
                        "published_scale": scale,
                        "value": round(v, 6),
                        "scale": "VPDB" if iso == "d18o" and scale == "VSMOW" else scale,
                        "sigma_1s": sigma_1s(r, iso, vsmow_relation),
                        "minus_accepted": None if ref is None else round(v - ref, 6),
                        "accepted": r.value_set == chosen,
                        "note": _scale_note(iso, scale, ref_scale, vsmow_relation),
                        "source": r.source,
                    }
                )
    return sorted(out, key=lambda r: (r["material"], r["isotope"], r["value_set"]))


def _scale_note(iso: str, scale: str, ref_scale: str | None, relation: str) -> str:
    """What a difference between two values of one material rests on."""
    notes = []
    if iso == "d18o" and scale == "VSMOW":
        notes.append(f"converted from VSMOW with {relation}")
    if ref_scale is not None and {scale, ref_scale} == {"VPDB", "VPDB-LSVEC"}:
        notes.append("VPDB and VPDB-LSVEC are two scales: part of the difference is the scale")
    return "; ".join(notes)
