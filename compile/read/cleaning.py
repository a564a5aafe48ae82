"""Cleaning: the text of a cell -> a number, a qualifier, or a reported problem.

Vectorised with pyarrow.compute so a million-row column costs a few passes, not a Python
call per cell; only cells that need a report line reach Python. What is handled, each
deliberately and reported:

* Unicode minus (U+2212), en dash and other dash look-alikes used as a minus sign;
* a leading plus sign; thin, no-break and plain spaces used as thousands separators;
* comma decimals (``-2,35``), thousands separators (``1,234.5``), European ``1.234,5``;
  a lone ``1,234`` is ambiguous unless the column or the mapping settles it;
* missing tokens (``n.d.``, ``n/a``, ``—`` …) -> empty, counted;
* censored values: ``bdl`` (value empty, qualifier ``bdl``, the column's detection limit
  if the mapping gives one) and ``<0.05`` / ``>200`` (value = the limit, qualifier);
* a trailing unit in a cell (``2.1 ‰``, ``35 %``);
* dates in a numeric column (a spreadsheet turned ``3.4`` into 3 April): an error.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

from strata13.compile.check.report import MAX_CELL_LINES, Issue, more_cells

if TYPE_CHECKING:
    import numpy as np
    import pyarrow as pa

MISSING_TOKENS = [
    "n.d.",
    "n.d",
    "nd",
    "n/a",
    "na",
    "n.a.",
    "-",
    "—",
    "–",
    "−",
    "?",
    "nm",
    "n.m.",
    "not determined",
    "not measured",
    "nan",
    "..",
    "…",
    "x",
    "null",
    "none",
]
BDL_PATTERN = r"^(bdl|b\.d\.l\.?|bd|b\.d\.|<\s*dl|<\s*lod|<\s*d\.l\.|below detection( limit)?|lod)$"
MINUS_CHARS = "−–‒‐﹣－"  # U+2212 U+2013 U+2012 U+2010 U+FE63 U+FF0D
NUMBER_PATTERN = r"^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$"


@dataclass
class CellContext:
    """Where a column sits, to turn a row index into ``D17``."""

    sheet: str
    header: str
    letter: str
    row_numbers: np.ndarray

    def cell(self, i: int) -> str:
        return f"{self.letter}{int(self.row_numbers[i])}"


@dataclass
class Parsed:
    values: pa.Array  # float64, null where empty, missing, bdl or bad
    qualifier: pa.Array  # string: '<', '>', 'bdl' or null
    bad: np.ndarray  # bool: cells rejected with an error
    issues: list[Issue] = field(default_factory=list)


def _mask(arr: pa.Array) -> np.ndarray:
    import pyarrow.compute as pc

    mask: np.ndarray = pc.fill_null(arr, False).to_numpy(zero_copy_only=False)
    return mask


def _cell_lines(
    ctx: CellContext, idx: np.ndarray, texts: list[str | None], severity: str, rule: str, hint: str
) -> list[Issue]:
    out = [
        Issue(severity, ctx.sheet, ctx.cell(int(i)), ctx.header, t or "", rule, hint)
        for i, t in zip(idx[:MAX_CELL_LINES], texts[:MAX_CELL_LINES], strict=False)
    ]
    if len(idx) > MAX_CELL_LINES:
        n = len(idx) - MAX_CELL_LINES
        out.append(more_cells(severity, ctx.sheet, ctx.letter, ctx.header, rule, n))
    return out


def _summary(
    ctx: CellContext, mask: np.ndarray, original: pa.Array, rule: str, hint: str
) -> list[Issue]:
    import numpy as np

    idx = np.nonzero(mask)[0]
    if not len(idx):
        return []
    first = int(idx[0])
    example = original[first].as_py()
    return [
        Issue(
            "info",
            ctx.sheet,
            ctx.cell(first),
            ctx.header,
            str(example),
            rule,
            f"{hint} ({len(idx)} cell{'s' if len(idx) != 1 else ''} in this column)",
        )
    ]


def parse_numbers(
    col: pa.Array | pa.ChunkedArray, ctx: CellContext, decimal: str = "auto"
) -> Parsed:
    """Parse a column of cell texts into float64 values with qualifiers and report lines.

    Fast path: cells that are already plain numbers are cast in one pass; only the others
    (tokens, commas, odd minus signs, junk) go through the full cleaning pipeline.
    """
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    if isinstance(col, pa.ChunkedArray):
        col = col.combine_chunks()
    col = col.cast(pa.string())
    s = pc.utf8_trim_whitespace(col)
    plain = _mask(pc.match_substring_regex(s, NUMBER_PATTERN))
    rest = ~plain & _mask(pc.is_valid(s)) & _mask(pc.not_equal(s, ""))
    values = pc.cast(pc.if_else(pa.array(plain), s, pa.scalar(None, pa.string())), pa.float64())
    n = len(col)
    if not rest.any():
        return Parsed(values, pa.nulls(n, pa.string()), np.zeros(n, dtype=bool), [])
    idx = np.nonzero(rest)[0]
    sub_ctx = CellContext(ctx.sheet, ctx.header, ctx.letter, ctx.row_numbers[idx])
    slow = _parse_slow(col.take(pa.array(idx)), sub_ctx, decimal)
    merged = values.to_numpy(zero_copy_only=False).astype(float, copy=True)
    merged[idx] = slow.values.to_numpy(zero_copy_only=False)
    qual = np.full(n, None, dtype=object)
    qual[idx] = slow.qualifier.to_numpy(zero_copy_only=False)
    bad = np.zeros(n, dtype=bool)
    bad[idx] = slow.bad
    return Parsed(
        pa.array(merged, type=pa.float64(), from_pandas=True),
        pa.array(qual, type=pa.string()),
        bad,
        slow.issues,
    )


def _parse_slow(col: pa.Array, ctx: CellContext, decimal: str) -> Parsed:
    """The full cleaning pipeline, for cells that are not plain numbers."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    original = col
    n = len(col)
    issues: list[Issue] = []
    s = pc.utf8_trim_whitespace(col)
    present = _mask(pc.not_equal(s, ""))
    lower = pc.utf8_lower(s)
    missing = _mask(pc.is_in(lower, value_set=pa.array(MISSING_TOKENS))) & present
    bdl = _mask(pc.match_substring_regex(lower, BDL_PATTERN)) & present & ~missing
    issues += _summary(ctx, missing, original, "missing token", "read as no value")
    issues += _summary(
        ctx,
        bdl,
        original,
        "censored value",
        "below detection limit: value empty, qualifier 'bdl' kept",
    )
    work = pc.if_else(pa.array(present & ~missing & ~bdl), s, pa.scalar(None, pa.string()))

    minus = _mask(pc.match_substring_regex(work, f"[{MINUS_CHARS}]"))
    for ch in MINUS_CHARS:
        work = pc.replace_substring(work, ch, "-")
    issues += _summary(
        ctx, minus, original, "minus sign", "a dash or Unicode minus read as a minus sign"
    )

    censored_lt = _mask(pc.match_substring_regex(work, r"^[<≤]\s*"))
    censored_gt = _mask(pc.match_substring_regex(work, r"^[>≥]\s*"))
    work = pc.replace_substring_regex(work, r"^[<>≤≥]\s*", "")
    issues += _summary(
        ctx, censored_lt, original, "censored value", "'<x' kept as value x with qualifier '<'"
    )
    issues += _summary(
        ctx, censored_gt, original, "censored value", "'>x' kept as value x with qualifier '>'"
    )

    unit = _mask(pc.match_substring_regex(work, r"\s*(‰|%|permil|ppm)$"))
    work = pc.replace_substring_regex(work, r"\s*(‰|%|permil|ppm)$", "")
    issues += _summary(ctx, unit, original, "unit in cell", "trailing unit dropped")
    work = pc.replace_substring_regex(work, r"^\+", "")

    spaced = _mask(pc.match_substring_regex(work, "\\d[ \u00a0\u2009\u202f']\\d{3}"))
    for _ in range(3):
        work = pc.replace_substring_regex(work, "(\\d)[ \u00a0\u2009\u202f'](\\d{3})", r"\1\2")
    issues += _summary(
        ctx,
        spaced,
        original,
        "thousands separator",
        "space or apostrophe between digit groups removed",
    )

    has_comma = _mask(pc.match_substring(work, ","))
    comma_errors = np.zeros(n, dtype=bool)
    if has_comma.any():
        work, more, comma_errors = _commas(work, has_comma, ctx, original, decimal)
        issues += more

    date = _mask(pc.match_substring_regex(work, r"^\d{4}-\d{2}-\d{2}([ T]\d|$)"))
    valid = _mask(pc.match_substring_regex(work, NUMBER_PATTERN))
    nonempty = _mask(pc.is_valid(work))
    bad = nonempty & ~valid
    if bad.any():
        idx = np.nonzero(bad & date)[0]
        issues += _cell_lines(
            ctx,
            idx,
            [original[int(i)].as_py() for i in idx[:MAX_CELL_LINES]],
            "error",
            "date in numeric column",
            "the spreadsheet turned a number into a date; type the number "
            "again with the cell formatted as text or number",
        )
        idx = np.nonzero(bad & ~date)[0]
        issues += _cell_lines(
            ctx,
            idx,
            [original[int(i)].as_py() for i in idx[:MAX_CELL_LINES]],
            "error",
            "not a number",
            "write a number, leave the cell empty, or use n.d. / bdl / <x",
        )
    bad = bad | comma_errors
    values = pc.cast(pc.if_else(pa.array(valid), work, pa.scalar(None, pa.string())), pa.float64())
    qual = np.full(n, None, dtype=object)
    qual[bdl] = "bdl"
    qual[censored_lt & valid] = "<"
    qual[censored_gt & valid] = ">"
    return Parsed(values, pa.array(qual, type=pa.string()), bad, issues)


