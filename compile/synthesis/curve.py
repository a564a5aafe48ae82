"""Composite δ13C curves: binned statistics and LOESS with a whole-section bootstrap.

Why sections and not samples: one densely sampled section would otherwise decide a
composite on its own, and its samples are not independent of each other. So every
statistic here can weight *sections*: in a bin, each section present carries total weight
1, shared equally by its samples there; in a curve, each section carries total weight 1
over the whole curve (1/n per sample), so a section sampled every 10 cm does not outweigh
one sampled every metre over the same interval.

Methods (each checked in ``tests/test_curve.py`` against something outside the project):

* **Replicates** are averaged first (``average_replicates``): a triplicate is one sample.
* **Bins** (``bin_stats``) hold ages from their young edge (inclusive) to their old edge
  (exclusive); the oldest edge of all is inclusive, so a sample at the interval's base is
  kept. Quantiles with ``weight="samples"`` are the linear interpolation pandas and numpy
  use by default (type 7 of Hyndman & Fan 1996). With ``weight="sections"`` they invert
  the weighted CDF with midpoint interpolation (see ``weighted_quantile``); with equal
  weights that is numpy's ``method="hazen"`` (Hyndman & Fan type 5).
* **LOESS** (``loess``): Cleveland (1979, JASA 74:829) local linear regression, degree 1,
  no robustness iterations. At each grid age the window is the k = ⌊span·n⌋ samples
  nearest to it; its radius h is the distance to the farthest of them; a sample at distance
  d gets the tricube weight (1 − (d/h)³)³ times its prior weight. The fit is the weighted
  least-squares line's value at the grid age. Undefined (NaN) where no sample in the window
  has positive weight; where all positive weight sits at one age the line has no slope and
  the fit is the weighted mean there (stage-only ages all share their stage's midpoint).
* **Bootstrap** (``curve``): whole sections resampled with replacement (a section's samples
  stay together), as LOESS prior weights: the times a section was drawn (× 1/n of its
  samples with ``weight="sections"``). The windows are those of the full data set (a
  section drawn zero times still occupies its window places, with weight 0), so a replicate
  costs one weighted fit, and without age draws all replicates share one pass over the
  windows (per-section window sums, then one matrix product with the draw counts).
  The band is the 2.5 and 97.5 % of the replicate fits (numpy's linear percentiles; NaN
  replicates ignored); ``fit`` is the LOESS of all samples, not the bootstrap mean.
* **Age uncertainty** (``age_draws``): replicate b also takes age draw b (cycling through
  the draws), so the band carries age and sampling uncertainty together. The draw index
  is the same for every section, so a chart-boundary error shared by sections (drawn once
  per draw in ``agemodel``) moves them together and is not averaged away. With age draws
  each replicate refits on its own ages (its own windows). ``sample_age_draws`` builds
  draws from a samples table: age-model samples from their section's draws, stage-only
  samples uniform over age ± √3σ (the stage span), reported ages normal with their σ.
* **Contributing sections** at a grid age: sections with at least one sample of positive
  weight in that age's window of the full fit (distance < h). Where fewer than
  ``min_sections`` contribute the band is not shown (lo/hi NaN).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, NamedTuple

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from strata13.errors import DomainError, OptionError

if TYPE_CHECKING:
    import pandas as pd

SECTION_KEY = ("source_id", "section_id")
SAMPLE_KEY = (*SECTION_KEY, "sample_id")
KEEP = (
    "position_m",
    "position_kind",
    "age_ma",
    "age_sigma_ma",
    "age_basis",
    "component",
    "setting",
)
WEIGHTS = ("sections", "samples")
LEAVE = ("source", "section")
QUANTILES = (("median", 0.5), ("q25", 0.25), ("q75", 0.75), ("p2_5", 0.025), ("p97_5", 0.975))
BAND = (2.5, 97.5)  # percentiles of the bootstrap fits
MIN_WINDOW = 3  # a window's farthest sample has weight 0: a line needs two more
SPREAD_TOL = 1e-12  # weighted variance of d/h below this × E[(d/h)²]: no slope (one age)
CHUNK_ELEMENTS = 1 << 18  # window values per chunk of grid ages (2 MB of float64)
STAGE_ONLY = "stage only"
AGE_MODEL = "age model"

AgeDrawSource = Callable[[int], Any] | Mapping[int, Any] | np.ndarray


# ------------------------------------------------------------------ checks


def _check_span(span: float) -> float:
    if not (isinstance(span, int | float) and 0.0 < span <= 1.0):
        raise OptionError(
            f"the LOESS span {span!r} is outside (0, 1].",
            "Give the fraction of samples in each window, e.g. 0.3.",
        )
    return float(span)


def _check_weight(weight: str) -> str:
    if weight not in WEIGHTS:
        raise OptionError(
            f"the weighting {weight!r} is neither 'sections' nor 'samples'.",
            "Weight by 'sections' (each section counts once) or 'samples'.",
        )
    return weight


def _check_columns(samples: pd.DataFrame, cols: Sequence[str], what: str) -> None:
    missing = [c for c in cols if c not in samples.columns]
    if missing:
        raise DomainError(
            f"the samples lack the column(s) {', '.join(missing)} needed for {what}.",
            "Average the replicates first (average_replicates), "
            "which keeps the key, age and value columns.",
        )


def _check_grid(grid: Any) -> np.ndarray:
    g = np.atleast_1d(np.asarray(grid, dtype=float))
    if g.ndim != 1 or g.size == 0 or not np.isfinite(g).all():
        raise OptionError(
            "the grid of ages is empty or has missing or infinite values.",
            "Give the ages (Ma) at which to evaluate the curve as finite numbers.",
        )
    return g


def window_size(n: int, span: float) -> int:
    """k = ⌊span·n⌋ (with a 1e-10 guard so that 0.3·10 is 3, not 2)."""
    return int(math.floor(span * n + 1e-10))


def window_reach(ages: Any, grid: Any, span: float) -> np.ndarray:
    """How far (Myr) each grid age's LOESS window reaches: the distance to the k-th nearest
    sample age, k = ⌊span·n⌋ — the tricube bandwidth of that local fit (Cleveland 1979).
    NaN where the window is empty. Chunked over the grid, so memory stays ~8 MB."""
    a = np.asarray(ages, dtype=float)
    a = a[np.isfinite(a)]
    g = np.asarray(grid, dtype=float).ravel()
    k = window_size(a.size, span)
    out = np.full(g.size, np.nan)
    if k < 1 or not a.size:
        return out
    step = max(1, 1_000_000 // a.size)
    for lo in range(0, g.size, step):
        d = np.abs(a[None, :] - g[lo : lo + step, None])
        out[lo : lo + step] = np.partition(d, k - 1, axis=1)[:, k - 1]
    return out


def _need_window(n: int, span: float) -> int:
    k = window_size(n, span)
    if k < MIN_WINDOW:
        raise DomainError(
            f"a span of {span:g} covers {k} of {n} samples, but a local line "
            f"needs at least {MIN_WINDOW}.",
            "Widen the span or add samples (or a wider age range).",
        )
    return k


# ------------------------------------------------------------------ replicates


def average_replicates(df: pd.DataFrame, value: str, keep: Sequence[str] = KEEP) -> pd.DataFrame:
    """One row per (source_id, section_id, sample_id): the mean of the replicates' ``value``.

    Why: replicate analyses of one sample are one observation of the rock; counting each
    would weight well-replicated samples more. Replicates without a value are ignored and
    a sample with none is left out (it has no ``value``). Columns: the sample key, ``value``,
    ``n_replicates`` and the ``keep`` columns present in ``df`` (each the sample's first
    non-missing entry). ``attrs["value"]`` names the averaged column.
    """
    _check_columns(df, [*SAMPLE_KEY, value], "averaging replicates")
    if df.empty:
        raise DomainError(
            "there are no samples to average.",
            "Widen the query (interval, region, material) or ingest data.",
        )
    cols = [c for c in keep if c in df.columns and c not in SAMPLE_KEY]
    data = df.loc[df[value].notna(), [*SAMPLE_KEY, value, *cols]]
    grouped = data.groupby(list(SAMPLE_KEY), sort=False, dropna=False)
    out = (
        grouped[value]
        .agg(["mean", "count"])
        .rename(columns={"mean": "value", "count": "n_replicates"})
    )
    if cols:
        out = out.join(grouped[cols].first())
    out = out.reset_index()
    out.attrs["value"] = value
    return out


# ------------------------------------------------------------------ bins


def bin_edges(older: float, younger: float, width: float) -> np.ndarray:
    """Edges (Ma, old → young) of bins ``width`` Myr wide from ``older`` to ``younger``.

    The ends may come in either order. The youngest bin is shortened to end at the
    interval's young end when the width does not divide the interval.
    """
    old, young = max(older, younger), min(older, younger)
    if not all(math.isfinite(v) for v in (old, young, width)) or width <= 0:
        raise OptionError(
            f"bins of {width!r} Myr from {older!r} to {younger!r} Ma cannot be made.",
            "Give finite ages and a positive bin width in Myr.",
        )
    if width > old - young:
        raise OptionError(
            f"a bin width of {width:g} Myr is wider than the interval "
            f"{old:g}–{young:g} Ma ({old - young:g} Myr).",
            "Choose a narrower bin or a longer interval.",
        )
    n = max(1, math.ceil((old - young) / width - 1e-9))
    edges = old - width * np.arange(n + 1, dtype=float)
    edges[-1] = young
    return edges


def _segments(keys: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Start index and length of each key 0..n-1 in a sorted key array."""
    counts = np.bincount(keys, minlength=n)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    return starts, counts


