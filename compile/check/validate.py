"""Validate: a mapping plus its sheet -> reported records, hierarchy tables and a report.

Everything is checked at once and reported by cell: cleaning problems, vocabularies with
"did you mean", a stated scale for every δ value, required ids, unique record ids, the
pandera schema (types and named plausible ranges), superposition against reported ages,
and plausibility warnings (swapped δ13C/δ18O columns, unit slips). Nothing is written.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, overload

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
    quarantine: Sequence[dict[str, Any]]
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
        hits = [(j, strip_unit(raw.headers[j])[1]) for j in exact.get(key, [])] or bare.get(
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


@dataclass
class _Preparing:
    """One sheet on its way through prepare: what the stages have read, cleaned and checked.

    The fields from ``found`` on are filled by the stages in the order prepare calls them.
    """

    mapping: Mapping
    spec: TableSpec  # the mapping's [table], which a sheet-less (ties-only) mapping lacks
    raw: RawTable
    report: Report
    rows: RowErrors
    # stored column -> numpy or Arrow array a row, or one constant for the whole sheet
    cols: dict[str, Any] = field(default_factory=dict)
    letters: dict[str, tuple[str, str]] = field(default_factory=dict)  # -> (letter, header)
    quarantine: Sequence[dict[str, Any]] = field(default_factory=list)
    runs: pa.Table | None = None  # an in-house run's reference-material measurements
    found: dict[str, tuple[int, str | None]] = field(init=False)  # header -> (column, unit)
    section_blocks: dict[str, dict[str, Any]] = field(init=False)
    locality_blocks: dict[str, dict[str, Any]] = field(init=False)
    sec: np.ndarray = field(init=False)  # section id of each row
    loc: np.ndarray = field(init=False)  # locality id of each row
    lat: np.ndarray = field(init=False)
    lon: np.ndarray = field(init=False)
    sample: np.ndarray = field(init=False)
    sample_cell: tuple[str, str] = field(init=False)  # (letter, header) of sample_id
    replicate: np.ndarray = field(init=False)
    replicate_keys: np.ndarray | None = None  # an in-house run's: run and position (record id)
    ids: pa.Array = field(init=False)  # record id of each row
    frame: pa.Table = field(init=False)  # every row, analyses columns
    records: pa.Table = field(init=False)  # the valid rows, completed and hashed

    @property
    def n(self) -> int:
        return self.raw.n_rows

    def column(self, name: str) -> np.ndarray:
        """A stored column as a numpy array of one value a row, whatever form it is kept in."""
        import numpy as np
        import pyarrow as pa

        v = self.cols.get(name)
        if v is None:
            return np.empty(self.n, dtype=object)  # all None
        if isinstance(v, (pa.Array, pa.ChunkedArray)):
            values: np.ndarray = v.to_numpy(zero_copy_only=False)
            return values
        if isinstance(v, np.ndarray):
            return v
        return np.full(self.n, v, dtype=object)

    def arrow_or(self, name: str, fallback: Any) -> Any:
        """The stored column when the sheet gave it (as Arrow), else ``fallback``."""
        import pyarrow as pa

        v = self.cols.get(name)
        return v if isinstance(v, (pa.Array, pa.ChunkedArray)) else fallback


def prepare(mapping: Mapping, progress: Any = None) -> Prepared:
    """Read, clean, map and validate one mapping's sheet. Never writes anything."""
    st = _read_sheet(mapping)
    _read_mapped_columns(st)
    _apply_constants(st)
    _attach_normalisation(st)
    _place_sections(st)
    _place_localities(st)
    _check_samples(st)
    _read_replicates(st)
    _check_delta_scales(st)
    interval_order(st.cols, st.column, st.rows, st.letters, st.section_blocks, st.sec)
    _check_duplicate_records(st)
    _assemble_frame(st)
    _check_frame(st)
    _quarantine_bad_rows(st)
    _keep_valid_records(st)
    sid = mapping.source_id
    return Prepared(
        mapping,
        _file_sha(st.spec.file),
        st.records,
        localities_table(sid, st.locality_blocks),
        sections_table(sid, st.section_blocks, st.sec, st.loc),
        samples_table(st.records),
        st.quarantine,
        st.report,
        st.runs,
    )


