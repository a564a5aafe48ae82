"""A correction step: what was done, with which parameters, on whose authority, how much."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np


@dataclass(frozen=True)
class Step:
    step: str
    method: str
    source: str
    parameters: dict[str, Any] = field(default_factory=dict)
    size_permil: float = 0.0  # largest absolute change this step made (‰)
    flags: tuple[str, ...] = ()

    def as_dict(self) -> dict[str, Any]:
        d = asdict(self)
        d["flags"] = list(self.flags)
        return d


def largest_change(before: np.ndarray, after: np.ndarray) -> float:
    """Largest absolute change over the finite values (0 when there are none)."""
    diff = np.abs(np.asarray(after, dtype=float) - np.asarray(before, dtype=float))
    diff = diff[np.isfinite(diff)]
    return float(diff.max()) if diff.size else 0.0
