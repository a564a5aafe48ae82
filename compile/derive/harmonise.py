"""Harmonise: each reported δ value onto ‰ VPDB where a method exists for its scale.

The second stage of derive (after corrections): VPDB and PDB pass through flagged,
δ18O on VSMOW is converted, stated anchors re-anchor, raw in-house runs are normalised run
by run; anything else is pending with its reason. Every value gets its chain of steps.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

from strata13.compile.derive.engine import Given, Recorded
from strata13.compile.derive.settings import Settings, check_tolerance_permil
from strata13.compile.derive.steps import IDENTITY, Step, add_chain, chain_id, set_column
from strata13.schemas.fields import DELTA_FIELDS

from strata13.errors import DomainError

if TYPE_CHECKING:
    import pyarrow as pa


def _reported_step(scale: str, flags: tuple[str, ...]) -> Step:
    """The first step of every chain: the value as the authors reported it."""
    return Step(
        f"reported on {scale}",
        "as reported (no correction)",
        "the authors' statement of scale",
        {"scale": scale},
        0.0,
        flags,
        maps=IDENTITY,
    )


# samples whose δ18O a normalisation to calcite standards carries through acid digestion
# (mineralogy not stated is read as calcite, and the chain says so)
CALCITE_LIKE = ("calcite", "low-Mg calcite", "high-Mg calcite", "unknown")
PRECISION_PERMIL = 0.05  # typical external precision of carbonate δ13C/δ18O (common practice)


def _reanchor(
    d: str, scale: str, values: Any, spec: dict[str, Any], materials: Any, relation: str
) -> tuple[Any, list[Step]]:
    """Re-anchor values whose authors stated their anchors: map the values they assumed for
    the anchor materials onto the values the store accepts (compile.harmonise.anchors)."""
    from strata13.compile.harmonise import anchors
    from strata13.schemas.materials import accepted_value

    table, choice = materials
    iso = "d18o" if d.startswith("d18o") else "d13c"
    named = sorted(spec["anchors"].items())
    accepted = [accepted_value(m, iso, table, choice, relation) for m, _ in named]
    source = "; ".join(
        f"{m}: {v:g} ‰ ({row.value_set}, {row.status}; {row.source})"
        for (m, _), (v, row) in zip(named, accepted, strict=True)
    )
    if spec["method"] == "two-point":
        out, step = anchors.two_point(
            values,
            (named[0][1], named[1][1]),
            (accepted[0][0], accepted[1][0]),
            (named[0][0], named[1][0]),
            source,
        )
    else:
        out, step = anchors.one_point(values, named[0][1], accepted[0][0], named[0][0], source)
    old_rows = [row for _, row in accepted if row.status != "current"]
    step = step.flagged(
        *(
            f"{row.material}: the accepted value is {row.status} ({row.value_set})"
            for row in old_rows
        )
    )
    size = step.size_permil or 0.0
    if size < PRECISION_PERMIL - 1e-9:  # not fooled by rounding
        step = step.flagged(
            f"largest change {size:.3g} ‰ is below "
            f"typical analytical precision ({PRECISION_PERMIL} ‰, common "
            "practice): the scales agree here within precision"
        )
    return out, [_reported_step(scale, ()), step]


def _fix_index(table: pa.Table, fixes: dict[str, Any]) -> dict[int, Any]:
    """Row index -> (corrected value, why, published) for one δ field's corrections."""
    if not fixes:
        return {}
    ids = table.column("record_id").to_pylist()
    return {i: fixes[r] for i, r in enumerate(ids) if r in fixes}


def _offset_values(values: Any, spec: dict[str, Any] | None) -> Any:
    off = (spec or {}).get("offset")
    return values + off["value"] if off else values


def _with_offset(steps: list[Step], spec: dict[str, Any] | None) -> list[Step]:
    """The chain with the source's declared offset as its last step, when there is one."""
    off = (spec or {}).get("offset")
    if not off:
        return steps
    offset = Step(
        "declared per-source offset",
        "add a constant",
        f"the mapping's justification: {off['why']}",
        {"offset_permil": off["value"]},
        abs(off["value"]),
        maps=(1.0, float(off["value"])),
    )
    return [*steps, offset]


