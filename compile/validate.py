"""Validate: a mapping plus its sheet -> reported records, hierarchy tables and a report.

Everything is checked at once and reported by cell: cleaning problems, vocabularies with
"did you mean", a stated scale for every δ value, required ids, unique record ids, the
pandera schema (types and named plausible ranges), superposition against reported ages,
and plausibility warnings (swapped δ13C/δ18O columns, unit slips). Nothing is written.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from strata13.compile.cleaning import CellContext, parse_coordinate, parse_numbers
from strata13.compile.errors import ConfigError
from strata13.compile.mapping import ColumnMap, Mapping, TableSpec
from strata13.compile.readers import RawTable, norm_header, read_table, strip_unit
from strata13.compile.report import Issue, Report
from strata13.schemas.fields import (
    BASIS_KEYS,
    BY_NAME,
    CONC_FIELDS,
    DELTA_FIELDS,
    DELTA_SCALES,
    FIELDS,
    SCALE_KEYS,
    UNITS,
)
from strata13.schemas.records import ANALYSES, LOCALITIES, SAMPLES, SECTIONS
from strata13.schemas.vocabularies import vocabulary

if TYPE_CHECKING:
    import numpy as np
    import pyarrow as pa


@dataclass
class Prepared:
    """What one mapping yields before anything is written."""

    mapping: Mapping
    file_sha256: str
    records: pa.Table  # valid rows only, analyses columns (derived ones still empty)
    localities: pa.Table
    sections: pa.Table
    samples: pa.Table
    quarantine: list[dict[str, Any]]
    report: Report = field(default_factory=Report)

    @property
    def ok(self) -> bool:
        return not self.report.errors


def record_id(source: str, section: str, sample: str, replicate: int) -> str:
    """Stable id: a hash of (source, section, sample, replicate)."""
    key = "\x1f".join([source, section, sample, str(replicate)])
    return hashlib.sha256(key.encode("utf-8")).hexdigest()[:20]


def _file_sha(path: Any) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


class _Rows:
    """Per-row error bookkeeping shared by the checks."""

    def __init__(self, raw: RawTable, report: Report) -> None:
        import numpy as np

        self.raw = raw
        self.report = report
        self.bad = np.zeros(raw.n_rows, dtype=bool)
        self.reasons: dict[int, list[str]] = {}

    def error(self, i: int, letter: str, column: str, value: Any, rule: str, hint: str) -> None:
        cell = f"{letter}{int(self.raw.row_numbers[i])}"
        self.report.add(Issue("error", self.raw.sheet, cell, column, _s(value), rule, hint))
        self.bad[i] = True
        self.reasons.setdefault(i, []).append(f"{cell}: {rule}")

    def mark(self, indices: np.ndarray, rule: str, letter: str) -> None:
        for i in indices:
            self.bad[int(i)] = True
            cell = f"{letter}{int(self.raw.row_numbers[int(i)])}"
            self.reasons.setdefault(int(i), []).append(f"{cell}: {rule}")


def _s(value: Any) -> str:
    return "" if value is None else str(value)


def _match_columns(raw: RawTable, spec: TableSpec,
                   report: Report) -> dict[str, tuple[int, str | None]]:
    """Mapped header -> (column index, unit found in the header).

    An exact header (ignoring case and spacing) wins over one matched without its unit;
    a mapped header that matches two columns of the sheet is refused, naming both cells.
    """
    exact: dict[str, list[int]] = {}
    bare: dict[str, list[tuple[int, str | None]]] = {}
    for j, h in enumerate(raw.headers):
        exact.setdefault(norm_header(h), []).append(j)
        name, unit = strip_unit(h)
        bare.setdefault(norm_header(name), []).append((j, unit))
    out: dict[str, tuple[int, str | None]] = {}
    missing = []
    for c in spec.columns:
        key = norm_header(c.header)
        hits = [(j, None) for j in exact.get(key, [])] or \
            bare.get(norm_header(strip_unit(c.header)[0]), [])
        if len(hits) > 1:
            cells = " and ".join(f"{raw.letters[j]}{raw.header_row}" for j, _ in hits)
            raise ConfigError(f"{raw.file} ({raw.sheet}): the mapped column {c.header!r} matches "
                              f"more than one header ({cells}).",
                              "Give the columns distinct headers in the sheet, or map the "
                              "exact header text including its unit.")
        if hits:
            out[c.header] = hits[0]
        else:
            missing.append(c.header)
    taken: dict[int, str] = {}
    for header, (j, _) in out.items():
        if j in taken:
            raise ConfigError(f"{spec.file.name}: mapping keys {taken[j]!r} and {header!r} both "
                              f"name column {raw.letters[j]} ({raw.headers[j]!r}).",
                              "Map each sheet column once.")
        taken[j] = header
    if missing:
        import difflib

        hint = difflib.get_close_matches(missing[0], raw.headers, n=1, cutoff=0.5)
        raise ConfigError(
            f"{raw.file} ({raw.sheet}): column {missing[0]!r} of the mapping is not in the header "
            f"row {raw.header_row}." + (f" Did you mean {hint[0]!r}?" if hint else ""),
            f"Header cells found: {', '.join(h for h in raw.headers if h)}. Set header_row "
            "in [table] if the header is elsewhere.")
    return out


def _unit_for(c: ColumnMap, header_unit: str | None, raw: RawTable, letter: str,
              report: Report) -> str | None:
    f = BY_NAME.get(c.field)
    if f is None or f.unit_kind is None:
        return None
    units = UNITS[f.unit_kind]
    if c.unit:
        if header_unit and header_unit in units and header_unit != c.unit:
            report.add(Issue("warning", raw.sheet, f"{letter}{raw.header_row}", c.header,
                             header_unit, "unit conflict",
                             f"the header says {header_unit} but the mapping says {c.unit}; "
                             f"the mapping's {c.unit} is used"))
        return c.unit
    if header_unit:
        hu = header_unit.replace(" ", "")
        for u in units:
            if hu.lower() == u.lower().replace(" ", ""):
                report.add(Issue("info", raw.sheet, f"{letter}{raw.header_row}", c.header, u,
                                 "unit from header", f"unit {u} taken from the header"))
                return u
    if f.unit_kind == "length":
        report.add(Issue("warning", raw.sheet, f"{letter}{raw.header_row}", c.header, "",
                         "unit not stated", "no unit for this length column; metres assumed — "
                         "set unit = \"m\", \"cm\" or \"ft\" in the mapping"))
    return f.stored_unit


def prepare(mapping: Mapping, progress: Any = None) -> Prepared:
    """Read, clean, map and validate one mapping's sheet. Never writes anything."""
    import numpy as np
    import pandas as pd
    import pyarrow as pa
    import pyarrow.compute as pc

    spec = mapping.table
    raw = read_table(spec.file, spec.sheet, spec.header_row, [c.header for c in spec.columns],
                     spec.delimiter, spec.encoding)
    report = Report()
    report.extend(raw.issues)
    report.rows_read = raw.n_rows + raw.blank_rows + raw.rejected_rows
    report.rows_blank = raw.blank_rows
    rows = _Rows(raw, report)
    n = raw.n_rows
    for issue in raw.issues:  # reader errors on a data cell reject that row
        digits = "".join(ch for ch in issue.cell if ch.isdigit())
        if issue.severity == "error" and digits:
            hit = np.flatnonzero(raw.row_numbers == int(digits))
            for i in hit:
                rows.bad[i] = True
                rows.reasons.setdefault(int(i), []).append(f"{issue.cell}: {issue.rule}")
    sid = mapping.source_id
    found = _match_columns(raw, spec, report)
    cols: dict[str, Any] = {}  # stored column -> array (numpy object/float or arrow)
    letters: dict[str, tuple[str, str]] = {}  # stored column -> (letter, header)

    for c in spec.columns:
        j, header_unit = found[c.header]
        letter, header = raw.letters[j], raw.headers[j]
        ctx = CellContext(raw.sheet, header, letter, raw.row_numbers)
        text = raw.column(j)
        target = c.field
        f = BY_NAME.get(target)
        if target in SCALE_KEYS or target in BASIS_KEYS:
            _text_column(cols, letters, target, text, letter, header)
            continue
        assert f is not None
        letters[f.stored] = (letter, header)
        if f.kind in ("text",):
            _text_column(cols, letters, f.stored, text, letter, header)
        elif f.kind == "vocab":
            cols[f.stored] = _vocab_column(text, f.vocab or "", rows, letter, header)
        elif f.kind == "coord":
            cols[f.stored] = _coord_column(text, target, rows, letter, header)
        else:
            parsed = parse_numbers(text, ctx, spec.decimal)
            report.extend(parsed.issues)
            rules = {i.cell: i.rule for i in parsed.issues if i.severity == "error"}
            for i in np.nonzero(parsed.bad)[0]:
                cell = f"{letter}{int(raw.row_numbers[i])}"
                rows.mark(np.array([i]), rules.get(cell, "not a number"), letter)
            unit = _unit_for(c, header_unit, raw, letter, report)
            values = parsed.values
            if unit and f.unit_kind:
                factor = UNITS[f.unit_kind][unit]
                if factor != 1.0:
                    values = pc.multiply(values, pa.scalar(factor))
                    report.add(Issue("info", raw.sheet, f"{letter}{raw.header_row}", header, unit,
                                     "unit conversion",
                                     f"{unit} converted to {f.stored_unit} (× {factor:g})"))
            if f.kind == "int":
                arr = values.to_numpy(zero_copy_only=False)
                frac = ~np.isnan(arr) & (np.floor(arr) != arr)
                for i in np.nonzero(frac)[0]:
                    rows.error(int(i), letter, header, raw.column(j)[int(i)].as_py(),
                               "whole number", "this column takes whole numbers")
                cols[f.stored] = values
            else:
                cols[f.stored] = values
            if f.kind == "conc":
                q = parsed.qualifier
                cols[f"{target}_qualifier"] = q
                if c.detection_limit is not None:
                    is_bdl = pc.fill_null(pc.equal(q, "bdl"), False)
                    cols[f"{target}_dl"] = pc.if_else(is_bdl, pa.scalar(c.detection_limit),
                                                      pa.scalar(None, pa.float64()))
                if c.basis:
                    cols[f"{target}_basis"] = c.basis
            elif parsed.qualifier.null_count < len(parsed.qualifier):
                idx = np.nonzero(pc.is_valid(parsed.qualifier).to_numpy(zero_copy_only=False))[0]
                for i in idx:
                    rows.error(int(i), letter, header, raw.column(j)[int(i)].as_py(),
                               "censored value", f"{target} takes plain numbers; "
                               "'<x' and 'bdl' belong to concentration columns")
            if f.kind == "delta" and c.scale:
                cols[f"{target}_scale"] = c.scale

    # constants fill whole columns (a column given in the sheet wins; load_mapping forbids both)
    for key, value in mapping.constants.items():
        f = BY_NAME.get(key)
        stored = f.stored if f else key
        if f and f.kind == "vocab":
            term = vocabulary(f.vocab or "").resolve(str(value))
            if term is None:
                sug = vocabulary(f.vocab or "").suggest(str(value))
                raise ConfigError(f"{mapping.path.name}: [constants] {key} = {value!r} is not in "
                                  f"the {f.vocab} vocabulary." + (f" Did you mean {sug!r}?" if sug
                                                                  else ""),
                                  f"Known terms: {', '.join(vocabulary(f.vocab or '').terms)}.")
            value = term
        if f and f.kind in ("float", "delta", "conc", "int", "coord") and not isinstance(
                value, (int, float)):
            if f.kind == "coord":
                try:
                    value = parse_coordinate(str(value), key)
                except ValueError as exc:
                    raise ConfigError(f"{mapping.path.name}: [constants] {key}: {exc}.", "") \
                        from None
            else:
                raise ConfigError(f"{mapping.path.name}: [constants] {key} must be a number.", "")
        cols[stored] = value
        letters.setdefault(stored, ("", f"[constants] {key}"))

    def column(name: str) -> np.ndarray:
        v = cols.get(name)
        if v is None:
            return np.empty(n, dtype=object)  # all None
        if isinstance(v, (pa.Array, pa.ChunkedArray)):
            return v.to_numpy(zero_copy_only=False)
        if isinstance(v, np.ndarray):
            return v
        return np.full(n, v, dtype=object)

    # sections and localities
    section_blocks = {str(s["id"]): s for s in mapping.sections}
    sec = column("section_id")
    if "section_id" not in cols:
        # load_mapping guarantees exactly one [[sections]] block in this case
        sec = np.full(n, next(iter(section_blocks)), dtype=object)
    else:
        letter_sec, header_sec = letters.get("section_id", ("", "section_id"))
        for i in np.flatnonzero(pd.isna(pd.Series(sec, dtype=object)).to_numpy()):
            rows.error(int(i), letter_sec, header_sec, "", "section missing",
                       "every row needs a section; fill the cell")
    locality_blocks = _localities(mapping, report)
    loc = column("locality_id")
    if "locality_id" not in cols:
        sec_loc = {k: v.get("locality") for k, v in section_blocks.items()}
        loc_s = pd.Series(sec, dtype=object).map(sec_loc).astype(object)
        if len(locality_blocks) == 1:
            loc_s = loc_s.fillna(next(iter(locality_blocks)))
        loc = loc_s.astype(object).where(loc_s.notna(), None).to_numpy()
    # coordinates: the row's own, else its locality's (vectorised through pandas)
    lat = pd.to_numeric(pd.Series(column("lat")), errors="coerce").to_numpy(dtype=float, copy=True)
    lon = pd.to_numeric(pd.Series(column("lon")), errors="coerce").to_numpy(dtype=float, copy=True)
    loc_series = pd.Series(loc, dtype=object)
    block_lat = loc_series.map({k: b["lat"] for k, b in locality_blocks.items()})
    block_lon = loc_series.map({k: b["lon"] for k, b in locality_blocks.items()})
    fill = np.isnan(lat) & block_lat.notna().to_numpy()
    lat[fill] = block_lat.to_numpy(dtype=float, na_value=np.nan)[fill]
    lon[fill] = block_lon.to_numpy(dtype=float, na_value=np.nan)[fill]
    lon = np.where(lon > 180, lon - 360, lon)
    for s_id, block in section_blocks.items():
        if block.get("locality") and block["locality"] not in locality_blocks:
            raise ConfigError(f"{mapping.path.name}: section {s_id!r} names locality "
                              f"{block['locality']!r}, which is not defined.",
                              "Add a [[localities]] block or a [localities_table].")

    sample = column("sample_id")
    letter_s, header_s = letters.get("sample_id", ("", "sample_id"))
    if "sample_id" not in cols:
        raise ConfigError(f"{mapping.path.name}: no column is mapped to sample_id.",
                          "Every record needs a sample identifier.")
    for i in np.nonzero(np.array([v is None for v in sample], dtype=bool))[0]:
        rows.error(int(i), letter_s, header_s, "", "sample missing",
                   "every row needs a sample id; fill it or delete the row")

    rep = pd.to_numeric(pd.Series(column("replicate")), errors="coerce").to_numpy(dtype=float)
    replicate = np.where(np.isnan(rep), 1, np.nan_to_num(rep)).astype(np.int64)

    # δ scales: every δ value needs one
    for d in DELTA_FIELDS:
        stored = BY_NAME[d].stored
        if stored not in cols:
            continue
        vals = column(stored).astype(float)
        scale = pd.Series(column(f"{d}_scale"), dtype=object)
        letter, header = letters[stored]
        has = ~np.isnan(vals)
        no_scale = has & scale.isna().to_numpy()
        unknown = has & ~no_scale & ~scale.isin(DELTA_SCALES[d]).to_numpy()
        for i in np.nonzero(no_scale)[0]:
            rows.error(int(i), letter, header, vals[i], "scale not stated",
                       f"state the reference scale of {d}: scale = \"VPDB\" on the column "
                       f"or {d}_scale in [constants]")
        for i in np.nonzero(unknown)[0]:
            rows.error(int(i), letter, header, scale[i], "unknown scale",
                       f"scales for {d}: {', '.join(DELTA_SCALES[d])}")

    _interval_order(cols, column, rows, letters, section_blocks, sec)
    def text(name: str, fallback: Any) -> Any:
        v = cols.get(name)
        return v if isinstance(v, (pa.Array, pa.ChunkedArray)) else fallback

    ids, first = _record_ids(sid, text("section_id", sec), text("sample_id", sample), replicate)
    for i in np.flatnonzero(first >= 0):
        rows.error(int(i), letter_s, header_s, sample[i], "duplicate record",
                   f"section {sec[i]}, sample {sample[i]}, replicate {replicate[i]} is already "
                   f"in row {raw.row_numbers[first[i]]}; give replicates a replicate number")

    # assemble the analyses table: Arrow columns pass through, constants are broadcast
    out: dict[str, Any] = {}
    types = {name: t for name, t in ANALYSES}
    for name, _t in ANALYSES:
        if name in ("lat", "lon"):
            out[name] = lat if name == "lat" else lon
        elif name in ("section_id", "locality_id") and not isinstance(
                cols.get(name), (pa.Array, pa.ChunkedArray)):
            out[name] = sec if name == "section_id" else loc
        elif name in cols:
            v = cols[name]
            out[name] = v if isinstance(v, (pa.Array, pa.ChunkedArray, np.ndarray)) \
                else _const(v, n, types[name])
    out["record_id"] = ids
    out["source_id"] = _const(sid, n, "VARCHAR")
    out["replicate"] = replicate
    out["sheet"] = _const(raw.sheet, n, "VARCHAR")
    out["sheet_row"] = raw.row_numbers
    if "position_kind" not in cols:
        kinds = {k: v.get("position_kind") for k, v in section_blocks.items()}
        if len(set(kinds.values())) <= 1:
            out["position_kind"] = _const(next(iter(kinds.values()), None), n, "VARCHAR")
        else:
            out["position_kind"] = pd.Series(sec, dtype=object).map(kinds).to_numpy()
    for name in list(out):
        out[name] = _to_arrow(out[name], types[name], n)
    frame = pa.table(out)

    col_index = {letter: j for j, letter in enumerate(raw.letters)}

    def raw_text(stored: str, i: int) -> str | None:
        """The cell as the sheet wrote it, for report lines about parsed values."""
        letter = letters.get(stored, ("", ""))[0]
        j = col_index.get(letter)
        return raw.column(j)[i].as_py() if j is not None else None

    _schema_check(frame, rows, letters, raw_text)
    _superposition(frame, rows, letters)
    _plausibility(frame, raw, report, letters)

    valid = ~rows.bad
    report.rows_valid = int(valid.sum())
    report.rows_rejected = int(rows.bad.sum()) + raw.rejected_rows
    quarantine = []
    for i in np.nonzero(rows.bad)[0]:
        cells = {raw.headers[j]: raw.column(j)[int(i)].as_py() for j in range(len(raw.headers))}
        quarantine.append({"sheet": raw.sheet, "sheet_row": int(raw.row_numbers[i]),
                           "cells_json": json.dumps(cells, ensure_ascii=False),
                           "reasons": "; ".join(rows.reasons.get(int(i), []))})
    for issue in raw.issues:  # rows the reader could not split: quarantined with their text
        if issue.rule == "row shape":
            digits = "".join(ch for ch in issue.cell if ch.isdigit())
            quarantine.append({"sheet": raw.sheet, "sheet_row": int(digits) if digits else None,
                               "cells_json": json.dumps({"line": issue.value},
                                                        ensure_ascii=False),
                               "reasons": f"{issue.cell}: row shape"})
    records = _complete(frame if valid.all() else frame.filter(pa.array(valid)))
    records = records.append_column("row_hash", _row_hashes(records)) \
        if "row_hash" not in records.column_names else records
    return Prepared(mapping, _file_sha(spec.file), records,
                    _localities_table(sid, locality_blocks),
                    _sections_table(sid, section_blocks, sec, loc),
                    _samples_table(records), quarantine, report)


