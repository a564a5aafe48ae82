"""Draft a mapping file for a sheet nobody has mapped yet (`strata13 propose-map`).

The sheet is read as a grid of text cells; the header row is the row among the first 60
whose cells best match the header vocabulary (``schemas/data/header_synonyms.csv``); each
header is split into its words, a unit and a scale (``header_parts``) and matched by its key.
The cells under each matched header are looked at for the decimal convention, missing-value
tokens, censored values and, for vocabulary fields, the distinct values and their closest
terms. What a sheet cannot say — the citation, coordinates, a δ column's scale or a unit the
header leaves silent — becomes a ``FILL IN`` placeholder, which ``load_mapping`` refuses
until it is replaced: the proposal never guesses silently.
"""

from __future__ import annotations

import csv
import dataclasses
import re
import unicodedata
from collections.abc import Sequence
from dataclasses import dataclass
from functools import cache
from pathlib import Path
from typing import Any

from strata13.compile.read.mapping import PLACEHOLDER
from strata13.compile.read.readers import SPREADSHEET_SUFFIXES, TEXT_SUFFIXES, col_letter
from strata13.schemas.fields import BY_NAME, UNITS

from strata13.errors import InputFileError
from strata13.suggest import closest

HEADER_SEARCH_ROWS = 60
SAMPLE_ROWS = 2000  # data rows looked at for conventions and distinct values

# words in a header that say a unit or a scale, mapped to the mapping's spelling
UNIT_WORDS = {
    "m": "m",
    "metres": "m",
    "meters": "m",
    "mbsf": "m",
    "mcd": "m",
    "cm": "cm",
    "mm": "mm",
    "km": "km",
    "ft": "ft",
    "feet": "ft",
    "ppm": "ppm",
    "mg/kg": "mg/kg",
    "ug/g": "ug/g",
    "µg/g": "µg/g",
    "μg/g": "µg/g",
    "ppb": "ppb",
    "%": "%",
    "wt%": "wt%",
    "wt.%": "wt%",
    "mmol/mol": "mmol/mol",
    "mol/mol": "mol/mol",
    "ma": "Ma",
    "ka": "ka",
    "myr": "Myr",
    "‰": "‰",
    "permil": "‰",
    "per mil": "‰",
    "mur": "mUr",
}
SCALE_WORDS = {
    "vpdb": "VPDB",
    "v-pdb": "VPDB",
    "pdb": "VPDB",
    "vsmow": "VSMOW",
    "v-smow": "VSMOW",
    "smow": "VSMOW",
    "raw": "raw",
}
DEPTH_WORDS = {"mbsf", "mcd"}
VOCAB_FIELDS = ("lithology", "texture", "component", "mineralogy", "setting", "position_kind")


@dataclass
class Match:
    """One header cell and what the proposal makes of it."""

    header: str
    letter: str
    field: str | None
    unit: str | None = None
    scale: str | None = None
    position_kind: str | None = None
    confidence: str = "none"  # high | medium | low | none
    evidence: list[str] = dataclasses.field(default_factory=list)
    values: list[str] = dataclasses.field(
        default_factory=list
    )  # distinct cell values (vocabularies)


@dataclass
class Proposal:
    """A drafted mapping: its TOML text, the matches and what is left to the user."""

    text: str
    header_row: int
    matches: list[Match]
    placeholders: list[str]
    sections: list[str]

    @property
    def matched(self) -> list[Match]:
        return [m for m in self.matches if m.field]

    @property
    def unmatched(self) -> list[Match]:
        return [m for m in self.matches if not m.field]

    def summary(self) -> list[str]:
        """Lines for stderr: what matched, what did not, what to fill in."""
        out = [
            f"header row {self.header_row}: {len(self.matched)} of {len(self.matches)} "
            "columns matched"
        ]
        if self.unmatched:
            out.append("not matched: " + ", ".join(repr(m.header) for m in self.unmatched))
        if self.placeholders:
            out.append(f"fill in ({len(self.placeholders)}): " + "; ".join(self.placeholders))
        return out


# --------------------------------------------------------------------- header words


