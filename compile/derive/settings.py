"""The store's derive settings: one frozen, typed value with one content hash per setting.

Every default lives here (the newest shipped chart is the default time scale). A store keeps
its settings as one row per key (``stored``); a store written before a setting existed reads
back with that setting's default, and keys this version does not know are kept in ``extra``
so nothing a newer version wrote is lost. A setting given as None is unset (a retired key
such as ``rotation_model_csv`` goes when a recompute replaces what it held).
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field, fields
from typing import Any

from strata13.schemas.timescales import DEFAULT_VERSION as DEFAULT_TIME_SCALE

from strata13.errors import OptionError

__all__ = [
    "DEFAULT_ACCUMULATION_SEGMENT_M",
    "DEFAULT_ACCUMULATION_SHAPE",
    "DEFAULT_AGE_DRAWS",
    "DEFAULT_AGE_SEED",
    "DEFAULT_TIME_SCALE",
    "DEFAULT_VSMOW_CONSTANTS",
    "Settings",
    "blank_sigma_policy",
    "check_tolerance_policy",
]

DEFAULT_VSMOW_CONSTANTS = "IUPAC-2014"  # the VSMOW–VPDB relation (harmonise.oxygen)
DEFAULT_AGE_DRAWS = 1000  # Monte Carlo draws per section age model
DEFAULT_AGE_SEED = 13  # their seed: the same store gives the same draws
# The accumulation prior of age models between ties (compile/ages/agemodel.py): the time one
# segment of DEFAULT_ACCUMULATION_SEGMENT_M metres took is Gamma(DEFAULT_ACCUMULATION_SHAPE)
# before the ties are known. Shape 1 per 1 m: exponential, coefficient of variation 1 per
# metre — a weak prior of the order gamma-process age–depth models commonly use (from
# memory), not a published value for any section. A section's mapping block may override it.
DEFAULT_ACCUMULATION_SHAPE = 1.0
DEFAULT_ACCUMULATION_SEGMENT_M = 1.0


def _digest(value: Any) -> str:
    text = json.dumps(value, sort_keys=True, ensure_ascii=False)
    return hashlib.sha256(text.encode()).hexdigest()[:16]


@dataclass(frozen=True)
class Settings:
    """The store's derive settings; each change is one new store version."""

    time_scale: str = DEFAULT_TIME_SCALE
    # a user's chart table (CSV text in the shipped format); time_scale is then its store
    # name "<version>@<12 hex of its SHA-256>" (schemas/timescales.py::use_table)
    time_scale_table: str | None = None
    vsmow_constants: str = DEFAULT_VSMOW_CONSTANTS
    age_extrapolation: bool = False  # age models extrapolate beyond their outermost ties
    age_draws: int = DEFAULT_AGE_DRAWS
    age_seed: int = DEFAULT_AGE_SEED
    age_accumulation_shape: float = DEFAULT_ACCUMULATION_SHAPE  # gamma shape per segment
    age_accumulation_segment_m: float = DEFAULT_ACCUMULATION_SEGMENT_M  # segment length (m)
    # what a chart boundary whose error the chart leaves blank gets as 1σ: "borrow" (from
    # the nearest shipped chart that states one), "refuse", or a stated σ in Myr as text
    blank_boundary_sigma: str = "borrow"
    # how far a run's check material may lie from its accepted value before the run is
    # marked warn: "from-uncertainty" (3 × √(σ_material² + σ_run²), common practice;
    # harmonise.runs.CHECK_RULE) or a tolerance in ‰ as text
    check_tolerance: str = "from-uncertainty"
    screen_rules: str | None = None  # canonical text of the rule set (None: shipped default)
    screen_rules_name: str | None = None
    screen_untested_passes: bool = False  # whether a rule that could not run counts as passed
    materials_csv: str | None = None  # the user's reference-material file, as text
    material_values: dict[str, Any] | None = None  # value set accepted per material/isotope
    # the rotation model (the TOML document, paleo/rotations.py) and plate polygons, as text
    rotation_model_toml: str | None = None
    plate_polygons_geojson: str | None = None
    rotation_model_name: str | None = None
    rotation_frame: str | None = None
    extra: dict[str, Any] = field(default_factory=dict)  # keys this version does not know

    def __post_init__(self) -> None:
        if self.time_scale_table:  # the store's own chart: loadable by its name from here on
            from strata13.schemas.timescales import use_table

            use_table(self.time_scale_table, "the store's chart table")

    def stored(self) -> dict[str, Any]:
        """The settings as the store's settings table keeps them (one key each; unset
        optional settings are left out)."""
        out = {
            f.name: getattr(self, f.name)
            for f in fields(self)
            if f.name != "extra" and getattr(self, f.name) is not None
        }
        return {**self.extra, **out}

    @classmethod
    def from_stored(cls, values: dict[str, Any]) -> Settings:
        """Settings from the stored rows; a missing key takes its default."""
        known = {f.name for f in fields(cls)} - {"extra"}
        given = {k: v for k, v in values.items() if k in known}
        rest = {k: v for k, v in values.items() if k not in known and v is not None}
        return cls(**given, extra=rest)

    def hashes(self) -> dict[str, str]:
        """One content hash per setting (SHA-256 of its JSON, 16 hex digits)."""
        return {k: _digest(v) for k, v in sorted(self.stored().items())}

    def hash(self) -> str:
        """The content hash of all settings together (of the per-setting hashes)."""
        return _digest(self.hashes())

    def but(self, **changes: Any) -> Settings:
        """These settings with some changed (unknown names go to ``extra``)."""
        return Settings.from_stored(self.stored() | changes)


def blank_sigma_policy(text: str) -> str:
    """The ``blank_boundary_sigma`` setting checked: borrow, refuse, or a σ above 0 Myr
    (written as text, like the stored setting)."""
    value = str(text).strip().lower()
    if value in ("borrow", "refuse"):
        return value
    try:
        sigma = float(value)
    except ValueError:
        sigma = float("nan")
    if not sigma > 0:
        raise OptionError(
            f"--blank-boundary-sigma {text!r} is not borrow, refuse or a σ above 0 Myr.",
            "Example: --blank-boundary-sigma borrow (the nearest chart that states one).",
        )
    return f"{sigma:g}"


def check_tolerance_policy(text: str) -> str:
    """The ``check_tolerance`` setting checked: from-uncertainty, or a tolerance above 0 ‰
    (written as text, like the stored setting)."""
    value = str(text).strip().lower()
    if value == "from-uncertainty":
        return value
    try:
        tol = float(value)
    except ValueError:
        tol = float("nan")
    if not 0 < tol <= 5:
        raise OptionError(
            f"--check-tolerance {text!r} is not from-uncertainty or a tolerance in (0, 5] ‰.",
            "Example: --check-tolerance 0.1 (‰), or from-uncertainty for 3 × the combined "
            "1σ of the material and the run (common practice).",
        )
    return f"{tol:g}"


def check_tolerance_permil(settings: Settings) -> float | None:
    """The store's check tolerance in ‰, or None for the from-uncertainty rule."""
    value = check_tolerance_policy(settings.check_tolerance)
    return None if value == "from-uncertainty" else float(value)