def _interval_order(cols: dict[str, Any], column: Any, rows: _Rows,
                    letters: dict[str, tuple[str, str]], section_blocks: dict[str, Any],
                    sec: Any) -> None:
    """A sampled interval's top must lie above its base (heights: top ≥ base; depths: top ≤
    base)."""
    import numpy as np
    import pandas as pd

    if "top_m" not in cols or "base_m" not in cols:
        return
    top = pd.to_numeric(pd.Series(column("top_m")), errors="coerce").to_numpy(dtype=float)
    base = pd.to_numeric(pd.Series(column("base_m")), errors="coerce").to_numpy(dtype=float)
    kinds = column("position_kind") if "position_kind" in cols else np.array(
        [section_blocks.get(s, {}).get("position_kind") for s in sec], dtype=object)
    depth = np.array([k == "depth" for k in kinds], dtype=bool)
    wrong = np.where(depth, top > base, top < base)
    letter, header = letters.get("top_m", ("", "top"))
    for i in np.nonzero(wrong)[0]:
        rows.error(int(i), letter, header, top[i], "interval order",
                   f"top {top[i]:g} m is {'below' if not depth[i] else 'deeper than'} base "
                   f"{base[i]:g} m; check that top and base are not swapped")


def _record_ids(sid: str, sec: Any, sample: Any, replicate: Any) -> tuple[pa.Array, Any]:
    """``record_id`` of every row (DuckDB's sha256 over the same key text as
    :func:`record_id`) and, for a repeated id, the row index of its first occurrence
    (−1 otherwise)."""
    import duckdb
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    n = len(replicate)
    t = pa.table({"sec": _strings(sec), "sample": _strings(sample),
                  "rep": pa.array(np.asarray(replicate, dtype=np.int64)),
                  "i": pa.array(np.arange(n, dtype=np.int64))})
    con = duckdb.connect()
    try:
        con.register("k", t)
        ids = con.execute(
            "SELECT CASE WHEN sec IS NULL OR sample IS NULL THEN NULL ELSE "
            "substr(sha256(concat_ws(chr(31), ?, sec, sample, CAST(rep AS VARCHAR))), 1, 20) "
            "END AS id FROM k ORDER BY i", [sid]).to_arrow_table().column("id").combine_chunks()
    finally:
        con.close()
    first = np.full(n, -1, dtype=np.int64)
    codes = pc.fill_null(ids.dictionary_encode().indices, -1).to_numpy(zero_copy_only=False)
    counts = np.bincount(codes[codes >= 0]) if n else np.zeros(0, dtype=np.int64)
    if len(counts) and counts.max() > 1:  # rare: find each repeat's first occurrence
        _, first_index = np.unique(codes, return_index=True)
        by_code = np.full(len(counts) + 1, -1, dtype=np.int64)
        uniq = np.unique(codes)
        by_code[uniq + 1] = first_index
        first_of = by_code[codes + 1]
        repeat = (codes >= 0) & (first_of != np.arange(n))
        first[repeat] = first_of[repeat]
    return ids, first


