"""The one derive pipeline: reported records + store settings -> every derived column.

harmonise -> ages -> paleo -> screens, in that order; ingest runs it and every recompute
command re-runs it with new settings. Reported columns are never touched. Each step that
changes a value records a chain of (method, parameters, source); a value whose step is not
available yet is *pending* (with the reason in its status column), never copied across.

What exists now: δ values reported on VPDB (or PDB) pass through with an identity step
flagged "normalisation not stated"; δ18O on VSMOW is converted with the settings' VSMOW–VPDB
relation; other scales are pending. Ages come from ``compile.ages`` (age models from ties,
converted reported ages, stage-only ages). Paleo-positions are pending (no rotation model).
"""

from __future__ import annotations

import functools
import hashlib
import json
from dataclasses import asdict, dataclass, field
from typing import TYPE_CHECKING, Any

from strata13.schemas.fields import DELTA_FIELDS

from strata13.errors import DomainError

if TYPE_CHECKING:
    import pyarrow as pa

DERIVED_COLUMNS = {
    *DELTA_FIELDS,
    *(f"{d}_chain" for d in DELTA_FIELDS),
    *(f"{d}_status" for d in DELTA_FIELDS),
    "age_ma",
    "age_sigma_ma",
    "age_basis",
    "time_scale",
    "age_status",
    "age_chain",
    "age_lo95_ma",
    "age_hi95_ma",
    "big_delta_13c",
    "paleolat_sigma",
    "plate_id",
    "paleolat",
    "paleolon",
    "paleo_model",
    "paleo_frame",
    "paleo_status",
    "screen",
    "row_hash",
}
DEFAULT_TIME_SCALE = "ICS2024/12"


@dataclass(frozen=True)
class Settings:
    """The store's derive settings; each change is one new store version."""

    time_scale: str = DEFAULT_TIME_SCALE
    extra: dict[str, Any] = field(default_factory=dict)

    def as_dict(self) -> dict[str, Any]:
        return asdict(self)

    def stored(self) -> dict[str, Any]:
        """The settings as the store's settings table keeps them (one key each)."""
        return {"time_scale": self.time_scale, **self.extra}

    @classmethod
    def from_stored(cls, values: dict[str, Any]) -> Settings:
        return cls(
            time_scale=values.get("time_scale", DEFAULT_TIME_SCALE),
            extra={k: v for k, v in values.items() if k != "time_scale"},
        )

    def hash(self) -> str:
        text = json.dumps(self.as_dict(), sort_keys=True)
        return hashlib.sha256(text.encode()).hexdigest()[:16]


@dataclass
class Derived:
    table: pa.Table
    chains: dict[str, str]  # chain id -> steps JSON
    draws: pa.Table | None = None  # age-model draws per section (age_draws rows)
    screens: pa.Table | None = None  # screen results, long form (screen_results rows)
    conflicts: list[str] = field(default_factory=list)  # sections whose ties contradict
    run_qc: pa.Table | None = None  # per in-house run and isotope: line and quality


def chain_id(steps: list[dict[str, Any]]) -> tuple[str, str]:
    text = json.dumps(steps, sort_keys=True, ensure_ascii=False)
    return hashlib.sha256(text.encode()).hexdigest()[:16], text


def derive(
    records: pa.Table,
    settings: Settings,
    ties: pa.Table | None = None,
    strict: bool = True,
    runs: pa.Table | None = None,
    corrections: pa.Table | None = None,
) -> Derived:
    """Fill the derived columns of ``records`` from its reported columns, ``settings`` and
    the age ties of its sections (``ties``: age_ties rows; others are ignored).

    ``runs``: the reference-material measurements of in-house runs (runs rows);
    ``corrections``: the store's corrections (applied on top of the reported values).
    ``strict`` (ingest): contradictory ties are refused. A recompute passes False: a section
    whose ties contradict each other on the new chart keeps its other ages, and
    ``Derived.conflicts`` lists it.
    """
    import pyarrow as pa
    from strata13.compile.derive import ages
    from strata13.schemas.records import RUN_QC, arrow_schema

    chains: dict[str, str] = {}
    conflicts: list[str] = []
    qc: list[dict[str, Any]] = []
    from strata13.compile.integrity.corrections import apply

    records, fixes = apply(records, corrections)
    table = _harmonise(records, chains, settings, strict, runs, qc, fixes)
    table = _big_delta(table)
    table, draws = ages.assign(table, ties, settings, chains, strict, conflicts)
    table = _paleo(table, settings)
    table, screens = _screens(table, settings)
    return Derived(
        table,
        chains,
        draws,
        screens,
        conflicts,
        pa.Table.from_pylist(qc, schema=arrow_schema(RUN_QC)),
    )


