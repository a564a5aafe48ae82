"""In-house runs: normalisation from the reference materials measured in the run.

Least squares through (measured, accepted) pairs of the anchor materials — exactly the
two-point line for two anchors (Coplen et al. 2006 recommend normalising to two
anchors) — with optional linear drift correction in run position, the offsets of check
materials (measured, not used as anchors) judged against a tolerance, external precision
from replicate reference materials, and a warning when the slope departs from 1 by more
than a tolerance (common practice).

Drift is fitted within material: every material its own intercept, one common slope in
run position (a fixed-effects or ANCOVA fit). A pooled fit of the offsets from each
material's mean is biased whenever the materials sit at different mean positions.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from strata13.compile.derive.steps import Step
from strata13.compile.harmonise.steps import largest_change

from strata13.errors import DomainError

SLOPE_TOLERANCE = 0.05  # |slope − 1| above this warns (common practice, configurable)
CHECK_K = 3.0  # a check warns beyond 3 × its combined 1σ (common practice)
CHECK_RULE = (
    f"{CHECK_K:g} × √(σ_material² + σ_run²): the check material's stated 1σ combined "
    "with the run's precision (common practice)"
)


@dataclass(frozen=True)
class Drift:
    """A linear drift in run position, fitted within material."""

    slope: float  # ‰ per run position, common to every material
    sigma: float | None  # 1σ of the slope (OLS); None without residual degrees of freedom
    intercepts: dict[str, float]  # each material's own intercept (‰)
    n: int  # measurements fitted


@dataclass(frozen=True)
class Check:
    """A check material's offset from its accepted value, judged against a tolerance."""

    material: str
    offset: float | None  # normalised mean − accepted (‰); None when not measured
    n: int
    tolerance: float | None  # ‰; None when it could not be set
    basis: str  # how the tolerance was set, or why the check is untested
    status: str  # pass | warn | untested

    def describe(self) -> str:
        if self.status == "untested" or self.offset is None or self.tolerance is None:
            return f"{self.material} untested: {self.basis}"
        where = "outside" if self.status == "warn" else "within"
        return (
            f"{self.material} {self.offset:+.3f} ‰ (n {self.n}) {where} "
            f"±{self.tolerance:.3f} ‰ [{self.basis}]"
        )


@dataclass(frozen=True)
class RunQC:
    run_id: str
    slope: float
    intercept: float
    n_anchors: int
    residuals: dict[str, float]  # non-anchor materials: normalised − accepted (‰)
    # pooled within-material SD of every replicated reference material (anchors and
    # checks) after drift correction and normalisation (‰); None without replicates
    precision_1s: float | None
    drift_per_position: float | None
    warnings: tuple[str, ...]
    checks: tuple[Check, ...] = ()

    @property
    def check_status(self) -> str | None:
        """warn if any check warns, else untested if any is, else pass (None: no checks)."""
        states = {c.status for c in self.checks}
        for s in ("warn", "untested", "pass"):
            if s in states:
                return s
        return None


def fit_drift(positions: np.ndarray, values: np.ndarray, materials: list[str]) -> Drift:
    """value = a_material + b · position by least squares (closed form of the
    fixed-effects fit: b = Σ within-material Sxy / Σ within-material Sxx)."""
    x = np.asarray(positions, dtype=float)
    y = np.asarray(values, dtype=float)
    mats = np.asarray(materials, dtype=object)
    names = sorted(set(materials))
    xc, yc = x.copy(), y.copy()
    for m in names:
        at = mats == m
        xc[at] -= x[at].mean()
        yc[at] -= y[at].mean()
    sxx = float(np.sum(xc * xc))
    if len(x) < 3 or not sxx > 0:
        raise DomainError(
            "drift correction needs at least three reference-material measurements, "
            "one material measured at two or more run positions.",
            "Measure a standard at the start and the end of the run, or set drift = false.",
        )
    slope = float(np.sum(xc * yc) / sxx)
    intercepts = {m: float(y[mats == m].mean() - slope * x[mats == m].mean()) for m in names}
    dof = len(x) - len(names) - 1
    resid = yc - slope * xc
    sigma = float(np.sqrt(np.sum(resid**2) / dof / sxx)) if dof > 0 else None
    return Drift(slope, sigma, intercepts, len(x))