def _const(value: Any, n: int, sqltype: str) -> pa.Array:
    """One value for every row, built by Arrow (no Python object per row)."""
    import pyarrow as pa

    t = {"VARCHAR": pa.string(), "DOUBLE": pa.float64(), "INTEGER": pa.int32(),
         "BIGINT": pa.int64()}[sqltype]
    if value is None:
        return pa.nulls(n, t)
    import pyarrow.compute as pc

    return pc.fill_null(pa.nulls(n, t), pa.scalar(str(value) if sqltype == "VARCHAR"
                                                   else value, t))


def _strings(values: Any) -> pa.Array:
    """Text column as Arrow; C-speed for str/None objects, str() only as a fallback."""
    import pyarrow as pa

    if isinstance(values, (pa.Array, pa.ChunkedArray)):
        return values.cast(pa.string())
    try:
        return pa.array(values, type=pa.string(), from_pandas=True)
    except (pa.ArrowInvalid, pa.ArrowTypeError):
        return pa.array([None if v is None or v != v else str(v) for v in values],
                        type=pa.string())


def _to_arrow(values: Any, sqltype: str, n: int) -> pa.Array:
    import numpy as np
    import pyarrow as pa

    t = {"VARCHAR": pa.string(), "DOUBLE": pa.float64(), "INTEGER": pa.int32(),
         "BIGINT": pa.int64()}[sqltype]
    if isinstance(values, pa.ChunkedArray):
        values = values.combine_chunks()
    if isinstance(values, pa.Array):
        return values.cast(t)
    if isinstance(values, np.ndarray) and values.dtype != object:
        return pa.array(values, from_pandas=True).cast(t)  # NaN -> null
    if sqltype == "DOUBLE":  # object arrays (lat/lon filled from localities)
        return pa.array([None if v is None or (isinstance(v, float) and np.isnan(v)) else float(v)
                         for v in values], type=t)
    if sqltype == "VARCHAR":
        return _strings(values)
    return pa.array(list(values), type=t)


