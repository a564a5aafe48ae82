"""Ages for every record on the store's time scale: the derive engine's age step.

Order of preference per record, each with its basis and a chain of steps:

1. **age model** — the record's section has at least two ties that can be put on the store's
   time scale: whole-section Monte Carlo draws (``compile.agemodel``), reported per sample as
   median and 1σ; samples outside the outermost ties only where the store allows
   extrapolation (flagged). The accumulation prior is the store's setting unless the
   section's mapping block gives its own;
2. **reported** — the authors' age, converted from its chart to the store's by the meaning of
   an age read on a chart (piecewise-linear between shared boundaries), both versions named;
   without a reported error, the uniform σ of its reported stage where that stage holds it;
3. **stage only** — a stage name alone: the stage's midpoint with the uniform σ of its span,
   flagged;
4. otherwise *pending*, with the reason.

A section with ties but no model (one tie; ties that contradict each other beyond their
errors; a tie its chart cannot place, in a recompute) keeps 2 and 3 with their σ, and every
one of its records says why in its status and its chain (a "no age model" step).

Ties move to the store's time scale by their meaning: a chart-boundary tie takes the
boundary's age and error on the store's chart (the error is drawn once per draw and shared
by every section tied to that boundary); biozone and correlation ties move with their chart;
radiometric ties keep their ages; astrochronologic ties keep their distance from their anchor.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from strata13.compile.derive.engine import Given, Recorded
from strata13.compile.derive.settings import Settings
from strata13.compile.derive.steps import Step

from strata13.errors import DomainError

if TYPE_CHECKING:
    import numpy as np
    import pyarrow as pa

CHUNK = 512  # sample positions per stored age_draws row
PENDING = "pending: no reported age, stage or age model"  # a record's status until dated
METHOD = (
    "whole-section Monte Carlo draws: sequential truncated sampling of tie ages, "
    "gamma-process accumulation between ties (after Haslett & Parnell 2008), a "
    "moment-matched one-jump bridge inside each segment"
)


def _options(settings: Settings) -> tuple[bool, int, int]:
    return bool(settings.age_extrapolation), int(settings.age_draws), int(settings.age_seed)


def ties_on_scale(
    ties: list[dict[str, Any]],
    scale: str,
    policy: str = "borrow",
    unplaced: list[str] | None = None,
) -> list[dict[str, Any]]:
    """Each tie's age and 1σ on ``scale``, with the step that put it there.

    Adds ``age``, ``sigma``, ``shared_key`` and ``step`` to a copy of each tie. A tie that
    cannot be placed (a boundary the chart does not have, an age outside the boundaries
    both charts share) raises DomainError, or, when ``unplaced`` is a list, is left out
    and its message appended there. ``policy`` says what a chart boundary whose error the
    chart leaves blank gets (``Settings.blank_boundary_sigma``); its refusal always raises.
    """
    out = []
    by_id = {t["tie_id"]: t for t in ties if t.get("tie_id")}
    placed: dict[str, float] = {}
    for t in sorted(ties, key=lambda t: t["basis"] == "astrochronologic"):
        try:
            out.append(_place(dict(t), scale, policy, by_id, placed))
        except _Unplaced as exc:
            if unplaced is None:
                raise exc.error from None
            unplaced.append(exc.error.message)
    return out


class _Unplaced(Exception):
    """A tie the chart cannot place (carries the DomainError to raise)."""

    def __init__(self, error: DomainError) -> None:
        super().__init__(error.message)
        self.error = error


def _place(
    t: dict[str, Any], scale: str, policy: str, by_id: dict[str, Any], placed: dict[str, float]
) -> dict[str, Any]:
    """One tie on ``scale`` (see ties_on_scale)."""
    import numpy as np
    from strata13.schemas import timescales

    where = _tie_name(t)
    basis = t["basis"]
    if basis == "chart boundary":
        chart = t["chart"] or scale
        try:
            unit = timescales.load(chart).unit(t["boundary"])
            target = timescales.load(scale).by_key(unit.boundary_key)
        except Exception as exc:  # the chart lacks the boundary: refuse, naming the tie
            raise _Unplaced(
                DomainError(
                    f"{where}: the boundary {t['boundary']!r} cannot be placed on "
                    f"{scale} ({getattr(exc, 'message', exc)}).",
                    "Name a stage, series or period of the tie's chart.",
                )
            ) from None
        t["age"] = target.base_ma
        t["sigma"], sigma_note = _boundary_sigma(scale, target, where, policy)
        t["shared_key"] = f"{scale}:{target.boundary_key}"
        t["step"] = {
            "tie": where,
            "method": "chart boundary: the boundary's base on the store's chart",
            "from": chart,
            "to": scale,
            "age_ma": t["age"],
            **({"sigma_from": sigma_note} if sigma_note else {}),
        }
    elif basis in ("biozone boundary", "correlation"):
        new, _ = timescales.convert(np.array([t["age_ma"]]), t["chart"], scale)
        if np.isnan(new[0]):
            raise _Unplaced(
                DomainError(
                    f"{where}: {t['age_ma']} Ma on {t['chart']} lies outside the "
                    f"boundaries {t['chart']} and {scale} share.",
                    "Check the tie's age and chart.",
                )
            )
        t["age"], t["sigma"] = float(new[0]), t["age_sigma_ma"] or 0.0
        t["shared_key"] = (
            f"biozone:{t['boundary'].strip().lower()}" if basis == "biozone boundary" else None
        )
        t["step"] = {
            "tie": where,
            "method": f"{basis}: moves with its chart",
            "from": t["chart"],
            "to": scale,
            "age_ma": t["age"],
        }
    elif basis == "astrochronologic":
        anchor = by_id.get(t["anchor"])
        if anchor is None:
            raise DomainError(
                f"{where}: its anchor {t['anchor']!r} is not a tie of the same section.",
                "Anchor it on a tie of its own section.",
            )
        if anchor["tie_id"] not in placed:  # the anchor itself could not be placed
            raise _Unplaced(
                DomainError(
                    f"{where}: its anchor {t['anchor']!r} cannot be placed on {scale}.",
                    "Check the anchor tie's boundary and chart.",
                )
            )
        t["age"] = placed[anchor["tie_id"]] + (t["age_ma"] - anchor["age_ma"])
        t["sigma"] = t["age_sigma_ma"] or 0.0
        t["shared_key"] = None
        t["step"] = {
            "tie": where,
            "method": f"astrochronologic: keeps its duration from anchor {anchor['tie_id']}",
            "to": scale,
            "age_ma": t["age"],
        }
    else:  # radiometric
        t["age"], t["sigma"], t["shared_key"] = t["age_ma"], t["age_sigma_ma"] or 0.0, None
        t["step"] = {"tie": where, "method": "radiometric: keeps its age", "age_ma": t["age"]}
    t["step"]["sigma_ma"] = t["sigma"]  # every tie's 1σ on the store's chart, in its chain
    if t.get("tie_id"):
        placed[t["tie_id"]] = t["age"]
    return t


def _boundary_sigma(scale: str, target: Any, where: str, policy: str) -> tuple[float, str]:
    """A chart-boundary tie's 1σ and, when the chart leaves the error blank, where it came
    from. A blank is never zero: by ``policy`` it is borrowed from the nearest chart that
    states one ("borrow", the default), a stated σ in Myr (a number), or refused ("refuse")."""
    from strata13.schemas import timescales

    if target.sigma_ma is not None:
        return float(target.sigma_ma), ""
    blank = f"{scale} states no error for the base of {target.name}"
    if policy == "refuse":
        raise DomainError(
            f"{where}: {blank}; the store refuses blank boundary errors.",
            "Choose another policy: strata13 redate --blank-boundary-sigma borrow (or a σ in Myr).",
        )
    if policy != "borrow":
        return float(policy), f"{blank}: the store's stated σ {float(policy):g} Myr"
    got = timescales.boundary_sigma(scale, target.boundary_key)
    if got.sigma_ma is None:
        raise DomainError(
            f"{where}: {blank}, and no shipped chart states one for that boundary.",
            "Give the store a stated σ for blank boundary errors (a number in Myr).",
        )
    return float(got.sigma_ma), f"{blank}: borrowed from {got.borrowed_from}"


def _tie_name(t: dict[str, Any]) -> str:
    name = t.get("tie_id") or t.get("boundary") or t["basis"]
    return f"tie {name!r} of section {t['source_id']}/{t['section_id']} at {t['position_m']:g} m"


def stage(table: pa.Table, settings: Settings, given: Given) -> tuple[pa.Table, Recorded]:
    """Ages for every record (age models, reported and stage-only ages) with their chains;
    the age-model draws and the sections whose ties contradict go in the record."""
    out = Recorded()
    table, out.draws = assign(
        table, given.ties, settings, out.chains, given.strict, out.conflicts, given.sections
    )
    return table, out


def priors(settings: Any, sections: pa.Table | None) -> dict[tuple[str, str], tuple[Any, str]]:
    """Each section's accumulation prior and where it came from ("section" when its mapping
    block overrides the store's setting in part or whole, else "store"); sections not listed
    take the store's (``default_prior``)."""
    from strata13.compile.ages.agemodel import Accumulation

    store = default_prior(settings)
    out: dict[tuple[str, str], tuple[Any, str]] = {}
    if sections is None or "accumulation_shape" not in sections.column_names:
        return out
    for r in sections.select(
        ["source_id", "section_id", "accumulation_shape", "accumulation_segment_m"]
    ).to_pylist():
        shape, seg = r["accumulation_shape"], r["accumulation_segment_m"]
        if shape is None and seg is None:
            continue
        prior = Accumulation(
            store.shape if shape is None else float(shape),
            store.segment_m if seg is None else float(seg),
        )
        out[(r["source_id"], r["section_id"])] = (prior, "section")
    return out


