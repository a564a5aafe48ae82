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

from strata13.compile.check.checks import (
    RowErrors,
    interval_order,
    plausibility,
    schema_check,
    superposition,
)
from strata13.compile.check.report import Issue, Report
from strata13.compile.check.tables import (
    complete,
    const,
    localities_table,
    record_ids,
    row_hashes,
    samples_table,
    sections_table,
    to_arrow,
)
from strata13.compile.read.cleaning import CellContext, parse_coordinate, parse_numbers
from strata13.compile.read.mapping import ColumnMap, Mapping, TableSpec
from strata13.compile.read.readers import RawTable, norm_header, read_table, strip_unit
from strata13.schemas.fields import (
    BASIS_KEYS,
    BY_NAME,
    DELTA_FIELDS,
    DELTA_SCALES,
    SCALE_KEYS,
    UNITS,
)
from strata13.schemas.records import ANALYSES
from strata13.schemas.vocabularies import vocabulary

from strata13.errors import ConfigError
from strata13.suggest import did_you_mean

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
    runs: pa.Table | None = None  # in-house runs: the reference-material measurements

    @property
    def ok(self) -> bool:
        return not self.report.errors


def prepare_ties_only(mapping: Mapping) -> Prepared:
    """A source that holds only age ties: no sheet, no records, an empty report."""
    from strata13.schemas.records import ANALYSES, LOCALITIES, SAMPLES, SECTIONS, arrow_schema

    def empty(cols: list[tuple[str, str]]) -> pa.Table:
        return arrow_schema(cols).empty_table()

    return Prepared(
        mapping,
        mapping.sha256,
        empty(ANALYSES),
        empty(LOCALITIES),
        empty(SECTIONS),
        empty(SAMPLES),
        [],
    )


def _file_sha(path: Any) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _match_columns(
    raw: RawTable, spec: TableSpec, report: Report
) -> dict[str, tuple[int, str | None]]:
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
        hits = [(j, None) for j in exact.get(key, [])] or bare.get(
            norm_header(strip_unit(c.header)[0]), []
        )
        if len(hits) > 1:
            cells = " and ".join(f"{raw.letters[j]}{raw.header_row}" for j, _ in hits)
            raise ConfigError(
                f"{raw.file} ({raw.sheet}): the mapped column {c.header!r} matches "
                f"more than one header ({cells}).",
                "Give the columns distinct headers in the sheet, or map the "
                "exact header text including its unit.",
            )
        if hits:
            out[c.header] = hits[0]
        else:
            missing.append(c.header)
    taken: dict[int, str] = {}
    for header, (j, _) in out.items():
        if j in taken:
            raise ConfigError(
                f"{spec.file.name}: mapping keys {taken[j]!r} and {header!r} both "
                f"name column {raw.letters[j]} ({raw.headers[j]!r}).",
                "Map each sheet column once.",
            )
        taken[j] = header
    if missing:
        raise ConfigError(
            f"{raw.file} ({raw.sheet}): column {missing[0]!r} of the mapping is not in the header "
            f"row {raw.header_row}." + did_you_mean(missing[0], raw.headers, cutoff=0.5),
            f"Header cells found: {', '.join(h for h in raw.headers if h)}. Set header_row "
            "in [table] if the header is elsewhere.",
        )
    return out


def _unit_for(
    c: ColumnMap, header_unit: str | None, raw: RawTable, letter: str, report: Report
) -> str | None:
    f = BY_NAME.get(c.field)
    if f is None or f.unit_kind is None:
        return None
    units = UNITS[f.unit_kind]
    if c.unit:
        if header_unit and header_unit in units and header_unit != c.unit:
            report.add(
                Issue(
                    "warning",
                    raw.sheet,
                    f"{letter}{raw.header_row}",
                    c.header,
                    header_unit,
                    "unit conflict",
                    f"the header says {header_unit} but the mapping says {c.unit}; "
                    f"the mapping's {c.unit} is used",
                )
            )
        return c.unit
    if header_unit:
        hu = header_unit.replace(" ", "")
        for u in units:
            if hu.lower() == u.lower().replace(" ", ""):
                report.add(
                    Issue(
                        "info",
                        raw.sheet,
                        f"{letter}{raw.header_row}",
                        c.header,
                        u,
                        "unit from header",
                        f"unit {u} taken from the header",
                    )
                )
                return u
    if f.unit_kind == "length":
        report.add(
            Issue(
                "warning",
                raw.sheet,
                f"{letter}{raw.header_row}",
                c.header,
                "",
                "unit not stated",
                "no unit for this length column; metres assumed — "
                'set unit = "m", "cm" or "ft" in the mapping',
            )
        )
    return f.stored_unit