def _text_column(cols: dict[str, Any], letters: dict[str, tuple[str, str]], stored: str,
                 text: pa.ChunkedArray, letter: str, header: str) -> None:
    import pyarrow as pa
    import pyarrow.compute as pc

    t = pc.utf8_trim_whitespace(text.combine_chunks())
    cols[stored] = pc.if_else(pc.equal(t, ""), pa.scalar(None, pa.string()), t)
    letters[stored] = (letter, header)


def _vocab_column(text: pa.ChunkedArray, vocab: str, rows: _Rows, letter: str,
                  header: str) -> Any:
    """Resolve each distinct cell once; map the column through the result (vectorised)."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    voc = vocabulary(vocab)
    arr = pc.utf8_trim_whitespace(text.combine_chunks().cast(pa.string()))
    arr = pc.if_else(pc.equal(arr, ""), pa.scalar(None, pa.string()), arr)
    uniq = [v for v in pc.unique(arr).to_pylist() if v is not None]
    resolved = [voc.resolve(v) for v in uniq]
    pos = pc.index_in(arr, value_set=pa.array(uniq, pa.string()))
    out = pc.take(pa.array(resolved, pa.string()), pos) if uniq else arr
    unknown = {v for v, r in zip(uniq, resolved, strict=True) if r is None}
    if unknown:
        bad = pc.is_in(arr, value_set=pa.array(sorted(unknown), pa.string()))
        for i in np.nonzero(pc.fill_null(bad, False).to_numpy(zero_copy_only=False))[0]:
            v = arr[int(i)].as_py()
            sug = voc.suggest(v)
            rows.error(int(i), letter, header, v, f"{vocab} vocabulary",
                       (f"did you mean {sug!r}? " if sug else "") +
                       f"known terms: {', '.join(voc.terms)}")
    return out


def _coord_column(text: pa.ChunkedArray, axis: str, rows: _Rows, letter: str,
                  header: str) -> Any:
    """Decimal degrees: plain numbers cast at once, DMS and hemisphere letters cell by cell."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc
    from strata13.compile.cleaning import NUMBER_PATTERN

    col = pc.utf8_trim_whitespace(text.combine_chunks().cast(pa.string()))
    plain = pc.fill_null(pc.match_substring_regex(col, NUMBER_PATTERN), False)
    out = pc.cast(pc.if_else(plain, col, pa.scalar(None, pa.string())), pa.float64())
    out = out.to_numpy(zero_copy_only=False).astype(float, copy=True)
    rest = ~plain.to_numpy(zero_copy_only=False) & \
        pc.fill_null(pc.not_equal(col, ""), False).to_numpy(zero_copy_only=False)
    cache: dict[str, float | str] = {}
    for i in np.nonzero(rest)[0]:
        v = col[int(i)].as_py()
        if v not in cache:
            try:
                cache[v] = parse_coordinate(v, axis)
            except ValueError as exc:
                cache[v] = str(exc)
        r = cache[v]
        if isinstance(r, str):
            rows.error(int(i), letter, header, v, "coordinate", r)
        else:
            out[i] = r
    return out