def default_prior(settings: Any) -> Any:
    """The store's accumulation prior (``Settings.age_accumulation_*``)."""
    from strata13.compile.ages.agemodel import Accumulation

    return Accumulation(
        float(settings.age_accumulation_shape), float(settings.age_accumulation_segment_m)
    )


def assign(
    table: pa.Table,
    ties: pa.Table | None,
    settings: Any,
    chains: dict[str, str],
    strict: bool = True,
    conflicts: list[str] | None = None,
    sections: pa.Table | None = None,
) -> tuple[pa.Table, pa.Table]:
    """Fill age_ma, age_sigma_ma, the 95 % range, age_basis, time_scale, age_status and
    age_chain.

    Returns the table and the age-model draws (``age_draws`` rows) of its sections.
    ``sections`` (sections rows) may hold a section's own accumulation prior. Ties that
    contradict each other on the store's chart raise DomainError when ``strict`` (an
    ingest); otherwise (a recompute) their section keeps its other ages, its records' status
    and chain say why, and the conflict is appended to ``conflicts``.
    """
    conflicts = [] if conflicts is None else conflicts
    import numpy as np
    import pyarrow as pa
    from strata13.compile.derive.steps import add_chain, set_column
    from strata13.schemas.records import AGE_DRAWS, arrow_schema

    n = table.num_rows
    scale = settings.time_scale
    age = np.full(n, np.nan)
    sigma = np.full(n, np.nan)
    basis = np.full(n, None, dtype=object)
    status = np.full(n, PENDING, dtype=object)
    chain = np.full(n, None, dtype=object)

    lo95 = np.full(n, np.nan)
    hi95 = np.full(n, np.nan)

    def put(
        rows: np.ndarray,
        a: np.ndarray,
        s: np.ndarray,
        b: str,
        st: str,
        steps: list[Step],
        lo: Any = None,
        hi: Any = None,
    ) -> None:
        """Date ``rows``; the 95 % range defaults to ±1.96σ (normal)."""
        cid = add_chain(chains, steps)
        age[rows], sigma[rows], basis[rows], status[rows], chain[rows] = a, s, b, st, cid
        lo95[rows] = a - 1.96 * s if lo is None else lo
        hi95[rows] = a + 1.96 * s if hi is None else hi

    def lost(rows: np.ndarray, reason: str, detail: str) -> None:
        """A section without an age model: rows dated otherwise keep that age and its σ, and
        their status and chain say why there is no model; the others stay pending."""
        import json

        step = Step(
            "no age model",
            "the section's records keep their other ages",
            "the section's age ties",
            {"reason": reason, "detail": detail, "time_scale": scale},
        )
        # numpy's stubs reject None in not_equal(); on objects it compares each with None
        dated = rows[np.not_equal(basis[rows], None)]  # type: ignore[call-overload]
        for cid, was in sorted({(str(chain[i]), str(status[i])) for i in dated}):
            pick = dated[(chain[dated] == cid) & (status[dated] == was)]
            steps = [Step.from_dict(d) for d in json.loads(chains[cid])] + [step]
            note = f"{was}; no age model: {reason}"
            b = str(basis[pick[0]])
            put(pick, age[pick], sigma[pick], b, note, steps, lo95[pick], hi95[pick])
        rest = np.setdiff1d(rows, dated)
        plain = rest[status[rest] == PENDING]
        status[plain] = f"pending: no age model: {reason}"
        other = np.setdiff1d(rest, plain)  # pending for a reason of their own: both said
        status[other] = [f"{st}; no age model: {reason}" for st in status[other]]

    _stage_only(table, scale, put, status)
    _reported(table, scale, put, status)
    draws = _models(table, ties, settings, put, lost, status, basis, strict, conflicts, sections)
    out = table
    f64, txt = pa.float64(), pa.string()
    for name, values, typ in (
        ("age_ma", age, f64),
        ("age_sigma_ma", sigma, f64),
        ("age_basis", basis, txt),
        ("age_status", status, txt),
        ("age_chain", chain, txt),
        ("age_lo95_ma", lo95, f64),
        ("age_hi95_ma", hi95, f64),
    ):
        out = set_column(out, name, pa.array(values, type=typ, from_pandas=True))
    dated = ~np.isnan(age)
    out = set_column(out, "time_scale", pa.array(np.where(dated, scale, None), pa.string()))
    draws_table = pa.Table.from_pylist(draws, schema=arrow_schema(AGE_DRAWS))
    return out, draws_table


