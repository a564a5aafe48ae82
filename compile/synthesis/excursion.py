"""Excursion metrics per section: baseline, peak, magnitude, onset and recovery.

What is measured, for one section's samples in the interval asked for (one component and
setting at a time: the caller's filter or ``group_col`` keeps them apart):

* **Stratigraphic order** is oldest first: heights ascending, depths descending. A section
  with no positions at all (ages only) is ordered by age, oldest first, and its position
  outputs are NaN (flag ``no_positions``). Samples missing a value, or missing a position
  in a section that has positions, are left out and counted (flag ``missing_dropped``).
* **Baseline** is the median of a pre-excursion window. Default: the oldest 20 % of the
  section's samples, rounded up, and never fewer than 3 (``BASELINE_FRACTION``,
  ``MIN_BASELINE``) — the median of three is the smallest that tolerates one odd value. An
  explicit window is ``Window(lo, hi, "ma")`` or ``Window(lo, hi, "m")`` (plain 3-tuples
  work too), bounds inclusive and in either order; positions in metres are the section's
  own (heights or depths).
* **Peak** is the sample outside the baseline window departing furthest from the baseline,
  in the direction asked for. ``direction="auto"`` takes the sign of the larger departure
  (an exact tie is taken as negative and flagged ``direction_ambiguous``); ``"negative"``
  and ``"positive"`` force it. **Magnitude** = peak − baseline, signed (‰).
* **Onset** is where the record, going from the baseline window towards the peak, last
  departs from the baseline by more than ``fraction``·|magnitude|: walking back from the
  peak, the first sample back within that threshold and the next one towards the peak
  bracket it. **Recovery** is where, after the peak, the record first comes back within
  the threshold. Both are interpolated linearly between the two bracketing samples: the
  fraction of the way at which the departure, linear between them, equals the threshold;
  position and age use that same fraction. (Linear, because it assumes nothing about the
  record between samples beyond continuity; its error is second order in the spacing.)
* **Duration** = onset age − recovery age (Myr), NaN unless both are found.
* **Spacing**: median of the gaps between consecutive positions (m).
* **Uncertainty** (every metric's 1σ and 95 % range over age draws and a resampling of the
  samples) is ``excursion_draws``'s; it measures each draw with these same definitions.

Bad input — which raises and which flags:

* DomainError: no samples at all (an empty interval), a missing column, an unknown
  direction, a fraction outside (0, 1), a malformed window. These are wrong requests.
* Flags (the row is kept with NaN metrics, never a crash): ``too_few_samples`` (fewer than
  ``MIN_BASELINE`` + 1 usable samples: a baseline and something to compare with it),
  ``short_baseline`` (an explicit window holding fewer than ``MIN_BASELINE`` samples),
  ``no_samples_outside_baseline``, ``mixed_position_kinds``. Flags with metrics kept:
  ``no_departure`` (flat record, magnitude 0: no onset or recovery),
  ``starts_in_excursion`` (no sample before the peak is within the threshold: onset NaN),
  ``no_recovery`` (none after it is: recovery NaN), ``direction_ambiguous``,
  ``no_positions``, ``missing_dropped``. ``flags`` is the "; "-joined list, "" if none.

Pure numpy/pandas; no plotting here (figures.py draws these).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Any, NamedTuple

import numpy as np
import pandas as pd

from strata13.errors import DomainError

BASELINE_FRACTION = 0.20  # default window: the oldest 20 % of the samples …
MIN_BASELINE = 3  # … and never fewer than three
DIRECTIONS = ("auto", "negative", "positive")
WINDOW_UNITS = ("ma", "m")
VALUE_COLUMNS = ("value", "d13c_carb")  # looked for in this order when value_col is None

PER_SECTION_COLUMNS = (
    "source_id",
    "section_id",
    "group",
    "position_kind",
    "baseline",
    "baseline_window",
    "peak_value",
    "peak_position_m",
    "peak_age_ma",
    "magnitude",
    "onset_position_m",
    "onset_age_ma",
    "recovery_position_m",
    "recovery_age_ma",
    "duration_myr",
    "n_samples",
    "median_spacing_m",
    "flags",
)
SUMMARY_STATS = ("magnitude", "peak_age_ma", "onset_age_ma", "recovery_age_ma", "duration_myr")


class Window(NamedTuple):
    """An explicit baseline window: inclusive bounds in Ma (``unit="ma"``) or in the
    section's own position metres (``unit="m"``), in either order."""

    lo: float
    hi: float
    unit: str