def remove_drift(values: np.ndarray, positions: np.ndarray, slope: float) -> np.ndarray:
    """Values with the drift taken out (relative to run position 0; the normalisation that
    follows absorbs the constant)."""
    return np.asarray(values, dtype=float) - slope * np.asarray(positions, dtype=float)


def check_tolerance(
    material_sigma: float | None, precision: float | None, setting: float | None = None
) -> tuple[float | None, str]:
    """(tolerance in ‰, its basis): the store's setting when given, else the rule
    ``CHECK_RULE``; None with the reason when an uncertainty it needs is unknown."""
    if setting is not None:
        return setting, "the store's check_tolerance setting"
    if material_sigma is None:
        return None, (
            "the material's table states no uncertainty of this value; set one with "
            "`strata13 reharmonise --check-tolerance ‰`"
        )
    if precision is None:
        return None, (
            "the run has no replicated reference material to measure its precision; "
            "set a tolerance with `strata13 reharmonise --check-tolerance ‰`"
        )
    tol = CHECK_K * float(np.hypot(material_sigma, precision))
    return tol, (
        f"{CHECK_K:g} × √({material_sigma:.3g}² + {precision:.3g}²): material 1σ and "
        "run precision, common practice"
    )


def judge_check(
    material: str,
    offset: float | None,
    n: int,
    material_sigma: float | None,
    precision: float | None,
    setting: float | None = None,
) -> Check:
    """pass when |offset| ≤ tolerance, warn beyond it, untested when either is unknown."""
    if offset is None or n == 0:
        return Check(material, None, 0, None, "not measured in this run", "untested")
    tol, basis = check_tolerance(material_sigma, precision, setting)
    if tol is None:
        return Check(material, offset, n, None, basis, "untested")
    return Check(material, offset, n, tol, basis, "warn" if abs(offset) > tol else "pass")


def _pooled_sd(groups: list[np.ndarray], fitted: int) -> float | None:
    """Pooled within-group SD; ``fitted`` more parameters (a drift slope) cost a dof each."""
    reps = [g for g in groups if len(g) > 1]
    dof = sum(len(g) - 1 for g in reps) - fitted
    if not reps or dof <= 0:
        return None
    dev = np.concatenate([g - g.mean() for g in reps])
    return float(np.sqrt(np.sum(dev**2) / dof))


def normalise_run(
    run_id: str,
    raw: np.ndarray,
    anchors: dict[str, tuple[list[float], float]],
    checks: dict[str, tuple[list[float], float]] | None = None,
    tolerance: float = SLOPE_TOLERANCE,
    source: str = "in-house run",
    check_sigmas: dict[str, float | None] | None = None,
    check_setting: float | None = None,
    drift_fitted: bool = False,
) -> tuple[np.ndarray, Step, RunQC]:
    """Normalise a run's raw δ values.

    ``anchors``: material -> (its measurements in this run, accepted value).
    ``checks``: materials measured but not used as anchors: their offsets are judged
    against ``check_setting`` (‰) or, without it, the rule ``CHECK_RULE`` with
    ``check_sigmas`` (material -> stated 1σ, None when unknown). ``drift_fitted``: the
    measurements are drift-corrected, which costs the precision one degree of freedom.
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
    checks = checks or {}
    residuals = {
        k: float(slope * np.mean(meas) + intercept - acc) for k, (meas, acc) in checks.items()
    }
    precision = _pooled_sd(
        [
            slope * np.asarray(meas, float) + intercept
            for meas, _ in [*anchors.values(), *checks.values()]
        ],
        1 if drift_fitted else 0,
    )
    sigmas = check_sigmas or {}
    judged = tuple(
        judge_check(
            k,
            residuals.get(k),
            len(checks.get(k, ([], 0.0))[0]),
            sigmas.get(k),
            precision,
            check_setting,
        )
        for k in sorted({*checks, *sigmas})
    )
    warnings = []
    if abs(slope - 1) > tolerance:
        warnings.append(f"slope {slope:.4f} departs from 1 by more than {tolerance:g}")
    warnings += [
        f"check {c.material} is {c.offset:+.3f} ‰ off its accepted value, beyond the "
        f"tolerance ±{c.tolerance:.3f} ‰"
        for c in judged
        if c.status == "warn" and c.offset is not None and c.tolerance is not None
    ]
    qc = RunQC(
        run_id,
        slope,
        intercept,
        len(anchors),
        residuals,
        precision,
        None,
        tuple(warnings),
        judged,
    )
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
