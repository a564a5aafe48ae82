"""The one derive pipeline: reported records + store settings -> every derived column.

The stages read as the data's way, one module each: ``corrections`` (the user's fixes on
top of the published values) -> ``harmonise`` (δ onto VPDB) -> ``ages`` (age models from
ties, converted reported ages, stage-only ages) -> ``paleo`` (rotation model) ->
``screens`` (rules of thumb), each ``stage(table, settings, given) -> (table, Recorded)``.
Ingest runs it and every recompute command re-runs it with new settings. Reported columns
are never touched. Each step that changes a value is a ``steps.Step`` in the value's
chain; a value whose step is not available yet is *pending* (with the reason in its status
column), never copied across.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from strata13.compile.derive.settings import DEFAULT_TIME_SCALE, Settings
from strata13.schemas.records import DERIVED

if TYPE_CHECKING:
    import pyarrow as pa

__all__ = [
    "DEFAULT_TIME_SCALE",
    "DERIVED_COLUMNS",
    "Derived",
    "Given",
    "Recorded",
    "Settings",
    "Stage",
    "derive",
]

# the columns derive fills, declared with the record schema (the rest is as reported)
DERIVED_COLUMNS = DERIVED


@dataclass(frozen=True)
class Given:
    """What the stages read besides the records and the settings."""

    ties: pa.Table | None = None  # age_ties rows (others than a section's are ignored)
    runs: pa.Table | None = None  # reference-material measurements of in-house runs
    corrections: pa.Table | None = None  # the store's corrections
    strict: bool = True  # ingest: contradictory ties refuse; recompute: listed in conflicts
    sections: pa.Table | None = None  # sections rows: a section's own accumulation prior


@dataclass
class Recorded:
    """What a stage recorded besides its table: the chains of steps it wrote and the side
    tables it made."""

    chains: dict[str, str] = field(default_factory=dict)  # chain id -> steps JSON
    run_qc: list[dict[str, Any]] = field(default_factory=list)
    draws: pa.Table | None = None
    screens: pa.Table | None = None
    conflicts: list[str] = field(default_factory=list)

    def add(self, other: Recorded) -> None:
        """Take in a later stage's record."""
        self.chains.update(other.chains)
        self.run_qc += other.run_qc
        self.conflicts += other.conflicts
        self.draws = other.draws if other.draws is not None else self.draws
        self.screens = other.screens if other.screens is not None else self.screens


Stage = Callable[["pa.Table", Settings, Given], tuple["pa.Table", Recorded]]


@dataclass
class Derived:
    table: pa.Table
    chains: dict[str, str]  # chain id -> steps JSON
    draws: pa.Table | None = None  # age-model draws per section (age_draws rows)
    screens: pa.Table | None = None  # screen results, long form (screen_results rows)
    conflicts: list[str] = field(default_factory=list)  # sections whose ties contradict
    run_qc: pa.Table | None = None  # per in-house run and isotope: line and quality


def derive(
    records: pa.Table,
    settings: Settings,
    ties: pa.Table | None = None,
    strict: bool = True,
    runs: pa.Table | None = None,
    corrections: pa.Table | None = None,
    sections: pa.Table | None = None,
) -> Derived:
    """Fill the derived columns of ``records`` from its reported columns, ``settings`` and
    the age ties of its sections (``ties``: age_ties rows; others are ignored).

    ``runs``: the reference-material measurements of in-house runs (runs rows);
    ``corrections``: the store's corrections (applied on top of the reported values);
    ``sections``: sections rows (a section's own accumulation prior for its age model).
    ``strict`` (ingest): contradictory ties are refused. A recompute passes False: a section
    whose ties contradict each other on the new chart keeps its other ages, and
    ``Derived.conflicts`` lists it.
    """
    import pyarrow as pa
    from strata13.compile.derive import ages, harmonise, paleo, screens
    from strata13.compile.derive import corrections as fixes
    from strata13.schemas.records import RUN_QC, arrow_schema

    given = Given(ties, runs, corrections, strict, sections)
    stages: tuple[Stage, ...] = (
        fixes.stage,
        harmonise.stage,
        ages.stage,
        paleo.stage,
        screens.stage,
    )
    table, recorded = records, Recorded()
    for stage in stages:  # the data's way: each stage reads the table the last one left
        table, got = stage(table, settings, given)
        recorded.add(got)
    return Derived(
        table,
        recorded.chains,
        recorded.draws,
        recorded.screens,
        recorded.conflicts,
        pa.Table.from_pylist(recorded.run_qc, schema=arrow_schema(RUN_QC)),
    )
