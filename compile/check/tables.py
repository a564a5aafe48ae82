"""Building the stored tables: record ids, typed Arrow columns, content hashes and the
hierarchy tables (localities, sections, samples) of one prepared sheet.

Everything here is vectorised (Arrow, NumPy, DuckDB in memory) so a million-row sheet
costs a few passes, not a Python object per cell.
"""

from __future__ import annotations

import hashlib
from typing import TYPE_CHECKING, Any

from strata13.schemas.records import ANALYSES, LOCALITIES, SAMPLES, SECTIONS

if TYPE_CHECKING:
    import pyarrow as pa


def record_id(source: str, section: str, sample: str, replicate: int | str) -> str:
    """Stable id: a hash of (source, section, sample, replicate); an in-house run's
    analysis gives its run key (:func:`run_key`) for the replicate."""
    key = "\x1f".join([source, section, sample, str(replicate)])
    return hashlib.sha256(key.encode("utf-8")).hexdigest()[:20]


def run_key(run_id: Any, position: float | None) -> str:
    """The replicate part of an in-house run analysis's record id: its run and position."""
    pos = "" if position is None or position != position else f"{float(position):.10g}"
    return f"run {run_id} position {pos}"


def record_ids(
    sid: str, sec: Any, sample: Any, replicate: Any, keys: Any = None
) -> tuple[pa.Array, Any]:
    """``record_id`` of every row (DuckDB's sha256 over the same key text as
    :func:`record_id`) and, for a repeated id, the row index of its first occurrence
    (−1 otherwise). ``keys``: text standing for the replicate number in the hash where not
    None (an in-house run's analyses are keyed by run and position)."""
    import duckdb
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    n = len(replicate)
    t = pa.table(
        {
            "sec": strings(sec),
            "sample": strings(sample),
            "rep": pa.array(np.asarray(replicate, dtype=np.int64)),
            "key": strings(keys) if keys is not None else pa.nulls(n, pa.string()),
            "i": pa.array(np.arange(n, dtype=np.int64)),
        }
    )
    con = duckdb.connect()
    try:
        con.register("k", t)
        ids = (
            con.execute(
                "SELECT CASE WHEN sec IS NULL OR sample IS NULL THEN NULL ELSE "
                "substr(sha256(concat_ws(chr(31), ?, sec, sample, "
                "coalesce(key, CAST(rep AS VARCHAR)))), 1, 20) "
                "END AS id FROM k ORDER BY i",
                [sid],
            )
            .to_arrow_table()
            .column("id")
            .combine_chunks()
        )
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


def const(value: Any, n: int, sqltype: str) -> pa.Array:
    """One value for every row, built by Arrow (no Python object per row)."""
    import pyarrow as pa

    t = {
        "VARCHAR": pa.string(),
        "DOUBLE": pa.float64(),
        "INTEGER": pa.int32(),
        "BIGINT": pa.int64(),
    }[sqltype]
    if value is None:
        return pa.nulls(n, t)
    import pyarrow.compute as pc

    return pc.fill_null(pa.nulls(n, t), pa.scalar(str(value) if sqltype == "VARCHAR" else value, t))


def strings(values: Any) -> pa.Array:
    """Text column as Arrow; C-speed for str/None objects, str() only as a fallback."""
    import pyarrow as pa

    if isinstance(values, (pa.Array, pa.ChunkedArray)):
        return values.cast(pa.string())
    try:
        return pa.array(values, type=pa.string(), from_pandas=True)
    except (pa.ArrowInvalid, pa.ArrowTypeError):
        return pa.array([None if v is None or v != v else str(v) for v in values], type=pa.string())