def _localities(mapping: Mapping, report: Report) -> dict[str, dict[str, Any]]:
    """Locality id -> block with decimal lat/lon, from inline blocks and a localities sheet."""
    out: dict[str, dict[str, Any]] = {}
    for block in mapping.localities:
        b = dict(block)
        for axis in ("lat", "lon"):
            if axis not in b:
                raise ConfigError(f"{mapping.path.name}: locality {b['id']!r} has no {axis}.", "")
            try:
                b[axis] = parse_coordinate(str(b[axis]), axis)
            except ValueError as exc:
                raise ConfigError(f"{mapping.path.name}: locality {b['id']!r} {axis} "
                                  f"{block[axis]!r}: {exc}.", "") from None
        _check_range(b, mapping)
        out[str(b["id"])] = b
    spec = mapping.localities_table
    if spec is not None:
        raw = read_table(spec.file, spec.sheet, spec.header_row, [c.header for c in spec.columns],
                         spec.delimiter, spec.encoding)
        found = _match_columns(raw, spec, report)
        by_field = {c.field: raw.column(found[c.header][0]).to_pylist() for c in spec.columns}
        for k in ("locality_id", "lat", "lon"):
            if k not in by_field:
                raise ConfigError(f"{mapping.path.name}: [localities_table] needs a column for "
                                  f"{k}.", "")
        for i, lid in enumerate(by_field["locality_id"]):
            if not lid:
                continue
            try:
                b = {"id": lid, "name": (by_field.get("locality_name") or [None] * (i + 1))[i],
                     "lat": parse_coordinate(str(by_field["lat"][i]), "lat"),
                     "lon": parse_coordinate(str(by_field["lon"][i]), "lon")}
            except ValueError as exc:
                raise ConfigError(f"{raw.file} ({raw.sheet}) row {raw.row_numbers[i]}: locality "
                                  f"{lid!r}: {exc}.", "Fix the coordinate in the localities "
                                  "sheet.") from None
            _check_range(b, mapping)
            out[str(lid)] = b
    return out


