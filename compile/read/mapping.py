"""The mapping file: how one author's sheet becomes strata13 fields.

A mapping file is TOML with the blocks ``[source]``, ``[table]``, ``[columns]``,
``[constants]``, ``[[sections]]``, ``[[localities]]`` and ``[localities_table]``; the
commented example is ``demo_compilation/mappings/example.toml``. Paths resolve relative to
the mapping file and may not leave its folder. Every problem is a ConfigError (exit 2)
naming the key and the fix.
"""

from __future__ import annotations

import hashlib
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from strata13.compile.ages.ties import read_ties
from strata13.compile.read.mapping_shape import check_shape
from strata13.schemas.fields import (
    BASIS_KEYS,
    BY_NAME,
    CONC_BASES,
    DELTA_SCALES,
    SCALE_KEYS,
    UNITS,
    field_names,
)
from strata13.schemas.vocabularies import vocabulary

from strata13.errors import ConfigError
from strata13.suggest import did_you_mean

PLACEHOLDER = "FILL IN"  # what `propose-map` writes where only the user knows the value
SLUG = re.compile(r"^[a-z0-9][a-z0-9-]{1,62}[a-z0-9]$")
TOP_KEYS = {
    "source",
    "table",
    "columns",
    "constants",
    "sections",
    "localities",
    "localities_table",
    "ties",
    "ties_table",
    "normalisation",
    "run",
    "offsets",
}
# the source's bibliographic fields: optional, they make the export's BibTeX entry proper
BIB_KEYS = ("entry_type", "authors", "title", "journal", "volume", "issue", "pages", "publisher")
# BibTeX entry types a source may declare (without one: article when a journal is given)
ENTRY_TYPES = (
    "article",
    "book",
    "incollection",
    "inproceedings",
    "techreport",
    "phdthesis",
    "mastersthesis",
    "unpublished",
    "misc",
)
SOURCE_KEYS = {
    "id",
    "citation",
    "year",
    "doi",
    "url",
    "kind",
    "lab",
    "republishes",
    "note",
    *BIB_KEYS,
}
TABLE_KEYS = {"file", "sheet", "header_row", "decimal", "delimiter", "encoding"}
COLUMN_KEYS = {"field", "unit", "scale", "basis", "detection_limit"}
SECTION_KEYS = {
    "id",
    "locality",
    "name",
    "datum",
    "position_kind",
    "datum_offset_m",
    "offset_from",
    "offset_source",
    "note",
    "accumulation",
}
ACCUMULATION_KEYS = {"shape", "segment_m"}  # a section's own accumulation prior
LOCALITY_KEYS = {"id", "name", "lat", "lon", "precision_km", "aliases", "note", "plate"}


@dataclass(frozen=True)
class ColumnMap:
    header: str
    field: str
    unit: str | None = None
    scale: str | None = None
    basis: str | None = None
    detection_limit: float | None = None


@dataclass
class TableSpec:
    file: Path
    sheet: str | int | None = None
    header_row: int | None = None
    decimal: str = "auto"
    delimiter: str = "auto"
    encoding: str = "auto"
    columns: list[ColumnMap] = field(default_factory=list)


@dataclass
class Mapping:
    path: Path
    sha256: str
    source: dict[str, Any]
    table: TableSpec | None  # None: a source of age ties only
    constants: dict[str, Any]
    sections: list[dict[str, Any]]
    localities: list[dict[str, Any]]
    localities_table: TableSpec | None
    ties: list[dict[str, Any]] = field(default_factory=list)  # stored age_ties rows
    # δ field -> {"method": two-point | one-point | not stated, "anchors": {material: ‰}}
    normalisation: dict[str, dict[str, Any]] = field(default_factory=dict)
    run: dict[str, Any] | None = None  # in-house run: anchors, checks, drift, slope tolerance

    @property
    def source_id(self) -> str:
        return str(self.source["id"])


def _unknown_keys(where: str, given: dict[str, Any], allowed: set[str], path: Path) -> None:
    for key in given:
        if key not in allowed:
            raise ConfigError(
                f"{path.name}: unknown key {key!r} in {where}." + did_you_mean(key, allowed),
                f"Allowed keys in {where}: {', '.join(sorted(allowed))}.",
            )