@dataclass(frozen=True)
class Metrics:
    """The excursion metrics of one section (NaN where not defined; see ``flags``)."""

    baseline: float
    baseline_window: str
    peak_value: float
    peak_position_m: float
    peak_age_ma: float
    magnitude: float
    onset_position_m: float
    onset_age_ma: float
    recovery_position_m: float
    recovery_age_ma: float
    duration_myr: float  # onset age − recovery age
    n_samples: int
    median_spacing_m: float
    flags: str

    def as_dict(self) -> dict[str, Any]:
        return asdict(self)


NAN = float("nan")


def metrics(
    section_df: pd.DataFrame,
    baseline_window: Window | tuple[float, float, str] | None = None,
    fraction: float = 0.10,
    direction: str = "auto",
    position_kind: str | None = None,
    value_col: str | None = None,
) -> Metrics:
    """Excursion metrics of one section's samples (columns ``position_m``, ``age_ma`` and
    the value: ``value_col``, else ``value``, else ``d13c_carb``).

    ``position_kind`` ("height" or "depth") defaults to the frame's ``position_kind``
    column, else "height". Raises DomainError for an empty frame or a wrong request;
    shortfalls of the data come back as flags (module docstring)."""
    _check_request(fraction, direction)
    window = _window(baseline_window)
    prep = prepare(section_df, position_kind, value_col)
    if isinstance(prep, Metrics):
        return prep
    pos, age, val, has_pos, flags = prep.pos, prep.age, prep.val, prep.has_pos, list(prep.flags)
    n = int(val.size)
    spacing = float(np.median(np.abs(np.diff(pos)))) if has_pos and n >= 2 else NAN
    if n < MIN_BASELINE + 1:
        return _empty(n, [*flags, "too_few_samples"], "", spacing)

    # -- baseline window
    inside = baseline_members(prep, window)
    if window is None:
        k = int(inside.sum())
        described = f"oldest {k} of {n} samples"
        if has_pos:
            described += f" ({_fmt(pos[0], 'm')}–{_fmt(pos[k - 1], 'm')} m)"
    else:
        lo, hi = sorted((float(window.lo), float(window.hi)))
        described = (
            f"{_fmt(hi, 'Ma')}–{_fmt(lo, 'Ma')} Ma"
            if window.unit == "ma"
            else f"{_fmt(lo, 'm')}–{_fmt(hi, 'm')} m"
        )
        described += f" ({int(inside.sum())} samples)"
        if inside.sum() < MIN_BASELINE:
            return _empty(n, [*flags, "short_baseline"], described, spacing)
    if inside.all():
        return _empty(n, [*flags, "no_samples_outside_baseline"], described, spacing)
    baseline = float(np.median(val[inside]))

    # -- peak and direction
    dep = val - baseline
    cand = np.flatnonzero(~inside)
    up, down = float(dep[cand].max()), float(-dep[cand].min())
    if direction == "auto":
        if up == down > 0.0:
            flags.append("direction_ambiguous")
        sign = 1.0 if up > down else -1.0
    else:
        sign = 1.0 if direction == "positive" else -1.0
    d = sign * dep  # departure in the excursion's direction
    ipk = int(cand[np.argmax(d[cand])])  # first of equal peaks, stratigraphically
    magnitude = float(val[ipk] - baseline)
    res: dict[str, Any] = dict(
        baseline=baseline,
        baseline_window=described,
        peak_value=float(val[ipk]),
        peak_position_m=float(pos[ipk]) if has_pos else NAN,
        peak_age_ma=float(age[ipk]),
        magnitude=magnitude,
        n_samples=n,
        median_spacing_m=spacing,
    )
    onset = recovery = (NAN, NAN)
    if d[ipk] <= 0.0:
        flags.append("no_departure")
    else:
        thr = fraction * abs(magnitude)
        before = np.flatnonzero(d[:ipk] <= thr)
        if before.size:
            i = int(before[-1])
            onset = _cross(d, pos, age, i, i + 1, thr)
        else:
            flags.append("starts_in_excursion")
        after = np.flatnonzero(d[ipk + 1 :] <= thr)
        if after.size:
            j = ipk + 1 + int(after[0])
            recovery = _cross(d, pos, age, j - 1, j, thr)
        else:
            flags.append("no_recovery")
    return Metrics(
        **res,
        onset_position_m=onset[0] if has_pos else NAN,
        onset_age_ma=onset[1],
        recovery_position_m=recovery[0] if has_pos else NAN,
        recovery_age_ma=recovery[1],
        duration_myr=onset[1] - recovery[1],
        flags="; ".join(flags),
    )


