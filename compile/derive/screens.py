"""Screens: the last derive stage, the store's screening rules over harmonised, dated records."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from strata13.compile.derive.engine import Given, Recorded
from strata13.compile.derive.settings import Settings
from strata13.compile.derive.steps import set_column

if TYPE_CHECKING:
    import pyarrow as pa

SCREEN_CHUNK = 200_000  # records per screening pass (whole sections; bounds memory)


def rule_set(settings: Settings) -> Any:
    """The store's screening rules (the shipped default where a store predates them)."""
    from strata13.compile.screening.rules import load_rules, parse_canonical

    text = settings.screen_rules
    return parse_canonical(text) if text else load_rules(None)


def stage(table: pa.Table, settings: Settings, given: Given) -> tuple[pa.Table, Recorded]:
    """The screen column and the long results of every rule (kept as ``screens``)."""
    table, results = screen(table, settings)
    return table, Recorded(screens=results)


def screen(table: pa.Table, settings: Settings) -> tuple[pa.Table, pa.Table]:
    """The screen and screen_reason columns (pass / warn / fail / untested, and why) and
    the long results of every rule.

    Runs on harmonised δ values and ages, so it comes last; it reads, never changes, any
    other column. Whether an untested rule counts as passed is the store's setting.
    """
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc
    from strata13.compile.screening.evaluate import evaluate
    from strata13.schemas.records import SCREEN_RESULTS, arrow_schema

    rules = rule_set(settings)
    untested_passes = bool(settings.screen_untested_passes)
    if table.num_rows == 0 or not rules.rules:
        why = "untested: the store has no screening rules" if not rules.rules else ""
        table = set_column(table, "screen", pa.array(["untested"] * table.num_rows, pa.string()))
        table = set_column(table, "screen_reason", pa.array([why] * table.num_rows, pa.string()))
        return table, arrow_schema(SCREEN_RESULTS).empty_table()
    # whole sections per chunk (covariance rules look at a section at once), so a large
    # ingest or recompute screens a bounded slice of the records at a time
    key = pc.binary_join_element_wise(
        table.column("source_id"), pc.fill_null(table.column("section_id"), ""), "\x1f"
    )
    codes = pc.dictionary_encode(key).combine_chunks().indices.to_numpy(zero_copy_only=False)
    order = np.argsort(codes, kind="stable")
    bounds = np.flatnonzero(np.diff(codes[order])) + 1
    cuts = [0]
    for b in bounds:  # cut only between sections, once a chunk is big enough
        if b - cuts[-1] >= SCREEN_CHUNK:
            cuts.append(int(b))
    cuts.append(len(order))
    screen = np.empty(table.num_rows, dtype=object)
    reason = np.empty(table.num_rows, dtype=object)
    parts = []
    for lo, hi in zip(cuts[:-1], cuts[1:], strict=True):
        rows = order[lo:hi] if len(cuts) > 2 else None
        chunk = table if rows is None else table.take(pa.array(rows))
        res = evaluate(chunk, rules, untested_passes, all_details=False)
        where = slice(None) if rows is None else rows
        screen[where] = res.overall.column("screen").to_numpy(zero_copy_only=False)
        reason[where] = res.overall.column("reason").to_numpy(zero_copy_only=False)
        k = res.results.num_rows // chunk.num_rows
        # the same source_id chunks once per rule: no copy (results are rule by rule)
        src = pa.chunked_array(
            [c for _ in range(k) for c in chunk.column("source_id").chunks], pa.string()
        )
        parts.append(res.results.append_column("source_id", src))
        del chunk, res
    out = set_column(table, "screen", pa.array(screen, pa.string()))
    out = set_column(out, "screen_reason", pa.array(reason, pa.string()))
    return out, pa.concat_tables(parts, promote_options="permissive")