def _read_sheet(mapping: Mapping) -> _Preparing:
    """The sheet's cells, the reader's findings and the mapped headers matched: the start."""
    spec = mapping.table
    if spec is None:
        raise ValueError(
            f"{mapping.path.name} maps no sheet; prepare_ties_only is for ties-only mappings."
        )
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
    st = _Preparing(mapping, spec, raw, report, RowErrors(raw, report))
    _reject_reader_errors(st)
    st.found = _match_columns(raw, spec, report)
    return st


def _reject_reader_errors(st: _Preparing) -> None:
    """A reader error on a data cell rejects that row: its value cannot be trusted."""
    import numpy as np

    for issue in st.raw.issues:
        digits = "".join(ch for ch in issue.cell if ch.isdigit())
        if issue.severity == "error" and digits:
            hit = np.flatnonzero(st.raw.row_numbers == int(digits))
            for i in hit:
                st.rows.bad[i] = True
                st.rows.reasons.setdefault(int(i), []).append(f"{issue.cell}: {issue.rule}")


def _read_mapped_columns(st: _Preparing) -> None:
    """Each mapped column cleaned as its field's kind says, into the column it is stored as."""
    for c in st.spec.columns:
        j, header_unit = st.found[c.header]
        letter, header = st.raw.letters[j], st.raw.headers[j]
        text = st.raw.column(j)
        if c.field in SCALE_KEYS or c.field in BASIS_KEYS:
            _text_column(st.cols, st.letters, c.field, text, letter, header)
            continue
        f = BY_NAME[c.field]  # load_mapping admits known fields only
        st.letters[f.stored] = (letter, header)
        if f.kind in ("text",):
            _text_column(st.cols, st.letters, f.stored, text, letter, header)
        elif f.kind == "vocab":
            st.cols[f.stored] = _vocab_column(text, f.vocab or "", st.rows, letter, header)
        elif f.kind == "coord":
            st.cols[f.stored] = _coord_column(text, c.field, st.rows, letter, header)
        else:
            _number_column(st, c, j, header_unit)


def _number_column(st: _Preparing, c: ColumnMap, j: int, header_unit: str | None) -> None:
    """A numeric column: parsed, in its stored unit, with its qualifiers and δ scale."""
    import numpy as np

    raw, f = st.raw, BY_NAME[c.field]
    letter, header = raw.letters[j], raw.headers[j]
    ctx = CellContext(raw.sheet, header, letter, raw.row_numbers)
    parsed = parse_numbers(raw.column(j), ctx, st.spec.decimal)
    st.report.extend(parsed.issues)
    rules = {i.cell: i.rule for i in parsed.issues if i.severity == "error"}
    for i in np.nonzero(parsed.bad)[0]:
        cell = f"{letter}{int(raw.row_numbers[i])}"
        st.rows.mark(np.array([i]), rules.get(cell, "not a number"), letter)
    unit = _unit_for(c, header_unit, raw, letter, st.report)
    values = _in_stored_unit(st, parsed.values, c, unit, j)
    if f.kind == "int":
        _check_whole_numbers(st, values, j)
    st.cols[f.stored] = values
    if f.kind == "conc":
        factor = UNITS[f.unit_kind][unit] if f.unit_kind and unit else 1.0
        _concentration_columns(st, c, parsed.qualifier, factor)
    elif parsed.qualifier.null_count < len(parsed.qualifier):
        _refuse_censored(st, c, j, parsed.qualifier)
    if f.kind == "delta" and c.scale:
        st.cols[f"{c.field}_scale"] = c.scale


