"""δ13C–δ18O covariance statistics over many groups or windows at once (no loop per group).

For each interval ``[lo, hi)`` of a sorted series this gives Pearson r, n, the lag-1
autocorrelation of each variable in position order, an effective n and a two-sided p.

* r: Pearson's product-moment correlation (checked against ``scipy.stats.pearsonr``).
* Effective n: ``n_eff = n (1 − ρ1) / (1 + ρ1)`` with ``ρ1 = ρx · ρy``, the product of the
  two series' lag-1 autocorrelations: the common first-order autocorrelation correction for
  the correlation of two AR(1) series (Bretherton et al. 1999, J. Climate 12:1990, eq. 31;
  from memory). When ρ1 ≤ 0 no correction is made (n_eff = n): serial structure is never
  allowed to inflate n. Only neighbours that both have a position enter ρ; a group with
  no positions gets no correction (its ρ is NaN in the statistics table).
* p: t test with ``n_eff − 2`` degrees of freedom, ``t = r √(df / (1 − r²))``; with
  ``n_eff = n`` this is exactly the p of ``pearsonr``.

Why the correction: neighbouring samples in a section are not independent, so a plain
p-value overstates how significant a δ13C–δ18O correlation is.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class IntervalStats:
    """Per-interval statistics; every array has one value per interval (NaN = undefined)."""

    n: np.ndarray
    r: np.ndarray
    rho_x: np.ndarray
    rho_y: np.ndarray
    n_eff: np.ndarray
    p: np.ndarray


def lag1_autocorrelation(x: np.ndarray) -> float:
    """Lag-1 autocorrelation of one series in its given order (the usual estimator:
    Σ (x_t − x̄)(x_{t+1} − x̄) / Σ (x_t − x̄)²)."""
    x = np.asarray(x, dtype=float)
    d = x - x.mean()
    den = float(np.sum(d * d))
    return float(np.sum(d[:-1] * d[1:]) / den) if den > 0 else float("nan")


def effective_n(n: np.ndarray, rho: np.ndarray) -> np.ndarray:
    """n (1 − ρ) / (1 + ρ) for ρ > 0, else n (never larger than n)."""
    n = np.asarray(n, dtype=float)
    rho = np.clip(np.asarray(rho, dtype=float), -1.0, 1.0)
    use = np.isfinite(rho) & (rho > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.where(use, n * (1.0 - rho) / (1.0 + rho), n)
    return out


def correlation_p(r: np.ndarray, df: np.ndarray) -> np.ndarray:
    """Two-sided p of a Pearson r on ``df`` degrees of freedom (NaN where df < 1)."""
    from scipy import stats

    r = np.asarray(r, dtype=float)
    df = np.asarray(df, dtype=float)
    ok = np.isfinite(r) & np.isfinite(df) & (df >= 1.0)
    p = np.full(r.shape, np.nan)
    if not ok.any():
        return p
    rr, dd = np.clip(r[ok], -1.0, 1.0), df[ok]
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.abs(rr) * np.sqrt(dd / (1.0 - rr * rr))
    t = np.where(np.abs(rr) >= 1.0, np.inf, t)
    p[ok] = np.minimum(1.0, 2.0 * stats.t.sf(t, dd))
    return p


def _prefix(v: np.ndarray) -> np.ndarray:
    out = np.empty(v.size + 1)
    out[0] = 0.0
    np.cumsum(v, out=out[1:])
    return out


def interval_stats(
    x: np.ndarray,
    y: np.ndarray,
    pair_ok: np.ndarray,
    lo: np.ndarray,
    hi: np.ndarray,
    lag1_correction: bool = True,
) -> IntervalStats:
    """Statistics of ``x[lo:hi]`` against ``y[lo:hi]`` for every interval at once.

    ``x`` and ``y`` are sorted by group and position, finite, and best centred per group
    (prefix sums lose digits on large offsets). ``pair_ok[t]`` says whether records t and
    t + 1 are neighbours in one series (same group, both with a position); only those
    pairs enter the lag-1 autocorrelations.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    lo = np.asarray(lo, dtype=np.int64)
    hi = np.asarray(hi, dtype=np.int64)
    n = (hi - lo).astype(float)
    px, py = _prefix(x), _prefix(y)
    pxx, pyy, pxy = _prefix(x * x), _prefix(y * y), _prefix(x * y)
    sx, sy = px[hi] - px[lo], py[hi] - py[lo]
    with np.errstate(invalid="ignore", divide="ignore"):
        mx, my = sx / n, sy / n
        sxx = np.maximum(pxx[hi] - pxx[lo] - sx * mx, 0.0)
        syy = np.maximum(pyy[hi] - pyy[lo] - sy * my, 0.0)
        sxy = pxy[hi] - pxy[lo] - sx * my
        den = np.sqrt(sxx * syy)
        r = np.where(den > 0, sxy / den, np.nan)
        r = np.clip(r, -1.0, 1.0)
    rho_x, rho_y = _lag1(x, pair_ok, lo, hi, mx, sxx), _lag1(y, pair_ok, lo, hi, my, syy)
    if lag1_correction:
        with np.errstate(invalid="ignore"):
            n_eff = effective_n(n, rho_x * rho_y)
    else:
        n_eff = n.copy()
    p = correlation_p(r, n_eff - 2.0)
    return IntervalStats(n.astype(np.int64), r, rho_x, rho_y, n_eff, p)


def _lag1(
    v: np.ndarray,
    pair_ok: np.ndarray,
    lo: np.ndarray,
    hi: np.ndarray,
    m: np.ndarray,
    svv: np.ndarray,
) -> np.ndarray:
    """Lag-1 autocorrelation per interval from prefix sums over neighbouring pairs."""
    ok = np.asarray(pair_ok, dtype=float)
    if v.size < 2:
        return np.full(lo.shape, np.nan)
    a, b = v[:-1] * ok, v[1:] * ok
    q_ab, q_a, q_b, q_n = _prefix(a * v[1:]), _prefix(a), _prefix(b), _prefix(ok)
    end = np.maximum(hi - 1, lo)  # pairs t in [lo, hi − 1)
    s_ab = q_ab[end] - q_ab[lo]
    s_a, s_b, s_n = q_a[end] - q_a[lo], q_b[end] - q_b[lo], q_n[end] - q_n[lo]
    with np.errstate(invalid="ignore", divide="ignore"):
        num = s_ab - m * (s_a + s_b) + m * m * s_n
        return np.where((svv > 0) & (s_n > 0), num / svv, np.nan)