def _sorted_quantiles(
    keys: np.ndarray, v: np.ndarray, w: np.ndarray | None, n: int, qs: Sequence[float] | np.ndarray
) -> np.ndarray:
    """Quantiles (len(qs) × n) per group of values sorted by (key, value); NaN if empty.

    ``w`` None: linear interpolation at h = (m − 1)·q (type 7). Weighted: the midpoint rule
    — value i sits at p_i = (S_i − w_i/2) / W (S_i the group's cumulative weight through i,
    W its total) and the quantile interpolates linearly between the points (p_i, v_i), held
    at the end values outside [p_1, p_m].
    """
    starts, m = _segments(keys, n)
    out = np.full((len(qs), n), np.nan)
    has = np.flatnonzero(m > 0)
    if has.size == 0:
        return out
    first, last = starts[has], starts[has] + m[has] - 1
    if w is not None:
        cs = np.cumsum(w)
        before = np.zeros(n)
        before[has] = cs[first] - w[first]
        total = np.bincount(keys, weights=w, minlength=n)
        p = (cs - before[keys] - 0.5 * w) / total[keys]
    for j, q in enumerate(qs):
        if w is None:
            h = (m[has] - 1) * q
            lo = first + np.floor(h).astype(np.int64)
            frac = h - np.floor(h)
        else:  # the last point at or below q (first - 1 when none is)
            lo = first + np.bincount(keys, weights=p <= q, minlength=n)[has].astype(np.int64) - 1
            inner = (lo >= first) & (lo < last)
            lo = np.clip(lo, first, last)
            p_lo, p_hi = p[lo], p[np.minimum(lo + 1, last)]
            frac = np.zeros(has.size)
            frac[inner] = (q - p_lo[inner]) / (p_hi[inner] - p_lo[inner])
        hi = np.minimum(lo + 1, last)
        out[j, has] = v[lo] + frac * (v[hi] - v[lo])
    return out


