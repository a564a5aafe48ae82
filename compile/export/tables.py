"""The package's tables beside the records, each restricted to what the records use.

Every table is read from the reader ``con`` (pinned to the exported version), joined to the
exported records registered on it as ``_exported`` (no id lists as parameters, whatever the
size), and typed by ``schemas.package_tables``, so the same version gives the same bytes.
Chains are expanded into one row per record, quantity and step, with the value before and
after each step from the step's own stored map, applied step by step as ``explain`` does
(vectorised per chain); age models are summarised per section from their stored draws.
"""

from __future__ import annotations

import json
from collections.abc import Iterator
from contextlib import contextmanager
from typing import TYPE_CHECKING, Any

from strata13.schemas.fields import DELTA_FIELDS
from strata13.schemas.package_tables import CHAIN_QUANTITIES, PACKAGE_TABLES
from strata13.schemas.records import arrow_schema

if TYPE_CHECKING:
    import pyarrow as pa

__all__ = ["exported", "package_tables", "readable", "rule_citations"]

# the records' columns the tables and the bibliography read
KEY_COLUMNS = [
    "record_id",
    "source_id",
    "section_id",
    "run_id",
    "original_source_id",
    "age_basis",
    "time_scale",
    "position_kind",
    "paleo_status",
    "paleo_model",
    "age_ma",
    "age_reported_ma",
    "age_reported_scale",
    "age_chain",
    *(c for d in DELTA_FIELDS for c in (d, f"{d}_reported", f"{d}_chain")),
]


@contextmanager
def exported(con: Any, records: pa.Table) -> Iterator[None]:
    """The exported records' key columns as the relation ``_exported`` on ``con``."""
    con.register("_exported", records.select(KEY_COLUMNS))
    try:
        yield
    finally:
        con.unregister("_exported")