def _commas(
    work: pa.Array, has_comma: np.ndarray, ctx: CellContext, original: pa.Array, decimal: str
) -> tuple[pa.Array, list[Issue], np.ndarray]:
    """Resolve commas: thousands separators, decimal commas and the ambiguous ``1,234``."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    issues: list[Issue] = []
    us = _mask(pc.match_substring_regex(work, r"^-?\d{1,3}(,\d{3})+\.\d*$"))
    eu = _mask(pc.match_substring_regex(work, r"^-?\d{1,3}(\.\d{3})+,\d*$"))
    groups = _mask(pc.match_substring_regex(work, r"^-?\d{1,3}(,\d{3})+$")) & ~us
    simple = _mask(pc.match_substring_regex(work, r"^-?\d*,\d+$")) & ~groups
    if decimal == ",":
        as_decimal, as_thousands, ambiguous = simple | groups, np.zeros_like(us), np.zeros_like(us)
    elif decimal == ".":
        as_decimal, as_thousands, ambiguous = np.zeros_like(us), groups, np.zeros_like(us)
    else:
        column_uses_decimal_comma = bool(simple.any() or eu.any())
        if column_uses_decimal_comma:
            as_decimal, as_thousands, ambiguous = simple | groups, np.zeros_like(us), groups
        elif us.any():
            as_decimal, as_thousands, ambiguous = np.zeros_like(us), groups, np.zeros_like(us)
        else:
            as_decimal, as_thousands, ambiguous = np.zeros_like(us), np.zeros_like(us), groups
    out = work
    thousands = us | as_thousands
    if thousands.any():
        out = pc.if_else(pa.array(thousands), pc.replace_substring(out, ",", ""), out)
        issues += _summary(
            ctx,
            thousands & ~ambiguous,
            original,
            "thousands separator",
            "comma between digit groups removed",
        )
    if eu.any():
        fixed = pc.replace_substring(pc.replace_substring(out, ".", ""), ",", ".")
        out = pc.if_else(pa.array(eu), fixed, out)
        issues += _summary(
            ctx,
            eu,
            original,
            "decimal comma",
            "'1.234,5' read as 1234.5 (dot groups, comma decimal)",
        )
    decided = as_decimal
    errors = np.zeros_like(us)
    if decided.any():
        out = pc.if_else(pa.array(decided), pc.replace_substring(out, ",", "."), out)
        issues += _summary(
            ctx, decided & ~ambiguous, original, "decimal comma", "comma read as the decimal mark"
        )
    if decimal == "auto" and ambiguous.any():
        idx = np.nonzero(ambiguous)[0]
        texts = [original[int(i)].as_py() for i in idx[:MAX_CELL_LINES]]
        if as_decimal[ambiguous].all():
            issues += _cell_lines(
                ctx,
                idx,
                texts,
                "warning",
                "ambiguous comma",
                "read as a decimal comma like the rest of this column; set "
                'decimal = "." in [table] if it was a thousands separator',
            )
        else:
            issues += _cell_lines(
                ctx,
                idx,
                texts,
                "error",
                "ambiguous comma",
                "'1,234' could be 1234 or 1.234; set decimal = \",\" or "
                'decimal = "." in the mapping\'s [table]',
            )
            out = pc.if_else(pa.array(ambiguous), pa.scalar(None, pa.string()), out)
            errors = ambiguous
    return out, issues, errors


# ---------------------------------------------------------------- coordinates

_DMS = re.compile(
    r"^\s*(?P<h1>[NSEW])?\s*(?P<deg>[-+]?\d+(?:[.,]\d+)?)\s*(?:°|º|d|deg|\s|(?=[NSEW]\s*$))\s*"
    r"(?:(?P<min>\d+(?:[.,]\d+)?)\s*(?:'|′|’|m|min|\s)\s*)?"
    r"(?:(?P<sec>\d+(?:[.,]\d+)?)\s*(?:\"|″|''|s|sec)?\s*)?(?P<h2>[NSEW])?\s*$",
    re.IGNORECASE,
)


def parse_coordinate(text: str, axis: str) -> float:
    """Decimal degrees from '12.5', '-12,5', '12°30′S', 'N 45 12 30', '45d12m30sW'.

    Raises ValueError with a reason a report can show.
    """
    t = str(text).strip()
    for ch in MINUS_CHARS:
        t = t.replace(ch, "-")
    try:
        return float(t.replace(",", "."))
    except ValueError:
        pass
    m = _DMS.match(t)
    if not m:
        raise ValueError("not a coordinate (write decimal degrees or 45°12′30″N)")
    deg = float(m.group("deg").replace(",", "."))
    minutes = float((m.group("min") or "0").replace(",", "."))
    seconds = float((m.group("sec") or "0").replace(",", "."))
    if minutes >= 60 or seconds >= 60:
        raise ValueError("minutes and seconds must be below 60")
    value = abs(deg) + minutes / 60 + seconds / 3600
    hemi = (m.group("h1") or m.group("h2") or "").upper()
    if hemi and axis == "lat" and hemi not in "NS":
        raise ValueError(f"hemisphere {hemi} on a latitude")
    if hemi and axis == "lon" and hemi not in "EW":
        raise ValueError(f"hemisphere {hemi} on a longitude")
    if hemi and deg < 0:
        raise ValueError("both a minus sign and a hemisphere letter")
    negative = deg < 0 or hemi in ("S", "W")
    return -value if negative else value