def _big_delta(table: pa.Table) -> pa.Table:
    """Δ13C = δ13C carbonate − δ13C organic, where both are harmonised on the same record."""
    import pyarrow.compute as pc

    return set_column(
        table, "big_delta_13c", pc.subtract(table.column("d13c_carb"), table.column("d13c_org"))
    )


def set_column(table: pa.Table, name: str, values: pa.Array) -> pa.Table:
    i = table.column_names.index(name)
    return table.set_column(i, table.schema.field(name), values.cast(table.schema.field(name).type))


def _reported_step(scale: str, flags: tuple[str, ...]) -> dict[str, Any]:
    return {
        "step": f"reported on {scale}",
        "method": "as reported (no correction)",
        "parameters": {"scale": scale},
        "source": "the authors' statement of scale",
        "size_permil": 0.0,
        "flags": list(flags),
    }


# samples whose δ18O a normalisation to calcite standards carries through acid digestion
# (mineralogy not stated is read as calcite, and the chain says so)
CALCITE_LIKE = ("calcite", "low-Mg calcite", "high-Mg calcite", "unknown")
PRECISION_PERMIL = 0.05  # typical external precision of carbonate δ13C/δ18O (common practice)
SCREEN_CHUNK = 200_000  # records per screening pass (whole sections; bounds memory)


def _reanchor(
    d: str, scale: str, values: Any, spec: dict[str, Any], materials: Any, relation: str
) -> tuple[Any, list[dict[str, Any]]]:
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
    info = step.as_dict()
    old_rows = [row for _, row in accepted if row.status != "current"]
    info["flags"] = list(info.get("flags", [])) + [
        f"{row.material}: the accepted value is {row.status} ({row.value_set})" for row in old_rows
    ]
    if info.get("size_permil", 0.0) < PRECISION_PERMIL - 1e-9:  # not fooled by rounding
        info["flags"].append(
            f"largest change {info.get('size_permil', 0.0):.3g} ‰ is below "
            f"typical analytical precision ({PRECISION_PERMIL} ‰, common "
            "practice): the scales agree here within precision"
        )
    return out, [_reported_step(scale, ()), info]


def _fix_index(table: pa.Table, fixes: dict[str, Any]) -> dict[int, Any]:
    """Row index -> (corrected value, why, published) for one δ field's corrections."""
    if not fixes:
        return {}
    ids = table.column("record_id").to_pylist()
    return {i: fixes[r] for i, r in enumerate(ids) if r in fixes}


def _offset_values(values: Any, spec: dict[str, Any] | None) -> Any:
    off = (spec or {}).get("offset")
    return values + off["value"] if off else values


def _with_offset(
    steps: list[dict[str, Any]], spec: dict[str, Any] | None, before: Any
) -> list[dict[str, Any]]:
    """The chain with the source's declared offset as its last step, when there is one."""
    off = (spec or {}).get("offset")
    if not off:
        return steps
    return [
        *steps,
        {
            "step": "declared per-source offset",
            "method": "add a constant",
            "parameters": {"offset_permil": off["value"]},
            "source": f"the mapping's justification: {off['why']}",
            "size_permil": abs(off["value"]),
            "flags": [],
        },
    ]