def safe_path(base: Path, relative: str, what: str, mapping: Path) -> Path:
    """Resolve ``relative`` against ``base``; refuse anything that leaves ``base``."""
    if not isinstance(relative, str) or not relative.strip():
        raise ConfigError(
            f"{mapping.name}: {what} must be a file name.",
            "Give a path relative to the mapping file.",
        )
    p = Path(relative)
    if p.is_absolute():
        raise ConfigError(
            f"{mapping.name}: {what} = {relative!r} is an absolute path.",
            "Paths in a mapping file are relative to its folder.",
        )
    try:
        resolved = (base / p).resolve()
    except (OSError, RuntimeError, ValueError) as exc:  # a symlink loop, a NUL, a long name
        raise ConfigError(
            f"{mapping.name}: {what} = {relative[:80]!r} cannot be followed ({exc}).",
            "Give the plain name of a file in the mapping file's folder.",
        ) from None
    if not resolved.is_relative_to(base.resolve()):
        raise ConfigError(
            f"{mapping.name}: {what} = {relative!r} leaves the mapping file's folder.",
            "Put the sheet in the mapping file's folder or below it.",
        )
    return resolved


def _table(block: dict[str, Any], where: str, path: Path, with_columns: bool) -> TableSpec:
    allowed = TABLE_KEYS | ({"columns"} if with_columns else set())
    _unknown_keys(where, block, allowed, path)
    if "file" not in block:
        raise ConfigError(
            f'{path.name}: {where} needs file = "…".',
            "Name the sheet file, relative to the mapping file.",
        )
    spec = TableSpec(file=safe_path(path.parent, block["file"], f"{where} file", path))
    sheet = block.get("sheet")
    if sheet is not None and (not isinstance(sheet, (str, int)) or isinstance(sheet, bool)):
        raise ConfigError(
            f"{path.name}: {where} sheet must be a name or a number.",
            'Example: sheet = "Table S1" or sheet = 2',
        )
    if sheet is not None and spec.file.suffix.lower() in (".csv", ".tsv", ".txt"):
        raise ConfigError(
            f"{path.name}: {where} sheet = {sheet!r} does not apply to {spec.file.name}, "
            "a text file with one table.",
            "Remove sheet, or name the workbook (xlsx, ods) that holds that sheet.",
        )
    spec.sheet = sheet
    hr = block.get("header_row")
    if hr is not None and (not isinstance(hr, int) or isinstance(hr, bool) or hr < 1):
        raise ConfigError(
            f"{path.name}: {where} header_row must be a row number from 1.",
            "Give the spreadsheet row that holds the column names.",
        )
    spec.header_row = hr
    dec = block.get("decimal", "auto")
    if dec not in ("auto", ".", ","):
        raise ConfigError(
            f"{path.name}: {where} decimal = {dec!r} is not one of auto . ,",
            'Use decimal = "," for comma decimals.',
        )
    spec.decimal = dec
    delim = str(block.get("delimiter", "auto"))
    if delim not in ("auto", "tab", "\\t") and len(delim) != 1:
        raise ConfigError(
            f'{path.name}: {where} delimiter = {delim!r} must be one character, "tab" or "auto".',
            'Example: delimiter = ";"',
        )
    spec.delimiter = delim
    enc = str(block.get("encoding", "auto"))
    if enc != "auto":
        import codecs

        try:
            codecs.lookup(enc)
        except LookupError:
            raise ConfigError(
                f"{path.name}: {where} encoding = {enc!r} is not an encoding Python knows.",
                'Use "auto", "utf-8", "cp1252" or "latin-1".',
            ) from None
    spec.encoding = enc
    return spec


def _column(header: str, spec: Any, path: Path) -> ColumnMap:
    where = f"[columns] {header!r}"
    if isinstance(spec, str):
        spec = {"field": spec}
    if not isinstance(spec, dict) or "field" not in spec:
        raise ConfigError(
            f"{path.name}: {where} must be a field name or {{ field = … }}.",
            'Example: "Height (ft)" = { field = "position", unit = "ft" }',
        )
    _unknown_keys(where, spec, COLUMN_KEYS, path)
    name = spec["field"]
    if name not in BY_NAME and name not in SCALE_KEYS and name not in BASIS_KEYS:
        raise ConfigError(
            f"{path.name}: {where} names unknown field {name!r}."
            + did_you_mean(name, field_names()),
            "Every field is listed in the README (Mapping files, Fields).",
        )
    f = BY_NAME.get(name)
    unit = spec.get("unit")
    if unit is not None:
        kinds = UNITS.get(f.unit_kind or "", {}) if f else {}
        if unit not in kinds:
            raise ConfigError(
                f"{path.name}: {where} unit {unit!r} does not fit field {name}.",
                f"Units for {name}: {', '.join(kinds) or 'none'}.",
            )
    scale = spec.get("scale")
    if scale is not None:
        _check_scale(name, scale, where, path)
    basis = spec.get("basis")
    if basis is not None and basis not in CONC_BASES:
        raise ConfigError(
            f"{path.name}: {where} basis {basis!r} is not one of {', '.join(CONC_BASES)}.", ""
        )
    dl = spec.get("detection_limit")
    if dl is not None and (not isinstance(dl, (int, float)) or isinstance(dl, bool) or dl < 0):
        raise ConfigError(
            f"{path.name}: {where} detection_limit must be a number ≥ 0.",
            "Example: detection_limit = 5 (in the column's unit).",
        )
    return ColumnMap(header, name, unit, scale, basis, float(dl) if dl is not None else None)