class Prepared(NamedTuple):
    """One section's usable samples in stratigraphic order (oldest first): positions (NaN
    without any), ages and values; ``rows`` are their row numbers in the frame given."""

    pos: np.ndarray
    age: np.ndarray
    val: np.ndarray
    rows: np.ndarray
    has_pos: bool
    kind: str
    flags: tuple[str, ...]


def prepare(
    section_df: pd.DataFrame, position_kind: str | None = None, value_col: str | None = None
) -> Prepared | Metrics:
    """The samples ``metrics`` measures, in the order it measures them (module docstring:
    stratigraphic order, what is left out); a Metrics of NaN when the position kinds are
    mixed. Raises DomainError for an empty frame, a missing column or an unknown kind."""
    if len(section_df) == 0:
        raise DomainError(
            "The interval holds no samples of this section.",
            "Widen the interval or check the section and filters.",
        )
    vcol = _value_column(section_df, value_col)
    for col in ("position_m", "age_ma"):
        if col not in section_df.columns:
            raise DomainError(
                f"The samples have no {col!r} column.",
                "Pass records with position_m and age_ma (NaN allowed).",
            )
    flags: list[str] = []
    kind = position_kind
    if kind is None:
        kinds = (
            {str(k) for k in pd.unique(section_df["position_kind"].to_numpy()) if not pd.isna(k)}
            if "position_kind" in section_df.columns
            else set()
        )
        if len(kinds) > 1:
            return _empty(len(section_df), ["mixed_position_kinds"], "")
        kind = kinds.pop() if kinds else "height"
    if kind not in ("height", "depth"):
        raise DomainError(
            f"Position kind {kind!r} is neither 'height' nor 'depth'.",
            "Give the section's position kind: height or depth.",
        )

    pos, age, val = (_floats(section_df[c]) for c in ("position_m", "age_ma", vcol))
    has_pos = bool(np.isfinite(pos).any())
    keep = np.isfinite(val) & (np.isfinite(pos) if has_pos else np.isfinite(age))
    if not has_pos:
        flags.append("no_positions")
    if not keep.all():
        flags.append("missing_dropped")
    rows = np.flatnonzero(keep)
    pos, age, val = pos[keep], age[keep], val[keep]
    if has_pos:  # oldest first: heights ascending, depths descending; ties by age, oldest first
        key = pos if kind == "height" else -pos
        order = np.lexsort((-np.nan_to_num(age, nan=-np.inf), key))
    else:
        order = np.argsort(-age, kind="stable")
    return Prepared(pos[order], age[order], val[order], rows[order], has_pos, kind, tuple(flags))