def _run_values(
    d: str,
    table: pa.Table,
    rows: Any,
    reported: Any,
    spec: dict[str, Any],
    runs: pa.Table | None,
    materials: Any,
    relation: str,
) -> tuple[Any, list[tuple[list[dict[str, Any]], Any, Any]], list[dict[str, Any]]]:
    """Normalise raw in-house run values, run by run, to the store's accepted values of the
    run's anchor materials (compile.harmonise.runs); returns per-run chains and the QC."""
    import numpy as np
    from strata13.compile.harmonise import runs as run_math
    from strata13.schemas.materials import accepted_value

    iso = "d18o" if d.startswith("d18o") else "d13c"
    measured = "d18o_measured" if iso == "d18o" else "d13c_measured"
    idx = np.flatnonzero(rows)
    src = table.column("source_id").take(idx).to_pylist()
    run_ids = table.column("run_id").take(idx).to_pylist()
    pos = table.column("run_position").take(idx).to_numpy(zero_copy_only=False).astype(float)
    std = runs.to_pylist() if runs is not None else []
    out: list[tuple[list[dict[str, Any]], Any, Any]] = []
    qcs: list[dict[str, Any]] = []
    mat_table, choice = materials
    for key in sorted(set(zip(src, run_ids, strict=True)), key=str):
        sel = np.array([(a, b) == key for a, b in zip(src, run_ids, strict=True)])
        here = [r for r in std if (r["source_id"], r["run_id"]) == key and r[measured] is not None]
        where = f"run {key[1]!r} of source {key[0]}"
        if key[1] is None:
            raise DomainError(
                f"source {key[0]}: a raw value has no run_id.",
                "Every row of an in-house run sheet needs its run.",
            )

        def meas(material: str, rows_: list[dict[str, Any]] = here) -> list[float]:
            return [float(r[measured]) for r in rows_ if r["material"] == material]

        anchors = {}
        for m in spec["anchors"]:
            if meas(m):
                anchors[m] = (meas(m), accepted_value(m, iso, mat_table, choice, relation)[0])
        checks = {
            m: (meas(m), accepted_value(m, iso, mat_table, choice, relation)[0])
            for m in spec.get("checks", [])
            if meas(m)
        }
        raw = reported[rows][sel]
        drift = None
        if spec.get("drift"):
            ref = [
                (r["run_position"], float(r[measured]))
                for r in here
                if r["run_position"] is not None
            ]
            by_mat: dict[str, list[float]] = {}
            for r in here:
                by_mat.setdefault(r["material"], []).append(float(r[measured]))
            offsets = [
                float(r[measured]) - float(np.mean(by_mat[r["material"]]))
                for r in here
                if r["run_position"] is not None
            ]
            raw, drift = run_math.drift_correct(
                raw, pos[sel], np.array([p for p, _ in ref]), np.array(offsets)
            )
            pp = np.array([r["run_position"] or 0.0 for r in here])
            for m in list(anchors):
                got = [
                    float(r[measured]) - drift * p
                    for r, p in zip(here, pp, strict=True)
                    if r["material"] == m
                ]
                anchors[m] = (got, anchors[m][1])
        try:
            values, step, qc = run_math.normalise_run(
                str(key[1]),
                raw,
                anchors,
                checks,
                spec.get("slope_tolerance", 0.05),
                f"{where}: reference materials measured in the run",
            )
        except DomainError as exc:
            raise DomainError(f"{where}, {iso}: {exc.message}", exc.hint) from None
        info = step.as_dict()
        info["parameters"]["accepted_from"] = "the store's reference-material values"
        if drift is not None:
            info["parameters"]["drift_per_position"] = drift
        if iso == "d18o":
            info["flags"] = [
                *info["flags"],
                "acid fractionation: carried by the normalisation "
                "to calcite standards reacted alongside (calcite samples; a "
                "mineralogy not stated is read as calcite)",
            ]
            mineral = table.column("mineralogy").take(idx).to_pylist()
            other = np.array([(m or "calcite") not in CALCITE_LIKE for m in mineral]) & sel
            if other.any():  # no shipped relation corrects dolomite against calcite standards
                values = np.where(other[sel], np.nan, values)
        out.append(
            (
                [
                    {
                        "step": "reported on the lab's working gas (raw)",
                        "method": "as measured",
                        "parameters": {"scale": "raw"},
                        "source": where,
                        "size_permil": 0.0,
                        "flags": [],
                    },
                    info,
                ],
                sel,
                values,
            )
        )
        qcs.append(
            {
                "source_id": key[0],
                "run_id": key[1],
                "isotope": iso,
                "slope": qc.slope,
                "intercept": qc.intercept,
                "n_anchors": qc.n_anchors,
                "anchors": ", ".join(sorted(anchors)),
                "residuals_json": json.dumps(qc.residuals, sort_keys=True),
                "precision_1s": qc.precision_1s,
                "drift_per_position": drift,
                "warnings": "; ".join(qc.warnings) or None,
            }
        )
    return None, out, qcs