def _check_range(b: dict[str, Any], mapping: Mapping) -> None:
    if not -90 <= b["lat"] <= 90 or not -180 <= b["lon"] <= 360:
        raise ConfigError(f"{mapping.path.name}: locality {b['id']!r} has coordinates out of "
                          f"range ({b['lat']}, {b['lon']}).", "Latitude −90…90, longitude "
                          "−180…180; check for swapped lat/lon.")
    if b["lon"] > 180:
        b["lon"] -= 360


def _schema_check(frame: pa.Table, rows: _Rows, letters: dict[str, tuple[str, str]],
                  raw_text: Any = lambda col, i: None) -> None:
    """Run the pandera schema lazily and turn its failure cases into cell errors."""
    import pandera.errors as pe
    import pyarrow as pa
    from strata13.schemas.records import record_schema

    schema = record_schema()
    # the schema sees the columns this sheet filled (ids and text are checked above, row by
    # row); vocabulary columns go in dictionary-encoded, so no Python object per cell
    keep = [c for c in frame.column_names if c in schema.columns and c not in TEXT_CHECKED
            and frame.column(c).null_count < frame.num_rows]
    sub = frame.select(keep)
    sub = pa.table({c: (sub.column(c).dictionary_encode() if pa.types.is_string(sub.column(c).type)
                        else sub.column(c)) for c in keep})
    schema = schema.select_columns(keep) if keep else schema.select_columns([])
    failures = []
    for start in range(0, max(sub.num_rows, 1), SCHEMA_CHUNK):  # bounded memory
        df = sub.slice(start, SCHEMA_CHUNK).to_pandas(types_mapper=_pandas_types)
        df.index = df.index + start
        try:
            schema.validate(df, lazy=True)
        except pe.SchemaErrors as err:
            failures.append(err.failure_cases)
    for fc in failures:
        for _, r in fc.iterrows():
            idx = r.get("index")
            col = r.get("column")
            check = str(r.get("check"))
            if idx is None or col is None or (isinstance(idx, float) and idx != idx):
                continue
            letter, header = letters.get(str(col), ("", str(col)))
            f = next((x for x in FIELDS if x.stored == col), None)
            if check.startswith("in_range") and f is not None and f.plausible:
                lo, hi = f.plausible
                rule = f"plausible {f.plausible_name or 'range'}"
                hint = (f"outside {lo:g} … {hi:g}"
                        f"{' ' + f.stored_unit if f.stored_unit else ''}; check the unit and the "
                        "column mapping")
            elif check.startswith("in_range"):
                rule, hint = "plausible range", f"outside {check}; check the unit and mapping"
            else:
                rule, hint = check, f"failed the {check} check"
            shown = raw_text(str(col), int(idx))
            rows.error(int(idx), letter, header,
                       shown if shown is not None else r.get("failure_case"), rule, hint)