@dataclass(frozen=True)
class _RunOut:
    """One run's normalised values: its chain, its rows (a mask over the source's raw rows),
    the values (NaN where pending), the pending reasons and the run's precision (1σ)."""

    steps: list[Step]
    rows: Any
    values: Any
    pending: Any
    precision: float | None


def _run_accepted(
    spec: dict[str, Any], iso: str, materials: Any, relation: str
) -> dict[str, dict[str, Any]]:
    """The accepted value of each anchor and check material of a run, with its value set,
    1σ, published form and source, and who chose the value set (the mapping's [run]
    value_set or the store). A check without a value of this isotope is left out."""
    from strata13.schemas.materials import accepted_value, run_choice, sigma_1s

    table, choice = materials
    names = [*spec["anchors"], *spec.get("checks", [])]
    chosen, why = run_choice(names, spec.get("value_set"), table, choice)
    out = {}
    for m in names:
        role = "anchor" if m in spec["anchors"] else "check"
        try:
            value, row = accepted_value(m, iso, table, chosen, relation)
        except DomainError:
            if role == "anchor":
                raise
            continue
        vsmow = iso == "d18o" and row.d18o_scale == "VSMOW"
        out[m] = {
            "role": role,
            "value_vpdb": value,
            "sigma_1s": sigma_1s(row, iso, relation),
            "value_set": row.value_set,
            "status": row.status,
            "published": getattr(row, iso),
            "published_scale": getattr(row, f"{iso}_scale"),
            "converted_with": relation if vsmow else None,
            "chosen_by": why[(m, iso)],
            "source": row.source,
        }
    return out


DOLOSTONE_PENDING = (
    "pending: a dolostone with no mineralogy stated; the acid-fractionation step of a run "
    "normalised to calcite standards needs the mineralogy of the sample (state mineralogy "
    "in a column or in [constants]: calcite, or dolomite)"
)
MINERAL_PENDING = (
    "pending: no acid-fractionation relation for {} against calcite standards is shipped"
)
NO_POSITION_PENDING = (
    "pending: drift correction needs the sample's run_position (fill it, or set drift = false)"
)


def _acid_pending(mineral: list[Any], lithology: list[Any]) -> list[str | None]:
    """Why each sample's δ18O cannot be carried by calcite standards, or None: a stated
    mineralogy other than calcite, or a dolostone whose mineralogy is not stated (never
    silently read as calcite). Other samples with no mineralogy are read as calcite."""
    out: list[str | None] = []
    for m, lith in zip(mineral, lithology, strict=True):
        if m in (None, "unknown") and lith == "dolostone":
            out.append(DOLOSTONE_PENDING)
        elif (m or "calcite") not in CALCITE_LIKE:
            out.append(MINERAL_PENDING.format(m))
        else:
            out.append(None)
    return out