def _stage_only(table: pa.Table, scale: str, put: Any, status: np.ndarray) -> None:
    """Records with a stage name and no age: the stage's midpoint, uniform σ, flagged."""
    import numpy as np
    from strata13.schemas import timescales

    from strata13.errors import Strata13Error

    stages = np.asarray(table.column("stage_reported").to_numpy(zero_copy_only=False), object)
    has_age = ~np.isnan(
        table.column("age_reported_ma").to_numpy(zero_copy_only=False).astype(float)
    )
    for name in sorted({s for s in stages[~has_age] if s}):
        rows = np.flatnonzero((stages == name) & ~has_age)
        try:
            mid, sig, base, top = timescales.stage_age(name, scale)
        except Strata13Error:
            status[rows] = f"pending: stage {name!r} is not on {scale}"
            continue
        step = Step(
            "stage only",
            "uniform over the stage: midpoint, σ = span/√12",
            f"time-scale table {scale}",
            {"stage": name, "base_ma": base, "top_ma": top, "time_scale": scale},
            flags=("dated to a stage only",),
        )
        half = 0.475 * (base - top)  # the central 95 % of a uniform spread
        put(
            rows,
            np.full(len(rows), mid),
            np.full(len(rows), sig),
            "stage only",
            "dated: stage only (uniform over the stage)",
            [step],
            mid - half,
            mid + half,
        )