def _check_scale(name: str, scale: str, where: str, path: Path) -> None:
    if name not in DELTA_SCALES:
        raise ConfigError(
            f"{path.name}: {where} gives a scale, but {name} is not a δ field.",
            "Scales go on d13c_carb, d18o_carb and d13c_org.",
        )
    if scale not in DELTA_SCALES[name]:
        raise ConfigError(
            f"{path.name}: {where} scale {scale!r} is not known for {name}."
            + did_you_mean(scale, DELTA_SCALES[name]),
            f"Scales for {name}: {', '.join(DELTA_SCALES[name])}.",
        )


@dataclass
class _Loading:
    """One mapping file between its TOML and its Mapping: what the stages have checked so far.

    The stages fill the fields in the order load_mapping calls them; ``table`` is set by
    _check_table, which a ties-only mapping never reaches.
    """

    path: Path
    raw: bytes  # the file as read, hashed into Mapping.sha256
    doc: dict[str, Any]
    ties_only: bool = False  # no [table] and no [columns], only ties
    source: dict[str, Any] = field(default_factory=dict)
    ties: list[dict[str, Any]] = field(default_factory=list)
    seen: dict[str, str] = field(default_factory=dict)  # field -> the header mapped to it
    constants: dict[str, Any] = field(default_factory=dict)
    sections: list[dict[str, Any]] = field(default_factory=list)
    localities: list[dict[str, Any]] = field(default_factory=list)
    localities_table: TableSpec | None = None
    normalisation: dict[str, dict[str, Any]] = field(default_factory=dict)
    run: dict[str, Any] | None = None
    table: TableSpec = field(init=False)

    @property
    def source_id(self) -> str:
        return str(self.source["id"])

    @property
    def sha256(self) -> str:
        return hashlib.sha256(self.raw).hexdigest()

    def mapping(self) -> Mapping:
        """The checked mapping of a sheet."""
        return Mapping(
            self.path,
            self.sha256,
            self.source,
            self.table,
            self.constants,
            self.sections,
            self.localities,
            self.localities_table,
            self.ties,
            self.normalisation,
            self.run,
        )


def load_mapping(path: Path) -> Mapping:
    """Read and check a mapping file. Raises InputFileError or ConfigError (exit 2)."""
    st = _read_document(path)
    check_shape(st.doc, st.raw, path)  # every value of the right type, once (mapping_shape)
    _check_blocks(st)
    _check_source(st)
    _read_ties(st)
    if st.ties_only:
        return _ties_only_mapping(st)
    _check_table(st)
    _check_constants(st)
    _check_sections_and_localities(st)
    _check_rows_have_a_section(st)
    _check_localities_table(st)
    _read_normalisation(st)
    _apply_run(st)
    _apply_offsets(st)
    return st.mapping()


