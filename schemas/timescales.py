"""Geologic time scales: the ICS chart versions as data, and the arithmetic done with them.

One CSV per chart version lives in ``data/timescales/`` (header comments name the source and
how firmly each value stands). A table lists units youngest first within each rank; only
bases are stored, because on a chart a unit ends where the next younger one begins (the
youngest ends at 0 Ma, the present), and a series or period begins at the base of its
oldest stage. ``boundary_key`` names a boundary across versions (renamed stages keep their
key), so ages move between charts with the boundaries the two charts share, never by name.

Wrong tables are ConfigError (naming file, line and fix); wrong names, ranges and versions
on a command line are OptionError with a "did you mean".
"""

from __future__ import annotations

import csv
import math
import re
import unicodedata
from dataclasses import dataclass, field
from functools import cache, cached_property
from pathlib import Path
from typing import TYPE_CHECKING, Any, NamedTuple

from strata13.schemas.vocabularies import vocabulary

from strata13.errors import ConfigError, InputFileError, OptionError
from strata13.suggest import closest

if TYPE_CHECKING:
    import numpy as np

TABLES = Path(__file__).with_name("data") / "timescales"


def _newest_shipped() -> str:
    """The newest shipped chart (its file name, e.g. ics2024-12.csv -> ICS2024/12): the
    default time scale of a new store, so shipping a newer chart moves the default."""
    stems = sorted(p.stem for p in TABLES.glob("ics*.csv"))
    return stems[-1].upper().replace("-", "/")


DEFAULT_VERSION = _newest_shipped()
RANKS = ("stage", "series", "subsystem", "period", "era", "eon")  # young rank to old rank
REQUIRED = ("name", "rank", "parent", "base_ma", "boundary_key")
OPTIONAL = ("uncertainty_ma", "confidence", "sigma_ma", "approximate", "note")
# stated level of a ± -> divisor giving 1σ
LEVELS = {
    "95%": 1.96,
    "2σ": 2.0,
    "2s": 2.0,
    "2sigma": 2.0,
    "1σ": 1.0,
    "1s": 1.0,
    "1sigma": 1.0,
    "68%": 1.0,
}
TRUE = {"true", "yes", "1", "~"}
FALSE = {"false", "no", "0", ""}
PRESENT = "present"  # boundary key of 0 Ma, shared by every chart
METHOD = "piecewise-linear between shared chart boundaries"


@dataclass(frozen=True)
class Unit:
    """One chronostratigraphic unit of one chart version (ages in Ma)."""

    name: str
    rank: str
    parent: str
    base_ma: float
    top_ma: float
    uncertainty_ma: float | None  # the chart's ± as stated
    confidence: str  # level of that ±, e.g. "95%"
    sigma_ma: float | None  # the same ± as 1σ
    approximate: bool  # "~" on the chart, or a value this table had to substitute
    boundary_key: str
    top_key: str  # boundary_key of the unit above (PRESENT for the youngest)
    note: str
    line: int

    @property
    def midpoint_ma(self) -> float:
        return (self.base_ma + self.top_ma) / 2.0

    @property
    def span_sigma_ma(self) -> float:
        """1σ of a uniform distribution over the unit: (base − top)/√12."""
        return (self.base_ma - self.top_ma) / math.sqrt(12.0)


@dataclass(frozen=True)
class TimeScale:
    """A chart version: its units in file order and where they came from."""

    version: str
    source: str
    path: str
    units: tuple[Unit, ...]
    header: tuple[str, ...] = field(default=(), compare=False)

    @cached_property
    def _index(self) -> dict[str, Unit]:
        return {_norm(u.name): u for u in self.units}

    @cached_property
    def boundaries(self) -> dict[str, tuple[float, bool]]:
        """boundary_key -> (age in Ma, approximate), the present included."""
        out = {PRESENT: (0.0, False)}
        for u in self.units:
            out.setdefault(u.boundary_key, (u.base_ma, u.approximate))
        return out

    def units_of(self, rank: str) -> list[Unit]:
        """The units of one rank, youngest first."""
        return sorted((u for u in self.units if u.rank == rank), key=lambda u: u.base_ma)

    def find(self, name: str) -> Unit:
        """The unit called ``name`` (case-insensitive; "Early Jurassic" = "Lower Jurassic")."""
        return _find(self, name)[0]

    unit = find

    def by_key(self, key: str) -> Unit:
        """The lowest-rank unit whose base is the boundary ``key`` (the same boundary on
        every chart version, whatever its name there)."""
        hits = [u for u in self.units if u.boundary_key == str(key).strip().lower()]
        if not hits:
            sug = closest(str(key).strip().lower(), self.boundaries, n=1)
            raise OptionError(
                f"Boundary {key!r} is not on the {self.version} chart.",
                (f"Did you mean {sug[0]}? " if sug else "")
                + "Boundary keys are lowercase stage names, e.g. 'toarcian'.",
            )
        return min(hits, key=lambda u: RANKS.index(u.rank))