def _in_stored_unit(st: _Preparing, values: Any, c: ColumnMap, unit: str | None, j: int) -> Any:
    """Values converted to the field's stored unit; the report says when a factor applied."""
    import pyarrow as pa
    import pyarrow.compute as pc

    f = BY_NAME[c.field]
    if not unit or not f.unit_kind:
        return values
    factor = UNITS[f.unit_kind][unit]
    if factor == 1.0:
        return values
    converted = pc.multiply(values, pa.scalar(factor))
    raw = st.raw
    st.report.add(
        Issue(
            "info",
            raw.sheet,
            f"{raw.letters[j]}{raw.header_row}",
            raw.headers[j],
            unit,
            "unit conversion",
            f"{unit} converted to {f.stored_unit} (× {factor:g})",
        )
    )
    return converted


def _check_whole_numbers(st: _Preparing, values: Any, j: int) -> None:
    """A whole-number field refuses fractions rather than rounding them."""
    import numpy as np

    raw = st.raw
    arr = values.to_numpy(zero_copy_only=False)
    frac = ~np.isnan(arr) & (np.floor(arr) != arr)
    for i in np.nonzero(frac)[0]:
        st.rows.error(
            int(i),
            raw.letters[j],
            raw.headers[j],
            raw.column(j)[int(i)].as_py(),
            "whole number",
            "this column takes whole numbers",
        )


def _concentration_columns(st: _Preparing, c: ColumnMap, qualifier: Any, factor: float) -> None:
    """A concentration keeps its qualifier, detection limit and basis beside it. A censored
    value is stored one way whatever its spelling: "<5" and "bdl" with a stated detection
    limit of 5 both become value 5, qualifier "<", detection limit 5 (in the stored unit);
    "bdl" with no limit stated stays "bdl" with no value (its bound is unknown)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    f = BY_NAME[c.field]
    values = st.cols[f.stored]
    if c.detection_limit is not None:
        is_bdl = pc.fill_null(pc.equal(qualifier, "bdl"), False)
        limit = pa.scalar(c.detection_limit * factor, pa.float64())
        values = pc.if_else(is_bdl, limit, pc.cast(values, pa.float64()))
        qualifier = pc.if_else(is_bdl, pa.scalar("<"), qualifier)
        st.cols[f.stored] = values
    below = pc.fill_null(pc.equal(qualifier, "<"), False)
    st.cols[f"{c.field}_qualifier"] = qualifier
    st.cols[f"{c.field}_dl"] = pc.if_else(
        below, pc.cast(values, pa.float64()), pa.scalar(None, pa.float64())
    )
    if c.basis:
        st.cols[f"{c.field}_basis"] = c.basis


def _refuse_censored(st: _Preparing, c: ColumnMap, j: int, qualifier: Any) -> None:
    """'<x' and 'bdl' have a meaning only in concentration columns; elsewhere they are errors."""
    import numpy as np
    import pyarrow.compute as pc

    raw = st.raw
    idx = np.nonzero(pc.is_valid(qualifier).to_numpy(zero_copy_only=False))[0]
    for i in idx:
        st.rows.error(
            int(i),
            raw.letters[j],
            raw.headers[j],
            raw.column(j)[int(i)].as_py(),
            "censored value",
            f"{c.field} takes plain numbers; '<x' and 'bdl' belong to concentration columns",
        )


def _apply_constants(st: _Preparing) -> None:
    """[constants] fill whole columns (load_mapping forbids a field as column and constant)."""
    for key, value in st.mapping.constants.items():
        f = BY_NAME.get(key)
        stored = f.stored if f else key
        st.cols[stored] = _constant_value(st.mapping, key, value)
        st.letters.setdefault(stored, ("", f"[constants] {key}"))


def _constant_value(mapping: Mapping, key: str, value: Any) -> Any:
    """A constant as it is stored: a vocabulary term, a number or decimal degrees."""
    f = BY_NAME.get(key)
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
        if f.kind != "coord":
            raise ConfigError(f"{mapping.path.name}: [constants] {key} must be a number.", "")
        try:
            value = parse_coordinate(str(value), key)
        except ValueError as exc:
            raise ConfigError(f"{mapping.path.name}: [constants] {key}: {exc}.", "") from None
    return value


def _attach_normalisation(st: _Preparing) -> None:
    """The declared normalisation, constant per source, kept beside every δ value."""
    for d, declared in st.mapping.normalisation.items():
        st.cols[f"{d}_normalisation"] = json.dumps(declared, sort_keys=True)


def _place_sections(st: _Preparing) -> None:
    """Every row's section: its own cell (which must be filled) or the one [[sections]]."""
    import numpy as np
    import pandas as pd

    st.section_blocks = {str(s["id"]): s for s in st.mapping.sections}
    if "section_id" not in st.cols:
        # load_mapping guarantees exactly one [[sections]] block in this case
        st.sec = np.full(st.n, next(iter(st.section_blocks)), dtype=object)
        return
    st.sec = st.column("section_id")
    letter, header = st.letters.get("section_id", ("", "section_id"))
    for i in np.flatnonzero(pd.isna(pd.Series(st.sec, dtype=object)).to_numpy()):
        st.rows.error(
            int(i),
            letter,
            header,
            "",
            "section missing",
            "every row needs a section; fill the cell",
        )


