"""The corrections layer: a user's fixes to published values, kept as data in the store.

A correction names a record, a field and the value it should have, with the reason. The
derive engine applies it on top of the reported value every time it derives the record —
so it survives re-ingests of the source for as long as the record id exists, and is
reported as orphaned when it no longer does. δ values keep their reported column as
published: the correction becomes the first step of the chain (reported → corrected →
harmonised). Other fields (position, age, concentrations, material terms) take the
corrected value in their stored column; the correction row keeps what was published.
"""

from __future__ import annotations

import csv
import datetime as dt
import hashlib
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from strata13.schemas.fields import BY_NAME, DELTA_FIELDS

from strata13.errors import ConfigError, DomainError, OptionError

if TYPE_CHECKING:
    import pyarrow as pa
    from strata13.compile.store.lake import Store

# fields a correction may change: δ values, positions, ages, concentrations, material terms
CORRECTABLE: tuple[str, ...] = (
    *DELTA_FIELDS,
    "position",
    "top",
    "base",
    "age",
    "age_sigma",
    "mn",
    "sr",
    "fe",
    "mg_ca",
    "caco3",
    "toc",
    "lithology",
    "texture",
    "component",
    "mineralogy",
    "setting",
    "preservation",
    "lithostrat_unit",
)
CORRECTABLE = tuple(f for f in CORRECTABLE if f in BY_NAME)


@dataclass(frozen=True)
class Correction:
    record_id: str
    field: str
    value: str
    why: str


def stored_column(field: str) -> str:
    """The column a correction of ``field`` reads (δ: the reported column)."""
    f = BY_NAME[field]
    return f.stored


def parse_value(field: str, text: str, where: str) -> Any:
    """The corrected value in the field's stored type; OptionError naming ``where``."""
    from strata13.schemas.vocabularies import vocabulary

    f = BY_NAME[field]
    if f.kind == "vocab":
        term = vocabulary(f.vocab or "").resolve(text)
        if term is None:
            sug = vocabulary(f.vocab or "").suggest(text)
            raise OptionError(
                f"{where}: {text!r} is not a known {f.vocab}."
                + (f" Did you mean {sug!r}?" if sug else ""),
                f"Known: {', '.join(vocabulary(f.vocab or '').terms)}.",
            )
        return term
    if f.kind == "text":
        if not text.strip():
            raise OptionError(f"{where}: the corrected text is empty.", "Give the text.")
        return text.strip()
    try:
        x = float(text.strip().replace("−", "-"))
    except ValueError:
        raise OptionError(
            f"{where}: {field} takes a number, not {text!r}.",
            f"Give the corrected {field} as a plain number"
            + (f" in {f.stored_unit}" if f.stored_unit else "")
            + ".",
        ) from None
    if x != x or x in (float("inf"), float("-inf")):
        raise OptionError(f"{where}: {text!r} is not a finite number.", "Give a number.")
    if f.plausible and not f.plausible[0] <= x <= f.plausible[1]:
        raise OptionError(
            f"{where}: {x:g} is outside the plausible {f.plausible_name} "
            f"({f.plausible[0]:g} … {f.plausible[1]:g}).",
            f"Check the value and its unit (the stored unit is {f.stored_unit or 'none'}).",
        )
    return x


def check(c: Correction, where: str) -> Any:
    """Validate one correction's field, value and reason; returns the typed value."""
    from strata13.suggest import did_you_mean

    if c.field not in CORRECTABLE:
        raise OptionError(
            f"{where}: {c.field!r} is not a field a correction can change."
            + did_you_mean(c.field, CORRECTABLE),
            f"Correctable: {', '.join(CORRECTABLE)}.",
        )
    if not c.why or len(c.why.strip()) < 5:
        raise OptionError(
            f"{where}: a correction needs its reason (--why).",
            'Say what is wrong and how you know, e.g. "minus sign lost in '
            'the journal table; the supplement gives −1.2".',
        )
    return parse_value(c.field, c.value, where)


def read_file(path: Path) -> list[Correction]:
    """A CSV of corrections: header record_id,field,value,why (one per line)."""
    from strata13.compile.read.inputs import read_text

    text = read_text(path, "corrections file", "Check --file.")
    reader = csv.DictReader(text.splitlines())
    need = {"record_id", "field", "value", "why"}
    if not need <= set(reader.fieldnames or []):
        raise ConfigError(
            f"{path.name} needs the columns record_id, field, value, why.",
            "Write a header line: record_id,field,value,why",
        )
    out = []
    for line, r in enumerate(reader, start=2):
        if not any((v or "").strip() for v in r.values()):
            continue
        out.append(
            Correction(
                (r["record_id"] or "").strip(),
                (r["field"] or "").strip(),
                (r["value"] or "").strip(),
                (r["why"] or "").strip(),
            )
        )
        try:
            check(out[-1], f"{path.name} line {line}")
        except OptionError as exc:
            raise ConfigError(exc.message, exc.hint) from None
    if not out:
        raise ConfigError(f"{path.name} holds no corrections.", "Add lines under the header.")
    return out


def correction_id(record_id: str, field: str) -> str:
    return hashlib.sha256(f"{record_id}\x1f{field}".encode()).hexdigest()[:16]


def _hits(table: pa.Table, corrections: pa.Table | None) -> list[tuple[int, dict[str, Any]]]:
    """(row index in ``table``, correction) for every correction of a record ``table`` has."""
    import pyarrow.compute as pc

    if corrections is None or corrections.num_rows == 0 or table.num_rows == 0:
        return []
    ids = table.column("record_id")
    hits = corrections.filter(pc.is_in(corrections.column("record_id"), value_set=ids))
    if hits.num_rows == 0:
        return []
    index = {r: i for i, r in enumerate(ids.to_pylist())}
    return [(index[c["record_id"]], c) for c in hits.to_pylist()]