class Interval(NamedTuple):
    older_ma: float
    younger_ma: float
    description: str
    notes: tuple[str, ...]


class StageAge(NamedTuple):
    midpoint_ma: float
    sigma_ma: float  # uniform over the unit
    base_ma: float
    top_ma: float


# --- versions and loading -------------------------------------------------------------


def _file_for(version: str) -> Path:
    return TABLES / (version.lower().replace("/", "-") + ".csv")


def versions() -> list[str]:
    """The shipped chart versions, newest first."""
    return [t for t in vocabulary("time_scale").terms if _file_for(t).is_file()]


@dataclass(frozen=True)
class BoundarySigma:
    """A boundary's 1σ on a chart, and where it comes from when the chart states none."""

    sigma_ma: float | None  # None: no shipped chart states an error for this boundary
    borrowed_from: str | None  # the chart whose stated error is used; None: the chart's own


def boundary_sigma(version: str, key: str) -> BoundarySigma:
    """The 1σ of boundary ``key`` on chart ``version``. A blank error on the chart is not
    zero: it is taken from the nearest shipped chart (in the vocabulary's order, newest
    first) that states one for the same boundary, and the result says which."""
    scale = load(version)
    own = scale.by_key(key)
    if own.sigma_ma is not None:
        return BoundarySigma(own.sigma_ma, None)
    shipped = versions()
    here = shipped.index(scale.version) if scale.version in shipped else 0
    for other in sorted(shipped, key=lambda v: (abs(shipped.index(v) - here), shipped.index(v))):
        if other == scale.version:
            continue
        try:
            unit = load(other).by_key(own.boundary_key)
        except OptionError:
            continue
        if unit.sigma_ma is not None:
            return BoundarySigma(unit.sigma_ma, other)
    return BoundarySigma(None, None)


def _family(text: str) -> str | None:
    """A chart name's family ("ICS", "GTS" …) from its leading letters; None when it has
    none ("2020", "v2020"), which any shipped chart may match."""
    m = re.match(r"\s*([A-Za-z]+)", str(text))
    letters = m.group(1).upper() if m else ""
    return None if letters in ("", "V") else letters


def suggest_chart(text: str) -> str | None:
    """The shipped chart most like ``text``, never across families: a GTS book chart is not
    an ICS chart (boundary ages differ between them), so a GTS name gets no ICS suggestion."""
    family = _family(text)
    shipped = [v for v in versions() if family is None or _family(v) == family]
    hit = closest(str(text).strip().upper().replace(" ", ""), shipped, n=1, cutoff=0.6)
    return hit[0] if hit else None


def canonical_version(text: str) -> str:
    """The vocabulary's name for a version, from common spellings ("ics 2024-12", "v2020")."""
    voc = vocabulary("time_scale")
    raw = str(text).strip()
    squeezed = raw.replace(" ", "")
    for cand in (
        raw,
        squeezed,
        squeezed.replace("-", "/").replace("_", "/"),
        re.sub(r"\.csv$", "", squeezed, flags=re.I).replace("-", "/"),
    ):
        hit = voc.resolve(cand)
        if hit:
            return hit
    shipped = versions()
    sug = suggest_chart(raw)
    raise OptionError(
        f"Time scale {raw!r} is not one of the shipped chart versions.",
        (f"Did you mean {sug}? " if sug else "")
        + f"Shipped: {', '.join(shipped)}; a chart table of your own is given as its CSV "
        "file (README, Ages, time scales and age models).",
    )


# A user's chart kept in a store: its name is "<the table's version>@<12 hex digits of the
# SHA-256 of its text>", so two tables never share a name; registered when the store's
# settings are read (use_table), then loaded by that name like a shipped chart.
_USER_TABLES: dict[str, TimeScale] = {}
USER_MARK = "@"