def _place_localities(st: _Preparing) -> None:
    """Every row's locality and coordinates, from its own cells or else its section's."""
    st.locality_blocks = _localities(st.mapping, st.report)
    st.loc = _locality_ids(st)
    st.lat, st.lon = _coordinates(st)
    for s_id, block in st.section_blocks.items():
        if block.get("locality") and block["locality"] not in st.locality_blocks:
            raise ConfigError(
                f"{st.mapping.path.name}: section {s_id!r} names locality "
                f"{block['locality']!r}, which is not defined.",
                "Add a [[localities]] block or a [localities_table].",
            )


def _locality_ids(st: _Preparing) -> np.ndarray:
    """A row's locality cell, else its section's locality, else the only locality there is."""
    import pandas as pd

    if "locality_id" in st.cols:
        return st.column("locality_id")
    sec_loc = {k: v.get("locality") for k, v in st.section_blocks.items()}
    loc_s = pd.Series(st.sec, dtype=object).map(sec_loc).astype(object)
    if len(st.locality_blocks) == 1:
        loc_s = loc_s.fillna(next(iter(st.locality_blocks)))
    loc: np.ndarray = loc_s.astype(object).where(loc_s.notna(), None).to_numpy()
    return loc


def _coordinates(st: _Preparing) -> tuple[np.ndarray, np.ndarray]:
    """Latitude and longitude: the row's own, else its locality's (vectorised through pandas)."""
    import numpy as np
    import pandas as pd

    lat = pd.to_numeric(pd.Series(st.column("lat")), errors="coerce").to_numpy(
        dtype=float, copy=True
    )
    lon = pd.to_numeric(pd.Series(st.column("lon")), errors="coerce").to_numpy(
        dtype=float, copy=True
    )
    loc_series = pd.Series(st.loc, dtype=object)
    block_lat = loc_series.map({k: b["lat"] for k, b in st.locality_blocks.items()})
    block_lon = loc_series.map({k: b["lon"] for k, b in st.locality_blocks.items()})
    fill = np.isnan(lat) & block_lat.notna().to_numpy()
    lat[fill] = block_lat.to_numpy(dtype=float, na_value=np.nan)[fill]
    lon[fill] = block_lon.to_numpy(dtype=float, na_value=np.nan)[fill]
    return lat, np.where(lon > 180, lon - 360, lon)