def header_parts(text: str) -> tuple[str, str | None, str | None, set[str]]:
    """A header's key, unit, scale and words: "δ13C (‰ VPDB)" -> ("d13c", "‰", "VPDB", …).

    The key is what is left when the unit and scale words and bracketed text are taken
    out, written in lowercase letters and digits with δ / delta as "d".
    """
    t = unicodedata.normalize("NFKC", str(text)).casefold().replace("μ", "µ")
    t = t.replace("δ", " d").replace("delta", " d").replace("‰", " ‰ ")
    t = re.sub(r"per\s+mil", "permil", t)
    inside = " ".join(re.findall(r"[\(\[]([^\)\]]*)[\)\]]", t))
    outside = re.sub(r"[\(\[][^\)\]]*[\)\]]", " ", t)
    words = set(re.split(r"[\s,;:_]+", inside + " " + outside)) - {""}
    unit = scale = None
    for w in re.split(r"[\s,;:_]+", inside + " " + outside):
        w = w.strip(".")
        if w in SCALE_WORDS and scale is None:
            scale = SCALE_WORDS[w]
        elif w in UNIT_WORDS and unit is None:
            unit = UNIT_WORDS[w]
    kept = [
        w
        for w in re.split(r"[\s,;:_]+", outside)
        if w and w.strip(".") not in SCALE_WORDS and w.strip(".") not in UNIT_WORDS
    ]
    key = re.sub(r"[^a-z0-9]", "", "".join(kept))
    key = re.sub(r"^d(?=\d)", "d", key)
    return key, unit, scale, words


@cache
def synonyms() -> dict[str, tuple[str, str | None]]:
    """header key -> (field, position kind) from the shipped vocabulary."""
    import strata13.schemas

    path = Path(strata13.schemas.__file__).with_name("data") / "header_synonyms.csv"
    rows = [ln for ln in path.read_text(encoding="utf-8").splitlines() if not ln.startswith("#")]
    out: dict[str, tuple[str, str | None]] = {}
    for row in csv.DictReader(rows):
        out[row["spelling"].strip()] = (row["field"].strip(), row["position_kind"].strip() or None)
    return out


def match_header(text: str, letter: str = "") -> Match:
    """The field a header feeds, with its unit, scale and the evidence for the match."""
    key, unit, scale, words = header_parts(text)
    m = Match(str(text), letter, None, unit, scale)
    vocab = synonyms()
    hit = vocab.get(key)
    if hit is not None:
        m.field, m.position_kind = hit
        m.confidence = "low" if len(key) <= 1 else "high"
        m.evidence.append(f"header key {key!r} is a known spelling of {m.field}")
    elif key:
        near = closest(key, vocab, n=1, cutoff=0.85)
        if near:
            m.field, m.position_kind = vocab[near[0]]
            m.confidence = "medium"
            m.evidence.append(f"header key {key!r} is close to {near[0]!r} ({m.field})")
    if m.field is None:
        return m
    if words & DEPTH_WORDS:
        m.position_kind = "depth"
    f = BY_NAME[m.field]
    if m.unit is not None:
        accepted = UNITS.get(f.unit_kind or "", {})
        if m.unit not in accepted:
            m.evidence.append(f"unit word {m.unit!r} does not fit {m.field}; not used")
            m.unit = None
        else:
            m.evidence.append(f"unit {m.unit!r} read from the header")
    if m.scale is not None:
        if f.kind == "delta":
            m.evidence.append(f"scale {m.scale} read from the header")
        else:
            m.scale = None
    return m


# --------------------------------------------------------------------------- the grid


def read_grid(
    path: Path, sheet: str | int | None = None
) -> tuple[str, list[list[str | None]], int, int]:
    """The sheet's name, its cells as text (first rows only) and where they start (0-based
    row and column of the sheet), for header finding."""
    from strata13.compile.read.readers import decode_bytes, sniff_delimiter

    suffix = path.suffix.lower()
    if not path.is_file():
        raise InputFileError(f"{path} does not exist or is not a file.", "Check the path.")
    limit = HEADER_SEARCH_ROWS + SAMPLE_ROWS
    if suffix in TEXT_SUFFIXES:
        text, _ = decode_bytes(path.read_bytes())
        lines = text.splitlines()[:limit]  # every line, so row numbers are the file's
        delim = "\t" if suffix == ".tsv" else sniff_delimiter("\n".join(lines[:50]))
        rows = [[c.strip() or None for c in r] for r in csv.reader(lines, delimiter=delim)]
        return path.name, rows, 0, 0
    if suffix in SPREADSHEET_SUFFIXES:
        from strata13.compile.read.readers import sheet_cells

        cells = sheet_cells(path, sheet)  # surveyed first: a huge or damaged file is refused
        return cells.sheet, cells.grid[:limit], cells.row_offset, cells.col_offset
    raise InputFileError(
        f"{path.name} is not a sheet strata13 reads ({suffix or 'no suffix'}).",
        "Use .xlsx, .ods, .csv or .tsv.",
    )


