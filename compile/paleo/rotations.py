"""Finite-rotation models in strata13's own TOML format, and reconstruction through them.

Why a TOML document: a model is a settings file the user edits, diffs and cites; plates are
named, each plate's poles sit together, and the frame is a word. It is stored in the store
whole, under its content hash (``RotationModel.digest``).

The document (UTF-8)::

    [model]
    name = "orvanne-demo-2026"
    frame = "paleomagnetic"            # paleomagnetic | mantle | other
    citation = "Invented for the demo."
    description = "optional free text"

    [plate.brevandel-block]
    moves_against = "paleomagnetic"    # the frame word, or another plate's name
    description = "optional"

    [[plate.brevandel-block.pole]]     # youngest first; today's identity is implied
    age_ma = 170
    axis_lat = 40                      # the rotation axis (Euler pole), degrees
    axis_lon = -20                     # degrees east, −180…360
    angle_deg = -30                    # right-hand rule: positive is counter-clockwise
    sigma_deg = 1.0                    # optional: 1σ cone about the axis, 0…90
    note = "optional"

    [plate.skellan-terrane]            # a plate that changes what it moves against
    [[plate.skellan-terrane.span]]     # 0 Ma to its last pole: against brevandel-block
    moves_against = "brevandel-block"
    [[plate.skellan-terrane.span.pole]]
    ...
    [[plate.skellan-terrane.span]]     # from the previous span's last age on
    moves_against = "paleomagnetic"
    [[plate.skellan-terrane.span.pole]]   # first pole: at the age the spans meet
    ...

* ``[model]``: ``name``, ``frame`` (a word of ``FRAMES``) and ``citation`` are required,
  ``description`` is optional.
* ``[plate.<name>]``: a name is a slug (lowercase letters, digits, hyphens, starting with a
  letter; not a frame word). A plate gives either ``moves_against`` and its ``pole`` array
  (one span), or a ``span`` array whose entries each give ``moves_against`` and ``pole``.
* A pole is the finite rotation that takes the plate from its present position to its
  position at ``age_ma``, relative to what it moves against. The present-day identity is
  implied (no pole at 0 Ma). Poles are listed youngest first, one per age.
* Spans are consecutive: the first runs from 0 Ma to its last pole; each later span starts
  at the previous span's last age, with a pole at exactly that age (relative to its own
  partner), and needs at least one older pole. An age where two spans meet belongs to the
  younger span. The two spans must put the plate in one place at that age: a jump of more
  than ``JUMP_TOLERANCE_DEG`` is refused (checked where both circuits reach that age).
* Every circuit (plate → what it moves against → … → the frame) must reach the frame
  without a loop at every age.

Every problem of a document is reported at once, each named by its place, e.g.
``plate.brevandel-block.pole[3]`` or ``plate.skellan-terrane.span[2].pole[1]`` (counted
from 1).

Interpolation: between two tabulated ages of a span, spherical linear interpolation of the
two finite rotations (unit quaternions, ``scipy.spatial.transform.Slerp``), which keeps the
path the short way round (tabulate consecutive rotations less than 180° apart). No
extrapolation: an age beyond a plate's oldest pole — or beyond the oldest pole of any plate
on its circuit at that age — gives NaN and the status ``BEYOND``.

Composition (order matters; rotations act on column vectors, applied right to left):
``R(P→frame, t) = R(F→frame, t) · R(P→F, t)`` — first the plate is moved on its partner F
(the one in force at t), then F (carrying it) is moved to the frame, and so on down the
circuit. In scipy terms ``r_frame = r_partner_to_frame * r_plate_to_partner``.

Paleolatitude uncertainty is a Monte Carlo on the pole cones with a fixed seed: in each draw
every tabulated pole with a ``sigma_deg`` is displaced in its tangent plane by two
independent normal offsets of standard deviation σ (so the angular displacement is Rayleigh
with scale σ, the offset direction uniform); angles are taken as exact and poles as
independent (no covariances). The result is the standard deviation of the drawn
paleolatitudes — a first estimate, not a full error budget. It is given only where every
pole entering a record's rotation states its σ (NaN otherwise: unknown, never zero).
"""

from __future__ import annotations

import hashlib
import re
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np
from scipy.spatial.transform import Rotation, Slerp
from strata13.compile.paleo.names import FRAMES, plate_name_problem

