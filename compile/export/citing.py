"""What the exported records depend on, as bibliography entries.

A record depends on its source; on the original its values were first published in (the
record's ``original_source_id``, or the originals its source says it re-publishes); on the
sources of the ties that dated its section (a source may give ties and nothing else); and,
through its chains, on the time-scale charts its ages passed through, the reference-material
values its run was normalised with, the VSMOW–VPDB relation, the screening rules evaluated
on it and the age-model method. Each entry says what it is cited for, with counts.
"""

from __future__ import annotations

import json
from collections import Counter
from typing import TYPE_CHECKING, Any

from strata13.compile.export.bibliography import (
    LOESS_REFERENCE,
    Entry,
    age_model_entry,
    method_entries,
    source_entries,
)

if TYPE_CHECKING:
    import pyarrow as pa

__all__ = ["COMMON_PRACTICE", "references"]

COMMON_PRACTICE = "common practice"


def _n(k: int, what: str = "exported record") -> str:
    return f"{k} {what}{'' if k == 1 else 's'}"


def _sources(con: Any, ids: set[str]) -> dict[str, dict[str, Any]]:
    if not ids:
        return {}
    cur = con.execute(
        "SELECT * FROM sources WHERE list_contains(?, source_id) ORDER BY source_id",
        [sorted(ids)],
    )
    cols = [d[0] for d in cur.description]
    return {r[0]: dict(zip(cols, r, strict=True)) for r in cur.fetchall()}


def _source_roles(
    con: Any, ties: list[dict[str, Any]]
) -> tuple[dict[str, dict[str, Any]], dict[str, list[str]], dict[str, str]]:
    """(stored sources, id -> what it is cited for, unknown original -> what for), from the
    exported records registered as ``_exported``."""
    data = dict(con.execute("SELECT source_id, count(*) FROM _exported GROUP BY 1").fetchall())
    runs: dict[str, list[str]] = dict(
        con.execute(
            "SELECT source_id, list(DISTINCT run_id ORDER BY run_id) FROM _exported "
            "WHERE run_id IS NOT NULL GROUP BY 1"
        ).fetchall()
    )
    dated = {
        (src, sec): n
        for src, sec, n in con.execute(
            "SELECT source_id, section_id, count(*) FROM _exported "
            "WHERE age_basis = 'age model' GROUP BY 1, 2"
        ).fetchall()
    }
    tie_sections: dict[str, set[tuple[str, str]]] = {}
    for t in ties:
        if t["tie_source_id"]:
            tie_sections.setdefault(t["tie_source_id"], set()).add(
                (t["source_id"], t["section_id"])
            )
    originals: Counter[tuple[str, str]] = Counter(
        {
            (o, by): n
            for o, by, n in con.execute(
                "SELECT original_source_id, source_id, count(*) FROM _exported "
                "WHERE original_source_id IS NOT NULL GROUP BY 1, 2"
            ).fetchall()
        }
    )
    stored = _sources(con, set(data) | set(tie_sections) | {o for o, _ in originals})
    for sid in list(data):
        for o in (stored.get(sid, {}).get("republishes") or "").split("|"):
            if o.strip() and (o.strip(), sid) not in originals:
                originals[(o.strip(), sid)] = 0  # said re-published, no record names it
    stored |= _sources(con, {o for o, _ in originals} - set(stored))
    roles: dict[str, list[str]] = {}
    for sid, k in sorted(data.items()):
        kind = stored.get(sid, {}).get("kind")
        if kind == "in-house" and sid in runs:
            roles.setdefault(sid, []).append(
                f"in-house runs {', '.join(runs[sid])}: data of {_n(k)}"
            )
        else:
            roles.setdefault(sid, []).append(f"data of {_n(k)}")
    unknown: dict[str, str] = {}
    for (orig, by), k in sorted(originals.items()):
        what = (
            f"original publication of {_n(k)} re-published by {by}"
            if k
            else f"original publication of data re-published by {by}"
        )
        if orig in stored:
            roles.setdefault(orig, []).append(what)
        else:
            unknown[orig] = what
    for sid, secs in sorted(tie_sections.items()):
        n = sum(dated.get(s, 0) for s in secs)
        names = ", ".join(f"{s}/{c}" for s, c in sorted(secs))
        roles.setdefault(sid, []).append(
            f"age ties dating {_n(n)} (sections {names})"
            + ("; gives ties only" if sid not in data else "")
        )
    return stored, roles, unknown


