"""In-house runs: normalisation from the reference materials measured in the run.

Least squares through (measured, accepted) pairs of the anchor materials — exactly the
two-point line for two anchors (Coplen et al. 2006 recommend normalising to two
anchors) — with optional linear drift correction in run position, the residuals of
materials not used as anchors, external precision from replicate reference materials,
and a warning when the slope departs from 1 by more than a tolerance (common practice).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from strata13.compile.derive.steps import Step
from strata13.compile.harmonise.steps import largest_change

from strata13.errors import DomainError

SLOPE_TOLERANCE = 0.05  # |slope − 1| above this warns (common practice, configurable)


@dataclass(frozen=True)
class RunQC:
    run_id: str
    slope: float
    intercept: float
    n_anchors: int
    residuals: dict[str, float]  # non-anchor materials: normalised − accepted (‰)
    precision_1s: float | None  # SD of replicate reference-material residuals (‰)
    drift_per_position: float | None
    warnings: tuple[str, ...]


def drift_correct(
    values: np.ndarray, positions: np.ndarray, ref_positions: np.ndarray, ref_offsets: np.ndarray
) -> tuple[np.ndarray, float]:
    """Remove a linear trend in run position fitted to reference-material offsets
    (measured − run mean of that material). Returns corrected values and the slope."""
    if len(ref_positions) < 3:
        raise DomainError(
            "drift correction needs at least three reference-material "
            "measurements spread over the run.",
            "Measure more standards or switch drift correction off.",
        )
    slope = float(
        np.polyfit(np.asarray(ref_positions, float), np.asarray(ref_offsets, float), 1)[0]
    )
    return np.asarray(values, float) - slope * np.asarray(positions, float), slope


def normalise_run(
    run_id: str,
    raw: np.ndarray,
    anchors: dict[str, tuple[list[float], float]],
    checks: dict[str, tuple[list[float], float]] | None = None,
    tolerance: float = SLOPE_TOLERANCE,
    source: str = "in-house run",
) -> tuple[np.ndarray, Step, RunQC]:
    """Normalise a run's raw δ values.

    ``anchors``: material -> (its measurements in this run, accepted value).
    ``checks``: materials measured but not used as anchors, for residuals.
    """
    if len(anchors) < 2:
        raise DomainError(
            f"run {run_id}: normalisation needs at least two anchor materials "
            f"(got {len(anchors)}).",
            "Measure two reference materials that bracket the samples.",
        )
    x = np.array([m for meas, _ in anchors.values() for m in meas], dtype=float)
    y = np.array([acc for meas, acc in anchors.values() for _ in meas], dtype=float)
    means = {k: float(np.mean(meas)) for k, (meas, _) in anchors.items()}
    if len({round(v, 9) for v in means.values()}) < 2:
        raise DomainError(
            f"run {run_id}: the anchors were measured at the same value; the slope is undefined.",
            "Check the anchor measurements.",
        )
    slope, intercept = (float(c) for c in np.polyfit(x, y, 1))
    if slope == 0 or not np.isfinite(slope):
        raise DomainError(
            f"run {run_id}: the normalisation slope is {slope}.",
            "Check the anchor measurements and accepted values.",
        )
    v = np.asarray(raw, dtype=float)
    out = slope * v + intercept
    residuals = {
        k: float(slope * np.mean(meas) + intercept - acc)
        for k, (meas, acc) in (checks or {}).items()
    }
    reps = [
        slope * np.asarray(meas, float) + intercept - acc
        for meas, acc in [*anchors.values(), *(checks or {}).values()]
        if len(meas) > 1
    ]
    precision = None
    if reps:
        dev = np.concatenate([r - r.mean() for r in reps])
        dof = sum(len(r) - 1 for r in reps)
        precision = float(np.sqrt(np.sum(dev**2) / dof)) if dof else None
    warnings = []
    if abs(slope - 1) > tolerance:
        warnings.append(f"slope {slope:.4f} departs from 1 by more than {tolerance:g}")
    qc = RunQC(run_id, slope, intercept, len(anchors), residuals, precision, None, tuple(warnings))
    step = Step(
        "run normalisation",
        "least squares through anchor materials",
        source,
        {
            "run": run_id,
            "anchors": {k: [list(m), a] for k, (m, a) in anchors.items()},
            "slope": slope,
            "intercept": intercept,
        },
        largest_change(v, out),
        tuple(warnings),
        maps=(slope, intercept),
    )
    return out, step, qc