def prepare(mapping: Mapping, progress: Any = None) -> Prepared:
    """Read, clean, map and validate one mapping's sheet. Never writes anything."""
    import numpy as np
    import pandas as pd
    import pyarrow as pa
    import pyarrow.compute as pc

    spec = mapping.table
    raw = read_table(
        spec.file,
        spec.sheet,
        spec.header_row,
        [c.header for c in spec.columns],
        spec.delimiter,
        spec.encoding,
    )
    report = Report()
    report.extend(raw.issues)
    report.rows_read = raw.n_rows + raw.blank_rows + raw.rejected_rows
    report.rows_blank = raw.blank_rows
    rows = RowErrors(raw, report)
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
                    report.add(
                        Issue(
                            "info",
                            raw.sheet,
                            f"{letter}{raw.header_row}",
                            header,
                            unit,
                            "unit conversion",
                            f"{unit} converted to {f.stored_unit} (× {factor:g})",
                        )
                    )
            if f.kind == "int":
                arr = values.to_numpy(zero_copy_only=False)
                frac = ~np.isnan(arr) & (np.floor(arr) != arr)
                for i in np.nonzero(frac)[0]:
                    rows.error(
                        int(i),
                        letter,
                        header,
                        raw.column(j)[int(i)].as_py(),
                        "whole number",
                        "this column takes whole numbers",
                    )
                cols[f.stored] = values
            else:
                cols[f.stored] = values
            if f.kind == "conc":
                q = parsed.qualifier
                cols[f"{target}_qualifier"] = q
                if c.detection_limit is not None:
                    is_bdl = pc.fill_null(pc.equal(q, "bdl"), False)
                    cols[f"{target}_dl"] = pc.if_else(
                        is_bdl, pa.scalar(c.detection_limit), pa.scalar(None, pa.float64())
                    )
                if c.basis:
                    cols[f"{target}_basis"] = c.basis
            elif parsed.qualifier.null_count < len(parsed.qualifier):
                idx = np.nonzero(pc.is_valid(parsed.qualifier).to_numpy(zero_copy_only=False))[0]
                for i in idx:
                    rows.error(
                        int(i),
                        letter,
                        header,
                        raw.column(j)[int(i)].as_py(),
                        "censored value",
                        f"{target} takes plain numbers; "
                        "'<x' and 'bdl' belong to concentration columns",
                    )
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
                raise ConfigError(
                    f"{mapping.path.name}: [constants] {key} = {value!r} is not in "
                    f"the {f.vocab} vocabulary." + (f" Did you mean {sug!r}?" if sug else ""),
                    f"Known terms: {', '.join(vocabulary(f.vocab or '').terms)}.",
                )
            value = term
        if (
            f
            and f.kind in ("float", "delta", "conc", "int", "coord")
            and not isinstance(value, (int, float))
        ):
            if f.kind == "coord":
                try:
                    value = parse_coordinate(str(value), key)
                except ValueError as exc:
                    raise ConfigError(
                        f"{mapping.path.name}: [constants] {key}: {exc}.", ""
                    ) from None
            else:
                raise ConfigError(f"{mapping.path.name}: [constants] {key} must be a number.", "")
        cols[stored] = value
        letters.setdefault(stored, ("", f"[constants] {key}"))

    for d, declared in mapping.normalisation.items():  # constant per source, kept per value
        cols[f"{d}_normalisation"] = json.dumps(declared, sort_keys=True)

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
            rows.error(
                int(i),
                letter_sec,
                header_sec,
                "",
                "section missing",
                "every row needs a section; fill the cell",
            )
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
            raise ConfigError(
                f"{mapping.path.name}: section {s_id!r} names locality "
                f"{block['locality']!r}, which is not defined.",
                "Add a [[localities]] block or a [localities_table].",
            )

    sample = column("sample_id")
    letter_s, header_s = letters.get("sample_id", ("", "sample_id"))
    if "sample_id" not in cols:
        raise ConfigError(
            f"{mapping.path.name}: no column is mapped to sample_id.",
            "Every record needs a sample identifier.",
        )
    for i in np.nonzero(np.array([v is None for v in sample], dtype=bool))[0]:
        rows.error(
            int(i),
            letter_s,
            header_s,
            "",
            "sample missing",
            "every row needs a sample id; fill it or delete the row",
        )

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
        hint = (
            f'state the reference scale of {d}: scale = "VPDB" on the column or '
            f"{d}_scale in [constants]"
        )
        missing = np.nonzero(no_scale)[0]
        if len(missing) and f"{d}_scale" not in cols:  # the whole column lacks a scale: one line
            first, last = (int(raw.row_numbers[missing[0]]), int(raw.row_numbers[missing[-1]]))
            report.add(
                Issue(
                    "error",
                    raw.sheet,
                    f"{letter}{first}:{letter}{last}",
                    header,
                    f"{len(missing)} values",
                    "scale not stated",
                    hint,
                )
            )
            rows.mark(missing, "scale not stated", letter)
        else:
            for i in missing:
                rows.error(int(i), letter, header, vals[i], "scale not stated", hint)
        for i in np.nonzero(unknown)[0]:
            rows.error(
                int(i),
                letter,
                header,
                scale[i],
                "unknown scale",
                f"scales for {d}: {', '.join(DELTA_SCALES[d])}",
            )

    interval_order(cols, column, rows, letters, section_blocks, sec)

    def text(name: str, fallback: Any) -> Any:
        v = cols.get(name)
        return v if isinstance(v, (pa.Array, pa.ChunkedArray)) else fallback

    ids, first = record_ids(sid, text("section_id", sec), text("sample_id", sample), replicate)
    standards = (
        {m.lower() for m in [*mapping.run["anchors"], *mapping.run["checks"]]}
        if mapping.run
        else set()
    )  # a run's standards repeat by design; they leave below
    for i in np.flatnonzero(first >= 0):
        if standards and str(sample[i]).strip().lower() in standards:
            continue
        rows.error(
            int(i),
            letter_s,
            header_s,
            sample[i],
            "duplicate record",
            f"section {sec[i]}, sample {sample[i]}, replicate {replicate[i]} is already "
            f"in row {raw.row_numbers[first[i]]}; give replicates a replicate number",
        )

    # assemble the analyses table: Arrow columns pass through, constants are broadcast
    out: dict[str, Any] = {}
    types = {name: t for name, t in ANALYSES}
    for name, _t in ANALYSES:
        if name in ("lat", "lon"):
            out[name] = lat if name == "lat" else lon
        elif name in ("section_id", "locality_id") and not isinstance(
            cols.get(name), (pa.Array, pa.ChunkedArray)
        ):
            out[name] = sec if name == "section_id" else loc
        elif name in cols:
            v = cols[name]
            out[name] = (
                v
                if isinstance(v, (pa.Array, pa.ChunkedArray, np.ndarray))
                else const(v, n, types[name])
            )
    out["record_id"] = ids
    out["source_id"] = const(sid, n, "VARCHAR")
    plates = {str(b["id"]): b.get("plate") for b in mapping.localities if b.get("plate")}
    if plates:  # the mapping places these localities on a plate (displaced terranes)
        out["plate_override"] = np.array(
            [plates.get(str(x)) if x is not None else None for x in loc], dtype=object
        )
    out["replicate"] = replicate
    out["sheet"] = const(raw.sheet, n, "VARCHAR")
    out["sheet_row"] = raw.row_numbers
    if "position_kind" not in cols:
        kinds = {k: v.get("position_kind") for k, v in section_blocks.items()}
        if len(set(kinds.values())) <= 1:
            out["position_kind"] = const(next(iter(kinds.values()), None), n, "VARCHAR")
        else:
            out["position_kind"] = pd.Series(sec, dtype=object).map(kinds).to_numpy()
    for name in list(out):
        out[name] = to_arrow(out[name], types[name], n)
    frame = pa.table(out)

    col_index = {letter: j for j, letter in enumerate(raw.letters)}

    def raw_text(stored: str, i: int) -> str | None:
        """The cell as the sheet wrote it, for report lines about parsed values."""
        letter = letters.get(stored, ("", ""))[0]
        j = col_index.get(letter)
        return raw.column(j)[i].as_py() if j is not None else None

    schema_check(frame, rows, letters, raw_text)
    superposition(frame, rows, letters)
    plausibility(frame, raw, report, letters)

    valid = ~rows.bad
    report.rows_valid = int(valid.sum())
    report.rows_rejected = int(rows.bad.sum()) + raw.rejected_rows
    quarantine = []
    for i in np.nonzero(rows.bad)[0]:
        cells = {raw.headers[j]: raw.column(j)[int(i)].as_py() for j in range(len(raw.headers))}
        quarantine.append(
            {
                "sheet": raw.sheet,
                "sheet_row": int(raw.row_numbers[i]),
                "cells_json": json.dumps(cells, ensure_ascii=False),
                "reasons": "; ".join(rows.reasons.get(int(i), [])),
            }
        )
    for issue in raw.issues:  # rows the reader could not split: quarantined with their text
        if issue.rule == "row shape":
            digits = "".join(ch for ch in issue.cell if ch.isdigit())
            quarantine.append(
                {
                    "sheet": raw.sheet,
                    "sheet_row": int(digits) if digits else None,
                    "cells_json": json.dumps({"line": issue.value}, ensure_ascii=False),
                    "reasons": f"{issue.cell}: row shape",
                }
            )
    records = complete(frame if valid.all() else frame.filter(pa.array(valid)))
    records = (
        records.append_column("row_hash", row_hashes(records))
        if "row_hash" not in records.column_names
        else records
    )
    runs = None
    if mapping.run is not None:
        records, runs = _split_run(records, mapping, report)
    return Prepared(
        mapping,
        _file_sha(spec.file),
        records,
        localities_table(sid, locality_blocks),
        sections_table(sid, section_blocks, sec, loc),
        samples_table(records),
        quarantine,
        report,
        runs,
    )