def readable(value: Any) -> str:
    """A parameter value as text: numbers in their shortest exact form, lists and tables
    as compact JSON."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (dict, list)):
        return json.dumps(value, sort_keys=True, ensure_ascii=False)
    return "" if value is None else str(value)


def _params_text(params: dict[str, Any]) -> str:
    return "; ".join(f"{k} = {readable(v)}" for k, v in sorted(params.items()))


def _table(name: str, rows: list[dict[str, Any]]) -> pa.Table:
    import pyarrow as pa

    return pa.Table.from_pylist(rows, schema=arrow_schema(PACKAGE_TABLES[name]))


def _arrow(con: Any, name: str, sql: str, params: list[Any] | None = None) -> pa.Table:
    """The rows of ``sql`` as the package table ``name`` (its declared columns and types)."""
    got = con.execute(sql, params or []).to_arrow_table()
    schema = arrow_schema(PACKAGE_TABLES[name])
    return got.select(schema.names).cast(schema)


def _stored_chains(con: Any, column_sql: str) -> dict[str, list[dict[str, Any]]]:
    rows = con.execute(
        f"SELECT c.chain_id, c.steps_json FROM chains c WHERE c.chain_id IN ({column_sql}) "
        "ORDER BY c.chain_id"
    ).fetchall()
    return {cid: json.loads(text) for cid, text in rows}


def _chains(con: Any, records: pa.Table) -> tuple[pa.Table, pa.Table]:
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    union = " UNION ".join(f"SELECT {q}_chain FROM _exported" for q in CHAIN_QUANTITIES)
    stored = _stored_chains(con, union)
    schema = arrow_schema(PACKAGE_TABLES["chains"])
    ids = records.column("record_id")
    batches = []
    for rank, q in enumerate(CHAIN_QUANTITIES):
        chain = records.column(f"{q}_chain").combine_chunks()
        start = records.column("age_reported_ma" if q == "age" else f"{q}_reported")
        final = records.column("age_ma" if q == "age" else q)
        v0 = start.to_numpy(zero_copy_only=False).astype(float)
        vf = final.to_numpy(zero_copy_only=False).astype(float)
        encoded = pc.dictionary_encode(chain)
        codes = encoded.indices.to_numpy(zero_copy_only=False)
        codes = np.where(pc.is_null(encoded.indices).to_numpy(zero_copy_only=False), -1, codes)
        for code, cid in enumerate(encoded.dictionary.to_pylist()):
            idx = np.flatnonzero(codes == code)
            steps = stored.get(cid, [])
            value = v0[idx]
            if q == "age" and not (steps and steps[0].get("step") == "reported"):
                value = np.full(idx.size, np.nan)  # an age model starts from positions
            for k, step in enumerate(steps):
                before = value
                maps = step.get("maps")
                value = before * maps[0] + maps[1] if maps else np.full(idx.size, np.nan)
                after = vf[idx] if k == len(steps) - 1 else value
                n = idx.size

                def const(v: Any, field: str, n: int = n) -> pa.Array:
                    return pa.array([v] * n, type=schema.field(field).type)

                batches.append(
                    (
                        rank,
                        pa.table(
                            {
                                "record_id": ids.take(pa.array(idx)),
                                "quantity": const(q, "quantity"),
                                "chain_id": const(cid, "chain_id"),
                                "step_order": const(k + 1, "step_order"),
                                "step": const(step.get("step"), "step"),
                                "method": const(step.get("method"), "method"),
                                "parameters": const(
                                    _params_text(step.get("parameters") or {}), "parameters"
                                ),
                                "source": const(step.get("source"), "source"),
                                "flags": const("; ".join(step.get("flags") or []) or None, "flags"),
                                "size_permil": const(step.get("size_permil"), "size_permil"),
                                "size_myr": const(step.get("size_myr"), "size_myr"),
                                "value_before": pa.array(before, mask=np.isnan(before)),
                                "value_after": pa.array(after, mask=np.isnan(after)),
                                "value_unit": const("Ma" if q == "age" else "‰", "value_unit"),
                                "_rank": pa.array(np.full(n, rank, dtype=np.int32)),
                            }
                        ),
                    )
                )
    if batches:
        long = pa.concat_tables([t for _, t in batches])
        order = pc.sort_indices(
            long,
            sort_keys=[
                ("record_id", "ascending"),
                ("_rank", "ascending"),
                ("step_order", "ascending"),
            ],
        )
        long = long.take(order).drop_columns(["_rank"]).cast(schema)
    else:
        long = schema.empty_table()
    params = [
        {
            "chain_id": cid,
            "step_order": k + 1,
            "step": step.get("step"),
            "parameter": name,
            "value": readable(v),
        }
        for cid in sorted(stored)
        for k, step in enumerate(stored[cid])
        for name, v in sorted((step.get("parameters") or {}).items())
    ]
    return long, _table("chain_parameters", params)


def _tie_text(t: dict[str, Any]) -> str:
    """One tie of an age-model step, as the chain records it, in a line."""
    sigma = t.get("sigma_ma")
    age = t.get("age_ma")
    where = t.get("tie", "")
    value = (
        "not placed" if age is None else f"{age:.6g} ± {sigma:.3g} Ma" if sigma else f"{age:.6g} Ma"
    )
    moved = t.get("from") and t.get("to") and t["from"] != t["to"]
    conv = f"; {t['from']} → {t['to']}" if moved else ""
    conv = f" ({t['method']}{conv})" if t.get("method") else ""
    return f"{where}: {value}{conv}"


def _draw_summary(con: Any, src: str, sec: str) -> dict[str, Any]:
    """Positions, median ages at the ends and 95 % widths of a section's stored draws."""
    import numpy as np

    chunks = con.execute(
        "SELECT positions_json, n_draws, draws FROM age_draws WHERE source_id = ? AND "
        "section_id = ? ORDER BY chunk",
        [src, sec],
    ).fetchall()
    from strata13.compile.ages.chronology import stored_draws

    positions, stored = stored_draws(chunks)
    if not positions:
        return {"n_draws": None, "n_positions": 0}
    draws = stored.astype(float)
    pos = np.asarray(positions)
    lo, mid, hi = np.percentile(draws, [2.5, 50, 97.5], axis=0)
    width = hi - lo
    return {
        "n_draws": int(draws.shape[0]),
        "n_positions": int(pos.size),
        "position_min_m": float(pos.min()),
        "position_max_m": float(pos.max()),
        "age_at_min_position_ma": float(mid[int(pos.argmin())]),
        "age_at_max_position_ma": float(mid[int(pos.argmax())]),
        "width95_median_myr": float(np.median(width)),
        "width95_max_myr": float(width.max()),
    }