def use_table(text: str, origin: str = "time-scale table") -> TimeScale:
    """A user's chart table (CSV text in the shipped format), checked and made loadable by
    its store name. A table naming itself after a shipped chart is refused: its ages would
    be taken for that chart's."""
    import hashlib

    digest = hashlib.sha256(text.encode("utf-8")).hexdigest()[:12]
    for name, scale in _USER_TABLES.items():
        if name.endswith(USER_MARK + digest):
            return scale
    parsed = _parse(text.removeprefix("\ufeff"), Path(origin))
    own = parsed.version.strip()
    if vocabulary("time_scale").resolve(own):
        raise ConfigError(
            f"{Path(origin).name} names itself {own!r}, the name of a chart strata13 knows.",
            "Use the shipped chart by its name, or give your table a name of its own in its "
            "'# version:' line (e.g. '# version: basin-chart-2026').",
        )
    if USER_MARK in own:
        raise ConfigError(
            f"{Path(origin).name}: the version name {own!r} contains {USER_MARK!r}.",
            f"Write the '# version:' line without {USER_MARK!r}.",
        )
    key = f"{own}{USER_MARK}{digest}"
    scale = TimeScale(key, parsed.source, parsed.path, parsed.units, parsed.header)
    _USER_TABLES[key] = scale
    return scale


def load(version: str = DEFAULT_VERSION) -> TimeScale:
    """The shipped table of a chart version (any common spelling of its name), or a user's
    table registered by ``use_table`` (by its store name)."""
    if str(version) in _USER_TABLES:
        return _USER_TABLES[str(version)]
    if USER_MARK in str(version):
        raise OptionError(
            f"Time scale {version!r} is a user's chart table that is not loaded here.",
            "Open the store that holds it (its settings carry the table), or pass the CSV.",
        )
    canon = canonical_version(version)
    if not _file_for(canon).is_file():
        raise OptionError(
            f"Time scale {canon} is known but no table of it is shipped.",
            f"Shipped: {', '.join(versions())}.",
        )
    return _load_shipped(canon)


@cache
def _load_shipped(version: str) -> TimeScale:
    scale = _read(_file_for(version))
    if scale.version != version:
        raise ConfigError(
            f"{_file_for(version).name} says it is {scale.version}, not {version}.",
            "Fix the '# version:' line of the shipped table.",
        )
    return scale


def load_file(path: str | Path) -> TimeScale:
    """A user's table in the shipped format, checked row by row."""
    p = Path(path)
    if not p.is_file():
        raise InputFileError(
            f"Time-scale table {p} does not exist.",
            "Give the path of a CSV in the format of the shipped tables.",
        )
    return _read(p)


def _scale(scale: TimeScale | str) -> TimeScale:
    return scale if isinstance(scale, TimeScale) else load(scale)


# --- reading and checking a table -----------------------------------------------------


class _Problems:
    def __init__(self, path: Path) -> None:
        self.path = path
        self.items: list[tuple[int, str, str]] = []

    def add(self, line: int, problem: str, fix: str) -> None:
        self.items.append((line, problem, fix))

    def raise_any(self) -> None:
        if not self.items:
            return
        line, problem, fix = self.items[0]
        more = len(self.items) - 1
        err = ConfigError(
            f"{self.path.name}, line {line}: {problem}"
            + (f" (and {more} more problem{'s' * (more > 1)})." if more else "."),
            fix,
        )
        err.problems = list(self.items)  # type: ignore[attr-defined]
        raise err


def _read(path: Path) -> TimeScale:
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputFileError(
            f"Time-scale table {path} cannot be read ({exc}).", "Save it as UTF-8 CSV."
        ) from None
    return _parse(text, path)