TEXT_CHECKED = ("record_id", "source_id", "section_id", "sample_id")
SCHEMA_CHUNK = 250_000  # rows per pandera pass


def _pandas_types(t: Any) -> Any:
    """Nullable integers stay integers in pandas (pandera checks them as Int32)."""
    import pandas as pd
    import pyarrow as pa

    return pd.Int32Dtype() if t == pa.int32() else None


def _superposition(frame: pa.Table, rows: _Rows, letters: dict[str, tuple[str, str]]) -> None:
    """Within a section, reported ages must not contradict the order of positions."""
    import numpy as np

    if "age_reported_ma" not in frame.column_names or "position_m" not in frame.column_names:
        return
    sec = frame.column("section_id").to_numpy(zero_copy_only=False)
    pos = frame.column("position_m").to_numpy(zero_copy_only=False).astype(float)
    age = frame.column("age_reported_ma").to_numpy(zero_copy_only=False).astype(float)
    sig = frame.column("age_reported_sigma_ma").to_numpy(zero_copy_only=False).astype(float) \
        if "age_reported_sigma_ma" in frame.column_names else np.zeros(len(age))
    sig = np.nan_to_num(sig)
    kind = frame.column("position_kind").to_numpy(zero_copy_only=False) \
        if "position_kind" in frame.column_names \
        else [None] * len(age)
    letter, header = letters.get("age_reported_ma", ("", "age"))
    import pandas as pd

    codes = pd.factorize(pd.Series(sec, dtype=object))[0]
    ok = (codes >= 0) & ~np.isnan(pos) & ~np.isnan(age)
    idx = np.nonzero(ok)[0]
    if len(idx) < 2:
        return
    idx = idx[np.lexsort((pos[idx], codes[idx]))]
    a, b = idx[:-1], idx[1:]
    same = (codes[a] == codes[b]) & (pos[a] != pos[b])
    depth = np.array([k == "depth" for k in kind], dtype=bool)[a]
    # height: higher is younger (age falls); depth: deeper is older (age rises)
    gap = np.where(depth, age[a] - age[b], age[b] - age[a])
    wrong = same & (gap > sig[a] + sig[b])
    for i, j in zip(a[wrong], b[wrong], strict=True):
        rows.error(int(j), letter, header, age[j], "superposition",
                   f"age {age[j]:g} Ma at {pos[j]:g} m contradicts {age[i]:g} Ma at "
                   f"{pos[i]:g} m (row {rows.raw.row_numbers[i]}) in the same section")


def _plausibility(frame: pa.Table, raw: RawTable, report: Report,
                  letters: dict[str, tuple[str, str]]) -> None:
    """Warnings for swapped δ columns and unit slips (common-practice heuristics)."""
    import numpy as np

    def values(name: str) -> np.ndarray:
        if name not in frame.column_names:
            return np.zeros(0)
        v = frame.column(name).to_numpy(zero_copy_only=False).astype(float)
        return v[~np.isnan(v)]

    c13, o18 = values("d13c_carb_reported"), values("d18o_carb_reported")
    scales = set(frame.column("d18o_carb_scale").unique().to_pylist()) \
        if "d18o_carb_scale" in frame.column_names else set()
    if len(c13) >= 5 and len(o18) >= 5 and scales <= {"VPDB", "PDB", None}:
        # Marine carbonate δ18O (VPDB) is mostly below δ13C (common practice, from memory:
        # Phanerozoic δ13C ~ -3…+6 ‰, δ18O ~ -10…0 ‰); the reverse suggests swapped columns.
        if np.median(o18) > np.median(c13) + 2:
            letter, header = letters.get("d13c_carb_reported", ("", ""))
            report.add(Issue("warning", raw.sheet, letter, header, f"{np.median(c13):.2f}",
                             "swapped δ columns?", "median δ18O is well above median δ13C; "
                             "check that the δ13C and δ18O columns are not swapped"))
    pos = values("position_m")
    letter, header = letters.get("position_m", ("", ""))
    if len(pos) >= 5 and np.nanmax(np.abs(pos)) > 2000:
        report.add(Issue("warning", raw.sheet, letter, header, f"{np.nanmax(pos):g}",
                         "unit slip?", "positions above 2000 m: were they given in cm or ft?"))
    for c in CONC_FIELDS:
        v = values(BY_NAME[c].stored)
        letter, header = letters.get(BY_NAME[c].stored, ("", ""))
        if c in ("mn", "sr", "fe") and len(v) >= 5 and np.nanmax(v) < 1.0:
            report.add(Issue("warning", raw.sheet, letter, header, f"{np.nanmax(v):g}",
                             "unit slip?", f"all {c} values below 1 ppm: were they in %?"))