def _reported(table: pa.Table, scale: str, put: Any, status: np.ndarray) -> None:
    """Reported ages, moved from their chart to the store's (identity on the same chart).

    A reported age without an error takes the uniform σ of its reported stage (span/√12,
    the honest bound of "somewhere in the stage") when that stage on the store's chart holds
    it; otherwise its σ stays empty and its status says "no uncertainty given"."""
    import numpy as np
    from strata13.schemas import timescales
    from strata13.schemas.vocabularies import vocabulary

    ages = table.column("age_reported_ma").to_numpy(zero_copy_only=False).astype(float)
    sig = table.column("age_reported_sigma_ma").to_numpy(zero_copy_only=False).astype(float)
    charts = np.asarray(table.column("age_reported_scale").to_numpy(zero_copy_only=False), object)
    stages = np.asarray(table.column("stage_reported").to_numpy(zero_copy_only=False), object)
    has = ~np.isnan(ages)
    # numpy's stubs reject None in equal(); on an object array it compares each item with None
    no_chart = np.equal(charts, None)  # type: ignore[call-overload]
    status[has & no_chart] = "pending: the reported age's time scale is not stated"
    voc = vocabulary("time_scale")
    for chart in sorted({c for c in charts[has] if c is not None}):
        rows = np.flatnonzero(has & (charts == chart))
        canon = voc.resolve(chart)
        if canon is None:
            status[rows] = f"pending: time scale {chart!r} is not known"
            continue
        new, step = timescales.convert(ages[rows], canon, scale)
        ok = ~np.isnan(new)
        status[rows[~ok]] = f"pending: outside the boundaries {canon} and {scale} share"
        first = Step("reported", "as reported", "the authors' age", {"time_scale": canon})
        steps = [first] + ([Step.from_dict(step)] if canon != scale else [])
        no_sigma = np.isnan(sig[rows])
        pick = ok & ~no_sigma
        if pick.any():
            put(rows[pick], new[pick], sig[rows][pick], "reported", "dated: reported", steps)
        _reported_without_sigma(rows[ok & no_sigma], new[ok & no_sigma], stages, scale, put, steps)