def to_arrow(values: Any, sqltype: str, n: int) -> pa.Array:
    import numpy as np
    import pyarrow as pa

    t = {
        "VARCHAR": pa.string(),
        "DOUBLE": pa.float64(),
        "INTEGER": pa.int32(),
        "BIGINT": pa.int64(),
    }[sqltype]
    if isinstance(values, pa.ChunkedArray):
        values = values.combine_chunks()
    if isinstance(values, pa.Array):
        return values.cast(t)
    if isinstance(values, np.ndarray) and values.dtype != object:
        return pa.array(values, from_pandas=True).cast(t)  # NaN -> null
    if sqltype == "DOUBLE":  # object arrays (lat/lon filled from localities)
        return pa.array(
            [
                None if v is None or (isinstance(v, float) and np.isnan(v)) else float(v)
                for v in values
            ],
            type=t,
        )
    if sqltype == "VARCHAR":
        return strings(values)
    return pa.array(list(values), type=t)


def complete(table: pa.Table) -> pa.Table:
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


# where a record sits (file, sheet, row): provenance, not content, so a moved row is the
# same record with new provenance
WHERE_FROM = ("file_name", "sheet", "sheet_row")


def row_hashes(table: pa.Table) -> pa.Array:
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
    from strata13.compile.derive.engine import DERIVED_COLUMNS

    n = table.num_rows
    h = np.zeros(n, dtype=np.uint64)
    for name in table.column_names:
        col = table.column(name)
        if name in DERIVED_COLUMNS or name in WHERE_FROM or col.null_count == n:
            continue
        k = hash_array(np.array([name], dtype=object))[0] | np.uint64(1)
        if pa.types.is_string(col.type):  # hash each distinct text once, spread by index
            d = col.combine_chunks().dictionary_encode()
            per_value = hash_array(d.dictionary.to_numpy(zero_copy_only=False), categorize=False)
            idx = pc.fill_null(d.indices, -1).to_numpy(zero_copy_only=False)
            v = np.where(idx >= 0, per_value[np.maximum(idx, 0)], 0).astype(np.uint64)
        else:
            values = col.cast(pa.float64())
            v = hash_array(values.to_numpy(zero_copy_only=False))
            v[pc.is_null(values).to_numpy(zero_copy_only=False)] = 0
        with np.errstate(over="ignore"):
            h += v * k
    return pa.array(h.view(np.int64), type=pa.int64())


def localities_table(sid: str, blocks: dict[str, dict[str, Any]]) -> pa.Table:
    import pyarrow as pa
    from strata13.schemas.records import arrow_schema

    rows = [
        {
            "source_id": sid,
            "locality_id": k,
            "name": b.get("name"),
            "lat": b["lat"],
            "lon": b["lon"],
            "precision_km": b.get("precision_km"),
            "aliases": "|".join(b.get("aliases", []) or []),
            "note": b.get("note"),
        }
        for k, b in sorted(blocks.items())
    ]
    return pa.Table.from_pylist(rows, schema=arrow_schema(LOCALITIES))


def sections_table(sid: str, blocks: dict[str, dict[str, Any]], sec: Any, loc: Any) -> pa.Table:
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
        rows.append(
            {
                "source_id": sid,
                "section_id": s,
                "locality_id": b.get("locality") or first_loc.get(s),
                "name": b.get("name"),
                "datum": b.get("datum"),
                "position_kind": b.get("position_kind"),
                "datum_offset_m": b.get("datum_offset_m"),
                "offset_from": b.get("offset_from"),
                "offset_source": b.get("offset_source"),
                "note": b.get("note"),
                "accumulation_shape": (b.get("accumulation") or {}).get("shape"),
                "accumulation_segment_m": (b.get("accumulation") or {}).get("segment_m"),
            }
        )
    return pa.Table.from_pylist(rows, schema=arrow_schema(SECTIONS))


def samples_table(records: pa.Table) -> pa.Table:
    """One row per sample (replicates folded), grouped by DuckDB."""
    import duckdb
    from strata13.schemas.records import arrow_schema

    con = duckdb.connect()
    try:
        con.register("r", records.select([c for c, _ in SAMPLES]))
        t = con.execute(
            "SELECT source_id, section_id, sample_id, min(position_m), min(top_m), "
            "max(base_m), min(lithostrat_unit) FROM r GROUP BY ALL "
            "ORDER BY section_id, sample_id"
        ).to_arrow_table()
    finally:
        con.close()
    return t.rename_columns([c for c, _ in SAMPLES]).cast(arrow_schema(SAMPLES))