from strata13.errors import ConfigError
from strata13.suggest import did_you_mean

MODEL_KEYS = ("name", "frame", "citation", "description")
PLATE_KEYS = ("moves_against", "pole", "span", "description")
SPAN_KEYS = ("moves_against", "pole", "note")
POLE_KEYS = ("age_ma", "axis_lat", "axis_lon", "angle_deg", "sigma_deg", "note")
# where two spans of a plate meet, the largest jump of its position accepted (degrees of
# rotation); a choice: poles rounded to 0.01° stay well within it
JUMP_TOLERANCE_DEG = 0.05
FORMAT_HINT = "The format: README 'Paleogeography' ([model] and [plate.<name>] tables)."

N_DRAWS = 200  # Monte Carlo draws for paleolatitude uncertainty (a choice)
SEED = 0  # fixed, so a recompute with the same settings gives the same σ

# Per-record status ("" = reconstructed).
OK = ""
NO_PLATE = "no plate"
UNKNOWN_PLATE = "plate not in the model"
NO_AGE = "no age"
BEYOND = "older than the model"


@dataclass(frozen=True)
class Span:
    """The tabulated finite rotations of one plate relative to one partner, by age."""

    partner: str  # a plate's name, or the model's frame word
    ages: np.ndarray  # Ma, ascending; the first span starts with the implied 0 Ma identity
    poles: np.ndarray  # n × 3 unit vectors
    angles_rad: np.ndarray
    sigma_rad: np.ndarray  # NaN where not given (0 for the exact present-day identity)
    where: tuple[str, ...]  # each row's place in the document ("" for the implied identity)

    def rotations(self, poles: np.ndarray | None = None) -> Rotation:
        """The tabulated rotations (optionally with displaced poles)."""
        p = self.poles if poles is None else poles
        return Rotation.from_rotvec(p * self.angles_rad[:, None])


@dataclass(frozen=True)
class Plate:
    """A named plate: its spans, youngest first, each ending where the next begins."""

    name: str
    spans: tuple[Span, ...]
    description: str = ""

    @property
    def oldest_ma(self) -> float:
        return float(self.spans[-1].ages[-1])

    def span_of(self, ages: np.ndarray) -> np.ndarray:
        """The span index in force at each age (len(spans) beyond the oldest pole); an age
        where two spans meet belongs to the younger one."""
        ends = np.array([s.ages[-1] for s in self.spans])
        return np.searchsorted(ends, ages, side="left")


@dataclass(frozen=True)
class RotationModel:
    name: str
    frame: str
    citation: str
    plates: Mapping[str, Plate]
    digest: str  # sha256 of the document's text: the settings key in the store
    description: str = ""

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(sorted(self.plates))

    def circuit(self, plate: str, age: float) -> list[str]:
        """The plates from ``plate`` down to the frame at ``age`` (frame excluded; stops at
        a plate the age is beyond)."""
        out: list[str] = []
        while plate != self.frame and plate not in out:
            p = self.plates[plate]
            out.append(plate)
            k = int(p.span_of(np.array([age]))[0])
            if k >= len(p.spans):
                break
            plate = p.spans[k].partner
        return out


class Reconstruction(NamedTuple):
    """Paleo-coordinates (degrees; NaN where not reconstructed) and a status per record."""

    paleolat: np.ndarray
    paleolon: np.ndarray
    status: np.ndarray  # OK, NO_PLATE, UNKNOWN_PLATE, NO_AGE or BEYOND


