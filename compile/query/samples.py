"""Records averaged to one row per sample, with the spread of its analyses.

A sample measured several times (replicates, or one sample in several runs or positions of
a run) is several records; a user who wants one value per sample asks for it
(`query --per-sample`). The mean of each δ value and each age, the number of analyses that
gave it, and their sample standard deviation (n − 1; empty for one analysis: a single
number has no spread, which is not a spread of 0) are kept; text columns that agree across
the analyses are kept, those that differ are listed with "; ".
"""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import pyarrow as pa

KEY = ("source_id", "section_id", "sample_id")
AVERAGED = ("d13c_carb", "d18o_carb", "d13c_org", "age_ma")
KEPT = (
    "locality_id",
    "lat",
    "lon",
    "position_m",
    "position_kind",
    "time_scale",
    "lithology",
    "component",
    "mineralogy",
    "setting",
    "screen",
    "run_id",
)


def per_sample(records: pa.Table) -> pa.Table:
    """One row per (source, section, sample): the key, ``n_analyses``, for each of
    ``AVERAGED`` its mean, ``<col>_n`` and ``<col>_sd``, then the ``KEPT`` columns."""
    import pyarrow as pa
    import pyarrow.compute as pc

    have = set(records.column_names)
    avg = [c for c in AVERAGED if c in have]
    kept = [c for c in KEPT if c in have]
    aggs: list[tuple[str, str] | tuple[str, str, pc.FunctionOptions]] = [
        (KEY[0], "count", pc.CountOptions(mode="all"))
    ]
    for c in avg:
        aggs += [
            (c, "mean"),
            (c, "count"),
            (c, "stddev", pc.VarianceOptions(ddof=1, min_count=2)),
        ]
    aggs += [(c, "distinct") for c in kept]
    grouped = records.group_by(list(KEY), use_threads=False).aggregate(aggs)
    cols: dict[str, pa.Array] = {k: grouped.column(k) for k in KEY}
    cols["n_analyses"] = grouped.column(f"{KEY[0]}_count")
    for c in avg:
        cols[c] = grouped.column(f"{c}_mean")
        cols[f"{c}_n"] = grouped.column(f"{c}_count")
        cols[f"{c}_sd"] = grouped.column(f"{c}_stddev")
    for c in kept:
        values = grouped.column(f"{c}_distinct").to_pylist()
        if _same(values):
            cols[c] = pa.array([_one(v) for v in values], records.schema.field(c).type)
        else:  # analyses of one sample disagree somewhere: each group's values, listed
            cols[c] = pa.array([_listed(v) for v in values], pa.string())
    out = pa.table(cols)
    order = pc.sort_indices(out, [(k, "ascending") for k in KEY])
    return out.take(order)


def _same(values: list[list[object]]) -> bool:
    """Whether every group's analyses agree (so the column keeps its type)."""
    return all(len([x for x in v if x is not None]) <= 1 for v in values)


def _one(v: list[object]) -> object:
    got = [x for x in v if x is not None]
    return got[0] if got else None


def _listed(v: list[object]) -> str | None:
    got = sorted(str(x) for x in v if x is not None)
    return "; ".join(got) if got else None