def baseline_members(prep: Prepared, window: Window | None) -> np.ndarray:
    """Which of a section's prepared samples form its baseline window: the oldest
    max(``MIN_BASELINE``, ⌈``BASELINE_FRACTION``·n⌉), or those inside an explicit window
    (bounds inclusive, on the ages or the positions)."""
    n = int(prep.val.size)
    if window is None:
        inside = np.zeros(n, bool)
        inside[: max(MIN_BASELINE, math.ceil(BASELINE_FRACTION * n))] = True
        return inside
    lo, hi = sorted((float(window.lo), float(window.hi)))
    coord = prep.age if window.unit == "ma" else prep.pos
    with np.errstate(invalid="ignore"):
        within: np.ndarray = np.isfinite(coord) & (coord >= lo) & (coord <= hi)
    return within


def per_section(
    df: pd.DataFrame,
    group_col: str | None = None,
    baseline_window: Window | tuple[float, float, str] | None = None,
    fraction: float = 0.10,
    direction: str = "auto",
    value_col: str | None = None,
) -> pd.DataFrame:
    """One row per (source_id, section_id[, group]) with the columns ``PER_SECTION_COLUMNS``.

    ``group`` is the value of ``group_col`` (e.g. "region", "component"), None without one;
    a section holding two groups gives two rows, so components are never mixed in one
    record. Rows are sorted by source, section and group. DomainError if ``df`` is empty."""
    _check_request(fraction, direction)
    _window(baseline_window)
    if len(df) == 0:
        raise DomainError(
            "The interval holds no samples: there is nothing to measure.",
            "Widen the interval or loosen the filters.",
        )
    keys = ["source_id", "section_id"] + ([group_col] if group_col else [])
    missing = [c for c in keys if c not in df.columns]
    if missing:
        raise DomainError(
            f"The samples have no {', '.join(map(repr, missing))} column.",
            "Pass records as queried from the store, or name an existing group column.",
        )
    vcol = _value_column(df, value_col)
    rows: list[dict[str, Any]] = []
    for key, part in df.groupby(keys, sort=True, dropna=False):
        m = metrics(part, baseline_window, fraction, direction, value_col=vcol)
        kinds = (
            part["position_kind"].dropna().astype(str).unique()
            if "position_kind" in part.columns
            else np.array(["height"])
        )
        rows.append(
            {
                "source_id": key[0],
                "section_id": key[1],
                "group": key[2] if group_col else None,
                "position_kind": str(kinds[0])
                if len(kinds) == 1
                else ("height" if len(kinds) == 0 else "mixed"),
                **m.as_dict(),
            }
        )
    return pd.DataFrame(rows, columns=list(PER_SECTION_COLUMNS))


def summary(per_section: pd.DataFrame, group_col: str | None = "group") -> pd.DataFrame:
    """Mean, SD (n − 1 in the denominator; NaN below two values) and n of the magnitude,
    peak, onset and recovery ages and the duration: one row across all sections (``scope``
    "all", ``group`` None), then one per value of ``group_col`` (``scope`` "group"), sorted.
    Rows with NaN in a quantity do not count towards its n.

    Columns: scope, group, n_sections, then ``<q>_mean``, ``<q>_sd``, ``<q>_n`` for q in
    ``SUMMARY_STATS``. ``excursion_draws.summary`` adds their uncertainty."""
    missing = [c for c in SUMMARY_STATS if c not in per_section.columns]
    if missing:
        raise DomainError(
            f"The table has no {', '.join(missing)} column.",
            "Pass the per-section table of excursion metrics unchanged.",
        )
    if group_col is not None and group_col not in per_section.columns:
        raise DomainError(
            f"The table has no {group_col!r} column.",
            "Name a column of the per-section table, or pass None.",
        )

    def row(scope: str, group: Any, part: pd.DataFrame) -> dict[str, Any]:
        out: dict[str, Any] = {"scope": scope, "group": group, "n_sections": len(part)}
        for q in SUMMARY_STATS:
            x = pd.to_numeric(part[q], errors="coerce").to_numpy(float)
            x = x[np.isfinite(x)]
            out[f"{q}_mean"] = float(x.mean()) if x.size else NAN
            out[f"{q}_sd"] = float(x.std(ddof=1)) if x.size >= 2 else NAN
            out[f"{q}_n"] = int(x.size)
        return out

    rows = [row("all", None, per_section)]
    if group_col is not None:
        for g, part in per_section.groupby(group_col, sort=True, dropna=True):
            rows.append(row("group", g, part))
    cols = ["scope", "group", "n_sections"] + [
        f"{q}_{s}" for q in SUMMARY_STATS for s in ("mean", "sd", "n")
    ]
    return pd.DataFrame(rows, columns=cols)


