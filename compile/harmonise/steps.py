"""How much a harmonisation step changed the values (the Step type is in derive.steps)."""

from __future__ import annotations

import numpy as np


def largest_change(before: np.ndarray, after: np.ndarray) -> float:
    """Largest absolute change over the finite values (0 when there are none)."""
    diff = np.abs(np.asarray(after, dtype=float) - np.asarray(before, dtype=float))
    diff = diff[np.isfinite(diff)]
    return float(diff.max()) if diff.size else 0.0