def weighted_quantile(values: Any, weights: Any, q: float | Sequence[float]) -> np.ndarray:
    """Quantile(s) ``q`` (0–1) of ``values`` with positive ``weights``, by the midpoint rule.

    Value i (sorted) sits at p_i = (S_i − w_i/2) / W of the weighted CDF; the quantile
    interpolates linearly between these points and is held at the first or last value
    outside them. With equal weights this is numpy's ``percentile(method="hazen")``.
    """
    v = np.asarray(values, dtype=float).ravel()
    w = np.asarray(weights, dtype=float).ravel()
    if (
        v.size == 0
        or v.size != w.size
        or not (np.isfinite(v).all() and np.isfinite(w).all() and (w > 0).all())
    ):
        raise DomainError(
            "weighted quantiles need as many finite values as positive weights.",
            "Drop missing values and give every value a weight above 0.",
        )
    order = np.argsort(v, kind="stable")
    qs = np.atleast_1d(np.asarray(q, dtype=float))
    res = _sorted_quantiles(np.zeros(v.size, dtype=np.int64), v[order], w[order], 1, qs)
    return res[:, 0]


def _section_codes(samples: pd.DataFrame) -> tuple[np.ndarray, int]:
    codes = samples.groupby(list(SECTION_KEY), sort=False, dropna=False).ngroup().to_numpy()
    return codes.astype(np.int64), int(codes.max()) + 1 if codes.size else 0