def _complete(table: pa.Table) -> pa.Table:
    """Every analyses column present, with the stored type, in the stored order."""
    import pyarrow as pa
    from strata13.schemas.records import arrow_schema

    schema = arrow_schema([c for c in ANALYSES if c[0] != "row_hash"])
    cols = []
    for f in schema:
        if f.name in table.column_names:
            cols.append(table.column(f.name).cast(f.type))
        else:
            cols.append(pa.nulls(table.num_rows, f.type))
    return pa.Table.from_arrays(cols, schema=schema)


def _row_hashes(table: pa.Table) -> pa.Array:
    """A content hash per record over its reported columns, for re-ingest diffs.

    Each filled cell contributes hash(value) × K(column), summed modulo 2**64; an empty
    cell contributes nothing, so a row's hash does not depend on which columns other rows
    fill, and all-empty columns cost nothing. hash and K are pandas' ``hash_array``
    (SipHash-2-4 with pandas' fixed default key; numbers as float64, text as UTF-8) — a
    documented, engine-independent content hash. One column in memory at a time.
    """
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc
    from pandas.util import hash_array
    from strata13.compile.derive import DERIVED_COLUMNS

    n = table.num_rows
    h = np.zeros(n, dtype=np.uint64)
    for name in table.column_names:
        col = table.column(name)
        if name in DERIVED_COLUMNS or name in ("sheet", "sheet_row") or col.null_count == n:
            continue
        k = hash_array(np.array([name], dtype=object))[0] | np.uint64(1)
        if pa.types.is_string(col.type):  # hash each distinct text once, spread by index
            d = col.combine_chunks().dictionary_encode()
            per_value = hash_array(d.dictionary.to_numpy(zero_copy_only=False),
                                   categorize=False)
            idx = pc.fill_null(d.indices, -1).to_numpy(zero_copy_only=False)
            v = np.where(idx >= 0, per_value[np.maximum(idx, 0)], 0).astype(np.uint64)
        else:
            values = col.cast(pa.float64())
            v = hash_array(values.to_numpy(zero_copy_only=False))
            v[pc.is_null(values).to_numpy(zero_copy_only=False)] = 0
        with np.errstate(over="ignore"):
            h += v * k
    return pa.array(h.view(np.int64), type=pa.int64())


def _localities_table(sid: str, blocks: dict[str, dict[str, Any]]) -> pa.Table:
    import pyarrow as pa
    from strata13.schemas.records import arrow_schema

    rows = [{"source_id": sid, "locality_id": k, "name": b.get("name"), "lat": b["lat"],
             "lon": b["lon"], "precision_km": b.get("precision_km"),
             "aliases": "|".join(b.get("aliases", []) or []), "note": b.get("note")}
            for k, b in sorted(blocks.items())]
    return pa.Table.from_pylist(rows, schema=arrow_schema(LOCALITIES))


def _sections_table(sid: str, blocks: dict[str, dict[str, Any]], sec: Any, loc: Any) -> pa.Table:
    import pandas as pd
    import pyarrow as pa
    from strata13.schemas.records import arrow_schema

    pairs = pd.DataFrame({"s": pd.Series(sec, dtype=object), "l": pd.Series(loc, dtype=object)})
    pairs = pairs[pairs.s.notna()].drop_duplicates("s")
    first_loc = {str(k): v for k, v in zip(pairs.s, pairs.l, strict=True)}
    ids = sorted(set(first_loc) | set(blocks))
    rows = []
    for s in ids:
        b = blocks.get(s, {})
        rows.append({"source_id": sid, "section_id": s,
                     "locality_id": b.get("locality") or first_loc.get(s),
                     "name": b.get("name"), "datum": b.get("datum"),
                     "position_kind": b.get("position_kind"),
                     "datum_offset_m": b.get("datum_offset_m"),
                     "offset_from": b.get("offset_from"), "offset_source": b.get("offset_source"),
                     "note": b.get("note")})
    return pa.Table.from_pylist(rows, schema=arrow_schema(SECTIONS))


def _samples_table(records: pa.Table) -> pa.Table:
    """One row per sample (replicates folded), grouped by DuckDB."""
    import duckdb
    from strata13.schemas.records import arrow_schema

    con = duckdb.connect()
    try:
        con.register("r", records.select([c for c, _ in SAMPLES]))
        t = con.execute("SELECT source_id, section_id, sample_id, min(position_m), min(top_m), "
                        "max(base_m), min(lithostrat_unit) FROM r GROUP BY ALL "
                        "ORDER BY section_id, sample_id").to_arrow_table()
    finally:
        con.close()
    return t.rename_columns([c for c, _ in SAMPLES]).cast(arrow_schema(SAMPLES))