def _parse(text: str, path: Path) -> TimeScale:
    meta: dict[str, str] = {}
    header: list[str] = []
    body: list[tuple[int, str]] = []
    last = ""
    for n, line in enumerate(text.splitlines(), 1):
        if line.lstrip().startswith("#"):
            comment = line.lstrip()[1:]
            header.append(comment.strip())
            m = re.match(r" ?([a-z][a-z _]*):\s*(.*)$", comment)
            if m:
                last = m.group(1).strip()
                meta[last] = m.group(2).strip()
            elif last and comment.startswith("  "):
                meta[last] += " " + comment.strip()
        elif line.strip():
            body.append((n, line))
    problems = _Problems(path)
    if not body:
        problems.add(
            1,
            "the table has no header row and no units",
            f"Add the header row {','.join(REQUIRED + OPTIONAL)} and one row per unit.",
        )
        problems.raise_any()
    head_line, head = body[0]
    columns = [c.strip().lower() for c in next(csv.reader([head]))]
    missing = [c for c in REQUIRED if c not in columns]
    if missing:
        extra = [c for c in columns if c not in REQUIRED + OPTIONAL]
        sug = closest(missing[0], extra, n=1, cutoff=0.6)
        problems.add(
            head_line,
            f"the header lacks column{'s' * (len(missing) > 1)} "
            f"{', '.join(missing)}"
            + (f" (is {sug[0]!r} meant to be {missing[0]!r}?)" if sug else ""),
            f"The header needs {', '.join(REQUIRED)}; optional: {', '.join(OPTIONAL)}.",
        )
        problems.raise_any()
    rows = []
    for n, line in body[1:]:
        values = next(csv.reader([line]))
        if len(values) != len(columns):
            problems.add(
                n,
                f"the row has {len(values)} fields but the header has {len(columns)}",
                "Quote fields that contain commas.",
            )
            continue
        rows.append((n, dict(zip(columns, (v.strip() for v in values), strict=True))))
    unit_rows = _units(rows, problems)
    problems.raise_any()
    units = _with_tops(unit_rows, problems)
    problems.raise_any()
    return TimeScale(
        meta.get("version") or path.stem,
        meta.get("source", ""),
        str(path),
        tuple(units),
        tuple(header),
    )


def _number(text: str, col: str, n: int, problems: _Problems, required: bool) -> float | None:
    if not text:
        if required:
            problems.add(n, f"{col} is empty", f"Write {col} in Ma, e.g. 201.4.")
        return None
    try:
        x = float(text.replace("−", "-"))
    except ValueError:
        problems.add(
            n,
            f"{col} {text!r} is not a number",
            f"Write {col} in Ma with a decimal point and no units, e.g. 201.4.",
        )
        return None
    if not math.isfinite(x) or x < 0:
        problems.add(n, f"{col} {text!r} is not a finite age ≥ 0", f"Write {col} in Ma, ≥ 0.")
        return None
    return x


def _units(rows: list[tuple[int, dict[str, str]]], problems: _Problems) -> list[dict[str, Any]]:
    out: list[dict[str, Any]] = []
    seen: dict[str, int] = {}
    for n, r in rows:
        name, rank = r["name"], r["rank"].lower()
        if not name:
            problems.add(n, "name is empty", "Give every unit its chart name.")
            continue
        if _norm(name) in seen:
            problems.add(
                n,
                f"{name!r} is listed twice (first on line {seen[_norm(name)]})",
                "Give each unit one row.",
            )
            continue
        seen[_norm(name)] = n
        if rank not in RANKS:
            sug = closest(rank, RANKS, n=1)
            problems.add(
                n,
                f"rank {r['rank']!r} of {name} is not a known rank",
                (f"Did you mean {sug[0]}? " if sug else "") + f"Ranks: {', '.join(RANKS)}.",
            )
        base = _number(r["base_ma"], "base_ma", n, problems, required=True)
        unc = _number(r.get("uncertainty_ma", ""), "uncertainty_ma", n, problems, required=False)
        sigma = _number(r.get("sigma_ma", ""), "sigma_ma", n, problems, required=False)
        level = r.get("confidence", "")
        if unc is not None:
            if level.lower().replace(" ", "") not in LEVELS:
                problems.add(
                    n,
                    f"confidence {level!r} of {name}'s ± is not a stated level",
                    f"Write one of {', '.join(LEVELS)} (95% is divided by 1.96).",
                )
            else:
                one = unc / LEVELS[level.lower().replace(" ", "")]
                if sigma is None:
                    sigma = one
                elif abs(sigma - one) > 5e-5 + 1e-4 * one:
                    problems.add(
                        n,
                        f"sigma_ma {sigma} of {name} is not uncertainty_ma {unc} at "
                        f"{level} as 1σ ({one:.5f})",
                        "Leave sigma_ma empty to have it computed, or correct it.",
                    )
        approx = r.get("approximate", "").lower()
        if approx not in TRUE | FALSE:
            problems.add(
                n,
                f"approximate {r.get('approximate')!r} of {name} is not true/false",
                "Write true where the chart marks the age with ~, else false.",
            )
        key = r["boundary_key"].strip().lower()
        if not key or key == PRESENT:
            problems.add(
                n,
                f"boundary_key of {name} is {'empty' if not key else 'reserved'}",
                "Give the lowercase name of the stage whose base this is, e.g. 'toarcian'.",
            )
        out.append(
            dict(
                name=name,
                rank=rank,
                parent=r["parent"],
                base_ma=base,
                uncertainty_ma=unc,
                confidence=level if unc is not None else "",
                sigma_ma=sigma,
                approximate=approx in TRUE,
                boundary_key=key,
                note=r.get("note", ""),
                line=n,
            )
        )
    return out


