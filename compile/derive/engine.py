"""The one derive pipeline: reported records + store settings -> every derived column.

The stages read as the data's way, one module each: corrections (the user's fixes on top
of the published values, ``integrity.corrections.apply``) -> ``harmonise`` (δ onto VPDB)
-> ``ages`` (age models from ties, converted reported ages, stage-only ages) -> ``paleo``
(rotation model) -> ``screens`` (rules of thumb). Ingest runs it and every recompute
command re-runs it with new settings. Reported columns are never touched. Each step that
changes a value is a ``steps.Step`` in the value's chain; a value whose step is not
available yet is *pending* (with the reason in its status column), never copied across.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from strata13.compile.derive.settings import DEFAULT_TIME_SCALE, Settings
from strata13.schemas.records import DERIVED

if TYPE_CHECKING:
    import pyarrow as pa

__all__ = ["DEFAULT_TIME_SCALE", "DERIVED_COLUMNS", "Derived", "Settings", "derive"]

# the columns derive fills, declared with the record schema (the rest is as reported)
DERIVED_COLUMNS = DERIVED


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
) -> Derived:
    """Fill the derived columns of ``records`` from its reported columns, ``settings`` and
    the age ties of its sections (``ties``: age_ties rows; others are ignored).

    ``runs``: the reference-material measurements of in-house runs (runs rows);
    ``corrections``: the store's corrections (applied on top of the reported values).
    ``strict`` (ingest): contradictory ties are refused. A recompute passes False: a section
    whose ties contradict each other on the new chart keeps its other ages, and
    ``Derived.conflicts`` lists it.
    """
    import pyarrow as pa
    from strata13.compile.derive import ages, harmonise, paleo, screens
    from strata13.compile.integrity.corrections import apply
    from strata13.schemas.records import RUN_QC, arrow_schema

    chains: dict[str, str] = {}
    conflicts: list[str] = []
    qc: list[dict[str, Any]] = []
    records, fixes = apply(records, corrections)
    table = harmonise.harmonise(records, chains, settings, strict, runs, qc, fixes)
    table = harmonise.big_delta(table)
    table, draws = ages.assign(table, ties, settings, chains, strict, conflicts)
    table = paleo.place(table, settings)
    table, results = screens.screen(table, settings)
    return Derived(
        table,
        chains,
        draws,
        results,
        conflicts,
        pa.Table.from_pylist(qc, schema=arrow_schema(RUN_QC)),
    )