def _charts(
    con: Any, ties: list[dict[str, Any]], store_chart: str
) -> list[tuple[str, str, str, str]]:
    from strata13.schemas.timescales import load
    from strata13.schemas.vocabularies import vocabulary

    from strata13.errors import Strata13Error

    uses: dict[str, list[str]] = {}
    row = con.execute("SELECT count(age_ma) FROM _exported").fetchone()
    dated = int(row[0]) if row else 0
    uses.setdefault(store_chart, []).append(f"the time scale of every age ({_n(dated)})")
    reported = dict(
        con.execute(
            "SELECT age_reported_scale, count(*) FROM _exported "
            "WHERE age_reported_scale IS NOT NULL GROUP BY 1"
        ).fetchall()
    )
    for chart, k in sorted(reported.items()):
        if chart != store_chart:
            uses.setdefault(chart, []).append(f"chart of the reported ages of {_n(k)}")
    tie_charts = Counter(t["chart"] for t in ties if t["chart"])
    for chart, k in sorted(tie_charts.items()):
        if chart != store_chart:
            uses.setdefault(chart, []).append(f"chart of {_n(k, 'age tie')}")
    out = []
    for chart, why in uses.items():
        try:
            scale = load(chart)
            source, version = scale.source, scale.version
        except (Strata13Error, OSError):  # a chart this installation cannot load
            source, version = "", chart
        term = vocabulary("time_scale").resolve(version)
        title = version
        if term:
            desc = next(
                (
                    line.split(",", 1)[1]
                    for line in _vocab_lines("time_scale")
                    if line.split(",", 1)[0] == term
                ),
                "",
            )
            title = desc.split(" (")[0].strip('"') or version
        key = "chart-" + "".join(ch if ch.isalnum() else "-" for ch in version).strip("-")
        out.append((key.lower(), title, source or version, "; ".join(why)))
    return out


def _vocab_lines(name: str) -> list[str]:
    from strata13.schemas.vocabularies import VOCAB_DIR

    return (VOCAB_DIR / f"{name}.csv").read_text(encoding="utf-8").splitlines()[1:]


def _materials(run_qc: list[dict[str, Any]]) -> list[tuple[str, str, str, str]]:
    used: dict[tuple[str, str, str], set[tuple[str, str]]] = {}
    for q in run_qc:
        try:
            accepted = json.loads(q["accepted_json"] or "{}")
        except ValueError:
            continue
        for material, a in sorted(accepted.items()):
            if not isinstance(a, dict):
                continue
            k = (material, str(a.get("value_set") or ""), str(a.get("source") or ""))
            used.setdefault(k, set()).add((str(q["run_id"]), str(q["isotope"])))
    out = []
    for (material, value_set, source), pairs in sorted(used.items()):
        by_run: dict[str, list[str]] = {}
        for run, iso in sorted(pairs):
            by_run.setdefault(run, []).append({"d13c": "δ13C", "d18o": "δ18O"}.get(iso, iso))
        runs = [f"{r} ({', '.join(isos)})" for r, isos in by_run.items()]
        key = "rm-" + "".join(ch if ch.isalnum() else "-" for ch in f"{material}-{value_set}")
        out.append(
            (
                key.lower().strip("-"),
                f"Accepted values of {material} ({value_set})",
                source or f"{material} {value_set}",
                f"reference-material values normalising runs {', '.join(runs)}",
            )
        )
    return out