def _with_tops(rows: list[dict[str, Any]], problems: _Problems) -> list[Unit]:
    """Check order, nesting and shared boundaries; give every unit its top."""
    by_name = {_norm(r["name"]): r for r in rows}
    children: dict[str, list[dict[str, Any]]] = {}
    for r in rows:
        if not r["parent"]:
            continue
        parent = by_name.get(_norm(r["parent"]))
        if parent is None:
            sug = closest(_norm(r["parent"]), by_name, n=1)
            problems.add(
                r["line"],
                f"parent {r['parent']!r} of {r['name']} is not in the table",
                (f"Did you mean {by_name[sug[0]]['name']}? " if sug else "")
                + "Add a row for the parent unit or correct its name.",
            )
        elif RANKS.index(parent["rank"]) <= RANKS.index(r["rank"]):
            problems.add(
                r["line"],
                f"parent {parent['name']} ({parent['rank']}) of "
                f"{r['name']} ({r['rank']}) is not of a higher rank",
                f"Ranks from young to old: {', '.join(RANKS)}.",
            )
        else:
            children.setdefault(_norm(parent["name"]), []).append(r)
    last: dict[str, dict[str, Any]] = {}
    for r in rows:  # each rank youngest first
        prev = last.get(r["rank"])
        if prev is not None and r["base_ma"] <= prev["base_ma"]:
            problems.add(
                r["line"],
                f"{r['name']} (base {r['base_ma']:g} Ma) is listed after "
                f"{prev['name']} (base {prev['base_ma']:g} Ma) but is not older",
                "List each rank from youngest to oldest; two units of one rank cannot "
                "share a base (that would leave one without duration).",
            )
        last[r["rank"]] = r
    leaves = sorted(
        (r for r in rows if _norm(r["name"]) not in children), key=lambda r: r["base_ma"]
    )
    keys: dict[str, dict[str, Any]] = {}
    for older, younger in zip(leaves[1:], leaves, strict=False):
        if older["base_ma"] == younger["base_ma"]:
            problems.add(
                older["line"],
                f"{older['name']} and {younger['name']} share the base "
                f"{older['base_ma']:g} Ma, so one of them has no duration",
                "Correct the base of one of them.",
            )
    for r in leaves:
        other = keys.setdefault(r["boundary_key"], r)
        if other is not r:
            problems.add(
                r["line"],
                f"{r['name']} and {other['name']} have the same boundary_key {r['boundary_key']!r}",
                "Give each boundary its own key.",
            )
    if problems.items:
        return []
    above: dict[str, Any] | None
    for above, leaf in zip([None, *leaves[:-1]], leaves, strict=True):
        leaf["top_ma"] = above["base_ma"] if above else 0.0
        leaf["top_key"] = above["boundary_key"] if above else PRESENT
    for rank in RANKS[1:]:  # a unit spans its children; it begins at the oldest one's base
        for r in rows:
            kids = children.get(_norm(r["name"]))
            if r["rank"] != rank or not kids or any("top_ma" not in k for k in kids):
                continue  # a leaf, or a child already reported
            oldest = max(kids, key=lambda k: k["base_ma"])
            youngest = min(kids, key=lambda k: k["base_ma"])
            if r["base_ma"] != oldest["base_ma"] or r["boundary_key"] != oldest["boundary_key"]:
                problems.add(
                    r["line"],
                    f"{r['name']} begins at {r['base_ma']:g} Ma "
                    f"({r['boundary_key']!r}) but its oldest unit {oldest['name']} "
                    f"at {oldest['base_ma']:g} Ma ({oldest['boundary_key']!r})",
                    f"A {rank} begins at the base of its oldest stage: write base_ma "
                    f"{oldest['base_ma']:g} and boundary_key {oldest['boundary_key']}.",
                )
                continue
            r["top_ma"], r["top_key"] = youngest["top_ma"], youngest["top_key"]
    if problems.items:
        return []
    lineage = {id(r): _ancestors(r, by_name) for r in leaves}
    for r in leaves:  # a unit's span holds exactly its own leaves
        for anc in lineage[id(r)]:
            if not (anc["top_ma"] < r["base_ma"] <= anc["base_ma"]):
                problems.add(
                    r["line"],
                    f"{r['name']} (base {r['base_ma']:g} Ma) lies outside "
                    f"its {anc['rank']} {anc['name']} ({anc['base_ma']:g}–"
                    f"{anc['top_ma']:g} Ma)",
                    "Correct its parent or its base.",
                )
    for r in rows:
        if _norm(r["name"]) not in children:
            continue
        for leaf in leaves:
            if r["top_ma"] < leaf["base_ma"] <= r["base_ma"] and not any(
                a is r for a in lineage[id(leaf)]
            ):
                problems.add(
                    leaf["line"],
                    f"{leaf['name']} lies within {r['name']} "
                    f"({r['base_ma']:g}–{r['top_ma']:g} Ma) but is not part of it",
                    "Correct its parent or its base.",
                )
    return [
        Unit(
            r["name"],
            r["rank"],
            r["parent"],
            r["base_ma"],
            r["top_ma"],
            r["uncertainty_ma"],
            r["confidence"],
            r["sigma_ma"],
            r["approximate"],
            r["boundary_key"],
            r["top_key"],
            r["note"],
            r["line"],
        )
        for r in rows
    ]