def find_header(grid: list[list[str | None]]) -> int:
    """0-based index of the header row: most cells matching the vocabulary, then most text."""
    best, best_score = 0, -1.0
    for i, row in enumerate(grid[:HEADER_SEARCH_ROWS]):
        cells = [c for c in row if c]
        if not cells:
            continue
        known = sum(1 for c in cells if match_header(c).confidence in ("high", "medium"))
        texty = sum(1 for c in cells if not _numberish(c))
        score = known + 0.01 * texty
        if score > best_score:
            best, best_score = i, score
    return best


def _numberish(text: str) -> bool:
    return bool(re.match(r"^[-+−]?\d[\d.,]*([eE][-+]?\d+)?$", text.strip()))


# ---------------------------------------------------------------------------- propose


def propose(path: Path, sheet: str | int | None = None) -> Proposal:
    """A complete, commented mapping for ``path`` (placeholders where the sheet is silent)."""
    sheet_name, grid, row_off, col_off = read_grid(path, sheet)
    if not any(any(r) for r in grid):
        raise InputFileError(f"{path.name} ({sheet_name}) holds no cells.", "Check the sheet.")
    h = find_header(grid)
    header = grid[h]
    notes_above = " ".join(c for r in grid[:h] for c in r if c)
    body = [r for r in grid[h + 1 :] if any(r)]
    matches = []
    for j, cell in enumerate(header):
        if not cell:
            continue
        m = match_header(cell, col_letter(j + col_off))
        m.values = _distinct([r[j] if j < len(r) else None for r in body])
        matches.append(m)
    _use_notes(matches, notes_above)
    _one_field_each(matches)
    decimal = _decimal(matches)
    for m in matches:
        _look_at_cells(m)
    return _write(path, sheet_name, sheet, h + 1 + row_off, matches, decimal, notes_above)


def _distinct(cells: Sequence[str | None]) -> list[str]:
    return list(dict.fromkeys(c for c in cells if c))


def _use_notes(matches: list[Match], notes: str) -> None:
    """A note above the header ("C = δ13C, O = δ18O, ‰ VPDB") raises bare C / O matches
    and gives δ columns their scale when the header is silent."""
    _, _, scale, words = header_parts(notes)
    says_delta = bool(re.search(r"(δ|delta|d)\s*1[38]", notes, re.I))
    for m in matches:
        if m.field in ("d13c_carb", "d18o_carb", "d13c_org"):
            if m.confidence == "low" and says_delta:
                m.confidence = "medium"
                m.evidence.append("a note above the header names δ13C / δ18O")
            if m.scale is None and scale is not None:
                m.scale = scale
                m.evidence.append(f"scale {scale} read from the note above the header")


def _one_field_each(matches: list[Match]) -> None:
    """Two headers on one field: the better match keeps it, the other is left unmatched."""
    rank = {"high": 3, "medium": 2, "low": 1, "none": 0}
    best: dict[str, Match] = {}
    for m in matches:
        if m.field is None:
            continue
        other = best.get(m.field)
        if other is None or rank[m.confidence] > rank[other.confidence]:
            if other is not None:
                _drop(other, m)
            best[m.field] = m
        else:
            _drop(m, other)


def _drop(m: Match, winner: Match) -> None:
    m.evidence.append(f"also looked like {m.field}, which {winner.header!r} matches better")
    m.field, m.confidence = None, "none"


def _decimal(matches: list[Match]) -> str | None:
    """ "," when numeric cells use decimal commas (and no decimal points), else None."""
    comma = point = 0
    for m in matches:
        if m.field is None or BY_NAME[m.field].kind in ("text", "vocab"):
            continue
        for v in m.values[:200]:
            if re.match(r"^[-+−]?\d+,\d+$", v):
                comma += 1
            elif re.match(r"^[-+−]?\d*\.\d+$", v):
                point += 1
    return "," if comma > 0 and point == 0 else None