def _read_document(path: Path) -> _Loading:
    """The file's bytes and its TOML, so that every later stage reads a parsed document."""
    from strata13.compile.read.inputs import read_bytes

    raw = read_bytes(path, "mapping file", "Check --map (a .toml file).")
    try:
        doc = tomllib.loads(raw.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError(
            f"{path.name} is not valid TOML ({exc}).",
            "Check quotes and brackets on the line named.",
        ) from None
    _refuse_placeholders(doc, path)
    return _Loading(path, raw, doc)


def _refuse_placeholders(doc: dict[str, Any], path: Path) -> None:
    """A drafted mapping (`propose-map`) marks what only the user knows "FILL IN: …";
    every such value is named at once until it is replaced."""
    found: list[str] = []

    def walk(value: Any, where: str) -> None:
        if isinstance(value, str) and value.strip().startswith(PLACEHOLDER):
            found.append(f"{where} ({value.strip()[len(PLACEHOLDER) :].strip(' :')})")
        elif isinstance(value, dict):
            for k, v in value.items():
                walk(v, f"{where} {k}" if where.startswith("[") else f"[{k}]")
        elif isinstance(value, list):
            for i, v in enumerate(value, 1):
                walk(v, f"{where} #{i}" if isinstance(v, dict) else where)

    walk(doc, "")
    if found:
        raise ConfigError(
            f"{path.name} has {len(found)} value{'s' * (len(found) > 1)} to fill in: "
            + "; ".join(found)
            + ".",
            f"Replace each {PLACEHOLDER!r} value with what the paper or the lab says.",
        )


def _check_blocks(st: _Loading) -> None:
    """Top-level keys and required blocks first: a misspelt block explains what follows."""
    doc, path = st.doc, st.path
    _unknown_keys("the top level", doc, TOP_KEYS, path)
    st.ties_only = (
        "table" not in doc and "columns" not in doc and ("ties" in doc or "ties_table" in doc)
    )
    for block in ("source",) if st.ties_only else ("source", "table", "columns"):
        if not isinstance(doc.get(block), dict):
            raise ConfigError(
                f"{path.name} has no [{block}] block.",
                "See the commented example demo_compilation/sheets/quillar_2011.toml.",
            )


def _check_source(st: _Loading) -> None:
    """[source]: the id every stored row carries and the reference it is credited to."""
    path = st.path
    source = dict(st.doc["source"])
    _unknown_keys("[source]", source, SOURCE_KEYS, path)
    _check_source_id(source.get("id"), path)
    if not isinstance(source.get("citation"), str) or not source["citation"].strip():
        raise ConfigError(
            f"{path.name}: [source] needs a citation.",
            "Give the full reference (or a description of the in-house run).",
        )
    source["kind"] = _source_kind(source.get("kind", "published"), path)
    _check_source_year(source.get("year"), path)
    _check_republishes(source.get("republishes", []), source["id"], path)
    _check_bibliographic(source, path)
    st.source = source


def _check_source_id(sid: Any, path: Path) -> None:
    """The source id names the source in the store and in file names, so it is a slug."""
    if sid is None:
        raise ConfigError(
            f"{path.name}: [source] has no id.",
            'Add id = "…": 3–64 lowercase letters, digits and hyphens.',
        )
    if not isinstance(sid, str) or not SLUG.match(sid):
        raise ConfigError(
            f"{path.name}: [source] id = {sid!r} is not a valid source id.",
            'Use 3–64 lowercase letters, digits and hyphens, e.g. "obrien-delta-2019".',
        )


def _source_kind(kind: Any, path: Path) -> str:
    """The source kind as its vocabulary term: published and in-house sources differ later."""
    term = vocabulary("source_kind").resolve(str(kind))
    if term is None:
        raise ConfigError(
            f"{path.name}: [source] kind = {kind!r} is not published or in-house.",
            'Use kind = "published" or kind = "in-house".',
        )
    return term


def _check_source_year(year: Any, path: Path) -> None:
    """An optional publication year, refused when it cannot be one (a typo or a date)."""
    if year is not None and (
        not isinstance(year, int) or isinstance(year, bool) or not 1600 <= year <= 2200
    ):
        raise ConfigError(
            f"{path.name}: [source] year = {year!r} is not a plausible year.",
            "Write the publication year, e.g. year = 2019.",
        )


def _check_republishes(rep: Any, sid: str, path: Path) -> None:
    """The sources this one re-publishes (overlap checks use them); never itself."""
    if not isinstance(rep, list) or not all(isinstance(x, str) for x in rep):
        raise ConfigError(
            f"{path.name}: [source] republishes must be a list of source ids or citations.",
            'Example: republishes = ["other-source-2015"]',
        )
    if sid in rep:
        raise ConfigError(
            f"{path.name}: source {sid!r} cannot re-publish itself.",
            "List the sources whose data this one re-publishes.",
        )


PAGES = re.compile(r"^\s*[A-Za-z]?\d+\s*(?:(?:-|–|—|--)\s*[A-Za-z]?\d+)?\s*$")


def _check_bibliographic(source: dict[str, Any], path: Path) -> None:
    """The optional BibTeX fields: a known entry type, authors as names, a page range as
    numbers ("55-70" or "e10018"); each refusal says what to write instead."""
    kind = source.get("entry_type")
    if kind is not None and kind not in ENTRY_TYPES:
        raise ConfigError(
            f"{path.name}: [source] entry_type = {kind!r} is not a BibTeX entry type the "
            "export writes." + did_you_mean(str(kind), ENTRY_TYPES),
            f"Use one of {', '.join(ENTRY_TYPES)}.",
        )
    authors = source.get("authors")
    if authors is not None and (not authors or any(not a.strip() for a in authors)):
        raise ConfigError(
            f"{path.name}: [source] authors must name at least one author, none blank.",
            'Example: authors = ["Pell, I.", "Sarrow, D."] (family name, comma, initials).',
        )
    pages = source.get("pages")
    if pages is not None and not PAGES.match(pages):
        raise ConfigError(
            f"{path.name}: [source] pages = {pages!r} is not a page or a page range.",
            'Write pages = "55-70" (or one article number, e.g. "e10018").',
        )


def _read_ties(st: _Loading) -> None:
    """The ties come before the sheet, since a ties-only mapping ends with them."""
    st.ties = _ties(st.doc, st.path, st.source_id)


def _ties_only_mapping(st: _Loading) -> Mapping:
    """A mapping of ties alone; a block that needs a sheet is refused, not ignored."""
    extra = sorted(set(st.doc) - {"source", "ties", "ties_table"})
    if extra:
        raise ConfigError(
            f"{st.path.name} has ties but no [table]; [{extra[0]}] needs a sheet.",
            "A ties-only mapping holds [source], [[ties]] and [ties_table].",
        )
    return Mapping(st.path, st.sha256, st.source, None, {}, [], [], None, st.ties)


def _check_table(st: _Loading) -> None:
    """[table] and [columns]: the sheet, and one field for each mapped header."""
    path = st.path
    table = _table(st.doc["table"], "[table]", path, with_columns=False)
    columns = st.doc["columns"]
    if not columns:
        raise ConfigError(f"{path.name}: [columns] is empty.", "Map at least one column.")
    table.columns = [_column(h, spec, path) for h, spec in columns.items()]
    _refuse_repeated_headers(table.columns, path)
    st.seen = _fields_mapped_once(table.columns, path)
    st.table = table


def _refuse_repeated_headers(columns: list[ColumnMap], path: Path) -> None:
    """Headers are matched ignoring case and spacing, so two keys may name one header."""
    from strata13.compile.read.readers import norm_header

    by_norm: dict[str, str] = {}
    for c in columns:
        key = norm_header(c.header)
        if key in by_norm:
            raise ConfigError(
                f"{path.name}: [columns] {by_norm[key]!r} and {c.header!r} name the "
                "same header (case and spacing are ignored).",
                "Keep one of them.",
            )
        by_norm[key] = c.header


def _fields_mapped_once(columns: list[ColumnMap], path: Path) -> dict[str, str]:
    """Field -> its header; a field fed from two columns would have two values a row."""
    seen: dict[str, str] = {}
    for c in columns:
        if c.field in seen:
            raise ConfigError(
                f"{path.name}: columns {seen[c.field]!r} and {c.header!r} both map to {c.field}.",
                "Map each field from one column.",
            )
        seen[c.field] = c.header
    return seen


def _check_constants(st: _Loading) -> None:
    """[constants]: known fields that no column also maps, with known scales and bases."""
    path = st.path
    constants = dict(st.doc.get("constants", {}))
    for key, value in constants.items():
        if key not in BY_NAME and key not in SCALE_KEYS and key not in BASIS_KEYS:
            raise ConfigError(
                f"{path.name}: [constants] names unknown field {key!r}."
                + did_you_mean(key, field_names()),
                "Every field is listed in the README (Mapping files, Fields).",
            )
        if key in st.seen:
            raise ConfigError(
                f"{path.name}: {key} is both a column ({st.seen[key]!r}) and a constant.",
                "Keep one.",
            )
        if key in SCALE_KEYS:
            _check_scale(SCALE_KEYS[key], value, f"[constants] {key}", path)
        if key in BASIS_KEYS and value not in CONC_BASES:
            raise ConfigError(
                f"{path.name}: [constants] {key} = {value!r} is not one of "
                f"{', '.join(CONC_BASES)}.",
                "",
            )
    st.constants = constants


def _check_sections_and_localities(st: _Loading) -> None:
    """[[sections]] and [[localities]]: tables with unique ids, plates and known terms."""
    path = st.path
    sections = st.doc.get("sections", [])
    localities = st.doc.get("localities", [])
    if not isinstance(sections, list) or not isinstance(localities, list):
        raise ConfigError(
            f"{path.name}: sections and localities are [[sections]] / [[localities]] blocks.", ""
        )
    _check_block_ids("sections", sections, SECTION_KEYS, path)
    _check_block_ids("localities", localities, LOCALITY_KEYS, path)
    _check_plates(localities, path)
    _resolve_section_terms(sections, path)
    _check_accumulation(sections, path)
    st.sections, st.localities = sections, localities


def _check_block_ids(kind: str, blocks: list[Any], keys: set[str], path: Path) -> None:
    """Rows and other blocks name a section or locality by id, so each has its own."""
    ids: set[str] = set()
    for block in blocks:
        if not isinstance(block, dict):
            raise ConfigError(f"{path.name}: [[{kind}]] entries must be tables.", "")
        _unknown_keys(f"[[{kind}]]", block, keys, path)
        if not block.get("id"):
            raise ConfigError(
                f"{path.name}: a [[{kind}]] block has no id.",
                f'Give every [[{kind}]] block an id = "…".',
            )
        if str(block["id"]) in ids:
            raise ConfigError(
                f"{path.name}: two [[{kind}]] blocks have the id {block['id']!r}.",
                "Give each its own id.",
            )
        ids.add(str(block["id"]))


def _check_plates(localities: list[dict[str, Any]], path: Path) -> None:
    """A locality's plate override names a plate of the rotation model (a slug)."""
    from strata13.compile.paleo.names import plate_name_problem

    for loc_block in localities:
        plate = loc_block.get("plate")
        why = None if plate is None else plate_name_problem(plate)
        if why:
            raise ConfigError(
                f"{path.name}: locality {loc_block['id']!r} plate = {why}.",
                "Give the name of the rotation model's plate this locality rides on, e.g. "
                'plate = "calderin-block".',
            )


def _resolve_section_terms(sections: list[dict[str, Any]], path: Path) -> None:
    """A section's position_kind and datum as vocabulary terms, which later stages compare."""
    for s in sections:
        for key, vocab in (("position_kind", "position_kind"), ("datum", "datum")):
            if key in s:
                term = vocabulary(vocab).resolve(str(s[key]))
                if term is None:
                    sug = vocabulary(vocab).suggest(str(s[key]))
                    raise ConfigError(
                        f"{path.name}: section {s['id']!r} {key} = {s[key]!r} is not known."
                        + (f" Did you mean {sug!r}?" if sug else ""),
                        f"Known: {', '.join(vocabulary(vocab).terms)}.",
                    )
                s[key] = term


def _check_accumulation(sections: list[dict[str, Any]], path: Path) -> None:
    """A section's ``accumulation = { shape = …, segment_m = … }``: its own prior for the
    age model (either key alone keeps the store's value of the other)."""
    from strata13.compile.ages.agemodel import prior_value

    for s in sections:
        if "accumulation" not in s:
            continue
        block = s["accumulation"]
        where = f"section {s['id']!r} accumulation"
        if not isinstance(block, dict) or not block:
            raise ConfigError(
                f"{path.name}: {where} = {block!r} is not a table of shape and segment_m.",
                "Write accumulation = { shape = 1.0, segment_m = 1.0 } (either key may go).",
            )
        _unknown_keys(where, block, ACCUMULATION_KEYS, path)
        s["accumulation"] = {
            k: prior_value(k, v, f"{path.name}: {where} {k}", ConfigError) for k, v in block.items()
        }


def _check_rows_have_a_section(st: _Loading) -> None:
    """Every row lands in a section: a mapped column, a constant or the one [[sections]]."""
    if "section_id" not in st.seen and "section_id" not in st.constants and len(st.sections) != 1:
        raise ConfigError(
            f"{st.path.name} does not say which section the rows belong to.",
            "Map a section column to section_id, set section_id in [constants], "
            "or define exactly one [[sections]] block.",
        )


def _check_localities_table(st: _Loading) -> None:
    """[localities_table]: a sheet of localities, mapped to locality fields only."""
    if "localities_table" not in st.doc:
        return
    path = st.path
    block = st.doc["localities_table"]
    loc_table = _table(block, "[localities_table]", path, with_columns=True)
    cols = block.get("columns") or {}
    loc_table.columns = [_column(h, spec, path) for h, spec in cols.items()]
    allowed = {"locality_id", "locality_name", "lat", "lon"}
    for c in loc_table.columns:
        if c.field not in allowed:
            raise ConfigError(
                f"{path.name}: [localities_table] maps {c.header!r} to "
                f"{c.field}; only {', '.join(sorted(allowed))} belong there.",
                "",
            )
    st.localities_table = loc_table


def _read_normalisation(st: _Loading) -> None:
    """[normalisation] and [run]: how the δ columns were put on their scales."""
    st.normalisation = _normalisation(st.doc.get("normalisation", {}), st.path)
    st.run = _run(st.doc.get("run"), st.path)


def _apply_run(st: _Loading) -> None:
    """Raw δ columns and a [run] come together; the run is then their normalisation."""
    path = st.path
    raw_fields = sorted(
        {c.field for c in st.table.columns if c.scale == "raw"}
        | {SCALE_KEYS[k] for k, v in st.constants.items() if k in SCALE_KEYS and v == "raw"}
    )
    if st.run is None:
        if raw_fields:
            raise ConfigError(
                f"{path.name}: {', '.join(raw_fields)} are raw run values but the "
                "mapping has no [run] block.",
                'Add [run] with anchors = ["…", "…"] '
                "(the reference materials measured in the run).",
            )
        return
    if not raw_fields:
        raise ConfigError(
            f'{path.name}: [run] is given but no δ column has scale = "raw".',
            'Mark the run\'s δ columns scale = "raw", or drop [run].',
        )
    if "run_id" not in st.seen and "run_id" not in st.constants:
        raise ConfigError(
            f"{path.name}: an in-house run needs run_id (a column or a constant).",
            "Map the run column to run_id, or set run_id in [constants].",
        )
    for fld in raw_fields:
        if fld in st.normalisation:
            raise ConfigError(
                f"{path.name}: {fld} is a raw run value; [normalisation.{fld}] does not apply.",
                "The [run] block says how it is normalised.",
            )
        st.normalisation[fld] = {"method": "in-house run", **st.run}


def _apply_offsets(st: _Loading) -> None:
    """[offsets]: a declared offset joins its field's normalisation ("not stated" if none)."""
    for fld, off in _offsets(st.doc.get("offsets", {}), st.path).items():
        st.normalisation.setdefault(fld, {"method": "not stated", "anchors": {}})["offset"] = off


RUN_KEYS = {"anchors", "checks", "drift", "slope_tolerance", "value_set", "note"}


def _run(block: Any, path: Path) -> dict[str, Any] | None:
    """``[run]``: an in-house run sheet. Rows whose sample_id names a listed reference
    material are its standards; the others are samples normalised with them."""
    if block is None:
        return None
    if not isinstance(block, dict):
        raise ConfigError(f"{path.name}: [run] must be a table.", "")
    _unknown_keys("[run]", block, RUN_KEYS, path)
    anchors, checks = block.get("anchors", []), block.get("checks", [])
    for key, names in (("anchors", anchors), ("checks", checks)):
        if not isinstance(names, list) or not all(isinstance(x, str) and x.strip() for x in names):
            raise ConfigError(
                f"{path.name}: [run] {key} must be a list of material names.",
                'Example: anchors = ["IAEA-603", "NBS-18"]',
            )
    if len(anchors) < 2:
        raise ConfigError(
            f"{path.name}: [run] names {len(anchors)} anchor(s); a run is "
            "normalised to at least two.",
            "List two or more reference materials that bracket the samples.",
        )
    both = set(anchors) & set(checks)
    if both:
        raise ConfigError(
            f"{path.name}: [run] lists {sorted(both)[0]!r} as anchor and check.",
            "A material is either an anchor or a check.",
        )
    tol = block.get("slope_tolerance", 0.05)
    if not isinstance(tol, (int, float)) or isinstance(tol, bool) or not 0 < tol < 1:
        raise ConfigError(
            f"{path.name}: [run] slope_tolerance must be a number in (0, 1).",
            "0.05 (common practice) warns when |slope − 1| > 0.05.",
        )
    drift = block.get("drift", False)
    if not isinstance(drift, bool):
        raise ConfigError(f"{path.name}: [run] drift must be true or false.", "")
    out = {
        "anchors": [str(a) for a in anchors],
        "checks": [str(c) for c in checks],
        "drift": drift,
        "slope_tolerance": float(tol),
    }
    if "value_set" in block:
        out["value_set"] = _run_value_set(block["value_set"], [*anchors, *checks], path)
    return out


def _run_value_set(given: Any, materials: list[str], path: Path) -> str | dict[str, str]:
    """``[run] value_set``: the published value set the run's materials are normalised to,
    one name for all (``"IAEA sheet"``) or one per material (``{ "NBS-18" = "IAEA sheet" }``);
    the names are checked against the store's table at ingest."""
    hint = 'Example: value_set = "IAEA sheet", or value_set = { "NBS-18" = "IAEA sheet" }'
    if isinstance(given, str) and given.strip():
        return given.strip()
    if (
        isinstance(given, dict)
        and given
        and all(isinstance(v, str) and v.strip() for v in given.values())
    ):
        for mat in given:
            if mat not in materials:
                raise ConfigError(
                    f"{path.name}: [run] value_set names {mat!r}, which is not one of the "
                    "run's anchors or checks." + did_you_mean(mat, materials),
                    hint,
                )
        return {str(k): str(v).strip() for k, v in given.items()}
    raise ConfigError(
        f"{path.name}: [run] value_set must be a value-set name or a table of material = "
        "value-set name.",
        hint,
    )


def _offsets(block: Any, path: Path) -> dict[str, dict[str, Any]]:
    """``[offsets.<δ field>]``: a declared per-source offset (value in ‰ and why)."""
    if not isinstance(block, dict):
        raise ConfigError(f"{path.name}: [offsets] must hold one table per δ field.", "")
    out = {}
    for fld, spec in block.items():
        where = f"[offsets.{fld}]"
        if fld not in DELTA_SCALES:
            raise ConfigError(
                f"{path.name}: {where} is not a δ field." + did_you_mean(fld, DELTA_SCALES),
                "",
            )
        if not isinstance(spec, dict):
            raise ConfigError(f"{path.name}: {where} must be a table.", "")
        _unknown_keys(where, spec, {"value", "why"}, path)
        value, why = spec.get("value"), spec.get("why")
        if not isinstance(value, (int, float)) or isinstance(value, bool) or abs(value) > 5:
            raise ConfigError(
                f"{path.name}: {where} value must be a number of ‰ (|value| ≤ 5).",
                "Example: value = 0.12",
            )
        if not isinstance(why, str) or len(why.strip()) < 10:
            raise ConfigError(
                f'{path.name}: {where} needs why = "…": the justification, in words.',
                "Say what the offset rests on, e.g. an "
                "inter-laboratory comparison and its reference.",
            )
        out[fld] = {"value": float(value), "why": why.strip()}
    return out


NORMALISATION_METHODS = {"two-point": 2, "one-point": 1, "not stated": 0}


def _normalisation(block: Any, path: Path) -> dict[str, dict[str, Any]]:
    """``[normalisation.<δ field>]``: how the authors normalised that column — method and
    the anchor values they assumed (material = ‰). Re-anchoring uses nothing else."""
    if not isinstance(block, dict):
        raise ConfigError(
            f"{path.name}: [normalisation] must hold one table per δ field.",
            'Example: [normalisation.d13c_carb] method = "two-point"',
        )
    out = {}
    for fld, spec in block.items():
        where = f"[normalisation.{fld}]"
        if fld not in DELTA_SCALES:
            raise ConfigError(
                f"{path.name}: {where} is not a δ field." + did_you_mean(fld, DELTA_SCALES),
                f"δ fields: {', '.join(DELTA_SCALES)}.",
            )
        if not isinstance(spec, dict):
            raise ConfigError(f"{path.name}: {where} must be a table.", "")
        _unknown_keys(where, spec, {"method", "anchors", "note"}, path)
        method = spec.get("method")
        if method not in NORMALISATION_METHODS:
            raise ConfigError(
                f"{path.name}: {where} method = {method!r} is not one of "
                f"{', '.join(NORMALISATION_METHODS)}.",
                'Say how the authors normalised; "not stated" if they did not.',
            )
        anchors = spec.get("anchors", {})
        if not isinstance(anchors, dict) or not all(
            isinstance(v, (int, float)) and not isinstance(v, bool) for v in anchors.values()
        ):
            raise ConfigError(
                f"{path.name}: {where} anchors must map material names to the "
                "values the authors assumed (‰).",
                'Example: anchors = { "NBS-19" = 1.95, "LSVEC" = -46.48 }',
            )
        need = NORMALISATION_METHODS[method]
        if len(anchors) != need:
            raise ConfigError(
                f"{path.name}: {where} is {method} but names {len(anchors)} anchor(s).",
                f"A {method} normalisation names {need} anchor(s)."
                if need
                else 'Leave anchors out for "not stated".',
            )
        out[fld] = {
            "method": method,
            "anchors": {str(k): float(v) for k, v in anchors.items()},
            **({"note": str(spec["note"])} if spec.get("note") else {}),
        }
    return out


def _ties(doc: dict[str, Any], path: Path, source_id: str) -> list[dict[str, Any]]:
    """The mapping's age ties (``[[ties]]`` blocks and a ``[ties_table]`` CSV)."""
    table_file = None
    if "ties_table" in doc:
        block = doc["ties_table"]
        if not isinstance(block, dict):
            raise ConfigError(f'{path.name}: [ties_table] must be a table with file = "…".', "")
        _unknown_keys("[ties_table]", block, {"file", "columns"}, path)
        if "file" not in block:
            raise ConfigError(
                f'{path.name}: [ties_table] needs file = "…".',
                "Name the CSV of ties, relative to the mapping file.",
            )
        table_file = safe_path(path.parent, block["file"], "[ties_table] file", path)
    chart = (doc.get("constants") or {}).get("age_time_scale")
    columns = (doc.get("ties_table") or {}).get("columns")
    return read_ties(
        path,
        doc.get("ties", []),
        table_file,
        source_id,
        str(chart) if isinstance(chart, str) else None,
        columns,
    )