def _ancestors(r: dict[str, Any], by_name: dict[str, dict[str, Any]]) -> list[dict[str, Any]]:
    out: list[dict[str, Any]] = []
    unit: dict[str, Any] | None = r
    while (
        unit is not None
        and unit["parent"]
        and (unit := by_name.get(_norm(unit["parent"]))) is not None
        and unit not in out
    ):
        out.append(unit)
    return out


# --- names and intervals --------------------------------------------------------------


def _norm(name: str) -> str:
    text = unicodedata.normalize("NFKD", str(name))
    text = "".join(c for c in text if not unicodedata.combining(c))
    return " ".join(text.lower().replace("_", " ").split())


_EPOCH_WORDS = {"early": "lower", "late": "upper", "mid": "middle"}


def _variants(text: str) -> list[str]:
    k = _norm(text)
    words = k.split()
    out = [k]
    if words and words[0] in _EPOCH_WORDS:
        out.append(" ".join([_EPOCH_WORDS[words[0]], *words[1:]]))
    if re.fullmatch(r"(stage|series) \d+", k):
        out.append("cambrian " + k)
    return out


def _find(scale: TimeScale, text: str) -> tuple[Unit, str | None]:
    """The unit named ``text`` and, when a former name was used, a note saying so."""
    for k in _variants(text):
        if k in scale._index:
            return scale._index[k], None
    for k in _variants(text):
        for version in versions():
            if version == scale.version:
                continue
            old = _load_shipped(version)._index.get(k)
            if old is None:
                continue
            for u in scale.units:
                if (u.rank, u.boundary_key, u.top_key) == (old.rank, old.boundary_key, old.top_key):
                    return u, (
                        f"{old.name} is the {version} name of what {scale.version} calls {u.name}"
                    )
    sug = closest(_norm(text), scale._index, n=3, cutoff=0.6)
    names = [scale._index[s].name for s in sug]
    raise OptionError(
        f"{str(text).strip()!r} is not a unit of the {scale.version} chart.",
        (f"Did you mean {' or '.join(names)}? " if names else "")
        + "Give a stage, series or period name, NAME..NAME, or an age range "
        "A-B in Ma; `strata13 stages` lists the names.",
    )


def _fmt(x: float) -> str:
    return f"{x:.6g}"