def _check_samples(st: _Preparing) -> None:
    """Every record needs a sample id: the mapping must map one and every row must fill it."""
    import numpy as np

    st.sample = st.column("sample_id")
    st.sample_cell = st.letters.get("sample_id", ("", "sample_id"))
    if "sample_id" not in st.cols:
        raise ConfigError(
            f"{st.mapping.path.name}: no column is mapped to sample_id.",
            "Every record needs a sample identifier.",
        )
    letter, header = st.sample_cell
    for i in np.nonzero(np.array([v is None for v in st.sample], dtype=bool))[0]:
        st.rows.error(
            int(i),
            letter,
            header,
            "",
            "sample missing",
            "every row needs a sample id; fill it or delete the row",
        )


def _read_replicates(st: _Preparing) -> None:
    """The replicate number of each row (1 when not given), part of its record id."""
    import numpy as np
    import pandas as pd

    rep = pd.to_numeric(pd.Series(st.column("replicate")), errors="coerce").to_numpy(dtype=float)
    st.replicate = np.where(np.isnan(rep), 1, np.nan_to_num(rep)).astype(np.int64)
    if st.mapping.run is not None and "replicate" not in st.cols:
        _run_replicates(st)


def _run_replicates(st: _Preparing) -> None:
    """An in-house run sheet without a replicate column: a sample measured again (in
    another run or at another position) is another analysis of that sample, not a
    duplicate. Its replicate number counts the sample's analyses in order of run and run
    position; its record id is keyed by run and position instead of that number, so an
    analysis keeps its id (and a stored correction stays with it) when runs are added."""
    import numpy as np
    import pandas as pd
    from strata13.compile.check.tables import run_key

    run = [None if r is None else str(r) for r in st.column("run_id")]
    pos = pd.to_numeric(pd.Series(st.column("run_position")), errors="coerce").to_numpy(dtype=float)
    st.replicate_keys = np.array([run_key(r, p) for r, p in zip(run, pos, strict=True)])
    frame = pd.DataFrame(
        {"sec": st.sec, "sample": st.sample, "run": [r or "" for r in run], "pos": pos}
    )
    ordered = frame.sort_values(["run", "pos"], kind="stable", na_position="last")
    number = ordered.groupby(["sec", "sample"], dropna=False, sort=False).cumcount() + 1
    st.replicate = number.reindex(frame.index).to_numpy(dtype=np.int64)


def _check_delta_scales(st: _Preparing) -> None:
    """Every δ value needs its reference scale: without one it cannot be compared."""
    for d in DELTA_FIELDS:
        if BY_NAME[d].stored in st.cols:
            _check_delta_scale(st, d)


