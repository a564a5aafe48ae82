"""Uncertainty of the excursion metrics: the same metrics measured in many draws.

Draw k of a section is its samples with

* **ages** from age draw k of every sample (``curve.sample_age_draws``: age-model samples take
  their section's stored whole-section draw k, reported ages are normal with their σ,
  stage-only ages uniform over the stage; a missing σ keeps an age fixed and the caller says
  how many). The draw index is the same for every section, so a chart-boundary error shared
  by sections moves them together in the group summary, as in the curve;
* **samples** resampled with replacement within the section (``bootstrap``, the default),
  each drawn sample kept at its own level: the draw is the multiset of drawn samples in
  stratigraphic order (a sample drawn twice stands twice at its level, one not drawn is
  missing). Why keep the order rather than resample freely: the metrics are defined along
  the section (a window of the oldest samples, a walk from the peak back to the baseline);
  a resample laid out in another order would be another record, while one in the section's
  own order asks the question the bootstrap should ask — how much do the metrics depend on
  which samples happened to be collected and measured. The resampling is **stratified**:
  the baseline window's samples and the others are each resampled to their own count, so
  every draw has as many baseline samples as the central estimate (never below the three
  the median needs) and the window cannot slide into the excursion when the oldest samples
  happen not to be drawn. A section's stream of resamples is its own (seeded from ``seed``
  and the section's identity, in blocks of ``BLOCK`` draws): adding a section to a request
  does not change another's draws, and draw k is the same whatever the number of draws.

Each draw is measured with ``excursion.metrics``' definitions, with two things held at
their values on all samples: the **baseline window** picks its samples once (at their
central ages, for a window in Ma), and the **direction** is the one found on all samples —
a draw measures the uncertainty of this excursion, not whether the record holds another.

Reported per metric (``with_uncertainty``): the central value stays the metric of all samples
at their central ages (``excursion.per_section``; not the mean of the draws), beside the 1σ
of the draws (n − 1 in the denominator), their 2.5 and 97.5 percentiles (numpy's linear
interpolation), and for onset, peak, recovery and duration the number of draws in which the
metric was found (a draw without a recovery is counted, never dropped silently). A metric
whose central value is undefined keeps NaN for its spread; its count still says in how many
draws it was found. Limits: a bootstrap cannot draw a sample more extreme than the most
extreme one measured (common practice), so the peak value and magnitude spread is one-sided
and the central magnitude may sit at the edge of its 95 % range; and resampling thins the
record, which moves interpolated crossings outward, so where samples are sparse across the
excursion the percentile range is off-centre and holds the truth less often than 95 % while
the σ is larger than the true spread (measured in a simulation: DEVELOPERS.md, "Excursion
uncertainty"). The age part alone is calibrated when the age draws are.

The group summary (``summary``) adds to ``excursion.summary`` the uncertainty of each group
mean: in draw k the mean over the sections whose metric was found in draw k (of those with
a central value), then the 1σ and the 2.5/97.5 percentiles of those per-draw means, the
number of draws in which a mean could be formed, and the mean number of sections it held.

Vectorised over draws: a section's draws are measured with numpy on (draws × samples)
arrays, whole blocks of draws at a time (the ages of every sample are built for as many
blocks as ``CHUNK_ELEMENTS`` ages allow, so memory stays bounded whatever the draws).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from strata13.compile.synthesis import excursion as ex

from strata13.errors import DomainError, OptionError

DEFAULT_DRAWS = 500  # 95 % ranges settle to about 0.01 of the spread by 500 (common practice)
MAX_DRAWS = 10_000
BLOCK = 128  # a section's resamples are drawn in blocks of this many draws (a fixed stream)
CHUNK_ELEMENTS = 1 << 22  # drawn ages held at once (draws × samples; 32 MB of float64)
PERCENTILES = (2.5, 97.5)
# metric drawn -> (stem of its new columns, unit of its σ, unit of its percentiles or None)
SPREAD = (
    ("baseline", "baseline", "permil", None),
    ("peak_value", "peak_value", "permil", None),
    ("peak_position_m", "peak_position", "m", "m"),
    ("peak_age_ma", "peak_age", "myr", "ma"),
    ("magnitude", "magnitude", "permil", "permil"),
    ("onset_position_m", "onset_position", "m", "m"),
    ("onset_age_ma", "onset_age", "myr", "ma"),
    ("recovery_position_m", "recovery_position", "m", "m"),
    ("recovery_age_ma", "recovery_age", "myr", "ma"),
    ("duration_myr", "duration", "myr", "myr"),
)
DRAWN = tuple(q for q, *_ in SPREAD)
# draws in which a metric was found, counted on the metric named
FOUND = (
    ("peak_found_draws", "peak_age_ma"),
    ("onset_found_draws", "onset_age_ma"),
    ("recovery_found_draws", "recovery_age_ma"),
    ("duration_found_draws", "duration_myr"),
)
UNITS = {"permil": "‰", "m": "m", "myr": "Myr", "ma": "Ma"}
SUMMARY_UNITS = {  # summary quantity -> (unit of its σ, unit of its percentiles)
    "magnitude": ("permil", "permil"),
    "peak_age_ma": ("myr", "ma"),
    "onset_age_ma": ("myr", "ma"),
    "recovery_age_ma": ("myr", "ma"),
    "duration_myr": ("myr", "myr"),
}


@dataclass(frozen=True)
class MetricDraws:
    """Every drawn metric of every row of a per-section table: ``values[q]`` is (rows ×
    draws), NaN where the metric was not found in a draw (or the row was not measured)."""

    n_draws: int
    seed: int
    bootstrap: bool
    values: dict[str, np.ndarray]


def check_draws(n_draws: int) -> int:
    """The number of draws, checked: 0 (no uncertainty) … ``MAX_DRAWS``."""
    ok = isinstance(n_draws, int | np.integer) and not isinstance(n_draws, bool)
    if not ok or not 0 <= int(n_draws) <= MAX_DRAWS:
        raise OptionError(
            f"--draws {n_draws!r} is outside 0 … {MAX_DRAWS}.",
            f"{DEFAULT_DRAWS} draws give stable 95 % ranges (common practice); 0 turns the "
            "uncertainty off.",
        )
    return int(n_draws)


# ------------------------------------------------------------------ one section, many draws


def measure(
    val: np.ndarray,
    pos: np.ndarray,
    ages: np.ndarray,
    picks: np.ndarray | None,
    inside: np.ndarray,
    *,
    has_pos: bool,
    sign: float,
    fraction: float = 0.10,
) -> dict[str, np.ndarray]:
    """The metrics of ``DRAWN`` in each draw of one section (arrays of one value per draw).

    ``val`` and ``pos`` are the section's samples in stratigraphic order (``excursion.
    prepare``), ``inside`` which of them form the baseline window (``excursion.
    baseline_members``), ``ages`` (draws × samples) their drawn ages, ``picks`` (draws ×
    drawn samples) the samples of each draw as ascending indices (None: every sample once),
    ``sign`` +1 or −1 the excursion's direction. A section without positions is ordered by
    its drawn ages in each draw. A draw with fewer than ``MIN_BASELINE`` drawn samples in
    the window, or none outside it, is not measured (NaN)."""
    ex._check_request(fraction, "auto")
    ages = np.atleast_2d(np.asarray(ages, dtype=float))
    n_draws = ages.shape[0]
    idx = np.broadcast_to(np.arange(ages.shape[1]), ages.shape) if picks is None else picks
    n = idx.shape[1]
    v = val[idx]
    a = np.take_along_axis(ages, idx, axis=1)
    p = pos[idx]
    win = np.asarray(inside, dtype=bool)[idx]
    if not has_pos:  # oldest first by this draw's ages
        order = np.argsort(-a, axis=1, kind="stable")
        v, a, win = (np.take_along_axis(x, order, 1) for x in (v, a, win))
    count = win.sum(axis=1)
    valid = (count >= ex.MIN_BASELINE) & (count < n)
    baseline = _masked_median(v, win, count)
    # -- peak
    d = sign * (v - baseline[:, None])
    ipk = np.argmax(np.where(win, -np.inf, d), axis=1)  # the first of equal peaks
    rows = np.arange(n_draws)
    dpk = d[rows, ipk]
    peak = v[rows, ipk]
    magnitude = peak - baseline
    # -- onset and recovery
    departs = valid & (dpk > 0.0)
    thr = float(fraction) * np.abs(magnitude)
    within = d <= thr[:, None]
    col = np.arange(n)[None, :]
    before = within & (col < ipk[:, None])
    after = within & (col > ipk[:, None])
    has_on = departs & before.any(axis=1)
    has_rec = departs & after.any(axis=1)
    i = np.where(has_on, n - 1 - np.argmax(before[:, ::-1], axis=1), 0)
    j = np.where(has_rec, np.argmax(after, axis=1), 1)
    on_p, on_a = _cross(d, p, a, rows, i, np.minimum(i + 1, n - 1), thr, has_on)
    rec_p, rec_a = _cross(d, p, a, rows, np.maximum(j - 1, 0), j, thr, has_rec)
    nan = np.full(n_draws, np.nan)
    out = {
        "baseline": baseline,
        "peak_value": peak,
        "peak_position_m": p[rows, ipk] if has_pos else nan,
        "peak_age_ma": a[rows, ipk],
        "magnitude": magnitude,
        "onset_position_m": on_p if has_pos else nan,
        "onset_age_ma": on_a,
        "recovery_position_m": rec_p if has_pos else nan,
        "recovery_age_ma": rec_a,
    }
    out = {q: np.where(valid, x, np.nan) for q, x in out.items()}
    out["duration_myr"] = out["onset_age_ma"] - out["recovery_age_ma"]
    return out


def resample(inside: np.ndarray, n_draws: int, rng: np.random.Generator) -> np.ndarray:
    """``n_draws`` stratified resamples of a section's samples (draws × samples, ascending
    indices): the baseline window's samples (``inside``) and the others are each drawn with
    replacement to their own count, then laid out in stratigraphic order."""
    win = np.flatnonzero(inside)
    rest = np.flatnonzero(~np.asarray(inside, dtype=bool))
    parts = [s[rng.integers(0, s.size, (n_draws, s.size))] for s in (win, rest) if s.size]
    return np.sort(np.concatenate(parts, axis=1), axis=1)


def _masked_median(v: np.ndarray, inside: np.ndarray, count: np.ndarray) -> np.ndarray:
    """Median of each row's values where ``inside`` (numpy's median: the mean of the two
    middle values of an even count); NaN for an empty row."""
    s = np.sort(np.where(inside, v, np.inf), axis=1)
    c = np.maximum(count, 1)
    rows = np.arange(v.shape[0])
    lo = s[rows, np.minimum((c - 1) // 2, v.shape[1] - 1)]
    hi = s[rows, np.minimum(c // 2, v.shape[1] - 1)]
    with np.errstate(invalid="ignore"):
        med = np.where(c % 2 == 1, lo, 0.5 * (lo + hi))
    return np.where(count > 0, med, np.nan)


def _cross(
    d: np.ndarray,
    p: np.ndarray,
    a: np.ndarray,
    rows: np.ndarray,
    i: np.ndarray,
    j: np.ndarray,
    thr: np.ndarray,
    ok: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """``excursion._cross`` for every draw at once: position and age where the departure,
    linear between samples i and j, equals ``thr``; NaN where not ``ok``."""
    di, dj = d[rows, i], d[rows, j]
    step = np.where(ok, dj - di, 1.0)
    t = np.where(ok, (thr - di) / np.where(step == 0.0, 1.0, step), np.nan)
    pi, ai = p[rows, i], a[rows, i]
    return pi + t * (p[rows, j] - pi), ai + t * (a[rows, j] - ai)


# ------------------------------------------------------------------ every section


def draw_metrics(
    df: pd.DataFrame,
    per_section: pd.DataFrame,
    n_draws: int,
    seed: int = 0,
    ages: Callable[[int], Any] | None = None,
    *,
    bootstrap: bool = True,
    group_col: str | None = None,
    baseline_window: ex.Window | tuple[float, float, str] | None = None,
    fraction: float = 0.10,
    direction: str = "auto",
    value_col: str | None = None,
) -> MetricDraws:
    """The metrics of every row of ``per_section`` (``excursion.per_section(df, group_col,
    baseline_window, fraction, direction, value_col)``) in ``n_draws`` draws.

    ``ages`` gives draw k's age of every row of ``df`` (e.g. ``curve.sample_age_draws``);
    None keeps the ages at ``age_ma``. ``bootstrap`` resamples each section's samples in
    every draw (module docstring); without it and without age spread every draw equals the
    central metrics."""
    from strata13.compile.ages.agemodel import section_seed
    from strata13.compile.synthesis.curve import _draw_getter

    n_draws = check_draws(n_draws)
    ex._check_request(fraction, direction)
    window = ex._window(baseline_window)
    keys = ["source_id", "section_id"] + ([group_col] if group_col else [])
    vcol = ex._value_column(df, value_col)
    for c in (*keys, "age_ma"):
        if c not in df.columns:
            raise DomainError(
                f"The samples have no {c!r} column.",
                "Pass the samples the per-section table was made from.",
            )
    used = [*keys, "position_m", "age_ma", vcol, "position_kind"]
    flat = df[[c for c in dict.fromkeys(used) if c in df.columns]].reset_index(drop=True)
    parts = list(flat.groupby(keys, sort=True, dropna=False))
    listed = per_section[["source_id", "section_id", "group"]].astype(str).to_numpy()
    made = [tuple(map(str, np.atleast_1d(k)))[: len(keys)] for k, _ in parts]
    if len(parts) != len(per_section) or any(
        tuple(row[: len(keys)]) != m for row, m in zip(listed, made, strict=True)
    ):
        raise DomainError(
            f"The per-section table ({len(per_section)} rows) does not list the "
            f"{len(parts)} sections of these samples in order.",
            "Pass the per-section table made from these same samples, with the same group column.",
        )
    values = {q: np.full((len(per_section), n_draws), np.nan) for q in DRAWN}
    if n_draws == 0:
        return MetricDraws(0, int(seed), bootstrap, values)
    get = _draw_getter(ages, len(df)) if ages is not None else None
    central = df["age_ma"].to_numpy(dtype=float, na_value=np.nan)
    magnitudes = pd.to_numeric(per_section["magnitude"], errors="coerce").to_numpy(float)
    todo = []  # (row, prepared samples, baseline window, rows of df, sign, own seed)
    for r, (key, part) in enumerate(parts):
        if not np.isfinite(magnitudes[r]):
            continue  # nothing measured on all samples (see its flags): nothing to draw
        at = part.index.to_numpy()
        prep = ex.prepare(part, None, vcol)
        if isinstance(prep, ex.Metrics):
            continue
        sign = (
            1.0 if direction == "positive" or (direction == "auto" and magnitudes[r] > 0) else -1.0
        )
        ident = "\x1f".join("" if k is None else str(k) for k in np.atleast_1d(key))
        inside = ex.baseline_members(prep, window)
        todo.append((r, prep, inside, at[prep.rows], sign, section_seed(ident, seed)))
    # whole blocks of draws at a time, as many as CHUNK_ELEMENTS ages allow
    step = BLOCK * max(1, CHUNK_ELEMENTS // (BLOCK * max(len(df), 1)))
    for k0 in range(0, n_draws, step):
        k1 = min(n_draws, k0 + step)
        block = None if get is None else np.stack([get(k) for k in range(k0, k1)])
        for r, prep, inside, at, sign, own in todo:
            a = np.broadcast_to(central[at], (k1 - k0, at.size)) if block is None else block[:, at]
            picks = None
            if bootstrap:
                picks = np.concatenate(
                    [
                        resample(inside, BLOCK, np.random.default_rng([own, b0]))[: k1 - b0]
                        for b0 in range(k0, k1, BLOCK)
                    ]
                )
            got = measure(
                prep.val,
                prep.pos,
                a,
                picks,
                inside,
                has_pos=prep.has_pos,
                sign=sign,
                fraction=fraction,
            )
            for q in DRAWN:
                values[q][r, k0:k1] = got[q]
    return MetricDraws(n_draws, int(seed), bootstrap, values)


# ------------------------------------------------------------------ tables


def spread(x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Per row of draws (rows × draws, NaN = not found): the number of draws with a value,
    their 1σ (n − 1 in the denominator; NaN below two), and their 2.5 and 97.5 percentiles
    (numpy's default linear interpolation between order statistics; NaN without any)."""
    x = np.atleast_2d(np.asarray(x, dtype=float))
    if x.shape[1] == 0:  # no draws: nothing found
        blank = np.full(x.shape[0], np.nan)
        return np.zeros(x.shape[0], dtype=np.int64), blank, blank.copy(), blank.copy()
    ok = np.isfinite(x)
    n = ok.sum(axis=1)
    # two passes over values shifted by each row's first value found, so a constant row
    # has a σ of exactly 0
    first = np.where(ok.any(axis=1), x[np.arange(x.shape[0]), np.argmax(ok, axis=1)], 0.0)
    y = np.where(ok, x - first[:, None], 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = y.sum(axis=1) / n
        dev = np.where(ok, y - mean[:, None], 0.0)
        sd = np.where(n >= 2, np.sqrt((dev**2).sum(axis=1) / (n - 1)), np.nan)
    s = np.sort(np.where(ok, x, np.inf), axis=1)
    rows = np.arange(x.shape[0])
    pct = []
    for q in PERCENTILES:
        h = (q / 100.0) * np.maximum(n - 1, 0)
        lo = np.floor(h).astype(np.int64)
        hi = np.minimum(lo + 1, np.maximum(n - 1, 0))
        a, b = s[rows, lo], s[rows, hi]
        with np.errstate(invalid="ignore"):
            v = a + (h - lo) * np.where(hi > lo, b - a, 0.0)
        pct.append(np.where(n > 0, v, np.nan))
    return n, sd, pct[0], pct[1]


def spread_columns(metric: str) -> list[str]:
    """The new columns beside ``metric`` in the per-section table."""
    for q, stem, su, pu in SPREAD:
        if q == metric:
            cols = [f"{stem}_sigma_{su}"]
            if pu is not None:
                cols += [f"{stem}_p2_5_{pu}", f"{stem}_p97_5_{pu}"]
            return cols + [f for f, on in FOUND if on == metric]
    return []


def per_section_columns() -> list[str]:
    """The per-section table's columns with the uncertainty: each spread beside its metric,
    ``draws`` before the flags."""
    cols: list[str] = []
    for c in ex.PER_SECTION_COLUMNS:
        if c == "flags":
            cols.append("draws")
        cols.append(c)
        cols += spread_columns(c)
    return cols


def with_uncertainty(per_section: pd.DataFrame, md: MetricDraws) -> pd.DataFrame:
    """``per_section`` with the spread of every drawn metric beside it (``per_section_
    columns``): 1σ, 2.5/97.5 percentiles and the draws in which it was found."""
    if any(md.values[q].shape[0] != len(per_section) for q in DRAWN):
        raise DomainError(
            "The draws do not belong to this per-section table.",
            "Pass the draws measured for this per-section table.",
        )
    out = per_section.copy()
    for q, stem, su, pu in SPREAD:
        centre = pd.to_numeric(out[q], errors="coerce").to_numpy(float)
        found, sd, lo, hi = spread(md.values[q])
        defined = np.isfinite(centre)
        out[f"{stem}_sigma_{su}"] = np.where(defined, sd, np.nan)
        if pu is not None:
            out[f"{stem}_p2_5_{pu}"] = np.where(defined, lo, np.nan)
            out[f"{stem}_p97_5_{pu}"] = np.where(defined, hi, np.nan)
        for f, on in FOUND:
            if on == q:
                out[f] = found
    out["draws"] = md.n_draws
    return out[per_section_columns()]


def summary_columns() -> list[str]:
    """The summary's columns with the uncertainty of each group mean."""
    cols = ["scope", "group", "n_sections"]
    for q in ex.SUMMARY_STATS:
        cols += [f"{q}_mean", f"{q}_sd", f"{q}_n", *_mean_columns(q)]
    return cols + ["draws"]


def _mean_columns(q: str) -> list[str]:
    su, pu = SUMMARY_UNITS[q]
    tail = "" if q.endswith("_" + pu) else "_" + pu
    return [
        f"{q}_mean_sigma_{su}",
        f"{q}_mean_p2_5{tail}",
        f"{q}_mean_p97_5{tail}",
        f"{q}_mean_draws",
        f"{q}_sections_per_draw",
    ]


def summary(
    per_section: pd.DataFrame, group_col: str | None, md: MetricDraws | None
) -> pd.DataFrame:
    """``excursion.summary`` with, for each quantity, the uncertainty of the group mean from
    the per-draw means (module docstring); NaN and 0 draws without ``md``."""
    base = ex.summary(per_section, group_col)
    rows_of: list[np.ndarray] = []
    idx = np.arange(len(per_section))
    rows_of.append(idx)
    if group_col is not None:
        for _g, part in per_section.reset_index(drop=True).groupby(
            group_col, sort=True, dropna=True
        ):
            rows_of.append(part.index.to_numpy())
    extra: dict[str, list[Any]] = {c: [] for q in ex.SUMMARY_STATS for c in _mean_columns(q)}
    for rows in rows_of:
        for q in ex.SUMMARY_STATS:
            names = _mean_columns(q)
            centre = pd.to_numeric(per_section[q], errors="coerce").to_numpy(float)[rows]
            if md is None or md.n_draws == 0 or q not in md.values:
                stats: tuple[Any, ...] = (math.nan, math.nan, math.nan, 0, math.nan)
            else:
                x = md.values[q][rows][np.isfinite(centre)]
                n_in = np.isfinite(x).sum(axis=0)
                with np.errstate(invalid="ignore", divide="ignore"):
                    means = np.where(n_in > 0, np.nansum(x, axis=0) / n_in, np.nan)
                found, sd, lo, hi = (float(v[0]) for v in spread(means))
                per_draw = float(n_in[n_in > 0].mean()) if found else math.nan
                stats = (sd, lo, hi, int(found), per_draw)
            for name, v in zip(names, stats, strict=True):
                extra[name].append(v)
    out = base.copy()
    for c, v in extra.items():
        out[c] = v
    out["draws"] = 0 if md is None else md.n_draws
    return out[summary_columns()]


def column_notes() -> pd.DataFrame:
    """Every column of the per-section and summary tables with its unit and meaning (the
    ``excursion_columns.csv`` of an output folder)."""
    base = {
        "source_id": ("", "source of the section's records"),
        "section_id": ("", "section or core"),
        "group": ("", "group of the row (--by; default the component)"),
        "position_kind": ("", "height (above datum) or depth (below datum)"),
        "baseline": ("‰", "median δ13C of the pre-excursion window"),
        "baseline_window": ("", "the pre-excursion window used"),
        "peak_value": ("‰", "δ13C at the peak"),
        "peak_position_m": ("m", "position of the peak"),
        "peak_age_ma": ("Ma", "age of the peak"),
        "magnitude": ("‰", "peak − baseline, signed"),
        "onset_position_m": ("m", "position of the onset"),
        "onset_age_ma": ("Ma", "age of the onset"),
        "recovery_position_m": ("m", "position of the recovery"),
        "recovery_age_ma": ("Ma", "age of the recovery"),
        "duration_myr": ("Myr", "onset age − recovery age"),
        "n_samples": ("", "samples measured"),
        "median_spacing_m": ("m", "median gap between consecutive samples"),
        "draws": ("", "draws measured (ages drawn, samples resampled unless --no-bootstrap)"),
        "flags": ("", "what could not be measured on all samples, and why"),
    }
    rows: list[tuple[str, str, str, str]] = []
    for c in per_section_columns():
        if c in base:
            rows.append(("per section", c, *base[c]))
            continue
        for q, stem, su, pu in SPREAD:
            if c == f"{stem}_sigma_{su}":
                rows.append(("per section", c, UNITS[su], f"1σ of {q} over the draws"))
            elif pu is not None and c in (f"{stem}_p2_5_{pu}", f"{stem}_p97_5_{pu}"):
                pct = "2.5" if "_p2_5_" in c else "97.5"
                rows.append(("per section", c, UNITS[pu], f"{pct} percentile of {q} draws"))
        for f, on in FOUND:
            if c == f:
                rows.append(("per section", c, "", f"draws in which {on} was found"))
    for c in summary_columns():
        if c in ("scope", "group", "n_sections", "draws"):
            what = {
                "scope": "all sections, or one group",
                "group": "the group (empty for all)",
                "n_sections": "rows (sections) in the scope",
                "draws": "draws measured",
            }[c]
            rows.append(("summary", c, "", what))
            continue
        for q in ex.SUMMARY_STATS:
            su, pu = SUMMARY_UNITS[q]
            names = dict(
                zip(
                    [f"{q}_mean", f"{q}_sd", f"{q}_n", *_mean_columns(q)],
                    [
                        (UNITS[pu], f"mean of {q} across sections"),
                        (UNITS[su], f"SD of {q} across sections (n − 1)"),
                        ("", f"sections with {q}"),
                        (UNITS[su], f"1σ of the mean of {q} over the draws"),
                        (UNITS[pu], f"2.5 percentile of the mean of {q} over the draws"),
                        (UNITS[pu], f"97.5 percentile of the mean of {q} over the draws"),
                        ("", f"draws in which a mean of {q} could be formed"),
                        ("", f"mean number of sections in the mean of {q} per draw"),
                    ],
                    strict=True,
                )
            )
            if c in names:
                rows.append(("summary", c, *names[c]))
    return pd.DataFrame(rows, columns=["table", "column", "unit", "what"])