def _unit_notes(scale: TimeScale, u: Unit) -> list[str]:
    notes = []
    if u.approximate:
        notes.append(
            f"the base of {u.name} ({_fmt(u.base_ma)} Ma) is approximate on {scale.version}"
        )
    if scale.boundaries.get(u.top_key, (0.0, False))[1]:
        notes.append(f"the top of {u.name} ({_fmt(u.top_ma)} Ma) is approximate on {scale.version}")
    if u.note and not u.note.startswith(("base = base of", "a series without stages")):
        notes.append(f"{u.name}: {u.note}")
    return notes


_NUM = r"[+\-−]?(?:\d+(?:\.\d*)?|\.\d+)"
_RANGE = re.compile(rf"^\s*({_NUM})\s*(?:ma)?\s*[-–—]\s*({_NUM})\s*(?:ma)?\s*$", re.I)


def resolve_interval(text: str, scale: TimeScale | str = DEFAULT_VERSION) -> Interval:
    """A time bin as numbers: a unit name, ``NAME..NAME`` or ``A-B`` (Ma, either order).

    Returns (older_ma, younger_ma, description, notes); names are read on ``scale``.
    """
    ts = _scale(scale)
    raw = str(text).strip()
    if not raw:
        raise OptionError(
            "The interval is empty.",
            "Give a stage, series or period name, NAME..NAME, or an age range A-B in Ma.",
        )
    if ".." in raw:
        left, _, right = raw.partition("..")
        (a, na), (b, nb) = _find(ts, left), _find(ts, right)
        older_ma, younger_ma = max(a.base_ma, b.base_ma), min(a.top_ma, b.top_ma)
        notes = [n for n in (na, nb) if n] + _unit_notes(ts, a) + _unit_notes(ts, b)
        first, last = (a, b) if a.base_ma >= b.base_ma else (b, a)
        if first is not a:
            notes.append(f"given younger first; read as {first.name}..{last.name}")
        return Interval(
            older_ma,
            younger_ma,
            f"{first.name}..{last.name} ({ts.version}): {_fmt(older_ma)}–{_fmt(younger_ma)} Ma",
            tuple(notes),
        )
    try:
        u, former = _find(ts, raw)
    except OptionError as err:
        m = _RANGE.match(raw)
        if m:
            return _numeric_range(raw, m.group(1), m.group(2))
        if re.search(r"\d", raw) and re.search(r"[-–—]", raw):
            raise OptionError(
                f"Interval {raw!r} is not a numeric range A-B in Ma.",
                "Write two ages ≥ 0 in Ma with a decimal point, e.g. 201.4-174.7; "
                "NAME..NAME joins units.",
            ) from None
        if re.search(r"[-–—]", raw):
            err.hint = "Use NAME..NAME for a span of units. " + err.hint
        raise
    notes = ([former] if former else []) + _unit_notes(ts, u)
    return Interval(
        u.base_ma,
        u.top_ma,
        f"{u.name} ({u.rank}, {ts.version}): {_fmt(u.base_ma)}–{_fmt(u.top_ma)} Ma",
        tuple(notes),
    )


def _numeric_range(raw: str, a_text: str, b_text: str) -> Interval:
    a, b = (float(t.replace("−", "-")) for t in (a_text, b_text))
    if a < 0 or b < 0 or a_text.lstrip().startswith(("-", "−")) or b_text.startswith(("-", "−")):
        raise OptionError(
            f"Interval {raw!r} has a negative age.",
            "Ages are in Ma before present and ≥ 0, e.g. 201.4-174.7.",
        )
    if a == b:
        raise OptionError(
            f"Interval {raw!r} has no duration.",
            "Give two different ages, older first, e.g. 201.4-174.7.",
        )
    notes: tuple[str, ...] = ()
    if a < b:
        notes = (f"given younger first; read as {_fmt(b)}-{_fmt(a)} Ma",)
        a, b = b, a
    return Interval(a, b, f"{_fmt(a)}–{_fmt(b)} Ma", notes)


def stage_age(name: str, scale: TimeScale | str = DEFAULT_VERSION) -> StageAge:
    """Age of a sample dated only by a unit: its midpoint and the 1σ of a uniform spread."""
    u = _scale(scale).find(name)
    return StageAge(u.midpoint_ma, u.span_sigma_ma, u.base_ma, u.top_ma)


# --- conversion between charts ---------------------------------------------------------


def _short(scale: TimeScale) -> str:
    return scale.source.split(" (")[0] if scale.source else Path(scale.path).name