def _run_values(
    d: str,
    table: pa.Table,
    rows: Any,
    reported: Any,
    spec: dict[str, Any],
    runs: pa.Table | None,
    materials: Any,
    relation: str,
    check_setting: float | None = None,
) -> tuple[list[_RunOut], list[dict[str, Any]]]:
    """Normalise raw in-house run values, run by run, to the accepted values of the run's
    anchor materials (compile.harmonise.runs): drift fitted within material first when the
    [run] asks, check materials judged, the run's precision measured; returns each run's
    values and chain, and the QC rows."""
    import numpy as np

    iso = "d18o" if d.startswith("d18o") else "d13c"
    measured = "d18o_measured" if iso == "d18o" else "d13c_measured"
    idx = np.flatnonzero(rows)
    src = table.column("source_id").take(idx).to_pylist()
    run_ids = table.column("run_id").take(idx).to_pylist()
    pos = table.column("run_position").take(idx).to_numpy(zero_copy_only=False).astype(float)
    acid = (
        _acid_pending(
            table.column("mineralogy").take(idx).to_pylist(),
            table.column("lithology").take(idx).to_pylist(),
        )
        if iso == "d18o"
        else [None] * len(idx)
    )
    std = runs.to_pylist() if runs is not None else []
    out: list[_RunOut] = []
    qcs: list[dict[str, Any]] = []
    try:
        accepted = _run_accepted(spec, iso, materials, relation)
    except DomainError as exc:
        raise DomainError(f"source {src[0]}, [run] {iso}: {exc.message}", exc.hint) from None
    for key in sorted(set(zip(src, run_ids, strict=True)), key=str):
        sel = np.array([(a, b) == key for a, b in zip(src, run_ids, strict=True)])
        here = [r for r in std if (r["source_id"], r["run_id"]) == key and r[measured] is not None]
        where = f"run {key[1]!r} of source {key[0]}"
        if key[1] is None:
            raise DomainError(
                f"source {key[0]}: a raw value has no run_id.",
                "Every row of an in-house run sheet needs its run.",
            )
        try:
            got = _one_run(
                str(key[1]),
                where,
                reported[rows][sel],
                pos[sel],
                here,
                measured,
                spec,
                accepted,
                check_setting,
            )
        except DomainError as exc:
            raise DomainError(f"{where}, {iso}: {exc.message}", exc.hint) from None
        values, step, qc, drift, drift_pending = got
        pending = np.array(
            [
                p or a
                for p, a in zip(drift_pending, np.asarray(acid, dtype=object)[sel], strict=True)
            ],
            dtype=object,
        )
        values = np.where([p is None for p in pending], values, np.nan)
        if iso == "d18o":
            step = step.flagged(
                "acid fractionation: carried by the normalisation "
                "to calcite standards reacted alongside (calcite samples; a "
                "mineralogy not stated is read as calcite, except in a dolostone)"
            )
        raw_step = Step(
            "reported on the lab's working gas (raw)",
            "as measured",
            where,
            {"scale": "raw"},
            maps=IDENTITY,
        )
        out.append(_RunOut([raw_step, step], sel, values, pending, qc.precision_1s))
        used = {
            m: {**a, "measured": sum(r["material"] == m for r in here)} for m, a in accepted.items()
        }
        qcs.append(
            {
                "source_id": key[0],
                "run_id": key[1],
                "isotope": iso,
                "slope": qc.slope,
                "intercept": qc.intercept,
                "n_anchors": qc.n_anchors,
                "anchors": ", ".join(sorted(step.parameters["anchors"])),
                "residuals_json": json.dumps(qc.residuals, sort_keys=True),
                "precision_1s": qc.precision_1s,
                "drift_per_position": None if drift is None else drift.slope,
                "warnings": "; ".join(qc.warnings) or None,
                "drift_sigma": None if drift is None else drift.sigma,
                "check_status": qc.check_status,
                "check_detail": "; ".join(c.describe() for c in qc.checks) or None,
                "accepted_json": json.dumps(used, sort_keys=True, ensure_ascii=False),
            }
        )
    return out, qcs


