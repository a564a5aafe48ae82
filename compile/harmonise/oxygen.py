"""δ18O between the VSMOW and VPDB scales.

Default: the IUPAC relation δ18O(VPDB) = 0.97001 · δ18O(VSMOW) − 29.99 (Brand et al. 2014,
Pure Appl. Chem. 86:425; Kim et al. 2015). Older published constants are selectable by
name (``schemas/data/vsmow_vpdb.csv``). The relation holds mineral-to-mineral (or
CO2-to-CO2) on the same footing; no acid-fractionation step is implied.
"""

from __future__ import annotations

import numpy as np
from strata13.compile.derive.settings import DEFAULT_VSMOW_CONSTANTS
from strata13.compile.derive.steps import Step
from strata13.compile.harmonise.steps import largest_change
from strata13.schemas.materials import OxygenRelation, oxygen_relations

from strata13.errors import OptionError

DEFAULT = DEFAULT_VSMOW_CONSTANTS  # the store setting's default (derive.settings)


def relation(name: str = DEFAULT) -> OxygenRelation:
    rels = oxygen_relations()
    if name not in rels:
        raise OptionError(
            f"VSMOW–VPDB constants {name!r} are not known.", f"Known: {', '.join(rels)}."
        )
    return rels[name]


def vsmow_to_vpdb(values: np.ndarray, name: str = DEFAULT) -> tuple[np.ndarray, Step]:
    rel = relation(name)
    a, b = rel.to_vpdb()
    v = np.asarray(values, dtype=float)
    out = a * v + b
    return out, Step(
        "δ18O VSMOW → VPDB",
        f"linear relation {rel.name}",
        rel.source,
        {"a": a, "b": b, "constants": rel.name},
        largest_change(v, out),
        ("constants from memory",) if rel.confidence == "MEMORY" else (),
        maps=(a, b),
    )


def vpdb_to_vsmow(values: np.ndarray, name: str = DEFAULT) -> tuple[np.ndarray, Step]:
    rel = relation(name)
    a, b = rel.to_vpdb()
    v = np.asarray(values, dtype=float)
    out = (v - b) / a
    return out, Step(
        "δ18O VPDB → VSMOW",
        f"linear relation {rel.name} (inverse)",
        rel.source,
        {"a": 1 / a, "b": -b / a, "constants": rel.name},
        largest_change(v, out),
        maps=(1 / a, -b / a),
    )