def shared_boundaries(
    from_scale: TimeScale | str, to_scale: TimeScale | str
) -> tuple[tuple[str, ...], np.ndarray, np.ndarray]:
    """Boundaries both charts carry (by boundary_key), young to old, with each chart's age."""
    import numpy as np

    fs, ts = _scale(from_scale), _scale(to_scale)
    keys = sorted(set(fs.boundaries) & set(ts.boundaries), key=lambda k: fs.boundaries[k][0])
    a = np.array([fs.boundaries[k][0] for k in keys])
    b = np.array([ts.boundaries[k][0] for k in keys])
    if np.any(np.diff(a) <= 0) or np.any(np.diff(b) <= 0):
        i = int(np.flatnonzero((np.diff(a) <= 0) | (np.diff(b) <= 0))[0])
        raise ConfigError(
            f"{fs.version} and {ts.version} order the boundaries {keys[i]!r} and "
            f"{keys[i + 1]!r} differently.",
            "Check the boundary_key and base_ma of those rows in the tables.",
        )
    return tuple(keys), a, b


def convert(
    ages: Any,
    from_scale: TimeScale | str,
    to_scale: TimeScale | str,
    *,
    allow_extrapolation: bool = False,
) -> tuple[np.ndarray, dict[str, Any]]:
    """Ages that move with their chart boundaries, from one chart version onto another.

    Linear between the boundaries both charts share (matched by boundary_key), so an age
    keeps its relative position within its interval. Ages beyond the oldest shared boundary
    (or below 0) are NaN unless ``allow_extrapolation``, which continues the nearest segment
    and says so in the step's flags. Returns (ages, step dict).
    """
    import numpy as np

    fs, ts = _scale(from_scale), _scale(to_scale)
    given = np.asarray(ages, dtype=float)
    x = given.ravel()
    step: dict[str, Any] = {
        "step": "time-scale conversion",
        "method": METHOD,
        "source": f"{fs.version} table ({_short(fs)}) and {ts.version} table ({_short(ts)}), "
        "strata13 schemas/data/timescales",
        "parameters": {"from": fs.version, "to": ts.version},
        "size_myr": 0.0,
        "flags": [],
    }
    if fs == ts:
        step["method"] = "identity (same chart version)"
        return given.copy(), step
    keys, a, b = shared_boundaries(fs, ts)
    y = np.interp(x, a, b)
    finite = np.isfinite(x)
    below, above = finite & (x < a[0]), finite & (x > a[-1])
    outside = below | above
    n_out = int(outside.sum())
    if n_out and allow_extrapolation:
        y = np.where(below, b[0] + (x - a[0]) * (b[1] - b[0]) / (a[1] - a[0]), y)
        y = np.where(above, b[-1] + (x - a[-1]) * (b[-1] - b[-2]) / (a[-1] - a[-2]), y)
        step["flags"].append(
            f"{n_out} age(s) beyond the shared boundaries "
            f"({_fmt(a[0])}–{_fmt(a[-1])} Ma on {fs.version}) extrapolated from "
            "the nearest segment"
        )
    elif n_out:
        y[outside] = np.nan
        step["flags"].append(
            f"{n_out} age(s) beyond the shared boundaries "
            f"({_fmt(a[0])}–{_fmt(a[-1])} Ma on {fs.version}) left blank"
        )
    seg = np.clip(np.searchsorted(a, x[finite], side="right") - 1, 0, len(a) - 2)
    used = np.flatnonzero(np.bincount(seg, minlength=len(a) - 1))
    brackets, approx = [], set()
    for i in used:
        younger, older = keys[i], keys[i + 1]
        brackets.append(
            {
                "younger": younger,
                "older": older,
                "from_ma": [float(a[i]), float(a[i + 1])],
                "to_ma": [float(b[i]), float(b[i + 1])],
            }
        )
        for k in (younger, older):
            for sc in (fs, ts):
                if sc.boundaries[k][1]:
                    approx.add(f"{k} on {sc.version}")
    step["parameters"].update(
        bracketing=brackets,
        shared_boundaries=len(keys),
        outside=n_out,
        extrapolated=bool(n_out and allow_extrapolation),
    )
    step["flags"] += [f"approximate boundary: {s}" for s in sorted(approx)]
    diff = np.abs(y - x)[np.isfinite(y) & finite]
    step["size_myr"] = float(diff.max()) if diff.size else 0.0
    return y.reshape(given.shape), step
