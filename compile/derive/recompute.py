"""Recompute: the derive engine re-run over every stored record with new settings.

Every recompute command (``reharmonise``, ``redate``, ``replace-rotations`` and ``screen``)
is this one function with a settings change: in one store
transaction it re-derives all records from their reported columns, replaces the derived
values, stores the new settings and chains, and reports what changed and by how much.
When nothing would change it says so and makes no new version.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from typing import Any

from strata13.compile.derive.engine import DERIVED_COLUMNS, Settings, derive
from strata13.compile.store.lake import Store

COMPARED = ("d13c_carb", "d18o_carb", "d13c_org", "age_ma", "age_sigma_ma", "paleolat", "paleolon")
# the unit each compared column's changes are reported in
UNITS = {
    "d13c_carb": " ‰",
    "d18o_carb": " ‰",
    "d13c_org": " ‰",
    "age_ma": " Myr",
    "age_sigma_ma": " Myr",
    "paleolat": "°",
    "paleolon": "°",
}


@dataclass
class RecomputeResult:
    command: str
    version: int | None  # None: nothing changed, no new version
    records: int = 0
    changed: dict[str, int] = field(default_factory=dict)  # column -> values changed
    max_change: dict[str, float] = field(default_factory=dict)
    median_change: dict[str, float] = field(default_factory=dict)
    settings_before: dict[str, Any] = field(default_factory=dict)
    settings_after: dict[str, Any] = field(default_factory=dict)
    conflicts: list[str] = field(default_factory=list)  # sections left without an age model
    screen_changed: int = 0  # records whose overall screen result changed
    # in-house runs whose check status changed: "source run isotope: before → after"
    checks_changed: list[str] = field(default_factory=list)


def _changes(old: Any, new: Any) -> tuple[int, float, float]:
    """(values changed, max |Δ|, median |Δ|); a value appearing or vanishing counts too."""
    import numpy as np

    a = old.to_numpy(zero_copy_only=False).astype(float)
    b = new.to_numpy(zero_copy_only=False).astype(float)
    both = ~np.isnan(a) & ~np.isnan(b)
    diff = np.abs(a[both] - b[both])
    moved = diff > 1e-12
    flipped = int((np.isnan(a) != np.isnan(b)).sum())
    n = int(moved.sum()) + flipped
    return (
        n,
        float(diff[moved].max()) if moved.any() else 0.0,
        float(np.median(diff[moved])) if moved.any() else 0.0,
    )


def _checks_changed(before: Any, after: Any) -> list[str]:
    """Runs (per isotope) whose check status differs between two run_qc tables."""

    def states(t: Any) -> dict[tuple[str, str, str], str | None]:
        if t is None or "check_status" not in t.column_names:
            return {}
        return {
            (r["source_id"], r["run_id"], r["isotope"]): r["check_status"]
            for r in t.select(["source_id", "run_id", "isotope", "check_status"]).to_pylist()
        }

    old, new = states(before), states(after)
    return [
        f"{k[0]} run {k[1]} {k[2]}: {old.get(k) or '—'} → {new.get(k) or '—'}"
        for k in sorted(set(old) | set(new))
        if old.get(k) != new.get(k)
    ]


def recompute(store: Store, change: dict[str, Any], command: str) -> RecomputeResult:
    """Apply ``change`` to the store's settings and re-derive every record (one commit)."""
    with store.transaction(command) as tx:
        before = tx.settings()
        after = {k: v for k, v in (before | change).items() if v is not None}  # None: unset
        settings = Settings.from_stored(after)
        table = tx.fetch("SELECT * FROM records ORDER BY record_id")
        ties = tx.fetch("SELECT * FROM age_ties")
        runs = tx.fetch("SELECT * FROM runs")
        fixes = tx.fetch("SELECT * FROM corrections")
        secs = tx.fetch("SELECT * FROM sections")
        derived = derive(
            table, settings, ties, strict=False, runs=runs, corrections=fixes, sections=secs
        )
        result = RecomputeResult(
            command,
            None,
            table.num_rows,
            settings_before=before,
            settings_after=after,
            conflicts=derived.conflicts,
            checks_changed=_checks_changed(tx.fetch("SELECT * FROM run_qc"), derived.run_qc),
        )
        status_changed = False
        for col in table.column_names:
            if col in DERIVED_COLUMNS and col != "row_hash" and col not in COMPARED:
                status_changed |= not table.column(col).equals(derived.table.column(col))
        for col in COMPARED:
            n, mx, med = _changes(table.column(col), derived.table.column(col))
            if n:
                result.changed[col], result.max_change[col], result.median_change[col] = n, mx, med
        import pyarrow.compute as pc

        result.screen_changed = int(
            pc.sum(
                pc.fill_null(
                    pc.not_equal(table.column("screen"), derived.table.column("screen")), True
                )
            ).as_py()
            or 0
        )
        if after == before and not (result.changed or status_changed or result.checks_changed):
            tx.abandon()
            return result
        h = settings.hash()
        tx.write_derived(None, derived)
        tx.write_settings(after, h)
        logged = {
            k: v
            for k, v in change.items()  # long texts: their names and hashes stand in
            if k
            not in (
                "screen_rules",
                "rotation_model_toml",
                "rotation_model_csv",
                "plate_polygons_geojson",
                "materials_csv",
                "time_scale_table",
            )
        }
        summary = {
            "records": table.num_rows,
            "changed": result.changed,
            "screen_changed": result.screen_changed,
            "max_change": result.max_change,
            "settings": logged,
        }
        tx.record(summary, h, detail=json.dumps(logged, sort_keys=True))
    result.version = tx.version
    return result