def bin_stats(samples: pd.DataFrame, edges: Any, weight: str = "sections") -> pd.DataFrame:
    """Statistics of ``value`` per age bin, rows old → young.

    ``edges`` are bin edges in Ma in any order (``bin_edges`` or stage boundaries). Columns:
    age_old, age_young, n_samples, n_sections, median, mean, q25, q75, p2_5, p97_5 (NaN in
    an empty bin). ``weight="sections"``: each section present in a bin has total weight 1,
    shared equally by its samples there (mean = mean of section means); quantiles by the
    midpoint rule of ``weighted_quantile``. ``weight="samples"``: every sample counts once
    and the numbers equal a plain pandas groupby (linear quantiles). Samples without an
    age or value, or outside the edges, are counted in ``attrs["outside"]``.
    """
    import pandas as pd

    _check_weight(weight)
    _check_columns(samples, [*SECTION_KEY, "age_ma", "value"], "binned statistics")
    if samples.empty:
        raise DomainError(
            "there are no samples to bin.",
            "Widen the query (interval, region, material) or ingest data.",
        )
    raw = np.asarray(edges, dtype=float).ravel()
    e = np.unique(raw)
    if raw.size < 2 or e.size != raw.size or not np.isfinite(raw).all():
        raise OptionError(
            "bin edges must be at least two distinct finite ages.",
            "Give edges in Ma, e.g. multiples of a bin width or the stage boundaries.",
        )
    nb = e.size - 1
    age = samples["age_ma"].to_numpy(dtype=float, na_value=np.nan)
    val = samples["value"].to_numpy(dtype=float, na_value=np.nan)
    sec, n_sec = _section_codes(samples)
    b = np.searchsorted(e, age, side="right") - 1
    b[age == e[-1]] = nb - 1  # the oldest edge is inclusive
    ok = np.isfinite(age) & np.isfinite(val) & (b >= 0) & (b < nb)
    b, val, sec = b[ok], val[ok], sec[ok]
    order = np.lexsort((val, b))
    b, val, sec = b[order], val[order], sec[order]

    pair, inverse, per_pair = np.unique(
        b * max(n_sec, 1) + sec, return_inverse=True, return_counts=True
    )
    n_samples = np.bincount(b, minlength=nb)
    n_sections = np.bincount(pair // max(n_sec, 1), minlength=nb)
    if weight == "sections":
        w = 1.0 / per_pair[inverse]
        total = np.bincount(b, weights=w, minlength=nb)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.bincount(b, weights=w * val, minlength=nb) / total
        qv = _sorted_quantiles(b, val, w, nb, [q for _, q in QUANTILES])
    else:
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.bincount(b, weights=val, minlength=nb) / n_samples
        qv = _sorted_quantiles(b, val, None, nb, [q for _, q in QUANTILES])
    out = pd.DataFrame(
        {
            "age_old": e[1:],
            "age_young": e[:-1],
            "n_samples": n_samples,
            "n_sections": n_sections,
            "median": qv[0],
            "mean": mean,
            **{name: qv[j] for j, (name, _) in enumerate(QUANTILES) if j},
        }
    )
    out = out.iloc[::-1].reset_index(drop=True)
    out.attrs.update({"weight": weight, "outside": int((~ok).sum())})
    return out


# ------------------------------------------------------------------ LOESS


class _Windows(NamedTuple):
    """The LOESS window of each grid age over sorted ages: first index and radius."""

    left: np.ndarray
    radius: np.ndarray
    k: int


def _windows(xs: np.ndarray, grid: np.ndarray, k: int) -> _Windows:
    """The k nearest sorted ages of each grid age, as one contiguous run [left, left + k).

    Moving the run one place right helps while x[left + k] − g < g − x[left], i.e. while
    x[left] + x[left + k] < 2g; that sum grows with ``left``, so one searchsorted finds it.
    """
    n = xs.size
    left = np.searchsorted(xs[: n - k] + xs[k:], 2.0 * grid, side="left")
    radius = np.maximum(grid - xs[left], xs[left + k - 1] - grid)
    return _Windows(left, radius, k)


def _step(k: int, n_sec: int = 1) -> int:
    """Grid ages per chunk: about CHUNK_ELEMENTS window (or section) values at a time."""
    return max(1, CHUNK_ELEMENTS // max(k, n_sec, 1))


def _tricube_chunk(
    xs: np.ndarray, ws: np.ndarray | None, grid: np.ndarray, win: _Windows, c0: int, c1: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """For grid ages c0..c1: window rows, u = (x − g)/h and weights (tricube × prior)."""
    rows = win.left[c0:c1]
    g = grid[c0:c1, None]
    h = win.radius[c0:c1, None]
    u = sliding_window_view(xs, win.k)[rows]  # a copy (fancy index)
    u -= g
    u /= np.where(h > 0, h, 1.0)  # h = 0: every sample sits at g, u = 0
    t = np.abs(u)
    np.multiply(t, t * t, out=t)
    np.subtract(1.0, t, out=t)
    np.maximum(t, 0.0, out=t)
    np.multiply(t, t * t, out=t)
    if ws is not None:
        t *= sliding_window_view(ws, win.k)[rows]
    return rows, u, t


def _line_value(
    s0: np.ndarray, mu: np.ndarray, var: np.ndarray, ybar: np.ndarray, cov: np.ndarray
) -> np.ndarray:
    """The weighted line's value at u = 0; the weighted mean where the ages do not spread."""
    with np.errstate(invalid="ignore", divide="ignore"):
        flat = var <= SPREAD_TOL * (var + mu * mu)
        fit = np.where(flat, ybar, ybar - mu * cov / np.where(flat, 1.0, var))
    return np.where(s0 > 0, fit, np.nan)


def _fit_sorted(
    xs: np.ndarray,
    ys: np.ndarray,
    ws: np.ndarray | None,
    grid: np.ndarray,
    k: int,
    sec: np.ndarray | None = None,
    n_sec: int = 0,
) -> tuple[np.ndarray, np.ndarray | None]:
    """LOESS at ``grid`` over ages sorted ascending; optionally contributing sections."""
    win = _windows(xs, grid, k)
    fit = np.empty(grid.size)
    contrib = None if sec is None else np.zeros(grid.size, dtype=np.int64)
    step = _step(k, n_sec)
    for c0 in range(0, grid.size, step):
        c1 = min(c0 + step, grid.size)
        rows, u, w = _tricube_chunk(xs, ws, grid, win, c0, c1)
        if contrib is not None and sec is not None:
            key = np.arange(c1 - c0)[:, None] * n_sec + sliding_window_view(sec, k)[rows]
            hits = np.bincount(key[w > 0], minlength=(c1 - c0) * n_sec)
            contrib[c0:c1] = np.count_nonzero(hits.reshape(c1 - c0, n_sec), axis=1)
        y = sliding_window_view(ys, k)[rows]
        s0 = w.sum(axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            mu = np.einsum("ij,ij->i", w, u) / s0
            ybar = np.einsum("ij,ij->i", w, y) / s0
            u -= mu[:, None]  # two passes: the spread about the weighted mean
            w *= u
            var = np.einsum("ij,ij->i", w, u) / s0
            cov = np.einsum("ij,ij->i", w, y) / s0
        fit[c0:c1] = _line_value(s0, mu, var, ybar, cov)
    return fit, contrib


def _fit(
    x: np.ndarray,
    y: np.ndarray,
    w: np.ndarray | None,
    grid: np.ndarray,
    span: float,
    sec: np.ndarray | None = None,
    n_sec: int = 0,
    strict: bool = True,
) -> tuple[np.ndarray, np.ndarray | None]:
    """Sort, size the window and fit; ``strict=False`` gives NaN instead of an error."""
    n = x.size
    if strict:
        k = _need_window(n, span)
    else:
        k = window_size(n, span)
        if k < MIN_WINDOW:
            return np.full(grid.size, np.nan), (
                np.zeros(grid.size, dtype=np.int64) if sec is not None else None
            )
    order = np.argsort(x)  # ties are harmless: a tie cut by the window sits at h
    return _fit_sorted(
        x[order],
        y[order],
        None if w is None else w[order],
        grid,
        k,
        None if sec is None else sec[order],
        n_sec,
    )


def loess(x: Any, y: Any, grid: Any, span: float, weights: Any = None) -> np.ndarray:
    """LOESS (Cleveland 1979: local linear, tricube weights, no robustness steps) at ``grid``.

    The window of each grid value is the ⌊span·n⌋ nearest x; ``weights`` (≥ 0) multiply the
    tricube weights. Pairs with a missing x, y or weight are dropped. NaN where undefined
    (no positive weight in the window).
    """
    span = _check_span(span)
    xa = np.asarray(x, dtype=float).ravel()
    ya = np.asarray(y, dtype=float).ravel()
    wa = None if weights is None else np.asarray(weights, dtype=float).ravel()
    if xa.size != ya.size or (wa is not None and wa.size != xa.size):
        raise DomainError(
            f"LOESS got {xa.size} x, {ya.size} y"
            + ("" if wa is None else f" and {wa.size} weights")
            + " values; they must pair up.",
            "Give one y (and weight) per x.",
        )
    ok = np.isfinite(xa) & np.isfinite(ya)
    if wa is not None:
        ok &= np.isfinite(wa)
        if (wa[ok] < 0).any():
            raise DomainError(
                "LOESS weights must not be negative.", "Give each sample a weight of 0 or more."
            )
    if not ok.any():
        raise DomainError(
            "there are no samples with both an age and a value to fit.",
            "Widen the query or check that ages and values are present.",
        )
    g = _check_grid(grid)
    return _fit(xa[ok], ya[ok], None if wa is None else wa[ok], g, span)[0]


# ------------------------------------------------------------------ age draws


@dataclass(frozen=True)
class SampleAgeDraws:
    """Age draw k (Ma) of every row of the samples table it was built from: call it with k.

    ``len()`` is the number of distinct draws; k cycles. Draw k of every section is taken
    at the same index, so errors shared across sections stay shared.
    """

    age: np.ndarray
    sigma: np.ndarray
    uniform: np.ndarray  # rows drawn uniform over age ± √3σ (stage only)
    normal: np.ndarray  # rows drawn normal (reported, or age model without section draws)
    sections: tuple[tuple[np.ndarray, np.ndarray, np.ndarray], ...]  # rows, columns, draws
    n_draws: int
    seed: int

    def __len__(self) -> int:
        return self.n_draws

    def __call__(self, k: int) -> np.ndarray:
        k = int(k) % self.n_draws
        out = self.age.copy()
        rng = np.random.default_rng((self.seed, k))
        if self.normal.size:
            out[self.normal] += self.sigma[self.normal] * rng.standard_normal(self.normal.size)
        if self.uniform.size:
            half = math.sqrt(3.0) * self.sigma[self.uniform]
            out[self.uniform] += half * rng.uniform(-1.0, 1.0, self.uniform.size)
        for rows, cols, draws in self.sections:
            out[rows] = draws[k % draws.shape[0], cols]
        return out


def _nearest_position(positions: Any, wanted: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The column of each wanted position among a section's positions, and whether it
    matches (within 0.1 mm, or 1e-6 relative: positions may have been stored as float32)."""
    p = np.asarray(positions, dtype=float).ravel()
    if p.size == 0:
        return np.zeros(wanted.size, dtype=np.int64), np.zeros(wanted.size, dtype=bool)
    order = np.argsort(p)
    ps = p[order]
    at = np.clip(np.searchsorted(ps, wanted), 1, max(ps.size - 1, 1))
    at = np.where(
        np.abs(ps[at - 1] - wanted) <= np.abs(ps[np.minimum(at, ps.size - 1)] - wanted), at - 1, at
    )
    at = np.minimum(at, ps.size - 1)
    hit = np.abs(ps[at] - wanted) <= np.maximum(1e-4, 1e-6 * np.abs(wanted))
    return order[at], hit


def sample_age_draws(
    samples: pd.DataFrame,
    n_draws: int,
    seed: int = 0,
    section_draws: Mapping[tuple[str, str], tuple[Any, Any]] | None = None,
) -> SampleAgeDraws:
    """Age draws for ``curve(age_draws=…)``, one age per row of ``samples`` per draw.

    ``section_draws`` maps (source_id, section_id) to (positions, draws): the section's
    distinct sample positions and its draws (n × positions, as ``agemodel`` stores them).
    Age-model samples take their section's draw at their position; stage-only samples are
    uniform over age_ma ± √3·age_sigma_ma (the stage's span); the others (reported ages,
    age-model samples without section draws) are normal with age_sigma_ma. A missing or
    zero σ keeps the age fixed.
    """
    _check_columns(samples, [*SECTION_KEY, "age_ma"], "age draws")
    if n_draws < 1:
        raise OptionError(f"{n_draws} age draws were asked for.", "Ask for at least one draw.")
    n = len(samples)
    age = samples["age_ma"].to_numpy(dtype=float, na_value=np.nan)
    sig = (
        samples["age_sigma_ma"].to_numpy(dtype=float, na_value=np.nan)
        if "age_sigma_ma" in samples.columns
        else np.full(n, np.nan)
    )
    basis = (
        samples["age_basis"].astype(object).to_numpy()
        if "age_basis" in samples.columns
        else np.full(n, None, dtype=object)
    )
    taken = np.zeros(n, dtype=bool)
    groups: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []
    if section_draws:
        pos = (
            samples["position_m"].to_numpy(dtype=float, na_value=np.nan)
            if "position_m" in samples.columns
            else np.full(n, np.nan)
        )
        model = np.flatnonzero(basis == AGE_MODEL)
        keys = samples.iloc[model][list(SECTION_KEY)].astype(str)
        for key, at_rows in keys.groupby(list(SECTION_KEY), sort=False).indices.items():
            if key not in section_draws:
                continue
            rows = model[at_rows]
            cols, hit = _nearest_position(section_draws[key][0], pos[rows])
            if hit.any():
                groups.append((rows[hit], cols[hit], np.asarray(section_draws[key][1])))
                taken[rows[hit]] = True
    spread = np.isfinite(sig) & (sig > 0) & np.isfinite(age) & ~taken
    uniform = np.flatnonzero(spread & (basis == STAGE_ONLY))
    normal = np.flatnonzero(spread & (basis != STAGE_ONLY))
    return SampleAgeDraws(
        age,
        np.where(np.isfinite(sig), sig, 0.0),
        uniform,
        normal,
        tuple(groups),
        int(n_draws),
        int(seed),
    )


def _draw_getter(age_draws: AgeDrawSource, n_rows: int) -> Callable[[int], np.ndarray]:
    """Replicate b → the ages of draw b (cycling when the number of draws is known),
    checked to give one age per row."""
    get: Callable[[int], np.ndarray]
    if isinstance(age_draws, np.ndarray):
        arr = np.atleast_2d(age_draws)
        n, get = arr.shape[0], arr.__getitem__
    elif isinstance(age_draws, Mapping):
        keys = sorted(age_draws)
        n, get = len(keys), (lambda b: age_draws[keys[b]])
    elif callable(age_draws):
        n = len(age_draws) if hasattr(age_draws, "__len__") else 0
        get = age_draws
    else:
        raise OptionError(
            f"age draws of type {type(age_draws).__name__} are not understood.",
            "Give an array (draws × samples), a mapping draw → ages, or a callable draw → ages.",
        )
    if n == 0 and not callable(age_draws):
        raise DomainError("the age draws are empty.", "Give at least one draw of the ages.")

    def ages(b: int) -> np.ndarray:
        out = np.asarray(get(b % n if n else b), dtype=float).ravel()
        if out.size != n_rows:
            raise DomainError(
                f"age draw {b} gives {out.size} ages for {n_rows} samples.",
                "Give one age per row of the samples table, in its order.",
            )
        return out

    return ages


# ------------------------------------------------------------------ curves


def _prepare(samples: pd.DataFrame, weight: str) -> tuple[np.ndarray, ...]:
    """Rows with an age and a value: their index, ages, values, sections, prior weights."""
    _check_weight(weight)
    _check_columns(samples, [*SECTION_KEY, "age_ma", "value"], "a curve")
    if samples.empty:
        raise DomainError(
            "there are no samples to fit a curve to.",
            "Widen the query (interval, region, material) or ingest data.",
        )
    age = samples["age_ma"].to_numpy(dtype=float, na_value=np.nan)
    val = samples["value"].to_numpy(dtype=float, na_value=np.nan)
    rows = np.flatnonzero(np.isfinite(age) & np.isfinite(val))
    if rows.size == 0:
        raise DomainError(
            "none of the samples has both an age and a value.",
            "Date the sections (ties or stages) or choose another value.",
        )
    sec, _ = _section_codes(samples.iloc[rows])
    per = np.bincount(sec)
    prior = 1.0 / per[sec] if weight == "sections" else np.ones(rows.size)
    return rows, age[rows], val[rows], sec, prior


def _fast_replicates(
    x: np.ndarray,
    y: np.ndarray,
    prior: np.ndarray,
    sec: np.ndarray,
    counts: np.ndarray,
    grid: np.ndarray,
    k: int,
) -> np.ndarray:
    """Replicate fits (boots × grid) with the full data's windows, in one pass over them.

    Per grid age and section the window sums of w, w·u, w·u², w·y, w·u·y (w = tricube ×
    prior); a replicate's sums are those weighted by its section counts (a matrix product).
    """
    order = np.argsort(x)  # ties are harmless: a tie cut by the window sits at h
    xs, ys, ws, ss = x[order], y[order], prior[order], sec[order]
    n_sec = counts.shape[1]
    win = _windows(xs, grid, k)
    out = np.empty((counts.shape[0], grid.size))
    cf = counts.astype(float)
    step = _step(k, n_sec)
    for c0 in range(0, grid.size, step):
        c1 = min(c0 + step, grid.size)
        rows, u, w = _tricube_chunk(xs, ws, grid, win, c0, c1)
        y_w = sliding_window_view(ys, k)[rows]
        key = (np.arange(c1 - c0)[:, None] * n_sec + sliding_window_view(ss, k)[rows]).ravel()
        size = (c1 - c0) * n_sec
        wu = w * u
        parts = (w, wu, wu * u, w * y_w, wu * y_w)
        sums = np.stack([np.bincount(key, weights=p.ravel(), minlength=size) for p in parts])
        s = (sums.reshape(5 * (c1 - c0), n_sec) @ cf.T).reshape(5, c1 - c0, -1)
        with np.errstate(invalid="ignore", divide="ignore"):
            mu, m2, ybar, m11 = s[1] / s[0], s[2] / s[0], s[3] / s[0], s[4] / s[0]
            fit = _line_value(s[0], mu, m2 - mu * mu, ybar, m11 - mu * ybar)
        out[:, c0:c1] = fit.T
    return out


def curve(
    samples: pd.DataFrame,
    grid: Any,
    span: float,
    boots: int = 200,
    seed: int = 0,
    min_sections: int = 5,
    weight: str = "sections",
    age_draws: AgeDrawSource | None = None,
) -> pd.DataFrame:
    """A LOESS composite of ``value`` against ``age_ma`` with a whole-section bootstrap band.

    Columns, one row per grid age (in the grid's order): age, fit, lo, hi, n_sections,
    band_shown. ``fit`` is the LOESS of all samples (prior weight 1/n per sample of a
    section with ``weight="sections"``); lo/hi the 2.5/97.5 % of ``boots`` replicate fits,
    each on sections resampled with replacement (seeded by ``seed``); ``n_sections`` the
    sections with a sample of positive weight in the grid age's window. Where fewer than
    ``min_sections`` contribute (or ``boots`` is 0) the band is hidden: lo/hi NaN,
    band_shown False. ``age_draws`` (optional; an array draws × rows, a mapping draw →
    ages, or a callable draw → ages, e.g. ``sample_age_draws``) gives one age per row of
    ``samples``; replicate b then also uses age draw b (cycling), so the band carries age
    uncertainty. Samples without an age or value are left out (``attrs["left_out"]``).
    """
    import pandas as pd

    span = _check_span(span)
    g = _check_grid(grid)
    if not isinstance(boots, int | np.integer) or boots < 0:
        raise OptionError(
            f"{boots!r} bootstrap draws were asked for.",
            "Give 0 (no band) or more draws, e.g. 1000.",
        )
    if min_sections < 1:
        raise OptionError(
            f"min_sections {min_sections!r} is below 1.",
            "Give how many sections a band needs, e.g. 5.",
        )
    rows, x, y, sec, prior = _prepare(samples, weight)
    n_sec = int(sec.max()) + 1
    k = _need_window(x.size, span)
    fit, contrib = _fit(x, y, prior, g, span, sec, n_sec)
    assert contrib is not None
    rng = np.random.default_rng(seed)
    counts = rng.multinomial(n_sec, np.full(n_sec, 1.0 / n_sec), size=boots)
    if boots == 0:
        reps = np.empty((0, g.size))
    elif age_draws is None:
        reps = _fast_replicates(x, y, prior, sec, counts, g, k)
    else:
        ages = _draw_getter(age_draws, len(samples))
        reps = np.empty((boots, g.size))
        every = rows.size == len(samples)
        for b in range(boots):
            xb = ages(b) if every else ages(b)[rows]
            wb = counts[b, sec] * prior
            ok = np.isfinite(xb)
            if ok.all():  # the usual case: no copies
                reps[b] = _fit(xb, y, wb, g, span, strict=False)[0]
            else:  # a sample undated in this draw sits this replicate out
                reps[b] = _fit(xb[ok], y[ok], wb[ok], g, span, strict=False)[0]
    shown = (contrib >= min_sections) & (boots > 0)
    lo = np.full(g.size, np.nan)
    hi = np.full(g.size, np.nan)
    some = shown & np.isfinite(reps).any(axis=0) if boots else shown
    if some.any():
        band = np.nanpercentile(reps[:, some], BAND, axis=0)
        lo[some], hi[some] = band
    out = pd.DataFrame(
        {"age": g, "fit": fit, "lo": lo, "hi": hi, "n_sections": contrib, "band_shown": some}
    )
    out.attrs.update(
        {
            "method": "LOESS (Cleveland 1979, degree 1) with a whole-section bootstrap",
            "span": span,
            "window": k,
            "boots": int(boots),
            "seed": seed,
            "weight": weight,
            "min_sections": min_sections,
            "age_draws": age_draws is not None,
            "n_samples": int(x.size),
            "n_sections": n_sec,
            "left_out": int(len(samples) - rows.size),
        }
    )
    return out


def curves(
    samples: pd.DataFrame,
    group_cols: str | Sequence[str],
    grid: Any,
    span: float,
    boots: int = 200,
    seed: int = 0,
    min_sections: int = 5,
    weight: str = "sections",
    age_draws: AgeDrawSource | None = None,
) -> pd.DataFrame:
    """``curve`` per group of ``group_cols`` (e.g. component and setting), stacked.

    Columns: the group columns, then those of ``curve``. Every group uses the same seed.
    A group too small for a fit is left out and named in ``attrs["skipped"]`` (group,
    reason); the caller decides the grouping (and never to mix carbonate and organic δ13C).
    """
    import pandas as pd

    cols = [group_cols] if isinstance(group_cols, str) else list(group_cols)
    _check_columns(samples, cols, "grouping curves")
    if samples.empty:
        raise DomainError(
            "there are no samples to fit curves to.",
            "Widen the query (interval, region, material) or ingest data.",
        )
    getter = None if age_draws is None else _draw_getter(age_draws, len(samples))
    parts, skipped = [], []
    for label, idx in samples.groupby(cols, sort=True, dropna=False).indices.items():
        label_t = label if isinstance(label, tuple) else (label,)
        sub = samples.iloc[idx]
        draws = None if getter is None else _Rows(getter, idx)
        try:
            c = curve(sub, grid, span, boots, seed, min_sections, weight, draws)
        except DomainError as err:
            skipped.append((label_t, str(err)))
            continue
        for name, val in zip(cols, label_t, strict=True):
            c.insert(cols.index(name), name, val)
        parts.append(c)
    out = (
        pd.concat(parts, ignore_index=True)
        if parts
        else pd.DataFrame(columns=[*cols, "age", "fit", "lo", "hi", "n_sections", "band_shown"])
    )
    out.attrs.update(
        {
            "group_cols": cols,
            "skipped": skipped,
            "span": span,
            "boots": boots,
            "seed": seed,
            "weight": weight,
            "min_sections": min_sections,
        }
    )
    return out


@dataclass(frozen=True)
class _Rows:
    """Draw b of the whole table's ages, restricted to one group's rows."""

    ages: Callable[[int], np.ndarray]
    rows: np.ndarray

    def __call__(self, b: int) -> np.ndarray:
        ages: np.ndarray = self.ages(b)[self.rows]
        return ages


class Robustness(NamedTuple):
    """What ``robustness`` returns."""

    curves: pd.DataFrame  # left_out, age, fit: the curve refitted without each unit
    influence: pd.DataFrame  # left_out, max_abs_change, rms_change, n_samples, n_undefined


def robustness(
    samples: pd.DataFrame, grid: Any, span: float, leave: str = "source", weight: str = "sections"
) -> Robustness:
    """Refit the curve without each source (or section) and rank them by influence.

    Why: a composite should not hang on one paper or one section. Each refit is a full
    LOESS of the remaining samples (its own windows, k = ⌊span·n⌋ of them). Influence:
    the largest and the root-mean-square absolute change of the fit over the grid ages
    where both fits are defined; ``n_undefined`` counts grid ages where the full fit is
    defined and the refit is not. Sorted most influential first. A section's label is
    ``source_id/section_id``.
    """
    import pandas as pd

    if leave not in LEAVE:
        raise OptionError(
            f"cannot leave out {leave!r}; only a 'source' or a 'section'.",
            "Use leave='source' or leave='section'.",
        )
    span = _check_span(span)
    g = _check_grid(grid)
    rows, x, y, sec, prior = _prepare(samples, weight)
    _need_window(x.size, span)
    full = _fit(x, y, prior, g, span)[0]
    used = samples.iloc[rows]
    if leave == "source":
        labels = used["source_id"].astype(str).to_numpy()
    else:
        labels = (used["source_id"].astype(str) + "/" + used["section_id"].astype(str)).to_numpy()
    units, unit = np.unique(labels, return_inverse=True)
    curves_, infl = [], []
    for j, name in enumerate(units):
        keep = unit != j
        fit_j = (
            _fit(x[keep], y[keep], prior[keep], g, span, strict=False)[0]
            if keep.any()
            else np.full(g.size, np.nan)
        )
        curves_.append(pd.DataFrame({"left_out": name, "age": g, "fit": fit_j}))
        both = np.isfinite(full) & np.isfinite(fit_j)
        d = np.abs(fit_j[both] - full[both])
        infl.append(
            (
                name,
                float(d.max()) if d.size else np.nan,
                float(np.sqrt(np.mean(d * d))) if d.size else np.nan,
                int((~keep).sum()),
                int((np.isfinite(full) & ~np.isfinite(fit_j)).sum()),
            )
        )
    influence = pd.DataFrame(
        infl, columns=["left_out", "max_abs_change", "rms_change", "n_samples", "n_undefined"]
    )
    influence = influence.sort_values(
        ["max_abs_change", "rms_change"], ascending=False, na_position="last", kind="stable"
    ).reset_index(drop=True)
    return Robustness(pd.concat(curves_, ignore_index=True), influence)