def _check_delta_scale(st: _Preparing, d: str) -> None:
    """One δ column: one report line when the whole column lacks a scale, else cell by cell."""
    import numpy as np
    import pandas as pd

    raw, rows = st.raw, st.rows
    stored = BY_NAME[d].stored
    vals = st.column(stored).astype(float)
    scale = pd.Series(st.column(f"{d}_scale"), dtype=object)
    letter, header = st.letters[stored]
    has = ~np.isnan(vals)
    no_scale = has & scale.isna().to_numpy()
    unknown = has & ~no_scale & ~scale.isin(DELTA_SCALES[d]).to_numpy()
    hint = (
        f'state the reference scale of {d}: scale = "VPDB" on the column or '
        f"{d}_scale in [constants]"
    )
    missing = np.nonzero(no_scale)[0]
    if len(missing) and f"{d}_scale" not in st.cols:  # the whole column lacks a scale
        first, last = (int(raw.row_numbers[missing[0]]), int(raw.row_numbers[missing[-1]]))
        st.report.add(
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


def _check_duplicate_records(st: _Preparing) -> None:
    """Each row's record id; a repeated one is an error, except for a run's standards."""
    import numpy as np

    st.ids, first = record_ids(
        st.mapping.source_id,
        st.arrow_or("section_id", st.sec),
        st.arrow_or("sample_id", st.sample),
        st.replicate,
        st.replicate_keys,
    )
    run = st.mapping.run
    standards = (
        {m.lower() for m in [*run["anchors"], *run["checks"]]} if run else set()
    )  # a run's standards repeat by design; they leave in _keep_valid_records
    repeated = np.flatnonzero(first >= 0)
    if standards:
        keep = [str(st.sample[i]).strip().lower() not in standards for i in repeated]
        repeated = repeated[np.array(keep, dtype=bool)]

    def hint(i: int) -> str:
        first_row = st.raw.row_numbers[first[i]]
        if st.replicate_keys is not None:
            return (
                f"section {st.sec[i]}, sample {st.sample[i]} at {st.replicate_keys[i]} is "
                f"already in row {first_row}; check the run and run_position"
            )
        return (
            f"section {st.sec[i]}, sample {st.sample[i]}, replicate {st.replicate[i]} is "
            f"already in row {first_row}; give replicates a replicate number"
        )

    st.rows.many(repeated, st.sample_cell, st.sample, "duplicate record", hint)


def _assemble_frame(st: _Preparing) -> None:
    """The analyses table of every row, which the checks and the store then read."""
    import pyarrow as pa

    n = st.n
    out = _analyses_columns(st)
    out["record_id"] = st.ids
    out["source_id"] = const(st.mapping.source_id, n, "VARCHAR")
    plates = _plate_overrides(st)
    if plates is not None:
        out["plate_override"] = plates
    out["replicate"] = st.replicate
    out["sheet"] = const(st.raw.sheet, n, "VARCHAR")
    out["sheet_row"] = st.raw.row_numbers
    out["file_name"] = const(st.spec.file.name, st.n, "VARCHAR")
    if "position_kind" not in st.cols:
        out["position_kind"] = _position_kinds(st)
    types = dict(ANALYSES)
    st.frame = pa.table({name: to_arrow(v, types[name], n) for name, v in out.items()})


def _analyses_columns(st: _Preparing) -> dict[str, Any]:
    """The analyses columns the stages filled: arrays pass through, constants are broadcast."""
    import numpy as np
    import pyarrow as pa

    out: dict[str, Any] = {}
    for name, sqltype in ANALYSES:
        if name in ("lat", "lon"):
            out[name] = st.lat if name == "lat" else st.lon
        elif name in ("section_id", "locality_id") and not isinstance(
            st.cols.get(name), (pa.Array, pa.ChunkedArray)
        ):
            out[name] = st.sec if name == "section_id" else st.loc
        elif name == "locality_name" and name not in st.cols and st.locality_blocks:
            names = {k: b.get("name") for k, b in st.locality_blocks.items()}  # the block's
            out[name] = np.array([names.get(str(x)) if x else None for x in st.loc], object)
        elif name in st.cols:
            v = st.cols[name]
            out[name] = (
                v
                if isinstance(v, (pa.Array, pa.ChunkedArray, np.ndarray))
                else const(v, st.n, sqltype)
            )
    return out


def _plate_overrides(st: _Preparing) -> np.ndarray | None:
    """The plate the mapping puts each row's locality on (displaced terranes), if any."""
    import numpy as np

    plates = {str(b["id"]): b.get("plate") for b in st.mapping.localities if b.get("plate")}
    if not plates:
        return None
    return np.array([plates.get(str(x)) if x is not None else None for x in st.loc], dtype=object)


def _position_kinds(st: _Preparing) -> Any:
    """Height or depth of each row, from its section's block when no column gives it."""
    import pandas as pd

    kinds = {k: v.get("position_kind") for k, v in st.section_blocks.items()}
    if len(set(kinds.values())) <= 1:
        return const(next(iter(kinds.values()), None), st.n, "VARCHAR")
    return pd.Series(st.sec, dtype=object).map(kinds).to_numpy()


def _standard_rows(st: _Preparing) -> np.ndarray | None:
    """The rows of an in-house run whose sample id names one of its reference materials."""
    import numpy as np

    run = st.mapping.run
    if run is None:
        return None
    names = {m.lower() for m in [*run["anchors"], *run["checks"]]}
    return np.array([str(s).strip().lower() in names for s in st.sample], dtype=bool)


def _check_frame(st: _Preparing) -> None:
    """The pandera schema, superposition and plausibility, on the assembled table."""
    raw = st.raw
    col_index = {letter: j for j, letter in enumerate(raw.letters)}

    def raw_text(stored: str, i: int) -> str | None:
        """The cell as the sheet wrote it, for report lines about parsed values."""
        letter = st.letters.get(stored, ("", ""))[0]
        j = col_index.get(letter)
        return raw.column(j)[i].as_py() if j is not None else None

    schema_check(st.frame, st.rows, st.letters, raw_text, _standard_rows(st))
    superposition(st.frame, st.rows, st.letters)
    plausibility(st.frame, raw, st.report, st.letters)


def _quarantine_bad_rows(st: _Preparing) -> None:
    """Rejected rows keep their cells and reasons, so that --keep-valid can set them aside.

    The entries are built only when read: a refused sheet (nothing written) never pays for
    them, however many rows it has."""
    import numpy as np

    raw, rows = st.raw, st.rows
    st.report.rows_valid = int((~rows.bad).sum())
    st.report.rows_rejected = int(rows.bad.sum()) + raw.rejected_rows
    bad = np.nonzero(rows.bad)[0]
    unsplit = [i for i in raw.issues if i.rule == "row shape"]
    file_name = st.spec.file.name

    def build() -> list[dict[str, Any]]:
        out = []
        for i in bad:
            cells = {h: raw.column(j)[int(i)].as_py() for j, h in enumerate(raw.headers)}
            out.append(
                {
                    "sheet": raw.sheet,
                    "file_name": file_name,
                    "sheet_row": int(raw.row_numbers[i]),
                    "cells_json": json.dumps(cells, ensure_ascii=False),
                    "reasons": "; ".join(rows.reasons.get(int(i), [])),
                }
            )
        for issue in unsplit:  # rows the reader could not split: quarantined with their text
            digits = "".join(ch for ch in issue.cell if ch.isdigit())
            out.append(
                {
                    "sheet": raw.sheet,
                    "file_name": file_name,
                    "sheet_row": int(digits) if digits else None,
                    "cells_json": json.dumps({"line": issue.value}, ensure_ascii=False),
                    "reasons": f"{issue.cell}: row shape",
                }
            )
        return out

    st.quarantine = QuarantineRows(build, len(bad) + len(unsplit))


class QuarantineRows(Sequence[dict[str, Any]]):
    """The quarantine entries of one sheet, counted at once and built on first use."""

    def __init__(self, build: Callable[[], list[dict[str, Any]]], n: int) -> None:
        self._build, self._n = build, n
        self._rows: list[dict[str, Any]] | None = None

    def __len__(self) -> int:
        return self._n

    @overload
    def __getitem__(self, k: int) -> dict[str, Any]: ...
    @overload
    def __getitem__(self, k: slice) -> Sequence[dict[str, Any]]: ...
    def __getitem__(self, k: int | slice) -> dict[str, Any] | Sequence[dict[str, Any]]:
        if self._rows is None:
            self._rows = self._build()
        return self._rows[k]


def _keep_valid_records(st: _Preparing) -> None:
    """The valid rows, completed and hashed; an in-house run's standards go to their table."""
    import pyarrow as pa

    valid = ~st.rows.bad
    records = complete(st.frame if valid.all() else st.frame.filter(pa.array(valid)))
    if "row_hash" not in records.column_names:
        records = records.append_column("row_hash", row_hashes(records))
    if st.mapping.run is not None:
        records, st.runs = _split_run(records, st.mapping, st.report)
    st.records = records


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