def _harmonise(
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

    constants = settings.extra.get("vsmow_constants", oxygen.DEFAULT)
    materials = store_table(settings.extra)
    run_qc = [] if run_qc is None else run_qc
    fixes = fixes or {}
    for d in DELTA_FIELDS:
        reported = table.column(f"{d}_reported").to_numpy(zero_copy_only=False).astype(float)
        fixed = _fix_index(table, fixes.get(d, {}))
        for i, (value, _why, _rep) in fixed.items():
            reported[i] = value  # derived from the corrected value; *_reported stays as published
        scale = np.asarray(table.column(f"{d}_scale").to_numpy(zero_copy_only=False), object)
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
                    values, run_steps, qc = _run_values(
                        d, table, rows, reported, spec, runs, materials, constants
                    )
                except DomainError as exc:
                    if strict:
                        raise
                    status[rows] = f"pending: {exc.message}"
                    continue
                run_qc += qc
                for r_steps, r_rows, r_vals in run_steps:  # one chain per run
                    values_rows = np.flatnonzero(rows)[r_rows]
                    r_steps = _with_offset(r_steps, spec, r_vals)
                    cid, text = chain_id(r_steps)
                    chains[cid] = text
                    out[values_rows] = _offset_values(r_vals, spec)
                    chain[values_rows] = cid
                    status[values_rows] = "harmonised"
                    gap = values_rows[np.isnan(np.asarray(r_vals, float))]
                    chain[gap] = None
                    status[gap] = (
                        "pending: no acid-fractionation relation for this "
                        "mineralogy against calcite standards is shipped"
                    )
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
                steps = [_reported_step(sc, ()), step.as_dict()]
            elif sc == "VPDB-LSVEC":
                status[rows] = (
                    "pending: VPDB-LSVEC values need the authors' anchors "
                    "([normalisation] in the mapping)"
                )
                continue
            else:
                status[rows] = f"pending: harmonisation from {sc} not available yet"
                continue
            steps = _with_offset(steps, spec, values)
            values = _offset_values(values, spec)
            cid, text = chain_id(steps)
            chains[cid] = text
            out[rows] = values
            chain[rows] = cid
            status[rows] = "harmonised"
        for i, (value, why, rep) in fixed.items():  # a correction opens the record's chain
            if chain[i] is None:
                continue
            steps = [
                {
                    "step": "correction",
                    "method": "the user's correction of the published value",
                    "parameters": {"published": rep, "corrected": value},
                    "source": why,
                    "size_permil": abs(value - rep) if rep is not None and rep == rep else 0.0,
                    "flags": ["corrected by the user"],
                },
                *json.loads(chains[chain[i]]),
            ]
            cid, text = chain_id(steps)
            chains[cid] = text
            chain[i] = cid
        status[has & (status == "pending")] = "pending: the reported scale is not stated"
        table = set_column(table, d, pa.array(out, type=pa.float64(), from_pandas=True))
        table = set_column(table, f"{d}_chain", pa.array(chain, type=pa.string()))
        table = set_column(table, f"{d}_status", pa.array(status, type=pa.string()))
    return table


@functools.lru_cache(maxsize=4)
def _paleo_model(model_text: str, polygons_text: str) -> tuple[Any, Any]:
    """The store's rotation model and plate polygons, parsed once per content."""
    from strata13.compile.paleo import plates, rotations

    return (
        rotations.parse_model(model_text, "the store's rotation model"),
        plates.parse_polygons(json.loads(polygons_text), "the store's plate polygons"),
    )


def _paleo(table: pa.Table, settings: Settings) -> pa.Table:
    """Paleo-positions of every dated record with the store's rotation model: plate by
    point-in-polygon (the mapping's per-locality plate wins), then the finite rotation of
    that plate at the record's own age; a record without either says why."""
    import numpy as np
    import pyarrow as pa
    from strata13.compile.paleo import plates, rotations

    n = table.num_rows
    model_text = settings.extra.get("rotation_model_csv")
    if not model_text or n == 0:
        return set_column(
            table,
            "paleo_status",
            pa.array(["pending: no rotation model in the store"] * n, pa.string()),
        )
    model, polygons = _paleo_model(model_text, settings.extra["plate_polygons_geojson"])
    lat = table.column("lat").to_numpy(zero_copy_only=False).astype(float)
    lon = table.column("lon").to_numpy(zero_copy_only=False).astype(float)
    age = table.column("age_ma").to_numpy(zero_copy_only=False).astype(float)
    has_xy = ~(np.isnan(lat) | np.isnan(lon))
    plate = np.full(n, plates.UNASSIGNED, dtype=np.int64)
    if has_xy.any():
        got = plates.assign(lat[has_xy], lon[has_xy], polygons)
        plate[has_xy] = got.plate_id
    override = table.column("plate_override").to_numpy(zero_copy_only=False)
    forced = np.array([v is not None and v == v for v in override], dtype=bool)
    plate[forced] = np.asarray(override[forced], dtype=np.int64)
    rec = rotations.reconstruct(lat, lon, plate.astype(float), age, model)
    sigma = rotations.paleolat_sigma(lat, lon, plate.astype(float), age, model)
    # numpy's stubs reject None as a value of where(); on object output it is the null
    placed = np.asarray(rec.status, dtype=object) == ""
    status = np.where(placed, "placed", None).astype(object)  # type: ignore[call-overload]
    for i in np.flatnonzero(status == None):  # noqa: E711 (object array)
        status[i] = f"pending: {rec.status[i]}"
    status[~has_xy & ~forced] = "pending: no present-day coordinates"
    status[(plate == plates.UNASSIGNED) & has_xy & ~forced] = (
        "pending: outside every plate polygon (unassigned)"
    )
    ok = status == "placed"
    out = table
    out = set_column(out, "plate_id", pa.array(plate, mask=plate < 0).cast(pa.int32()))
    for name, values in (
        ("paleolat", rec.paleolat),
        ("paleolon", rec.paleolon),
        ("paleolat_sigma", sigma),
    ):
        out = set_column(
            out, name, pa.array(np.where(ok, values, np.nan), type=pa.float64(), from_pandas=True)
        )
    out = set_column(out, "paleo_model", pa.array(np.where(ok, model.name, None), pa.string()))
    out = set_column(out, "paleo_frame", pa.array(np.where(ok, model.frame, None), pa.string()))
    return set_column(out, "paleo_status", pa.array(status, pa.string()))


def rule_set(settings: Settings) -> Any:
    """The store's screening rules (the shipped default where a store predates them)."""
    from strata13.compile.screening.rules import load_rules, parse_canonical

    text = settings.extra.get("screen_rules")
    return parse_canonical(text) if text else load_rules(None)


def _screens(table: pa.Table, settings: Settings) -> tuple[pa.Table, pa.Table]:
    """The screen column (pass / fail / untested) and the long results of every rule.

    Runs on harmonised δ values and ages, so it comes last; it reads, never changes, any
    other column. Whether an untested rule counts as passed is the store's setting.
    """
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc
    from strata13.compile.screening.evaluate import evaluate
    from strata13.schemas.records import SCREEN_RESULTS, arrow_schema

    rules = rule_set(settings)
    untested_passes = bool(settings.extra.get("screen_untested_passes", False))
    if table.num_rows == 0 or not rules.rules:
        return set_column(
            table, "screen", pa.array(["untested"] * table.num_rows, pa.string())
        ), arrow_schema(SCREEN_RESULTS).empty_table()
    # whole sections per chunk (covariance rules look at a section at once), so a large
    # ingest or recompute screens a bounded slice of the records at a time
    key = pc.binary_join_element_wise(
        table.column("source_id"), pc.fill_null(table.column("section_id"), ""), "\x1f"
    )
    codes = pc.dictionary_encode(key).combine_chunks().indices.to_numpy(zero_copy_only=False)
    order = np.argsort(codes, kind="stable")
    bounds = np.flatnonzero(np.diff(codes[order])) + 1
    cuts = [0]
    for b in bounds:  # cut only between sections, once a chunk is big enough
        if b - cuts[-1] >= SCREEN_CHUNK:
            cuts.append(int(b))
    cuts.append(len(order))
    screen = np.empty(table.num_rows, dtype=object)
    parts = []
    for lo, hi in zip(cuts[:-1], cuts[1:], strict=True):
        rows = order[lo:hi] if len(cuts) > 2 else None
        chunk = table if rows is None else table.take(pa.array(rows))
        res = evaluate(chunk, rules, untested_passes, all_details=False)
        overall = res.overall.column("screen").to_numpy(zero_copy_only=False)
        screen[slice(None) if rows is None else rows] = overall
        k = res.results.num_rows // chunk.num_rows
        # the same source_id chunks once per rule: no copy (results are rule by rule)
        src = pa.chunked_array(
            [c for _ in range(k) for c in chunk.column("source_id").chunks], pa.string()
        )
        parts.append(res.results.append_column("source_id", src))
        del chunk, res
    out = set_column(table, "screen", pa.array(screen, pa.string()))
    return out, pa.concat_tables(parts, promote_options="permissive")
