"""Re-anchoring reported δ values to the reference-material values the store accepts.

Applied only where the authors stated their anchors and the values they assumed:

* two anchors: the straight line through (assumed₁ → accepted₁, assumed₂ → accepted₂)
  (two-point normalisation; Coplen et al. 2006 Anal. Chem. 78:2439 describe normalising
  δ13C to two anchors);
* one anchor: an offset (accepted − assumed), flagged weaker, because a one-point
  correction cannot fix a scale-compression error;
* not stated: no correction, flagged.
"""

from __future__ import annotations

import numpy as np
from strata13.compile.derive.steps import IDENTITY, Step
from strata13.compile.harmonise.steps import largest_change

from strata13.errors import DomainError


def two_point(
    values: np.ndarray,
    assumed: tuple[float, float],
    accepted: tuple[float, float],
    materials: tuple[str, str],
    source: str,
) -> tuple[np.ndarray, Step]:
    (x1, x2), (y1, y2) = assumed, accepted
    if x1 == x2:
        raise DomainError(
            f"the two anchors {materials[0]} and {materials[1]} have the same "
            f"assumed value ({x1:g} ‰); no scale can be drawn through them.",
            "State two anchors with different values.",
        )
    slope = (y2 - y1) / (x2 - x1)
    intercept = y1 - slope * x1
    v = np.asarray(values, dtype=float)
    out = slope * v + intercept
    return out, Step(
        "re-anchoring (two-point)",
        "linear map between anchor values",
        source,
        {
            "materials": list(materials),
            "assumed": [x1, x2],
            "accepted": [y1, y2],
            "slope": slope,
            "intercept": intercept,
        },
        largest_change(v, out),
        maps=(slope, intercept),
    )


def one_point(
    values: np.ndarray, assumed: float, accepted: float, material: str, source: str
) -> tuple[np.ndarray, Step]:
    v = np.asarray(values, dtype=float)
    out = v + (accepted - assumed)
    return out, Step(
        "re-anchoring (one-point)",
        "offset to the accepted anchor value",
        source,
        {
            "material": material,
            "assumed": assumed,
            "accepted": accepted,
            "offset": accepted - assumed,
        },
        largest_change(v, out),
        ("one-point normalisation: scale compression not corrected",),
        maps=(1.0, accepted - assumed),
    )


def not_stated(values: np.ndarray) -> tuple[np.ndarray, Step]:
    v = np.asarray(values, dtype=float)
    return v.copy(), Step(
        "no re-anchoring",
        "identity",
        "the authors did not state anchors",
        {},
        0.0,
        ("normalisation not stated",),
        maps=IDENTITY,
    )