# --- helpers --------------------------------------------------------------------------


def _cross(
    d: np.ndarray, pos: np.ndarray, age: np.ndarray, i: int, j: int, thr: float
) -> tuple[float, float]:
    """Where the departure, linear between samples i and j (one each side of ``thr``),
    equals ``thr``: (position, age) at that same fraction of the way from i to j."""
    t = (thr - d[i]) / (d[j] - d[i])
    return float(pos[i] + t * (pos[j] - pos[i])), float(age[i] + t * (age[j] - age[i]))


def _empty(n: int, flags: list[str], window: str, spacing: float = NAN) -> Metrics:
    return Metrics(
        NAN, window, NAN, NAN, NAN, NAN, NAN, NAN, NAN, NAN, NAN, n, spacing, "; ".join(flags)
    )


def _check_request(fraction: float, direction: str) -> None:
    if direction not in DIRECTIONS:
        raise DomainError(
            f"Direction {direction!r} is not one of {', '.join(DIRECTIONS)}.",
            "Use auto (the sign of the larger departure), negative or positive.",
        )
    if not (0.0 < float(fraction) < 1.0):
        raise DomainError(
            f"The onset/recovery fraction {fraction} is not between 0 and 1.",
            "Give a fraction of the magnitude such as 0.1 (10 %).",
        )


def _window(w: Any) -> Window | None:
    if w is None:
        return None
    try:
        lo, hi, unit = w
        win = Window(float(lo), float(hi), str(unit).strip().lower())
    except (TypeError, ValueError):
        raise DomainError(
            f"Baseline window {w!r} is not (lo, hi, unit).",
            "Give e.g. (184.0, 183.5, 'ma') or (0.0, 2.5, 'm').",
        ) from None
    if win.unit not in WINDOW_UNITS or not (np.isfinite(win.lo) and np.isfinite(win.hi)):
        raise DomainError(
            f"Baseline window {w!r} needs finite bounds and unit 'ma' or 'm'.",
            "Give e.g. (184.0, 183.5, 'ma') or (0.0, 2.5, 'm').",
        )
    return win


def _value_column(df: pd.DataFrame, value_col: str | None) -> str:
    if value_col is not None:
        if value_col not in df.columns:
            raise DomainError(
                f"The samples have no {value_col!r} column.",
                "Name the column holding the δ13C values.",
            )
        return value_col
    for c in VALUE_COLUMNS:
        if c in df.columns:
            return c
    raise DomainError(
        "The samples have neither a 'value' nor a 'd13c_carb' column.",
        "Name the column holding the δ13C values with value_col.",
    )


def _floats(col: pd.Series) -> np.ndarray:
    """A column as float64, text that is no number as NaN (numeric columns at once)."""
    if pd.api.types.is_numeric_dtype(col.dtype) and not pd.api.types.is_bool_dtype(col.dtype):
        out: np.ndarray = col.to_numpy(dtype=float, na_value=np.nan)
    else:
        out = pd.to_numeric(col, errors="coerce").to_numpy(float)
    return out


def _fmt(x: float, unit: str) -> str:
    from strata13.numbers import readable

    return readable(float(x), unit=unit)