def _reported_without_sigma(
    rows: np.ndarray, ages: np.ndarray, stages: np.ndarray, scale: str, put: Any, steps: list[Step]
) -> None:
    """Reported ages the authors gave no error for: the σ of their stage where it holds
    them, else none (said in the status)."""
    import numpy as np
    from strata13.schemas import timescales

    from strata13.errors import Strata13Error

    plain = np.ones(len(rows), dtype=bool)
    for name in sorted({s for s in stages[rows] if s}):
        try:
            _, sig, base, top = timescales.stage_age(name, scale)
        except Strata13Error:
            continue
        pick = (stages[rows] == name) & (ages >= top) & (ages <= base)
        if not pick.any():
            continue
        plain &= ~pick
        step = Step(
            "σ from the stage",
            "no error reported: the uniform σ of the reported stage, span/√12",
            f"time-scale table {scale}",
            {"stage": name, "base_ma": base, "top_ma": top, "time_scale": scale},
            flags=("no uncertainty given",),
        )
        put(
            rows[pick],
            ages[pick],
            np.full(int(pick.sum()), sig),
            "reported",
            f"dated: reported (no uncertainty given; σ of its stage {name})",
            [*steps, step],
        )
    if plain.any():
        n = int(plain.sum())
        put(
            rows[plain],
            ages[plain],
            np.full(n, np.nan),
            "reported",
            "dated: reported (no uncertainty given)",
            steps,
        )