def _split_run(records: pa.Table, mapping: Mapping, report: Report) -> tuple[pa.Table, pa.Table]:
    """An in-house run sheet: rows whose sample_id names one of the run's reference
    materials are its standards (kept in the runs table), the rest are samples."""
    import pyarrow as pa
    import pyarrow.compute as pc
    from strata13.schemas.records import RUNS, arrow_schema

    run = mapping.run or {}
    names = {m.lower(): m for m in [*run["anchors"], *run["checks"]]}
    sample = pc.utf8_lower(pc.utf8_trim_whitespace(records.column("sample_id")))
    is_std = pc.fill_null(pc.is_in(sample, value_set=pa.array(list(names))), False)
    std = records.filter(is_std)
    rows = [
        {
            "source_id": r["source_id"],
            "run_id": r["run_id"],
            "material": names[str(r["sample_id"]).strip().lower()],
            "d13c_measured": r["d13c_carb_reported"],
            "d18o_measured": r["d18o_carb_reported"],
            "note": r["note"],
            "run_position": r["run_position"],
            "sheet_row": r["sheet_row"],
        }
        for r in std.select(
            [
                "source_id",
                "run_id",
                "sample_id",
                "d13c_carb_reported",
                "d18o_carb_reported",
                "note",
                "run_position",
                "sheet_row",
            ]
        ).to_pylist()
    ]
    report.add(
        Issue(
            "info",
            "",
            "",
            "",
            str(len(rows)),
            "in-house run",
            f"{len(rows)} reference-material measurements kept as run standards; "
            f"{records.num_rows - len(rows)} samples",
        )
    )
    return records.filter(pc.invert(is_std)), pa.Table.from_pylist(rows, schema=arrow_schema(RUNS))