def apply(table: pa.Table, corrections: pa.Table | None) -> pa.Table:
    """Corrections of non-δ fields written into ``table``, and ``corrected_fields`` set on
    every corrected record (δ fields too: their values are corrected by harmonisation from
    ``delta_fixes``, so ``*_reported`` keeps the published value)."""
    import json

    import pyarrow as pa
    from strata13.compile.derive.steps import set_column

    hits = _hits(table, corrections)
    if not hits:
        return table
    marks: dict[int, list[str]] = {}
    for i, c in hits:
        f = c["field"]
        value = parse_value(f, c["value_text"], f"correction of {c['record_id']} {f}")
        marks.setdefault(i, []).append(f)
        if f in DELTA_FIELDS:
            continue
        col = stored_column(f)
        arr: list[Any] = table.column(col).to_pylist()
        arr[i] = value
        table = set_column(table, col, pa.array(arr, type=table.schema.field(col).type))
    flags: list[str | None] = [None] * table.num_rows
    for i, fields in marks.items():
        flags[i] = json.dumps(sorted(fields))
    return set_column(table, "corrected_fields", pa.array(flags, pa.string()))


def delta_fixes(
    table: pa.Table, corrections: pa.Table | None
) -> dict[str, dict[str, tuple[float, str, float | None]]]:
    """The δ corrections for harmonisation: {δ field: {record_id: (value, why, reported)}}."""
    delta: dict[str, dict[str, tuple[float, str, float | None]]] = {}
    for i, c in _hits(table, corrections):
        f = c["field"]
        if f not in DELTA_FIELDS:
            continue
        value = parse_value(f, c["value_text"], f"correction of {c['record_id']} {f}")
        rep = table.column(f"{f}_reported")[i].as_py()
        delta.setdefault(f, {})[c["record_id"]] = (float(value), c["why"], rep)
    return delta


@dataclass
class CorrectResult:
    version: int | None
    added: int
    replaced: int
    sources: list[str]


def correct(store: Store, items: list[Correction]) -> CorrectResult:
    """Store corrections and re-derive the sources they touch, in one commit."""
    import pyarrow as pa
    from strata13.compile.derive.engine import Settings
    from strata13.schemas.records import CORRECTIONS, arrow_schema

    for k, c in enumerate(items):
        check(c, f"correction {k + 1}" if len(items) > 1 else "correction")
    with store.transaction("correct") as tx:
        rows = []
        sources: set[str] = set()
        replaced = 0
        for c in items:
            hit = tx.rows(
                "SELECT record_id, source_id FROM records WHERE starts_with(record_id, ?) LIMIT 3",
                [c.record_id],
            )
            if len(c.record_id) < 6 or not hit:
                raise DomainError(
                    f"no record {c.record_id!r} in this store; nothing was written.",
                    "Find record ids with `strata13 query`.",
                )
            if len(hit) > 1:
                raise OptionError(
                    f"record id {c.record_id!r} matches more than one record.",
                    "Give more characters of the id.",
                )
            rid, sid = hit[0]
            original = tx.value(
                f'SELECT CAST("{_source_column(c.field)}" AS VARCHAR) FROM records '
                "WHERE record_id = ?",
                [rid],
            )
            cid = correction_id(rid, c.field)
            replaced += tx.delete("corrections", correction_id=cid)
            rows.append(
                {
                    "correction_id": cid,
                    "record_id": rid,
                    "source_id": sid,
                    "field": c.field,
                    "value_text": c.value.strip(),
                    "why": c.why.strip(),
                    "original_text": original,
                    "created_utc": dt.datetime.now(dt.UTC).strftime("%Y-%m-%d %H:%M:%S"),
                }
            )
            sources.add(sid)
        tx.insert("corrections", pa.Table.from_pylist(rows, schema=arrow_schema(CORRECTIONS)))
        settings = Settings.from_stored(tx.settings())
        tx.rederive(sorted(sources), settings)
        tx.record(
            {"corrections": len(rows), "replaced": replaced},
            settings.hash(),
            detail=", ".join(sorted(sources)),
        )
    return CorrectResult(tx.version, len(rows) - replaced, replaced, sorted(sources))


def _source_column(field: str) -> str:
    return f"{field}_reported" if field in DELTA_FIELDS else stored_column(field)


def listing(store: Store, source: list[str] | None = None) -> list[dict[str, Any]]:
    """Every correction with its record's place and whether the record still exists."""
    con, _ = store.reader()
    try:
        where, params = ("", [])
        if source:
            where = f" WHERE c.source_id IN ({', '.join('?' for _ in source)})"
            params = list(source)
        cur = con.execute(
            "SELECT c.source_id, r.section_id, r.sample_id, c.record_id, c.field, "
            "c.original_text AS published, c.value_text AS corrected, c.why, c.created_utc, "
            "CASE WHEN r.record_id IS NULL THEN 'orphaned' ELSE 'applied' END AS status "
            f"FROM corrections c LEFT JOIN records r USING (record_id){where} "
            "ORDER BY c.source_id, r.section_id, r.sample_id, c.field",
            params,
        )
        cols = [d[0] for d in cur.description]
        return [dict(zip(cols, r, strict=True)) for r in cur.fetchall()]
    finally:
        con.close()