def _look_at_cells(m: Match) -> None:
    """Missing-value tokens, censored values and vocabulary terms seen under a header."""
    from strata13.compile.read.cleaning import BDL_PATTERN, MISSING_TOKENS

    if m.field is None:
        return
    f = BY_NAME[m.field]
    if f.kind in ("delta", "conc", "float", "int"):
        odd = [v for v in m.values if not _numberish(v.replace(",", "."))]
        tokens = [v for v in odd if v.strip().lower() in MISSING_TOKENS]
        censored = [v for v in odd if re.match(BDL_PATTERN, v.strip().lower()) or v[:1] in "<>"]
        if tokens:
            m.evidence.append(f"missing-value tokens: {', '.join(tokens[:5])}")
        if censored:
            m.evidence.append(f"censored values: {', '.join(censored[:5])}")
        if f.kind == "conc" and any(re.match(BDL_PATTERN, v.strip().lower()) for v in censored):
            m.evidence.append("'bdl' cells: give detection_limit if the paper states one")
    if f.vocab is not None:
        from strata13.schemas.vocabularies import vocabulary

        voc = vocabulary(f.vocab)
        unknown = [v for v in m.values if voc.resolve(v) is None]
        for v in unknown[:8]:
            sug = voc.suggest(v)
            m.evidence.append(
                f"value {v!r} is not a {f.vocab} term"
                + (f" (closest: {sug!r})" if sug else "; correct it in the sheet or a constant")
            )


# ---------------------------------------------------------------------------- writing


def _q(text: Any) -> str:
    """A TOML basic string."""
    s = str(text).replace("\\", "\\\\").replace('"', '\\"')
    return f'"{s}"'


def _fill(what: str) -> str:
    return _q(f"{PLACEHOLDER}: {what}")


def _slug(text: str) -> str:
    s = re.sub(r"[^a-z0-9]+", "-", unicodedata.normalize("NFKD", text).casefold()).strip("-")
    return (s or "source")[:60].strip("-").rjust(3, "x")


def _write(
    path: Path,
    sheet_name: str,
    sheet: str | int | None,
    header_row: int,
    matches: list[Match],
    decimal: str | None,
    notes_above: str,
) -> Proposal:
    fill: list[str] = []
    by_field = {m.field: m for m in matches if m.field}
    kind = "in-house" if any(m.scale == "raw" for m in matches) else "published"
    out = [
        f"# strata13 mapping drafted by `strata13 propose-map` for {path.name}.",
        f"# Replace every {PLACEHOLDER!r} value (ingest refuses the mapping until then) and check",
        "# each match: the comments give the evidence and its confidence.",
        "",
        "[source]",
        f"id = {_q(_slug(path.stem))}",
        f"citation = {_fill('the full reference (or a description of the in-house run)')}",
        f"year = {_fill('the year of publication')}",
        '# doi = "…"   # or url = "…"',
        "# bibliographic fields for the export's BibTeX (optional; README: Every block):",
        '# entry_type = "article"',
        '# authors = ["Family, G.", "Other, H."]',
        '# title = "…"',
        '# journal = "…"',
        "# volume = 1",
        '# pages = "1-20"',
        f"kind = {_q(kind)}" + " " * (31 - len(kind)) + "# published | in-house",
        "",
        "[table]",
        f"file = {_q(path.name)}",
    ]
    fill += ["[source] citation", "[source] year"]
    if sheet is not None or path.suffix.lower() in SPREADSHEET_SUFFIXES:
        out.append(f"sheet = {_q(sheet_name)}")
    out.append(f"header_row = {header_row}")
    if decimal:
        out.append(f'decimal = "{decimal}"                        # decimal commas in the cells')
    out += ["", "[columns]"]
    for m in matches:
        out += _column_lines(m, fill)
    constants = _constants(by_field, fill)
    if constants:
        out += ["", "[constants]", *constants]
    sections = _distinct(by_field["section_id"].values)[:200] if "section_id" in by_field else []
    out += _sections(sections, by_field, fill)
    if any(m.scale == "raw" for m in matches):
        from strata13.schemas.materials import shipped_materials

        known = {v.material for v in shipped_materials()}
        ids = by_field["sample_id"].values if "sample_id" in by_field else []
        found = [v for v in _distinct(ids) if v in known]
        out += [
            "",
            "# an in-house run: the reference materials measured in it",
            "[run]",
            *(["# reference materials among the sample ids: " + ", ".join(found)] if found else []),
            f"anchors = [{_fill('the reference materials the run is normalised to')}]",
            f"checks = [{_fill('the materials measured as unknowns, or leave the list empty')}]",
            "drift = false",
        ]
        fill += ["[run] anchors", "[run] checks"]
    if notes_above:
        out += ["", "# text above the header: " + notes_above[:300]]
    return Proposal("\n".join(out) + "\n", header_row, matches, fill, sections)


