"""Checks across rows and columns: the pandera schema, superposition against reported
ages, sampled-interval order and plausibility warnings — each finding tied to a cell.

``RowErrors`` is the per-row bookkeeping every check shares: an error marks its row as
rejected and records the reason the quarantine keeps.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import TYPE_CHECKING, Any

from strata13.compile.check.report import Issue, Report
from strata13.compile.read.readers import RawTable
from strata13.schemas.fields import (
    BY_NAME,
    CONC_FIELDS,
    FIELDS,
    REFERENCE_RANGE,
    REFERENCE_RANGE_NAME,
)

if TYPE_CHECKING:
    import numpy as np
    import pyarrow as pa


def _s(value: Any) -> str:
    return "" if value is None else str(value)


class RowErrors:
    """Per-row error bookkeeping shared by the checks."""

    def __init__(self, raw: RawTable, report: Report) -> None:
        import numpy as np

        self.raw = raw
        self.report = report
        self.bad = np.zeros(raw.n_rows, dtype=bool)
        self.reasons: dict[int, list[str]] = {}

    def error(self, i: int, letter: str, column: str, value: Any, rule: str, hint: str) -> None:
        cell = f"{letter}{int(self.raw.row_numbers[i])}"
        self.report.add(Issue("error", self.raw.sheet, cell, column, _s(value), rule, hint))
        self.bad[i] = True
        self.reasons.setdefault(i, []).append(f"{cell}: {rule}")

    def many(
        self,
        indices: np.ndarray,
        where: tuple[str, str],
        values: Any,
        rule: str,
        hint: Callable[[int], str],
    ) -> None:
        """The same rule broken in many rows: every row rejected with its reason, the first
        cells reported one by one and the rest counted (``Report.add``), without building
        a hint for cells the report only counts."""
        letter, column = where
        key = ("error", self.raw.sheet, letter, column, rule)
        room = max(self.report.room(key), 0)
        for i in indices[:room]:
            self.error(int(i), letter, column, values[int(i)], rule, hint(int(i)))
        rest = indices[room:]
        if len(rest):
            self.mark(rest, rule, letter)
            self.report.count_more(key, len(rest))

    def mark(self, indices: np.ndarray, rule: str, letter: str) -> None:
        self.bad[indices] = True
        for i in indices:
            cell = f"{letter}{int(self.raw.row_numbers[int(i)])}"
            self.reasons.setdefault(int(i), []).append(f"{cell}: {rule}")


def interval_order(
    cols: dict[str, Any],
    column: Any,
    rows: RowErrors,
    letters: dict[str, tuple[str, str]],
    section_blocks: dict[str, Any],
    sec: Any,
) -> None:
    """A sampled interval's top must lie above its base (heights: top ≥ base; depths: top ≤
    base)."""
    import numpy as np
    import pandas as pd

    if "top_m" not in cols or "base_m" not in cols:
        return
    top = pd.to_numeric(pd.Series(column("top_m")), errors="coerce").to_numpy(dtype=float)
    base = pd.to_numeric(pd.Series(column("base_m")), errors="coerce").to_numpy(dtype=float)
    kinds = (
        column("position_kind")
        if "position_kind" in cols
        else np.array([section_blocks.get(s, {}).get("position_kind") for s in sec], dtype=object)
    )
    depth = np.array([k == "depth" for k in kinds], dtype=bool)
    wrong = np.where(depth, top > base, top < base)
    letter, header = letters.get("top_m", ("", "top"))
    for i in np.nonzero(wrong)[0]:
        rows.error(
            int(i),
            letter,
            header,
            top[i],
            "interval order",
            f"top {top[i]:g} m is {'below' if not depth[i] else 'deeper than'} base "
            f"{base[i]:g} m; check that top and base are not swapped",
        )


def schema_check(
    frame: pa.Table,
    rows: RowErrors,
    letters: dict[str, tuple[str, str]],
    raw_text: Any = lambda col, i: None,
    standards: np.ndarray | None = None,
) -> None:
    """Run the pandera schema lazily and turn its failure cases into cell errors.

    ``standards`` marks an in-house run's reference-material rows: their δ values are held
    to ``REFERENCE_RANGE``, not to the sample ranges."""
    import pandera.errors as pe
    import pyarrow as pa
    from strata13.schemas.records import record_schema

    schema = record_schema()
    # the schema sees the columns this sheet filled (ids and text are checked above, row by
    # row); vocabulary columns go in dictionary-encoded, so no Python object per cell
    keep = [
        c
        for c in frame.column_names
        if c in schema.columns
        and c not in TEXT_CHECKED
        and frame.column(c).null_count < frame.num_rows
    ]
    sub = frame.select(keep)
    sub = pa.table(
        {
            c: (
                sub.column(c).dictionary_encode()
                if pa.types.is_string(sub.column(c).type)
                else sub.column(c)
            )
            for c in keep
        }
    )
    schema = schema.select_columns(keep) if keep else schema.select_columns([])
    failures = []
    for start in range(0, max(sub.num_rows, 1), SCHEMA_CHUNK):  # bounded memory
        df = sub.slice(start, SCHEMA_CHUNK).to_pandas(types_mapper=pandas_types)
        df.index = df.index + start
        try:
            schema.validate(df, lazy=True)
        except pe.SchemaErrors as err:
            failures.append(err.failure_cases)
    for fc in failures:
        for _, r in fc.iterrows():
            idx = r.get("index")
            col = r.get("column")
            check = str(r.get("check"))
            if idx is None or col is None or (isinstance(idx, float) and idx != idx):
                continue
            letter, header = letters.get(str(col), ("", str(col)))
            f = next((x for x in FIELDS if x.stored == col), None)
            standard = standards is not None and bool(standards[int(idx)])
            if standard and f is not None and f.kind == "delta" and check.startswith("in_range"):
                lo, hi = REFERENCE_RANGE
                if lo <= _number(r.get("failure_case")) <= hi:
                    continue  # a reference material: the sample range does not apply
                rule = f"plausible {REFERENCE_RANGE_NAME}"
                hint = f"outside {lo:g} … {hi:g} ‰ for a reference material; check the unit"
            elif check.startswith("in_range") and f is not None and f.plausible:
                lo, hi = f.plausible
                rule = f"plausible {f.plausible_name or 'range'}"
                hint = (
                    f"outside {lo:g} … {hi:g}"
                    f"{' ' + f.stored_unit if f.stored_unit else ''}; check the unit and the "
                    "column mapping"
                )
            elif check.startswith("in_range"):
                rule, hint = "plausible range", f"outside {check}; check the unit and mapping"
            else:
                rule, hint = check, f"failed the {check} check"
            shown = raw_text(str(col), int(idx))
            rows.error(
                int(idx),
                letter,
                header,
                shown if shown is not None else r.get("failure_case"),
                rule,
                hint,
            )


def _number(value: Any) -> float:
    """A failure case as a number (NaN when it is not one)."""
    try:
        return float(value)
    except (TypeError, ValueError):
        return float("nan")


TEXT_CHECKED = ("record_id", "source_id", "section_id", "sample_id")


SCHEMA_CHUNK = 250_000  # rows per pandera pass


def pandas_types(t: Any) -> Any:
    """Nullable integers stay integers in pandas (pandera checks them as Int32)."""
    import pandas as pd
    import pyarrow as pa

    return pd.Int32Dtype() if t == pa.int32() else None


def superposition(frame: pa.Table, rows: RowErrors, letters: dict[str, tuple[str, str]]) -> None:
    """Within a section, reported ages must not contradict the order of positions."""
    import numpy as np

    if "age_reported_ma" not in frame.column_names or "position_m" not in frame.column_names:
        return
    sec = frame.column("section_id").to_numpy(zero_copy_only=False)
    pos = frame.column("position_m").to_numpy(zero_copy_only=False).astype(float)
    age = frame.column("age_reported_ma").to_numpy(zero_copy_only=False).astype(float)
    sig = (
        frame.column("age_reported_sigma_ma").to_numpy(zero_copy_only=False).astype(float)
        if "age_reported_sigma_ma" in frame.column_names
        else np.zeros(len(age))
    )
    sig = np.nan_to_num(sig)
    kind = (
        frame.column("position_kind").to_numpy(zero_copy_only=False)
        if "position_kind" in frame.column_names
        else [None] * len(age)
    )
    letter, header = letters.get("age_reported_ma", ("", "age"))
    import pandas as pd

    codes = pd.factorize(pd.Series(sec, dtype=object))[0]
    ok = (codes >= 0) & ~np.isnan(pos) & ~np.isnan(age)
    idx = np.nonzero(ok)[0]
    if len(idx) < 2:
        return
    idx = idx[np.lexsort((pos[idx], codes[idx]))]
    a, b = idx[:-1], idx[1:]
    same = (codes[a] == codes[b]) & (pos[a] != pos[b])
    depth = np.array([k == "depth" for k in kind], dtype=bool)[a]
    # height: higher is younger (age falls); depth: deeper is older (age rises)
    gap = np.where(depth, age[a] - age[b], age[b] - age[a])
    wrong = same & (gap > sig[a] + sig[b])
    for i, j in zip(a[wrong], b[wrong], strict=True):
        rows.error(
            int(j),
            letter,
            header,
            age[j],
            "superposition",
            f"age {age[j]:g} Ma at {pos[j]:g} m contradicts {age[i]:g} Ma at "
            f"{pos[i]:g} m (row {rows.raw.row_numbers[i]}) in the same section",
        )


def plausibility(
    frame: pa.Table, raw: RawTable, report: Report, letters: dict[str, tuple[str, str]]
) -> None:
    """Warnings for swapped δ columns and unit slips (common-practice heuristics)."""
    import numpy as np

    def values(name: str) -> np.ndarray:
        if name not in frame.column_names:
            return np.zeros(0)
        v: np.ndarray = frame.column(name).to_numpy(zero_copy_only=False).astype(float)
        finite: np.ndarray = v[~np.isnan(v)]
        return finite

    c13, o18 = values("d13c_carb_reported"), values("d18o_carb_reported")
    scales = (
        set(frame.column("d18o_carb_scale").unique().to_pylist())
        if "d18o_carb_scale" in frame.column_names
        else set()
    )
    if len(c13) >= 5 and len(o18) >= 5 and scales <= {"VPDB", "PDB", None}:
        # Marine carbonate δ18O (VPDB) is mostly below δ13C (common practice, from memory:
        # Phanerozoic δ13C ~ -3…+6 ‰, δ18O ~ -10…0 ‰); the reverse suggests swapped columns.
        if np.median(o18) > np.median(c13) + 2:
            letter, header = letters.get("d13c_carb_reported", ("", ""))
            report.add(
                Issue(
                    "warning",
                    raw.sheet,
                    letter,
                    header,
                    f"{np.median(c13):.2f}",
                    "swapped δ columns?",
                    "median δ18O is well above median δ13C; "
                    "check that the δ13C and δ18O columns are not swapped",
                )
            )
    pos = values("position_m")
    letter, header = letters.get("position_m", ("", ""))
    if len(pos) >= 5 and np.nanmax(np.abs(pos)) > 2000:
        report.add(
            Issue(
                "warning",
                raw.sheet,
                letter,
                header,
                f"{np.nanmax(pos):g}",
                "unit slip?",
                "positions above 2000 m: were they given in cm or ft?",
            )
        )
    for c in CONC_FIELDS:
        v = values(BY_NAME[c].stored)
        letter, header = letters.get(BY_NAME[c].stored, ("", ""))
        if c in ("mn", "sr", "fe") and len(v) >= 5 and np.nanmax(v) < 1.0:
            report.add(
                Issue(
                    "warning",
                    raw.sheet,
                    letter,
                    header,
                    f"{np.nanmax(v):g}",
                    "unit slip?",
                    f"all {c} values below 1 ppm: were they in %?",
                )
            )