def _text_column(
    cols: dict[str, Any],
    letters: dict[str, tuple[str, str]],
    stored: str,
    text: pa.ChunkedArray,
    letter: str,
    header: str,
) -> None:
    import pyarrow as pa
    import pyarrow.compute as pc

    t = pc.utf8_trim_whitespace(text.combine_chunks())
    cols[stored] = pc.if_else(pc.equal(t, ""), pa.scalar(None, pa.string()), t)
    letters[stored] = (letter, header)


def _vocab_column(
    text: pa.ChunkedArray, vocab: str, rows: RowErrors, letter: str, header: str
) -> Any:
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
            rows.error(
                int(i),
                letter,
                header,
                v,
                f"{vocab} vocabulary",
                (f"did you mean {sug!r}? " if sug else "") + f"known terms: {', '.join(voc.terms)}",
            )
    return out


def _coord_column(
    text: pa.ChunkedArray, axis: str, rows: RowErrors, letter: str, header: str
) -> Any:
    """Decimal degrees: plain numbers cast at once, DMS and hemisphere letters cell by cell."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc
    from strata13.compile.read.cleaning import NUMBER_PATTERN

    col = pc.utf8_trim_whitespace(text.combine_chunks().cast(pa.string()))
    plain = pc.fill_null(pc.match_substring_regex(col, NUMBER_PATTERN), False)
    out = pc.cast(pc.if_else(plain, col, pa.scalar(None, pa.string())), pa.float64())
    out = out.to_numpy(zero_copy_only=False).astype(float, copy=True)
    rest = ~plain.to_numpy(zero_copy_only=False) & pc.fill_null(
        pc.not_equal(col, ""), False
    ).to_numpy(zero_copy_only=False)
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
                raise ConfigError(
                    f"{mapping.path.name}: locality {b['id']!r} {axis} {block[axis]!r}: {exc}.", ""
                ) from None
        _check_range(b, mapping)
        out[str(b["id"])] = b
    spec = mapping.localities_table
    if spec is not None:
        raw = read_table(
            spec.file,
            spec.sheet,
            spec.header_row,
            [c.header for c in spec.columns],
            spec.delimiter,
            spec.encoding,
        )
        found = _match_columns(raw, spec, report)
        by_field = {c.field: raw.column(found[c.header][0]).to_pylist() for c in spec.columns}
        for k in ("locality_id", "lat", "lon"):
            if k not in by_field:
                raise ConfigError(
                    f"{mapping.path.name}: [localities_table] needs a column for {k}.", ""
                )
        for i, lid in enumerate(by_field["locality_id"]):
            if not lid:
                continue
            try:
                b = {
                    "id": lid,
                    "name": (by_field.get("locality_name") or [None] * (i + 1))[i],
                    "lat": parse_coordinate(str(by_field["lat"][i]), "lat"),
                    "lon": parse_coordinate(str(by_field["lon"][i]), "lon"),
                }
            except ValueError as exc:
                raise ConfigError(
                    f"{raw.file} ({raw.sheet}) row {raw.row_numbers[i]}: locality {lid!r}: {exc}.",
                    "Fix the coordinate in the localities sheet.",
                ) from None
            _check_range(b, mapping)
            out[str(lid)] = b
    return out


def _check_range(b: dict[str, Any], mapping: Mapping) -> None:
    if not -90 <= b["lat"] <= 90 or not -180 <= b["lon"] <= 360:
        raise ConfigError(
            f"{mapping.path.name}: locality {b['id']!r} has coordinates out of "
            f"range ({b['lat']}, {b['lon']}).",
            "Latitude −90…90, longitude −180…180; check for swapped lat/lon.",
        )
    if b["lon"] > 180:
        b["lon"] -= 360