def _one_run(
    run_id: str,
    where: str,
    raw: Any,
    positions: Any,
    here: list[dict[str, Any]],
    measured: str,
    spec: dict[str, Any],
    accepted: dict[str, dict[str, Any]],
    check_setting: float | None,
) -> tuple[Any, Step, Any, Any, list[str | None]]:
    """One run: (values, normalisation step, QC, drift fit or None, pending reasons)."""
    import numpy as np
    from strata13.compile.harmonise import runs as run_math

    values_of: dict[str, list[float]] = {r["material"]: [] for r in here}
    pending: list[str | None] = [None] * len(raw)
    drift = None
    if spec.get("drift"):
        blank = [r for r in here if r["run_position"] is None]
        if blank:
            raise DomainError(
                f"drift correction needs the run position of every standard; "
                f"{blank[0]['material']} in sheet row {blank[0]['sheet_row']} has none.",
                "Fill its run position, or set drift = false in [run].",
            )
        p = np.array([float(r["run_position"]) for r in here])
        v = np.array([float(r[measured]) for r in here])
        drift = run_math.fit_drift(p, v, [r["material"] for r in here])
        corrected = run_math.remove_drift(v, p, drift.slope)
        raw = run_math.remove_drift(raw, positions, drift.slope)
        pending = [NO_POSITION_PENDING if np.isnan(x) else None for x in positions]
    else:
        corrected = np.array([float(r[measured]) for r in here])
    for r, c in zip(here, corrected, strict=True):
        values_of[r["material"]].append(float(c))
    anchors = {
        m: (values_of[m], a["value_vpdb"])
        for m, a in accepted.items()
        if a["role"] == "anchor" and values_of.get(m)
    }
    checks = {
        m: (values_of[m], a["value_vpdb"])
        for m, a in accepted.items()
        if a["role"] == "check" and values_of.get(m)
    }
    sigmas = {m: a["sigma_1s"] for m, a in accepted.items() if a["role"] == "check"}
    values, step, qc = run_math.normalise_run(
        run_id,
        raw,
        anchors,
        checks,
        spec.get("slope_tolerance", run_math.SLOPE_TOLERANCE),
        f"{where}: reference materials measured in the run",
        check_sigmas=sigmas,
        check_setting=check_setting,
        drift_fitted=drift is not None,
    )
    params = {
        **step.parameters,
        "accepted": {  # in full (scale, source, who chose) in run_qc.accepted_json
            m: f"{a['value_vpdb']:+.3f} ‰ VPDB ({a['value_set']})" for m, a in accepted.items()
        },
        "precision_1s": qc.precision_1s,
        "precision_rule": "pooled within-material SD of the run's replicated reference "
        "materials after normalisation; fills the record's precision where the sheet "
        "states none (a sheet's own precision wins)",
    }
    if drift is not None:  # the value after depends on the run position too: no map
        params |= {"drift_per_position": drift.slope, "drift_sigma": drift.sigma}
    step = replace(step, parameters=params, maps=None if drift is not None else step.maps)
    return values, step, qc, drift, pending


def stage(table: pa.Table, settings: Settings, given: Given) -> tuple[pa.Table, Recorded]:
    """Every δ onto ‰ VPDB with its chain (corrected δ values first), then Δ13C."""
    from strata13.compile.integrity.corrections import delta_fixes

    out = Recorded()
    fixes = delta_fixes(table, given.corrections)
    table = harmonise(table, out.chains, settings, given.strict, given.runs, out.run_qc, fixes)
    return big_delta(table), out


