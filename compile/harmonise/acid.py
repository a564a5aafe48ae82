"""Phosphoric-acid fractionation of oxygen between evolved CO2 and carbonate.

Calcite: 1000 ln α = 3.48 (10³/T) − 1.47, T in K (Kim, Coplen & Horita 2015, Geochim.
Cosmochim. Acta 158:276; calibrated 25–75 °C; α = 1.01025 at 25 °C). No correction is
needed for δ13C. Other minerals need their own published relation; none is shipped yet.
"""

from __future__ import annotations

import numpy as np

from strata13.errors import DomainError

KIM_2015_RANGE_C = (25.0, 75.0)


def alpha_calcite(temp_c: float) -> float:
    """α(CO2–calcite) at ``temp_c`` °C (Kim et al. 2015)."""
    t = temp_c + 273.15
    return float(np.exp((3.48 * 1e3 / t - 1.47) / 1000.0))


def alpha(mineral: str, temp_c: float) -> tuple[float, list[str]]:
    """α and any caveats (extrapolation beyond the calibration range)."""
    if mineral not in ("calcite", "low-Mg calcite", "high-Mg calcite"):
        raise DomainError(
            f"no acid-fractionation relation is shipped for {mineral}.",
            "Give the fractionation factor for this mineral explicitly.",
        )
    lo, hi = KIM_2015_RANGE_C
    notes = (
        []
        if lo <= temp_c <= hi
        else [
            f"{temp_c:g} °C is outside the {lo:g}–{hi:g} °C "
            "calibration of Kim et al. 2015 (extrapolated)"
        ]
    )
    return alpha_calcite(temp_c), notes