def _column_lines(m: Match, fill: list[str]) -> list[str]:
    why = f"# {m.confidence}: " + "; ".join(m.evidence) if m.evidence else ""
    if m.field is None:
        return [
            f'# {_q(m.header)} = "…"   # column {m.letter}: no field matched'
            + (f" ({'; '.join(m.evidence)})" if m.evidence else "")
        ]
    f = BY_NAME[m.field]
    keys = [f"field = {_q(m.field)}"]
    if f.kind == "delta":
        if m.scale is None:
            keys.append(f"scale = {_fill('VPDB, VSMOW (δ18O) or raw: the header does not say')}")
            fill.append(f"[columns] {m.header!r} scale")
        else:
            keys.append(f"scale = {_q(m.scale)}")
    elif f.unit_kind in ("length", "concentration", "percent", "ratio_mmol"):
        if m.unit is None:
            units = ", ".join(UNITS[f.unit_kind])
            keys.append(f"unit = {_fill(units + ': the header does not say')}")
            fill.append(f"[columns] {m.header!r} unit")
        else:
            keys.append(f"unit = {_q(m.unit)}")
    line = f"{_q(m.header)} = {{ {', '.join(keys)} }}"
    return [why, line] if why else [line]


def _constants(by_field: dict[str, Match], fill: list[str]) -> list[str]:
    out = []
    if "age" in by_field:
        out.append(
            f"age_time_scale = {_fill('the chart the ages were published on, e.g. ICS2024/12')}"
        )
        fill.append("[constants] age_time_scale")
    pos = by_field.get("position") or by_field.get("position_top")
    if pos is not None and "position_kind" not in by_field:
        if pos.position_kind:
            out.append(
                f"position_kind = {_q(pos.position_kind)}   # from the header {pos.header!r}"
            )
        else:
            out.append(f"position_kind = {_fill('height (above the datum) or depth (below it)')}")
            fill.append("[constants] position_kind")
    if "component" not in by_field:
        out.append(f"component = {_fill('bulk, micrite, brachiopod, … (what was analysed)')}")
        fill.append("[constants] component")
    if "section_id" not in by_field:
        out.append(f"section_id = {_fill('the section or core these rows come from')}")
        fill.append("[constants] section_id")
    raw = any(m.scale == "raw" for m in by_field.values())
    if raw and "run_id" not in by_field:
        out.append(f"run_id = {_fill('the run these rows were measured in')}")
        fill.append("[constants] run_id")
    if "lat" not in by_field and "locality_id" not in by_field and "section_id" not in by_field:
        out.append('locality_id = "site-1"                 # the [[localities]] block below')
    return out


def _sections(sections: list[str], by_field: dict[str, Match], fill: list[str]) -> list[str]:
    out: list[str] = []
    located = "lat" in by_field or "locality_id" in by_field
    for sec in sections:
        out += ["", "[[sections]]", f"id = {_q(sec)}"]
        if not located:
            out.append('locality = "site-1"')
    if not located:
        out += [
            "",
            "[[localities]]",
            'id = "site-1"',
            f"name = {_fill('the locality name as published')}",
            f"lat = {_fill('latitude (decimal or 47°18′N)')}",
            f"lon = {_fill('longitude (decimal or 9°42′E)')}",
        ]
        fill += ["[[localities]] name", "[[localities]] lat", "[[localities]] lon"]
    return out