def harmonise(
    table: pa.Table,
    chains: dict[str, str],
    settings: Settings,
    strict: bool = True,
    runs: pa.Table | None = None,
    run_qc: list[dict[str, Any]] | None = None,
    fixes: dict[str, dict[str, Any]] | None = None,
) -> pa.Table:
    """Each δ column onto ‰ VPDB where a method exists for its reported scale:

    * VPDB: taken as reported (normalisation not stated: flagged, not corrected);
    * PDB: the historical name of the same scale, taken as reported and flagged
      (common practice);
    * δ18O on VSMOW: the VSMOW–VPDB relation named in the settings (IUPAC by default);
    * anything else (VPDB-LSVEC needs the authors' anchors): pending, not copied.
    """
    import numpy as np
    import pyarrow as pa
    from strata13.compile.harmonise import oxygen
    from strata13.schemas.materials import store_table

    constants = settings.vsmow_constants
    check_setting = check_tolerance_permil(settings)
    materials = store_table(settings.stored())
    run_qc = [] if run_qc is None else run_qc
    fixes = fixes or {}
    for d in DELTA_FIELDS:
        reported = table.column(f"{d}_reported").to_numpy(zero_copy_only=False).astype(float)
        fixed = _fix_index(table, fixes.get(d, {}))
        for i, (value, _why, _rep) in fixed.items():
            reported[i] = value  # derived from the corrected value; *_reported stays as published
        scale = np.asarray(table.column(f"{d}_scale").to_numpy(zero_copy_only=False), object)
        precision = (
            table.column(f"{d}_precision_reported").to_numpy(zero_copy_only=False).astype(float)
        )
        has = ~np.isnan(reported)
        out = np.full(len(reported), np.nan)
        chain = np.full(len(reported), None, dtype=object)
        # numpy's stubs reject None as a value of where(); on object output it is the null
        status = np.where(has, "pending", None).astype(object)  # type: ignore[call-overload]
        norm = (
            np.asarray(table.column(f"{d}_normalisation").to_numpy(zero_copy_only=False), object)
            if f"{d}_normalisation" in table.column_names
            else np.full(len(reported), None, dtype=object)
        )
        for sc, nm in sorted(
            {(x, y) for x, y in zip(scale[has], norm[has], strict=True) if x is not None}, key=str
        ):
            rows = has & (scale == sc) & np.equal(norm, nm)
            spec = json.loads(nm) if nm else None
            stated = spec is not None and spec.get("method") != "not stated"
            if sc == "raw":
                # a raw run's mapping always gives its normalisation (the [run] block)
                assert spec is not None
                try:
                    run_out, qc = _run_values(
                        d, table, rows, reported, spec, runs, materials, constants, check_setting
                    )
                except DomainError as exc:
                    if strict:
                        raise
                    status[rows] = f"pending: {exc.message}"
                    continue
                run_qc += qc
                for r in run_out:  # one chain per run
                    values_rows = np.flatnonzero(rows)[r.rows]
                    cid = add_chain(chains, _with_offset(r.steps, spec))
                    out[values_rows] = _offset_values(r.values, spec)
                    chain[values_rows] = cid
                    status[values_rows] = "harmonised"
                    gap = np.array([p is not None for p in r.pending], dtype=bool)
                    chain[values_rows[gap]] = None
                    status[values_rows[gap]] = r.pending[gap]
                    if r.precision is not None:  # the sheet's own precision wins
                        fill = values_rows[~gap & np.isnan(precision[values_rows])]
                        precision[fill] = r.precision
                continue
            if sc in ("VPDB", "PDB", "VPDB-LSVEC") and stated and spec is not None:
                try:
                    values, steps = _reanchor(d, sc, reported[rows], spec, materials, constants)
                except DomainError as exc:
                    if strict:
                        src = table.column("source_id")[int(np.flatnonzero(rows)[0])].as_py()
                        raise DomainError(
                            f"source {src}: [normalisation.{d}]: {exc.message}", exc.hint
                        ) from None
                    status[rows] = f"pending: {exc.message}"
                    continue
            elif sc in ("VPDB", "PDB"):
                flags = ("normalisation not stated",) + (
                    ("reported as PDB; read as VPDB (common practice)",) if sc == "PDB" else ()
                )
                steps = [_reported_step(sc, flags)]
                values = reported[rows]
            elif sc == "VSMOW" and d == "d18o_carb":
                values, step = oxygen.vsmow_to_vpdb(reported[rows], constants)
                steps = [_reported_step(sc, ()), step]
            elif sc == "VPDB-LSVEC":
                status[rows] = (
                    "pending: VPDB-LSVEC values need the authors' anchors "
                    "([normalisation] in the mapping)"
                )
                continue
            else:
                status[rows] = f"pending: harmonisation from {sc} not available yet"
                continue
            cid = add_chain(chains, _with_offset(steps, spec))
            out[rows] = _offset_values(values, spec)
            chain[rows] = cid
            status[rows] = "harmonised"
        for i, (value, why, rep) in fixed.items():  # a correction opens the record's chain
            if chain[i] is None:
                continue
            fix = Step(
                "correction",
                "the user's correction of the published value",
                why,
                {"published": rep, "corrected": value},
                abs(value - rep) if rep is not None and rep == rep else 0.0,
                ("corrected by the user",),
                maps=(0.0, float(value)),  # the value after is the corrected one, whatever before
            )
            cid, text = chain_id([fix.as_dict(), *json.loads(chains[chain[i]])])
            chains[cid] = text
            chain[i] = cid
        status[has & (status == "pending")] = "pending: the reported scale is not stated"
        table = set_column(table, d, pa.array(out, type=pa.float64(), from_pandas=True))
        table = set_column(table, f"{d}_chain", pa.array(chain, type=pa.string()))
        table = set_column(table, f"{d}_status", pa.array(status, type=pa.string()))
        table = set_column(
            table, f"{d}_precision", pa.array(precision, type=pa.float64(), from_pandas=True)
        )
    return table


def big_delta(table: pa.Table) -> pa.Table:
    """Δ13C = δ13C carbonate − δ13C organic, where both are harmonised on the same record."""
    import pyarrow.compute as pc

    return set_column(
        table, "big_delta_13c", pc.subtract(table.column("d13c_carb"), table.column("d13c_org"))
    )