def _oxygen(chains: pa.Table) -> list[tuple[str, str, str, str]]:
    import pyarrow.compute as pc
    from strata13.schemas.materials import oxygen_relations

    steps = chains.filter(
        pc.and_(
            pc.equal(chains.column("quantity"), "d18o_carb"),
            pc.match_substring(chains.column("step"), "VSMOW →"),
        )
    )
    used: dict[str, int] = {}
    for params in pc.unique(steps.column("parameters")).to_pylist():
        name = (params or "").split("constants = ")[-1].split(";")[0].strip()
        n = steps.filter(pc.equal(steps.column("parameters"), params))
        used[name] = used.get(name, 0) + len(pc.unique(n.column("record_id")))
    relations = oxygen_relations()
    return [
        (
            f"vsmow-vpdb-{name.lower()}",
            f"δ18O VSMOW–VPDB relation {name}",
            relations[name].source if name in relations else name,
            f"δ18O reported on VSMOW converted to VPDB ({_n(n)})",
        )
        for name, n in sorted(used.items())
    ]


def _rules(screens: pa.Table) -> list[tuple[str, str, str, str]]:
    import pyarrow.compute as pc

    tested = screens.filter(
        pc.and_(
            pc.not_equal(screens.column("outcome"), "not applicable"),
            pc.is_valid(screens.column("citation")),
        )
    )
    names: dict[str, list[str]] = {}
    for row in tested.group_by(["citation", "rule"]).aggregate([]).to_pylist():
        names.setdefault(row["citation"], []).append(row["rule"])
    counts = {
        row["citation"]: row["record_id_count_distinct"]
        for row in tested.group_by("citation")
        .aggregate([("record_id", "count_distinct")])
        .to_pylist()
    }
    out = []
    for citation, rules in sorted(names.items()):
        if citation.strip().lower() == COMMON_PRACTICE:
            continue
        rules = sorted(rules)
        out.append(
            (
                f"rule-{rules[0]}",
                f"Screening rule{'s' if len(rules) > 1 else ''} {', '.join(rules)} "
                "(a rule of thumb)",
                citation,
                f"diagenetic screening of {_n(counts[citation])}",
            )
        )
    return out


def _rotation_model(con: Any, settings: dict[str, Any]) -> list[tuple[str, str, str, str]]:
    """The rotation model that placed the records, with the citation its document gives."""
    from strata13.compile.paleo.rotations import parse_model

    from strata13.errors import Strata13Error

    text = settings.get("rotation_model_toml")
    row = con.execute("SELECT count(*) FROM _exported WHERE paleo_status = 'placed'").fetchone()
    placed = int(row[0]) if row else 0
    if not text or not placed:
        return []
    try:
        model = parse_model(str(text), "the store's rotation model")
    except Strata13Error:  # the stored document no longer parses: cite it by name
        name = str(settings.get("rotation_model_name") or "rotation model")
        return [
            (f"rotation-{name}", f"Rotation model {name}", name, f"paleo-positions of {_n(placed)}")
        ]
    return [
        (
            "rotation-" + "".join(ch if ch.isalnum() else "-" for ch in model.name.lower()),
            f"Rotation model {model.name} (frame: {model.frame})",
            model.citation or model.name,
            f"paleo-positions of {_n(placed)}",
        )
    ]


def references(
    con: Any,
    records: pa.Table,
    related: dict[str, pa.Table],
    settings: dict[str, Any],
    *,
    with_curve: bool = False,
) -> list[Entry]:
    """Every entry the exported ``records`` (with the package tables ``related``) depend
    on: sources first (by key), then methods."""
    from strata13.compile.export.tables import exported

    ties = related["ties"].to_pylist()  # a few per section
    chart = str(settings.get("time_scale") or "")
    with exported(con, records):
        stored, roles, unknown = _source_roles(con, ties)
        methods = _charts(con, ties, chart) if chart else []
        methods += _rotation_model(con, settings)
    entries = source_entries(stored, roles, unknown)
    methods += _materials(related["run_qc"].to_pylist())
    methods += _oxygen(related["chains"])
    methods += _rules(related["screen_results"])
    if with_curve:
        methods.append(
            (
                "method-loess",
                "LOESS: locally weighted regression",
                LOESS_REFERENCE,
                "the composite curve in curve/ (local linear fit, tricube weights)",
            )
        )
    entries += method_entries(methods)
    models = related["age_models"]
    if models.num_rows:
        n = sum(models.column("n_records").to_pylist())
        entries.append(
            age_model_entry(f"age-model method of {_n(models.num_rows, 'section')} ({_n(n)})")
        )
    return entries
