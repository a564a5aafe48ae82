"""The package's tables beside the records, each restricted to what the records use.

Every table is read from the reader ``con`` (pinned to the exported version) and typed by
``schemas.package_tables``, so the same version gives the same bytes. Chains are expanded
into one row per record, quantity and step, with the value before and after each step
from the step's own stored map (as ``explain`` shows them); age models are summarised per
section from their stored draws.
"""

from __future__ import annotations

import json
from typing import TYPE_CHECKING, Any

from strata13.compile.derive.steps import value_after
from strata13.schemas.fields import DELTA_FIELDS
from strata13.schemas.package_tables import PACKAGE_TABLES
from strata13.schemas.records import arrow_schema

if TYPE_CHECKING:
    import pyarrow as pa

__all__ = ["package_tables", "readable", "rule_citations"]


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


def _in(con: Any, sql: str, values: list[Any]) -> list[dict[str, Any]]:
    """Rows of ``sql`` (with one ``IN ({})`` placeholder list) for ``values``, as dicts."""
    if not values:
        return []
    cur = con.execute(sql.format(", ".join("?" for _ in values)), values)
    cols = [d[0] for d in cur.description]
    return [dict(zip(cols, r, strict=True)) for r in cur.fetchall()]


def _chains(con: Any, records: list[dict[str, Any]]) -> tuple[pa.Table, pa.Table]:
    ids = sorted(
        {r[f"{q}_chain"] for r in records for q in (*DELTA_FIELDS, "age") if r[f"{q}_chain"]}
    )
    stored = {
        r["chain_id"]: json.loads(r["steps_json"])
        for r in _in(con, "SELECT chain_id, steps_json FROM chains WHERE chain_id IN ({})", ids)
    }
    rows: list[dict[str, Any]] = []
    for rec in records:
        for q in (*DELTA_FIELDS, "age"):
            cid = rec[f"{q}_chain"]
            steps = stored.get(cid, []) if cid else []
            value = rec[f"{q}_reported"] if q != "age" else None
            if q == "age" and steps and steps[0].get("step") == "reported":
                value = rec["age_reported_ma"]  # an age model starts from positions, not ages
            final = rec["age_ma"] if q == "age" else rec[q]
            for k, step in enumerate(steps):
                before = value
                value = value_after(step, value)
                after = final if k == len(steps) - 1 else value
                rows.append(
                    {
                        "record_id": rec["record_id"],
                        "quantity": q,
                        "chain_id": cid,
                        "step_order": k + 1,
                        "step": step.get("step"),
                        "method": step.get("method"),
                        "parameters": _params_text(step.get("parameters") or {}),
                        "source": step.get("source"),
                        "flags": "; ".join(step.get("flags") or []) or None,
                        "size_permil": step.get("size_permil"),
                        "size_myr": step.get("size_myr"),
                        "value_before": before,
                        "value_after": after,
                        "value_unit": "Ma" if q == "age" else "‰",
                    }
                )
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
    return _table("chains", rows), _table("chain_parameters", params)


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