def _age_models(con: Any) -> pa.Table:
    sections = con.execute(
        "SELECT source_id, section_id, count(*), list(DISTINCT age_chain ORDER BY age_chain), "
        "any_value(time_scale) FROM _exported WHERE age_basis = 'age model' "
        "GROUP BY 1, 2 ORDER BY 1, 2"
    ).fetchall()
    stored = _stored_chains(con, "SELECT age_chain FROM _exported WHERE age_basis = 'age model'")
    rows = []
    for src, sec, n, cids, chart in sections:
        cids = [c for c in cids if c]
        step: dict[str, Any] = {}
        for cid in cids:
            for s in stored.get(cid, []):
                if s.get("step") == "age model":
                    step = s
        ties = step.get("ties") or []
        params = step.get("parameters") or {}
        rows.append(
            {
                "source_id": src,
                "section_id": sec,
                "chain_id": "; ".join(cids) or None,
                "method": step.get("method"),
                "settings": _params_text(params) or None,
                "time_scale": params.get("time_scale") or chart,
                "n_ties": len(ties),
                "ties_used": "; ".join(_tie_text(t) for t in ties) or None,
                "n_records": int(n),
                **_draw_summary(con, src, sec),
            }
        )
    return _table("age_models", rows)


def rule_citations(settings: dict[str, Any]) -> dict[str, str]:
    """Rule name -> citation, from the rule set the store keeps (empty without one)."""
    from strata13.compile.screening.rules import parse_canonical

    text = settings.get("screen_rules")
    if not text:
        return {}
    return {r.name: r.citation for r in parse_canonical(str(text)).rules}


def package_tables(con: Any, records: pa.Table, settings: dict[str, Any]) -> dict[str, pa.Table]:
    """Every package table beside the records, by file stem, restricted to ``records``."""
    import pyarrow as pa

    citations = rule_citations(settings)
    cites = pa.table(
        {"rule": list(citations), "citation": [citations[r] or None for r in citations]},
        schema=pa.schema([("rule", pa.string()), ("citation", pa.string())]),
    )
    with exported(con, records):
        con.register("_citations", cites)
        try:
            chains, chain_params = _chains(con, records.select(KEY_COLUMNS))
            sections = "SELECT DISTINCT source_id, section_id FROM _exported"
            runs = "SELECT DISTINCT source_id, run_id FROM _exported WHERE run_id IS NOT NULL"
            ids = "SELECT record_id FROM _exported"
            return {
                "chains": chains,
                "chain_parameters": chain_params,
                "ties": _arrow(
                    con,
                    "ties",
                    f"SELECT t.* FROM age_ties t JOIN ({sections}) k USING (source_id, "
                    "section_id) ORDER BY t.source_id, t.section_id, t.position_m, t.tie_id",
                ),
                "age_models": _age_models(con),
                "screen_results": _arrow(
                    con,
                    "screen_results",
                    "SELECT s.*, c.citation FROM screen_results s "
                    f"JOIN ({ids}) e USING (record_id) LEFT JOIN _citations c USING (rule) "
                    "ORDER BY s.record_id, s.rule",
                ),
                "runs": _arrow(
                    con,
                    "runs",
                    f"SELECT r.* FROM runs r JOIN ({runs}) k USING (source_id, run_id) "
                    "ORDER BY r.source_id, r.run_id, r.sheet_row, r.material",
                ),
                "run_qc": _arrow(
                    con,
                    "run_qc",
                    f"SELECT q.* FROM run_qc q JOIN ({runs}) k USING (source_id, run_id) "
                    "ORDER BY q.source_id, q.run_id, q.isotope",
                ),
                "corrections": _arrow(
                    con,
                    "corrections",
                    f"SELECT c.* FROM corrections c JOIN ({ids}) e USING (record_id) "
                    "ORDER BY c.record_id, c.field, c.correction_id",
                ),
                # a pair counts when either side is exported (the dropped one is not, by
                # default)
                "duplicate_decisions": _arrow(
                    con,
                    "duplicate_decisions",
                    f"SELECT * FROM duplicates WHERE record_a IN ({ids}) OR record_b IN ({ids}) "
                    "ORDER BY record_a, record_b, decision",
                ),
            }
        finally:
            con.unregister("_citations")
