"""δ ↔ isotope ratio ↔ atom fraction, and Δ13C between carbonate and organic carbon.

δ = R/R_std − 1 (IUPAC 2013; reported ×1000 in ‰). R(13C/12C) of VPDB defaults to
0.0111802 (= 0.011202 / 1.00195, from Zhang & Li 1990's NBS 19 ratio; attribution to
Werner & Brand 2001 from memory); other published values can be passed in.
"""

from __future__ import annotations

import numpy as np

R_VPDB_13C = 0.0111802


def delta_to_ratio(delta_permil: np.ndarray, r_std: float = R_VPDB_13C) -> np.ndarray:
    return (np.asarray(delta_permil, float) / 1000.0 + 1.0) * r_std


def ratio_to_delta(ratio: np.ndarray, r_std: float = R_VPDB_13C) -> np.ndarray:
    return (np.asarray(ratio, float) / r_std - 1.0) * 1000.0


def atom_fraction(ratio: np.ndarray) -> np.ndarray:
    """x(13C) = R / (1 + R) for a two-isotope element."""
    r = np.asarray(ratio, float)
    return r / (1.0 + r)


def big_delta_13c(d13c_carb: np.ndarray, d13c_org: np.ndarray) -> np.ndarray:
    """Δ13C = δ13C(carbonate) − δ13C(organic), on the same sample."""
    big_delta: np.ndarray = np.asarray(d13c_carb, float) - np.asarray(d13c_org, float)
    return big_delta