def _age_models(con: Any, records: list[dict[str, Any]], stored: dict[str, Any]) -> pa.Table:
    import numpy as np

    sections: dict[tuple[str, str], list[dict[str, Any]]] = {}
    for r in records:
        if r["age_basis"] == "age model":
            sections.setdefault((r["source_id"], r["section_id"]), []).append(r)
    rows = []
    for (src, sec), recs in sorted(sections.items()):
        cids = sorted({r["age_chain"] for r in recs if r["age_chain"]})
        step: dict[str, Any] = {}
        for cid in cids:
            for s in stored.get(cid, []):
                if s.get("step") == "age model":
                    step = s
        chunks = con.execute(
            "SELECT positions_json, n_draws, draws FROM age_draws WHERE source_id = ? AND "
            "section_id = ? ORDER BY chunk",
            [src, sec],
        ).fetchall()
        positions: list[float] = []
        blocks = []
        for pos_json, n_draws, blob in chunks:
            p = json.loads(pos_json)
            positions += p
            blocks.append(np.frombuffer(blob, dtype="<f4").reshape(n_draws, len(p)))
        summary: dict[str, Any] = {"n_draws": None, "n_positions": 0}
        if blocks:
            draws = np.concatenate(blocks, axis=1).astype(float)
            pos = np.asarray(positions)
            lo, mid, hi = np.percentile(draws, [2.5, 50, 97.5], axis=0)
            width = hi - lo
            summary = {
                "n_draws": int(draws.shape[0]),
                "n_positions": int(pos.size),
                "position_min_m": float(pos.min()),
                "position_max_m": float(pos.max()),
                "age_at_min_position_ma": float(mid[int(pos.argmin())]),
                "age_at_max_position_ma": float(mid[int(pos.argmax())]),
                "width95_median_myr": float(np.median(width)),
                "width95_max_myr": float(width.max()),
            }
        ties = step.get("ties") or []
        params = step.get("parameters") or {}
        rows.append(
            {
                "source_id": src,
                "section_id": sec,
                "chain_id": "; ".join(cids) or None,
                "method": step.get("method"),
                "settings": _params_text(params) or None,
                "time_scale": params.get("time_scale") or recs[0]["time_scale"],
                "n_ties": len(ties),
                "ties_used": "; ".join(_tie_text(t) for t in ties) or None,
                "n_records": len(recs),
                **summary,
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
    rows = records.select(
        [
            "record_id",
            "source_id",
            "section_id",
            "run_id",
            "age_basis",
            "time_scale",
            "age_ma",
            "age_reported_ma",
            "age_chain",
            *(c for d in DELTA_FIELDS for c in (d, f"{d}_reported", f"{d}_chain")),
        ]
    ).to_pylist()
    ids = [r["record_id"] for r in rows]
    chains, chain_params = _chains(con, rows)
    age_ids = sorted({r["age_chain"] for r in rows if r["age_chain"]})
    stored = {
        r["chain_id"]: json.loads(r["steps_json"])
        for r in _in(con, "SELECT chain_id, steps_json FROM chains WHERE chain_id IN ({})", age_ids)
    }
    sections = sorted({(r["source_id"], r["section_id"]) for r in rows})
    runs = sorted({(r["source_id"], r["run_id"]) for r in rows if r["run_id"]})
    citations = rule_citations(settings)

    def keyed(table: str, keys: list[tuple[str, str]], a: str, b: str, order: str) -> list[Any]:
        if not keys:
            return []
        cur = con.execute(
            f"SELECT t.* FROM {table} t JOIN (SELECT unnest(?) AS k1, unnest(?) AS k2) k "
            f"ON t.{a} = k.k1 AND t.{b} = k.k2 ORDER BY {order}",
            [[k[0] for k in keys], [k[1] for k in keys]],
        )
        cols = [d[0] for d in cur.description]
        return [dict(zip(cols, r, strict=True)) for r in cur.fetchall()]

    screens = _in(
        con,
        "SELECT * FROM screen_results WHERE record_id IN ({}) ORDER BY record_id, rule",
        ids,
    )
    for s in screens:
        s["citation"] = citations.get(s["rule"]) or None
    return {
        "chains": chains,
        "chain_parameters": chain_params,
        "ties": _table(
            "ties",
            keyed(
                "age_ties",
                sections,
                "source_id",
                "section_id",
                "source_id, section_id, position_m, tie_id",
            ),
        ),
        "age_models": _age_models(con, rows, stored),
        "screen_results": _table("screen_results", screens),
        "runs": _table(
            "runs", keyed("runs", runs, "source_id", "run_id", "source_id, run_id, sheet_row")
        ),
        "run_qc": _table(
            "run_qc", keyed("run_qc", runs, "source_id", "run_id", "source_id, run_id, isotope")
        ),
        "corrections": _table(
            "corrections",
            _in(
                con,
                "SELECT * FROM corrections WHERE record_id IN ({}) ORDER BY record_id, field, "
                "correction_id",
                ids,
            ),
        ),
        "duplicate_decisions": _table("duplicate_decisions", _duplicates(con, ids)),
    }


def _duplicates(con: Any, ids: list[str]) -> list[dict[str, Any]]:
    """Decisions on pairs that involve an exported record (the dropped one is not exported
    by default, so a pair counts when either side is)."""
    if not ids:
        return []
    cur = con.execute(
        "SELECT * FROM duplicates WHERE list_contains(?, record_a) OR list_contains(?, record_b) "
        "ORDER BY record_a, record_b, decision",
        [ids, ids],
    )
    cols = [d[0] for d in cur.description]
    return [dict(zip(cols, r, strict=True)) for r in cur.fetchall()]