def _models(
    table: pa.Table,
    ties: pa.Table | None,
    settings: Any,
    put: Any,
    lost: Any,
    status: np.ndarray,
    basis: np.ndarray,
    strict: bool,
    conflicts: list[str],
    sections: pa.Table | None,
) -> list[dict[str, Any]]:
    """Age models for every section of ``table`` that has ties; a section whose ties give
    no model (too few, contradictory, or not on the chart) goes to ``lost``."""
    import json

    import numpy as np
    from strata13.compile.ages import agemodel

    if ties is None or ties.num_rows == 0 or table.num_rows == 0:
        return []
    scale = settings.time_scale
    extrapolate, n_draws, seed = _options(settings)
    store_prior, own_priors = default_prior(settings), priors(settings, sections)
    src = np.asarray(table.column("source_id").to_numpy(zero_copy_only=False), object)
    sec = np.asarray(table.column("section_id").to_numpy(zero_copy_only=False), object)
    pos = table.column("position_m").to_numpy(zero_copy_only=False).astype(float)
    top = table.column("top_m").to_numpy(zero_copy_only=False).astype(float)
    base = table.column("base_m").to_numpy(zero_copy_only=False).astype(float)
    pos = np.where(np.isnan(pos), (top + base) / 2, pos)
    kinds = np.asarray(table.column("position_kind").to_numpy(zero_copy_only=False), object)
    by_section: dict[tuple[str, str], list[dict[str, Any]]] = {}
    for t in ties.to_pylist():
        by_section.setdefault((t["source_id"], t["section_id"]), []).append(t)
    wanted = {(s, c) for s, c in zip(src, sec, strict=True)}
    policy = settings.blank_boundary_sigma
    placed: dict[tuple[str, str], list[dict[str, Any]]] = {}
    for k, v in sorted(by_section.items()):
        if k not in wanted:
            continue
        unplaced: list[str] | None = None if strict else []  # ingest: refuse them
        placed[k] = ties_on_scale(v, scale, policy, unplaced)
        if unplaced:  # a recompute onto a chart that cannot place a tie: no model
            del placed[k]
            rows = np.flatnonzero((src == k[0]) & (sec == k[1]))
            lost(rows, f"a tie of the section cannot be placed on {scale}", unplaced[0])
            conflicts.append(f"{k[0]}/{k[1]}: {unplaced[0]}")
    keys = sorted({t["shared_key"] for v in placed.values() for t in v if t["shared_key"]})
    shared = agemodel.shared_offsets(keys, n_draws, seed)
    draws_rows: list[dict[str, Any]] = []
    for (s, c), tl in sorted(placed.items()):
        rows = np.flatnonzero((src == s) & (sec == c))
        if len(tl) < 2:
            reason = f"the section has {len(tl)} age tie; an age model needs two"
            lost(rows, reason, reason)
            continue
        kind = str(kinds[rows[0]] or "height")
        model_ties = [
            agemodel.Tie(
                position_m=t["position_m"],
                age_ma=t["age"],
                age_sigma_ma=t["sigma"],
                basis=t["basis"],
                boundary_key=t["shared_key"],
                note=_tie_name(t),
                source=t.get("tie_source_id") or "",
            )
            for t in tl
        ]
        try:
            agemodel.validate_ties(model_ties, kind)
        except DomainError as exc:
            if strict:  # ties being ingested: refuse them
                raise
            # a recompute (another chart) made consistent ties contradict each other: the
            # section falls back to its other ages and says why; the store stays usable
            lost(rows, f"the section's ties contradict each other on {scale}", exc.message)
            conflicts.append(f"{s}/{c}: {exc.message}")
            continue
        prior, prior_from = own_priors.get((s, c), (store_prior, "store"))
        have = rows[~np.isnan(pos[rows])]
        no_pos = rows[np.isnan(pos[rows])]
        left = no_pos[np.equal(basis[no_pos], None)]  # type: ignore[call-overload]  # as above
        status[left] = "pending: no position (the section's age model dates positions)"
        if not have.size:
            continue
        uniq, inverse = np.unique(pos[have], return_inverse=True)
        res = agemodel.draw_section(
            uniq,
            model_ties,
            kind,
            n_draws,
            agemodel.section_seed(f"{s}/{c}", seed),
            shared,
            allow_extrapolation=extrapolate,
            prior=prior,
        )
        d = res.draws
        summary = agemodel.summarise(d)
        steps = [
            Step(
                "age model",
                METHOD,
                "the section's age ties",
                agemodel.parameters(n_draws, seed, allow_extrapolation=extrapolate, prior=prior)
                | {"time_scale": scale, "accumulation_from": prior_from},
                extra={"ties": [t["step"] for t in tl]},
            )
        ]
        inside = ~np.isnan(summary.median)
        flagged = res.flags == agemodel.EXTRAPOLATED
        for mask, note in (
            (inside & ~flagged, "dated: age model"),
            (inside & flagged, "dated: age model, extrapolated beyond the ties"),
        ):
            if mask.any():
                pick = np.isin(inverse, np.flatnonzero(mask))
                put(
                    have[pick],
                    summary.median[inverse[pick]],
                    summary.sigma[inverse[pick]],
                    "age model",
                    note,
                    steps,
                    summary.lo95[inverse[pick]],
                    summary.hi95[inverse[pick]],
                )
        outside = have[np.isin(inverse, np.flatnonzero(~inside))]
        left = outside[np.equal(basis[outside], None)]  # type: ignore[call-overload]  # as above
        status[left] = "pending: outside the section's ties (extrapolation is off)"
        for i in range(0, len(uniq), CHUNK):
            block = d[:, i : i + CHUNK].astype("<f4")
            draws_rows.append(
                {
                    "source_id": s,
                    "section_id": c,
                    "chunk": i // CHUNK,
                    "positions_json": json.dumps([float(x) for x in uniq[i : i + CHUNK]]),
                    "n_draws": n_draws,
                    "draws": block.tobytes(order="C"),
                }
            )
    return draws_rows