def unit_vectors(lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """n × 3 unit vectors (x to 0°N 0°E, z to the north pole) from degrees."""
    la, lo = np.radians(lat), np.radians(lon)
    return np.column_stack([np.cos(la) * np.cos(lo), np.cos(la) * np.sin(lo), np.sin(la)])


def lat_lon(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Degrees from n × 3 vectors; longitude in −180…180."""
    lat = np.degrees(np.arcsin(np.clip(v[:, 2], -1.0, 1.0)))
    lon = np.degrees(np.arctan2(v[:, 1], v[:, 0]))
    return lat, lon


def euler_rotation(pole_lat: float, pole_lon: float, angle_deg: float) -> Rotation:
    """One finite rotation about an Euler pole (right-hand rule)."""
    axis = unit_vectors(np.array([pole_lat]), np.array([pole_lon]))[0]
    return Rotation.from_rotvec(axis * np.radians(angle_deg))


# ---------------------------------------------------------------------------------------------
# Reading and validation


def load_model(path: Path | str) -> RotationModel:
    """Read and validate a rotation-model document; ConfigError names every problem."""
    from strata13.compile.read.inputs import read_text

    path = Path(path)
    text = read_text(path, "rotation model", "Check the MODEL argument (a TOML file).")
    return parse_model(text, path.name)


def looks_like_retired_csv(text: str, name: str = "") -> bool:
    """Whether ``text`` is a rotation model in the CSV layout strata13 no longer reads."""
    head = [ln.strip() for ln in text.splitlines() if ln.strip()][:8]
    return name.lower().endswith(".csv") or any(
        ln.startswith("# model:") or ln.replace(" ", "").startswith("plate_id,") for ln in head
    )


def refuse_retired_csv(name: str) -> ConfigError:
    return ConfigError(
        f"{name} is a rotation model in the retired CSV layout, which strata13 no longer "
        "reads: write it as a TOML document of [model] and [plate.<name>] tables.",
        "README 'Paleogeography' shows the format.",
    )


def _toml(text: str, name: str) -> dict[str, Any]:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        msg = re.sub(r"\s*\(at line \d+, column \d+\)", "", str(exc)).rstrip(".")
        at = re.search(r"line (\d+)", str(exc))
        raise ConfigError(
            f"{name} is not valid TOML{f' at line {at.group(1)}' if at else ''}: {msg}.",
            "Check quotes, brackets and commas on that line. " + FORMAT_HINT,
        ) from None


class _Problems:
    """Every problem of one document, each with its place, raised together at the end."""

    def __init__(self, name: str) -> None:
        self.name = name
        self.items: list[str] = []

    def add(self, where: str, what: str) -> None:
        what = what.rstrip(".")
        self.items.append(f"{where}: {what}" if where else what)

    def unknown_keys(self, where: str, table: Mapping[str, Any], keys: Sequence[str]) -> None:
        for key in table:
            if key not in keys:
                self.add(
                    where,
                    f"unknown key {key!r}.{did_you_mean(key, keys)} (known: {', '.join(keys)})",
                )

    def raise_any(self) -> None:
        if self.items:
            n = len(self.items)
            raise ConfigError(
                f"the rotation model {self.name} has {n} problem{'s' if n > 1 else ''}: "
                + "; ".join(self.items)
                + ".",
                "Fix each named entry (positions count from 1). " + FORMAT_HINT,
            )


def _text(table: Mapping[str, Any], key: str, where: str, out: _Problems, need: bool) -> str:
    value = table.get(key)
    if value is None:
        if need:
            out.add(where, f"{key} is missing.")
        return ""
    if not isinstance(value, str) or (need and not value.strip()):
        out.add(where, f"{key} must be a non-empty text in quotes, not {value!r}.")
        return ""
    return value.strip()


def _number(
    pole: Mapping[str, Any], key: str, lo: float, hi: float, where: str, out: _Problems, fix: str
) -> float:
    value = pole.get(key)
    if value is None:
        out.add(where, f"{key} is missing.")
        return np.nan
    if isinstance(value, bool) or not isinstance(value, int | float):
        out.add(where, f"{key} {value!r} is not a number (write it without quotes).")
        return np.nan
    value = float(value)
    if not np.isfinite(value) or not lo <= value <= hi:
        out.add(where, f"{key} {value:g} is outside {lo:g}…{hi:g}{fix}.")
        return np.nan
    return value


class _RawSpan(NamedTuple):
    where: str  # "plate.x" or "plate.x.span[2]"
    partner: str
    rows: list[tuple[float, float, float, float, float, str]]  # age, lat, lon, angle, σ, where


def _poles(table: Mapping[str, Any], where: str, out: _Problems) -> list[tuple[Any, ...]]:
    raw = table.get("pole")
    if raw is None:
        out.add(where, "has no poles (give [[…pole]] tables, youngest first).")
        return []
    if not isinstance(raw, list) or not all(isinstance(p, dict) for p in raw) or not raw:
        out.add(where, "pole must be an array of tables ([[…pole]]), youngest first.")
        return []
    rows = []
    for i, pole in enumerate(raw, start=1):
        at = f"{where}.pole[{i}]"
        out.unknown_keys(at, pole, POLE_KEYS)
        age = _number(pole, "age_ma", 0, np.inf, at, out, " (Ma before present)")
        lat = _number(
            pole, "axis_lat", -90, 90, at, out, " (check for swapped latitude and longitude)"
        )
        lon = _number(pole, "axis_lon", -180, 360, at, out, " (degrees east)")
        angle = _number(pole, "angle_deg", -360, 360, at, out, "")
        sigma = np.nan
        if pole.get("sigma_deg") is not None:
            sigma = _number(pole, "sigma_deg", 0, 90, at, out, " (leave it out if unknown)")
        if "note" in pole and not isinstance(pole["note"], str):
            out.add(at, "note must be a text in quotes.")
        rows.append((age, lat, lon, angle, sigma, at))
    return rows


def _check_order(span: _RawSpan, first: bool, out: _Problems) -> None:
    """Poles youngest first, one per age; the present is implied in the first span."""
    previous: float | None = None
    for age, *_, at in span.rows:
        if not np.isfinite(age):
            continue
        if first and age == 0:
            out.add(at, "age_ma 0: the present-day identity is implied; leave this pole out.")
        elif previous is not None and age <= previous:
            out.add(
                at,
                f"age_ma {age:g} is not older than the pole before it ({previous:g} Ma): "
                "list poles youngest first, one per age.",
            )
        previous = age if previous is None else max(previous, age)


def _read_plate(slug: str, table: Any, out: _Problems) -> list[_RawSpan]:
    where = f"plate.{slug}"
    why = plate_name_problem(slug)
    if why:
        out.add(where, f"the name {why}.")
    if not isinstance(table, dict):
        out.add(where, "must be a table ([plate.<name>]).")
        return []
    out.unknown_keys(where, table, PLATE_KEYS)
    _text(table, "description", where, out, need=False)
    if "span" in table:
        if "moves_against" in table or "pole" in table:
            out.add(
                where,
                "gives both span and moves_against/pole: give either one span's moves_against "
                "and poles, or an array of spans.",
            )
        raw = table["span"]
        if not isinstance(raw, list) or not raw or not all(isinstance(s, dict) for s in raw):
            out.add(where, "span must be an array of tables ([[plate.<name>.span]]).")
            return []
        spans = []
        for k, s in enumerate(raw, start=1):
            at = f"{where}.span[{k}]"
            out.unknown_keys(at, s, SPAN_KEYS)
            _text(s, "note", at, out, need=False)
            spans.append(_RawSpan(at, _text(s, "moves_against", at, out, True), _poles(s, at, out)))
    else:
        spans = [
            _RawSpan(
                where, _text(table, "moves_against", where, out, True), _poles(table, where, out)
            )
        ]
    for k, span in enumerate(spans):
        _check_order(span, k == 0, out)
    for before, span in zip(spans, spans[1:], strict=False):
        if before.partner and before.partner == span.partner:
            out.add(
                span.where,
                f"moves against {span.partner!r} like the span before it: "
                "merge the two spans into one.",
            )
        if span.rows and before.rows:
            end, start = before.rows[-1][0], span.rows[0][0]
            if np.isfinite(end) and np.isfinite(start) and start != end:
                out.add(
                    span.rows[0][5],
                    f"the span starts at {start:g} Ma but the span before it ends at {end:g} Ma: "
                    f"a later span's first pole is at the age the spans meet ({end:g} Ma).",
                )
        if len(span.rows) < 2 and span.rows:
            out.add(
                span.where,
                "a later span needs its first pole (where it meets the span before) and at "
                "least one older pole.",
            )
    return spans


def _check_partners(spans: Mapping[str, list[_RawSpan]], frame: str, out: _Problems) -> None:
    for slug, plate_spans in spans.items():
        for span in plate_spans:
            p = span.partner
            if not p or p == frame or p in spans and p != slug or p in FRAMES and not frame:
                continue  # (a frame word is checked once the model's frame is known)
            if p == slug:
                out.add(span.where, "a plate cannot move against itself.")
            elif p in FRAMES:
                out.add(
                    span.where,
                    f"moves against the {p} frame, but the model's frame is {frame!r}.",
                )
            else:
                out.add(
                    span.where,
                    f"moves against {p!r}, which is neither a plate of the model nor its "
                    f"frame {frame!r}.{did_you_mean(p, [*spans, frame])}",
                )


def _build_span(raw: _RawSpan, first: bool) -> Span:
    rows = [r[:5] for r in raw.rows]
    where = [r[5] for r in raw.rows]
    if first:  # the implied present-day identity (any axis, angle 0; exact: σ 0)
        rows.insert(0, (0.0, 90.0, 0.0, 0.0, 0.0))
        where.insert(0, "")
    arr = np.array(rows, dtype=float)
    return Span(
        partner=raw.partner,
        ages=arr[:, 0],
        poles=unit_vectors(arr[:, 1], arr[:, 2]),
        angles_rad=np.radians(arr[:, 3]),
        sigma_rad=np.radians(arr[:, 4]),
        where=tuple(where),
    )


def parse_model(text: str, name: str = "rotation model") -> RotationModel:
    """Validate the text of a rotation-model document (see the module docstring); every
    problem is reported at once in one ConfigError."""
    if looks_like_retired_csv(text, name):
        raise refuse_retired_csv(name)
    doc = _toml(text, name)
    out = _Problems(name)
    out.unknown_keys("", doc, ("model", "plate"))
    header = doc.get("model")
    model_name = citation = description = frame = ""
    if not isinstance(header, dict):
        out.add("", "the [model] table is missing (its name, frame and citation)")
    else:
        out.unknown_keys("model", header, MODEL_KEYS)
        model_name = _text(header, "name", "model", out, need=True)
        citation = _text(header, "citation", "model", out, need=True)
        description = _text(header, "description", "model", out, need=False)
        frame = _text(header, "frame", "model", out, need=True).lower()
        if frame and frame not in FRAMES:
            out.add("model", f"frame {frame!r} is not one of {', '.join(FRAMES)}")
            frame = ""
    plates_doc = doc.get("plate")
    if not isinstance(plates_doc, dict) or not plates_doc:
        out.add("", "the model has no plates (add a [plate.<name>] table).")
        plates_doc = {}
    spans = {slug: _read_plate(slug, t, out) for slug, t in plates_doc.items()}
    _check_partners(spans, frame, out)
    out.raise_any()
    plates = {
        slug: Plate(
            slug,
            tuple(_build_span(s, k == 0) for k, s in enumerate(raw)),
            str(plates_doc[slug].get("description", "")).strip(),
        )
        for slug, raw in spans.items()
    }
    model = RotationModel(
        model_name,
        frame,
        citation,
        plates,
        hashlib.sha256(text.encode("utf-8")).hexdigest(),
        description,
    )
    _check_loops(model, out)
    out.raise_any()
    _check_jumps(model, out)
    out.raise_any()
    return model


def _check_loops(model: RotationModel, out: _Problems) -> None:
    """Every circuit reaches the frame at every age. Partners are constant between
    consecutive span ends (an end belongs to the younger span), so the ends are the ages
    to look at."""
    ends = sorted({float(s.ages[-1]) for p in model.plates.values() for s in p.spans})
    seen: set[frozenset[str]] = set()
    for age in ends:
        for start in model.names:
            path = model.circuit(start, age)
            last = model.plates[path[-1]]
            k = int(last.span_of(np.array([age]))[0])
            if k >= len(last.spans) or last.spans[k].partner == model.frame:
                continue
            head = last.spans[k].partner
            loop = path[path.index(head) :]
            if frozenset(loop) in seen:
                continue
            seen.add(frozenset(loop))
            out.add(
                f"plate.{head}",
                f"the plate circuit loops at {age:g} Ma ({' → '.join([*loop, head])}); "
                f"every circuit must end at the frame {model.frame!r}.",
            )


def _check_jumps(model: RotationModel, out: _Problems) -> None:
    """Where two spans meet, both put the plate in one place (where both circuits reach)."""
    tables = _tables(model)
    for plate in model.plates.values():
        for before, span in zip(plate.spans, plate.spans[1:], strict=False):
            age = np.array([span.ages[0]])
            if not (_reaches(model, before.partner, age) & _reaches(model, span.partner, age))[0]:
                continue
            young = _to_frame(model, before.partner, age, tables) * Rotation.from_rotvec(
                before.poles[-1:] * before.angles_rad[-1:, None]
            )
            old = _to_frame(model, span.partner, age, tables) * Rotation.from_rotvec(
                span.poles[:1] * span.angles_rad[:1, None]
            )
            jump = float(np.degrees((young * old.inv()).magnitude()[0]))
            if jump > JUMP_TOLERANCE_DEG:
                out.add(
                    span.where[0],
                    f"at {age[0]:g} Ma the plate would jump {jump:.3g}° where it changes from "
                    f"moving against {before.partner!r} to {span.partner!r} (the two spans "
                    f"must give one position there; tolerance {JUMP_TOLERANCE_DEG:g}°).",
                )


# ---------------------------------------------------------------------------------------------
# Rotations at any age

Tables = Mapping[tuple[str, int], Rotation]  # the tabulated rotations of each (plate, span)


def _tables(model: RotationModel) -> dict[tuple[str, int], Rotation]:
    return {
        (name, k): s.rotations() for name, p in model.plates.items() for k, s in enumerate(p.spans)
    }


def _reaches(model: RotationModel, plate: str, ages: np.ndarray) -> np.ndarray:
    """Whether the circuit of ``plate`` reaches the frame at each age (no extrapolation)."""
    ok = np.ones(len(ages), dtype=bool)
    if plate == model.frame:
        return ok
    p = model.plates[plate]
    k = p.span_of(ages)
    ok &= (k < len(p.spans)) & (ages >= 0)
    for j, span in enumerate(p.spans):
        sel = ok & (k == j)
        if sel.any():
            ok[sel] = _reaches(model, span.partner, ages[sel])
    return ok


def _to_frame(model: RotationModel, plate: str, ages: np.ndarray, tables: Tables) -> Rotation:
    """R(plate→frame, t) = R(F→frame, t) · R(plate→F, t) for ages the circuit reaches, F the
    partner in force at t."""
    if plate == model.frame:
        return Rotation.identity(len(ages))
    p = model.plates[plate]
    k = p.span_of(ages)
    quats = np.empty((len(ages), 4))
    for j, span in enumerate(p.spans):
        sel = k == j
        if sel.any():
            own = Slerp(span.ages, tables[(plate, j)])(ages[sel])
            quats[sel] = (_to_frame(model, span.partner, ages[sel], tables) * own).as_quat()
    return Rotation.from_quat(quats)


def relative_rotation(model: RotationModel, plate: str, ages: np.ndarray) -> Rotation:
    """Finite rotation of ``plate`` relative to the partner in force at each of ``ages``."""
    ages = np.atleast_1d(np.asarray(ages, dtype=float))
    p = model.plates[plate]
    if np.any(~(ages >= 0)) or np.any(ages > p.oldest_ma):
        raise ValueError(f"ages must lie in 0…{p.oldest_ma:g} Ma for plate {plate!r}")
    k = p.span_of(ages)
    quats = np.empty((len(ages), 4))
    for j, span in enumerate(p.spans):
        sel = k == j
        if sel.any():
            quats[sel] = Slerp(span.ages, span.rotations())(ages[sel]).as_quat()
    return Rotation.from_quat(quats)


def frame_rotation(model: RotationModel, plate: str, ages: np.ndarray) -> Rotation:
    """Finite rotation of ``plate`` to the model's frame at ``ages`` (all reachable)."""
    ages = np.atleast_1d(np.asarray(ages, dtype=float))
    if not _reaches(model, plate, ages).all():
        raise ValueError(
            f"plate {plate!r}'s circuit does not reach every one of these ages; "
            "use reconstruct() for NaN-and-status handling"
        )
    return _to_frame(model, plate, ages, _tables(model))


# ---------------------------------------------------------------------------------------------
# Reconstruction of records


class _Groups(NamedTuple):
    status: np.ndarray
    valid: np.ndarray  # records that can be reconstructed
    key_plate: np.ndarray  # per distinct (plate, age) of the valid records: a plate name
    key_age: np.ndarray
    inverse: np.ndarray  # valid record -> key index


def _plate_codes(plates: np.ndarray, model: RotationModel) -> np.ndarray:
    """Per record: the index of its plate in ``model.names``, −1 for no plate, −2 for a
    plate the model lacks (hash-based, one pass: the names repeat a lot)."""
    import pandas as pd

    codes, uniques = pd.factorize(pd.Series(plates, dtype=object), use_na_sentinel=True)
    lookup = {name: i for i, name in enumerate(model.names)}
    per = np.array(
        [-1 if u == "" else lookup.get(u, -2) if isinstance(u, str) else -2 for u in uniques],
        dtype=np.int64,
    )
    return np.where(codes < 0, -1, per[np.maximum(codes, 0)] if len(per) else -1)


def _group(plates: np.ndarray, ages: np.ndarray, model: RotationModel) -> _Groups:
    n = len(ages)
    status = np.full(n, OK, dtype=object)
    code = _plate_codes(plates, model)
    status[code == -2] = UNKNOWN_PLATE
    status[code == -1] = NO_PLATE
    known = code >= 0
    no_age = known & ~(ages >= 0)
    status[no_age] = NO_AGE
    cand = np.flatnonzero(known & ~no_age)
    # distinct (plate, age) pairs: each coded 1-D and combined into one int64 key, which
    # sorts several times faster than a row-wise unique over a 2-column array
    p_vals, p_code = np.unique(code[cand], return_inverse=True)
    a_vals, a_code = np.unique(ages[cand], return_inverse=True)
    combined = p_code.astype(np.int64) * max(len(a_vals), 1) + a_code
    key, inverse = np.unique(combined, return_inverse=True)
    inverse = np.asarray(inverse).reshape(-1)
    names = np.array(model.names, dtype=object)
    key_plate = names[p_vals[key // max(len(a_vals), 1)]] if len(key) else names[:0]
    key_age = a_vals[key % max(len(a_vals), 1)] if len(key) else a_vals
    reach = np.zeros(len(key), dtype=bool)
    for plate in np.unique(key_plate).tolist():
        sel = key_plate == plate
        reach[sel] = _reaches(model, plate, key_age[sel])
    beyond = ~reach[inverse]
    status[cand[beyond]] = BEYOND
    # keep the reachable keys only, renumbered
    keep = np.flatnonzero(reach)
    renumber = np.full(len(key), -1, dtype=np.int64)
    renumber[keep] = np.arange(len(keep))
    valid = np.zeros(n, dtype=bool)
    valid[cand[~beyond]] = True
    return _Groups(status, valid, key_plate[keep], key_age[keep], renumber[inverse[~beyond]])


def _key_quats(groups: _Groups, model: RotationModel, tables: Tables) -> np.ndarray:
    """One rotation (as a quaternion) per distinct (plate, age); a loop over plates only."""
    quats = np.empty((len(groups.key_plate), 4))
    for plate in np.unique(groups.key_plate).tolist():
        sel = groups.key_plate == plate
        quats[sel] = _to_frame(model, plate, groups.key_age[sel], tables).as_quat()
    return quats


def _as_arrays(
    lat: Any, lon: Any, plates: Any, ages: Any
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    lat, lon, ages = (np.atleast_1d(np.asarray(a, dtype=float)) for a in (lat, lon, ages))
    names = np.atleast_1d(np.asarray(plates, dtype=object))
    if len({len(lat), len(lon), len(names), len(ages)}) != 1:
        raise ValueError("lat, lon, plates and ages must have one length")
    return lat, lon, names, ages


def reconstruct(lat: Any, lon: Any, plates: Any, ages: Any, model: RotationModel) -> Reconstruction:
    """Rotate present-day points on their plates (by name) to the model's frame at their ages.

    Vectorised: one rotation per distinct (plate, age), applied to all records at once.
    Records without a plate (None or ""), on a plate the model lacks, without an age, or
    older than their circuit reaches get NaN and a status saying which.
    """
    lat, lon, names, ages = _as_arrays(lat, lon, plates, ages)
    groups = _group(names, ages, model)
    plat = np.full(len(lat), np.nan)
    plon = np.full(len(lat), np.nan)
    if groups.valid.any():
        quats = _key_quats(groups, model, _tables(model))
        moved = Rotation.from_quat(quats[groups.inverse]).apply(
            unit_vectors(lat[groups.valid], lon[groups.valid])
        )
        plat[groups.valid], plon[groups.valid] = lat_lon(moved)
    return Reconstruction(plat, plon, groups.status)


def _displaced_poles(poles: np.ndarray, sigma: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Each pole moved by a 2-D normal offset (σ per component, radians) in its tangent plane."""
    z = np.array([0.0, 0.0, 1.0])
    e1 = np.cross(poles, z)
    polar = np.linalg.norm(e1, axis=1) < 1e-12
    e1[polar] = np.array([1.0, 0.0, 0.0])
    e1 /= np.linalg.norm(e1, axis=1)[:, None]
    e2 = np.cross(poles, e1)
    s = np.where(np.isfinite(sigma), sigma, 0.0)
    a = rng.normal(size=len(poles)) * s
    b = rng.normal(size=len(poles)) * s
    theta = np.hypot(a, b)
    with np.errstate(invalid="ignore", divide="ignore"):
        u = (a[:, None] * e1 + b[:, None] * e2) / theta[:, None]
    u[theta == 0] = 0.0
    return poles * np.cos(theta)[:, None] + u * np.sin(theta)[:, None]


def _sigma_known(model: RotationModel, plate: str, ages: np.ndarray) -> np.ndarray:
    """Whether every pole entering the rotation at each age states its σ: the tabulated
    poles bracketing the age on each span of the circuit (only the one at a tabulated age;
    the implied present-day identity is exact)."""
    out = np.ones(len(ages), dtype=bool)
    if plate == model.frame:
        return out
    p = model.plates[plate]
    k = p.span_of(ages)
    for j, span in enumerate(p.spans):
        sel = np.flatnonzero(k == j)
        if not len(sel):
            continue
        t = ages[sel]
        upper = np.searchsorted(span.ages, t, side="left")
        known = np.isfinite(span.sigma_rad)
        lower_enters = t < span.ages[upper]
        ok = known[upper] & (~lower_enters | known[np.maximum(upper - 1, 0)])
        out[sel] = ok & _sigma_known(model, span.partner, t)
    return out


def paleolat_sigma(
    lat: Any,
    lon: Any,
    plates: Any,
    ages: Any,
    model: RotationModel,
    n_draws: int = N_DRAWS,
    seed: int = SEED,
) -> np.ndarray:
    """1σ of paleolatitude (degrees) from the poles' cones, by Monte Carlo (module docstring).

    NaN where the record is not reconstructed or a pole entering its rotation gives no σ
    (a σ from the other poles alone would claim too little uncertainty).
    """
    if n_draws < 2:
        raise ValueError("n_draws must be at least 2")
    lat, lon, names, ages = _as_arrays(lat, lon, plates, ages)
    groups = _group(names, ages, model)
    out = np.full(len(lat), np.nan)
    if not groups.valid.any():
        return out
    key_ok = np.zeros(len(groups.key_plate), dtype=bool)
    for plate in np.unique(groups.key_plate).tolist():
        sel = groups.key_plate == plate
        key_ok[sel] = _sigma_known(model, plate, groups.key_age[sel])
    rec_ok = key_ok[groups.inverse]
    if not rec_ok.any():
        return out
    rng = np.random.default_rng(seed)
    vecs = unit_vectors(lat[groups.valid], lon[groups.valid])
    shift, _ = lat_lon(
        Rotation.from_quat(_key_quats(groups, model, _tables(model))[groups.inverse]).apply(vecs)
    )
    total = np.zeros(len(vecs))  # sums of (draw − undisturbed) keep the variance exact
    total_sq = np.zeros(len(vecs))
    spans = [(name, k, s) for name, p in model.plates.items() for k, s in enumerate(p.spans)]
    for _ in range(n_draws):
        tables = {
            (name, k): s.rotations(_displaced_poles(s.poles, s.sigma_rad, rng))
            for name, k, s in spans
        }
        quats = _key_quats(groups, model, tables)
        drawn, _ = lat_lon(Rotation.from_quat(quats[groups.inverse]).apply(vecs))
        drawn -= shift
        total += drawn
        total_sq += drawn * drawn
    mean = total / n_draws
    var = np.maximum(total_sq - n_draws * mean * mean, 0.0) / (n_draws - 1)
    sig = np.sqrt(var)
    sig[~rec_ok] = np.nan
    out[groups.valid] = sig
    return out
