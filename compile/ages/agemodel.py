"""Age models per section: Monte Carlo draws of every sample's age from the section's ties.

Why draws and not one line: an age between two ties is uncertain twice over — the ties' own
errors, and the unknown accumulation history between them. Whole-section draws keep both,
stay in stratigraphic order in every draw, and let a chart boundary's error be *one* error
shared by every section tied to it (curves built from many sections then do not average it
away).

The model, in stratigraphic order (``z``: metres downward, age grows with ``z``):

* **Tie ages** are drawn once per draw. A tie with a ``boundary_key`` takes its error from
  ``shared_offsets[key]`` (a standard-normal vector per key, the same for every section);
  other ties draw their own. Order is kept by *sequential truncated sampling*, never by
  rejection (rejection starves when ties are closer than their errors): keyed ties first,
  each truncated below by the keyed tie above it; then the others, each from its normal
  truncated to [drawn tie above, next keyed tie below] (an exact tie, σ = 0, is clipped
  into that range when its neighbours' draws demand it). A keyed tie keeps its shared value
  whenever that value is in order; in the draws where it is not (two boundaries closer than
  their errors), it is drawn at the same normal quantile from the truncated normal instead —
  a deterministic function of the shared vector, so sections with the same keyed ties still
  agree, but it then no longer equals the unconstrained shared value. The sequential order
  (top down) slightly favours older ages for ties closer than their errors.
* **Superposition** is judged with the ties' errors: an older tie above a younger one is a
  contradiction only when it is older by more than ``SUPERPOSITION_SIGMAS`` (2) standard
  deviations of the age difference, 2·√(σ₁² + σ₂²) (common practice: two ages are
  distinguishable at about 95 % when they differ by twice the σ of their difference). Ties
  that overlap within that are kept; the truncated draws put them in order. Keyed ties are
  drawn first, so an unkeyed tie inverted against a keyed one takes the truncation: its
  draws are pulled towards the keyed tie's, however precise it is itself.
* **Between ties** the accumulation history is a gamma process in ``z`` — the limit, for
  many small events, of the compound Poisson–gamma increments of Haslett & Parnell (2008,
  Applied Statistics 57:399, "A simple monotone process with application to
  radiocarbon-dated depth chronologies"). The prior (``Accumulation``, a store setting with
  a per-section override) says: before the ties are known, the time a stretch of
  ``segment_m`` metres took is Gamma(``shape``), i.e. the process has shape
  ``shape / segment_m`` per metre and a stretch of ℓ metres took Gamma(shape·ℓ/segment_m).
  Conditioned on the drawn tie ages the durations of the segments are Dirichlet (a Dirichlet
  bridge), so the ages at segment edges (knots) follow the gamma process exactly: the
  fraction of an interval's time elapsed at a knot ``w`` of the way down an interval of ``L``
  metres is Beta(βwL, β(1−w)L), β the shape per metre. Segments are ``segment_m`` long from
  the top of each interval (the rest at its base), at most ``max_segments`` per interval
  (longer beyond that). A hiatus (two ties at one position) is a jump.
* **Inside a segment** the exact law of the elapsed fraction ``F`` at relative position
  ``u`` is Beta(a·u, a·(1−u)) (``a`` the segment's shape), independent of the segment's
  duration and of all other segments (a gamma bridge). Drawing it exactly costs a gamma
  variate per sample and draw, several times the whole model's budget; linear
  interpolation (F = u) drops its variance, so σ dipped between knots (a saw-tooth). Here
  ``F = (1−ρ)·u + ρ·1{J < u}`` with ``J`` uniform, one per segment and draw, and
  ``ρ = 1/√(a+1)``: a monotone *one-jump bridge* (a share ρ of the segment's time passes at
  one random level, the rest evenly). It has the Beta law's mean ``u`` and variance
  ``u(1−u)/(a+1)``, and because F is independent of everything else, every sample's age has
  exactly the first two moments — so the σ — of the gamma process at that very position
  (law of total variance), smooth in position whatever the segment edges; at the knots the
  law is exact. Only higher moments inside a segment are approximate.
* **Tie position errors** (``position_sigma_m``) are not drawn: they are added to the tie's
  age error to first order through the mean accumulation rate of the tie's neighbouring
  intervals (central ages): σ² = σ_age² + (rate · σ_position)². For a keyed tie this part is
  the section's own, not shared.
* **Outside the ties** samples get NaN and the flag "outside the ties", unless
  ``allow_extrapolation``: then the adjacent interval's drawn mean rate carries the age on
  (never below 0 Ma), flagged "extrapolated".

The default prior (``compile/derive/settings.py``): shape 1 per 1 m segment — the time one
metre took is exponential before the ties are known (coefficient of variation 1, falling as
1/√(ℓ/1 m) over ℓ metres: 0.32 over 10 m, 0.1 over 100 m), a weak prior of the order
gamma-process age–depth models commonly use (from memory; not a published value for any
section). Shape 1 per segment is also what numpy draws fastest (exponentials).

Numbers are float64 (ages in Ma). Monotonicity is exact in floating point: knot ages are one
running sum of non-negative increments, and a sample in a segment gets
``knot + F·increment`` with 0 ≤ F ≤ 1 non-decreasing in position, which never passes the
next knot. Memory: the draws array (n_draws × n_samples) is the one full-size result; the
rest is computed in chunks of draws of about ``CHUNK_ELEMENTS`` values each.
"""

from __future__ import annotations

import hashlib
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, NamedTuple

import numpy as np
from strata13.compile.derive.settings import (
    DEFAULT_ACCUMULATION_SEGMENT_M,
    DEFAULT_ACCUMULATION_SHAPE,
)

from strata13.errors import DomainError, OptionError, Strata13Error

BASES = ("chart boundary", "biozone boundary", "radiometric", "astrochronologic", "correlation")
KEYED_BASES = ("chart boundary", "biozone boundary")  # must carry a boundary_key
POSITION_KINDS = ("height", "depth")

SUPERPOSITION_SIGMAS = 2.0  # an inversion beyond 2σ of the age difference refuses (see above)
MAX_SEGMENTS = 2000  # per interval between two tie levels; longer segments beyond
CHUNK_ELEMENTS = 1 << 20  # knot values per chunk of draws (8 MB of float64)
GATHER_ELEMENTS = 1 << 15  # sample values per gather block: stays in cache (256 kB)
TINY = 1e-200  # an interval's summed gamma draws below this are taken as underflow
BOUNDARY_SEED = 0  # seed of shared_offsets when the caller passes none
# sanity bounds of the accumulation prior (wide; common practice stays near shape 1–10 and
# segments of centimetres to metres)
PRIOR_RANGES = {"shape": (0.01, 1000.0), "segment_m": (0.001, 1000.0)}
PRIOR_MEANING = {
    "shape": "the gamma shape of the time one segment took (1: exponential; larger: "
    "steadier accumulation)",
    "segment_m": "the length in metres the shape refers to, and the resolution of the "
    "drawn rate history",
}

METHOD = (
    "Monte Carlo age model: tie ages by sequential truncated normal sampling, shared "
    "boundary errors; gamma-process (Dirichlet) bridge between ties after the compound "
    "Poisson–gamma model of Haslett & Parnell 2008, a moment-matched one-jump bridge "
    "inside each segment"
)

# Per-sample flags ("" = an ordinary interpolated age).
EXTRAPOLATED = "extrapolated"
OUTSIDE = "outside the ties"
AT_HIATUS = "at a hiatus"  # takes the older tie's age: the surface tops the rock below it
NO_POSITION = "no position"


@dataclass(frozen=True)
class Accumulation:
    """The accumulation prior between ties: before the ties are known, the time a stretch of
    ``segment_m`` metres took is Gamma(``shape``) — a gamma process of ``shape_per_m`` per
    metre, whose scale the ties then fix. ``segment_m`` is also the resolution at which the
    draws follow the process exactly (see the module docstring)."""

    shape: float = DEFAULT_ACCUMULATION_SHAPE
    segment_m: float = DEFAULT_ACCUMULATION_SEGMENT_M

    @property
    def shape_per_m(self) -> float:
        return self.shape / self.segment_m

    def as_dict(self) -> dict[str, float]:
        return {"shape": self.shape, "segment_m": self.segment_m}

    def describe(self) -> str:
        return f"shape {self.shape:g} per {self.segment_m:g} m segment"


def prior_value(key: str, value: Any, label: str, error: type[Strata13Error]) -> float:
    """One value of the accumulation prior checked against ``PRIOR_RANGES``; ``label`` names
    where it came from (a mapping block, an option), ``error`` is the class to raise."""
    lo, hi = PRIOR_RANGES[key]
    number = isinstance(value, int | float) and not isinstance(value, bool)
    if not (number and math.isfinite(value) and lo <= value <= hi):
        default = Accumulation().as_dict()[key]
        raise error(
            f"{label} = {value!r} is not a number from {lo:g} to {hi:g}.",
            f"{key} is {PRIOR_MEANING[key]}; the default is {default:g}.",
        )
    return float(value)


@dataclass(frozen=True)
class Tie:
    """One dated level of a section. Ages in Ma, errors 1σ (convert other levels first)."""

    position_m: float
    age_ma: float
    age_sigma_ma: float
    basis: str
    boundary_key: str | None = None  # identity shared across sections, e.g. "ICS2024/12:toarcian"
    position_sigma_m: float | None = None
    note: str = ""
    source: str = ""  # the source that gave the tie, for messages

    def describe(self, position_kind: str) -> str:
        """The tie as error messages name it: its note (or basis), age, σ, position and
        source."""
        label = self.note or f"the {self.basis} tie"
        given = f", from {self.source}" if self.source else ""
        return (
            f"{label} ({self.age_ma:g} ± {self.age_sigma_ma:g} Ma at {self.position_m:g} m "
            f"{position_kind}{given})"
        )


class SectionDraws(NamedTuple):
    """``draws``: n_draws × n_samples float64 ages (Ma), NaN where undated; ``flags``: one
    string per sample ("" or EXTRAPOLATED, OUTSIDE, AT_HIATUS, NO_POSITION)."""

    draws: np.ndarray
    flags: np.ndarray


@dataclass(frozen=True)
class Summary:
    """Per-sample statistics of the draws (Ma); NaN where a sample has no draws."""

    median: np.ndarray
    sigma: np.ndarray  # standard deviation of the draws (ddof=1)
    lo95: np.ndarray  # 2.5th percentile
    hi95: np.ndarray  # 97.5th percentile


@dataclass(frozen=True)
class StageAge:
    """A stage-only age: uniform over the stage, reported as midpoint and its σ."""

    age_ma: float
    age_sigma_ma: float
    basis: str = "stage only"
    flag: str = "dated to a stage only (uniform over the stage span)"


# ------------------------------------------------------------------ ties


def _z(positions: np.ndarray, position_kind: str) -> np.ndarray:
    """Metres downward: depth as is, height negated (age grows with z either way)."""
    return positions if position_kind == "depth" else -positions


def _check_kind(position_kind: str) -> None:
    if position_kind not in POSITION_KINDS:
        raise DomainError(
            f"position kind {position_kind!r} is neither 'height' nor 'depth'.",
            "Give the section's position kind: height above or depth below its datum.",
        )


def validate_ties(ties: Sequence[Tie], position_kind: str) -> list[Tie]:
    """The ties in stratigraphic order (youngest first), or DomainError for the first problem.

    Superposition is judged with the ties' errors: an older tie above a younger one is
    refused only when it is older by more than ``SUPERPOSITION_SIGMAS`` σ of the difference
    (both ties named); within that the draws keep them in order by truncation.
    """
    _check_kind(position_kind)
    if len(ties) < 2:
        raise DomainError(
            f"a section needs at least two ties for an age model (this one has {len(ties)}).",
            "Add a second dated level, or date the samples by stage only.",
        )
    keys: dict[str, Tie] = {}
    for t in ties:
        _check_tie(t, position_kind)
        if t.boundary_key:
            if t.boundary_key in keys:
                raise DomainError(
                    f"{keys[t.boundary_key].describe(position_kind)} and "
                    f"{t.describe(position_kind)} both mark boundary {t.boundary_key!r}.",
                    "A boundary crosses a section once; keep one of the two.",
                )
            keys[t.boundary_key] = t
    ordered = [ties[i] for i in _order(ties, position_kind)]
    z = _z(np.array([t.position_m for t in ordered]), position_kind)
    levels, starts, counts = np.unique(z, return_index=True, return_counts=True)
    if len(levels) < 2:
        raise DomainError(
            f"the section's ties all lie at {ordered[0].position_m:g} m, but an "
            "age model needs ties at two different positions.",
            "Add a tie at another level of the section.",
        )
    for start, count in zip(starts, counts, strict=True):
        group = ordered[start : start + count]
        if len(group) > 2:
            raise DomainError(
                f"{len(group)} ties lie at {group[0].position_m:g} m.",
                "One level takes one tie, or two for a hiatus (its top and base ages).",
            )
        if len(group) == 2 and group[0].age_ma == group[1].age_ma:
            raise DomainError(
                f"{group[0].describe(position_kind)} and "
                f"{group[1].describe(position_kind)} give one level the same age.",
                "Keep one of them; two ties at one level mean a hiatus and need "
                "two different ages.",
            )
    _check_superposition(ordered, np.searchsorted(levels, z), position_kind)
    return ordered


def _check_tie(t: Tie, position_kind: str) -> None:
    """One tie on its own: finite numbers, errors ≥ 0, a known basis, a key where needed."""
    values = (
        t.position_m,
        t.age_ma,
        t.age_sigma_ma,
        0.0 if t.position_sigma_m is None else t.position_sigma_m,
    )
    if not all(math.isfinite(v) for v in values):
        raise DomainError(
            f"{t.describe(position_kind)} has a missing or infinite number.",
            "Give the tie's position, age and 1σ as finite numbers.",
        )
    if t.age_ma < 0 or t.age_sigma_ma < 0 or values[3] < 0:
        raise DomainError(
            f"{t.describe(position_kind)} has a negative age or error.",
            "Ages are Ma before present and errors are 1σ, both ≥ 0.",
        )
    if t.basis not in BASES:
        raise DomainError(
            f"{t.describe(position_kind)} has the unknown basis {t.basis!r}.",
            f"Bases: {', '.join(BASES)}.",
        )
    if t.basis in KEYED_BASES and not t.boundary_key:
        raise DomainError(
            f"{t.describe(position_kind)} is a {t.basis} without a boundary key.",
            "Give the boundary's identity so its error is shared across sections.",
        )


def _check_superposition(ordered: list[Tie], level: np.ndarray, position_kind: str) -> None:
    """Every pair of ties at different levels: the upper one may be older only within
    ``SUPERPOSITION_SIGMAS`` σ of their age difference; the worst pair beyond it refuses."""
    age = np.array([t.age_ma for t in ordered], dtype=float)
    sig = np.array([t.age_sigma_ma for t in ordered], dtype=float)
    # every pair at once: row i above column j
    allowed = SUPERPOSITION_SIGMAS * np.hypot(sig[:, None], sig[None, :])
    excess = np.where(level[:, None] < level[None, :], age[:, None] - age - allowed, -np.inf)
    i, j = np.unravel_index(int(np.argmax(excess)), excess.shape)
    if excess[i, j] <= 0:
        return
    upper, lower = ordered[i], ordered[j]
    raise DomainError(
        f"superposition is violated beyond the ties' errors: {upper.describe(position_kind)}"
        f" lies above {lower.describe(position_kind)} but is older by "
        f"{upper.age_ma - lower.age_ma:.4g} Myr, more than {SUPERPOSITION_SIGMAS:g}σ of "
        f"the difference ({allowed[i, j]:.4g} Myr).",
        "Check the two ties' positions, the section's position kind "
        "(height or depth), their ages and their errors.",
    )


def _order(ties: Sequence[Tie], position_kind: str) -> np.ndarray:
    """Indices of the ties top down; at one level (a hiatus) the younger first."""
    z = _z(np.array([t.position_m for t in ties], dtype=float), position_kind)
    return np.lexsort((np.array([t.age_ma for t in ties], dtype=float), z))


def shared_offsets(
    keys: Iterable[str], n_draws: int, seed: int = BOUNDARY_SEED
) -> dict[str, np.ndarray]:
    """One standard-normal vector of ``n_draws`` per boundary key.

    Each vector comes from SHA-256 of (seed, key) alone, so a section drawn today and one
    drawn next year (same numpy, same seed and n_draws) share a boundary's error exactly,
    whatever other keys are asked for alongside.
    """
    out = {}
    for key in sorted(set(keys)):
        digest = hashlib.sha256(f"strata13 boundary\x1f{seed}\x1f{key}".encode()).digest()
        rng = np.random.default_rng(int.from_bytes(digest[:16], "little"))
        out[key] = rng.standard_normal(n_draws)
    return out


def section_seed(section_id: str, seed: int = 0) -> int:
    """A section's own seed from its identity, so sections draw independent errors."""
    digest = hashlib.sha256(f"strata13 section\x1f{seed}\x1f{section_id}".encode()).digest()
    return int.from_bytes(digest[:8], "little")


def _clip(x: Any, lo: Any, hi: Any) -> np.ndarray:
    """``np.clip`` as its two ufuncs (the same values; a tenth of the call cost on the small
    arrays of one section's ties)."""
    out: np.ndarray = np.minimum(np.maximum(x, lo), hi)
    return out


def _truncated_normal(
    mu: float, sigma: float, lo: np.ndarray, hi: np.ndarray, u: np.ndarray
) -> np.ndarray:
    """Quantile ``u`` of N(mu, sigma) truncated to [lo, hi] (inverse CDF, vectorised).

    Intervals in the upper tail are mirrored into the lower tail, where the normal CDF keeps
    its precision; an interval too far out to have mass takes its end nearer the mean.
    """
    if sigma <= 0:
        clipped: np.ndarray = _clip(np.full(u.shape, mu), lo, hi)
        return clipped
    from scipy.special import ndtr, ndtri

    with np.errstate(over="ignore"):  # a tiny σ: bounds go to ±inf, which is right
        a, b = (lo - mu) / sigma, (hi - mu) / sigma
    if a.max(initial=-np.inf) < -40.0 and b.min(initial=np.inf) > 9.0:
        # bounds beyond the normal's mass: ndtr(a) is exactly 0 and ndtr(b) exactly 1 in
        # float64, so the general path below reduces to these same operations
        fast: np.ndarray = _clip(mu + sigma * _clip(ndtri(u), a, b), lo, hi)
        return fast
    flip = a > 0
    flipped = bool(flip.any())
    if flipped:
        a2, b2, u2 = np.where(flip, -b, a), np.where(flip, -a, b), np.where(flip, 1 - u, u)
    else:  # the common case: no interval in the upper tail
        a2, b2, u2 = a, b, u
    pa = ndtr(a2)
    pb = ndtr(b2) if np.isfinite(b2).any() else np.ones_like(pa)
    with np.errstate(invalid="ignore"):
        x = ndtri(pa + u2 * (pb - pa))
    empty = ~(pb > pa)
    if empty.any():
        x = np.where(empty, b2, x)
    if flipped:
        x = np.where(flip, -x, x)
    x = _clip(x, a, b)
    finite = np.isfinite(x)
    if finite.all():
        inside: np.ndarray = _clip(mu + sigma * x, lo, hi)
        return inside
    # A σ so small that the bounds overflowed: the mean, or the bound nearer to it.
    out: np.ndarray = np.where(finite, _clip(mu + sigma * x, lo, hi), _clip(mu, lo, hi))
    return out


def _tie_sigmas(ordered: list[Tie], z: np.ndarray) -> np.ndarray:
    """Each tie's age σ with its position σ added through the neighbouring mean rates."""
    sig = np.array([t.age_sigma_ma for t in ordered], dtype=float)
    age = np.array([t.age_ma for t in ordered], dtype=float)
    for k, t in enumerate(ordered):
        if not t.position_sigma_m:
            continue
        rates = [
            abs(age[j] - age[k]) / abs(z[j] - z[k])
            for j in (k - 1, k + 1)
            if 0 <= j < len(ordered) and z[j] != z[k]
        ]
        rate = float(np.mean(rates)) if rates else 0.0
        sig[k] = math.hypot(sig[k], rate * t.position_sigma_m)
    return sig


def _draw_ties(
    ordered: list[Tie],
    sig: np.ndarray,
    n_draws: int,
    rng: np.random.Generator,
    shared: Mapping[str, np.ndarray],
) -> np.ndarray:
    """n_draws × n_ties ages in stratigraphic order, non-decreasing in every draw."""
    n = len(ordered)
    out = np.empty((n_draws, n))
    u = rng.random((n_draws, n))  # one quantile per tie and draw, used by the unkeyed ties
    eps = rng.standard_normal((n_draws, n))  # section's own part of a keyed tie's error
    keyed = [k for k, t in enumerate(ordered) if t.boundary_key]
    lower = np.zeros(n_draws)  # ages are ≥ 0 Ma
    for k in keyed:  # pass 1: keyed ties keep their shared value where it is in order
        t = ordered[k]
        assert t.boundary_key is not None  # keyed: chosen above for having a key
        own = math.sqrt(max(sig[k] ** 2 - t.age_sigma_ma**2, 0.0))
        value = t.age_ma + t.age_sigma_ma * shared[t.boundary_key] + own * eps[:, k]
        bad = value < lower
        if bad.any():
            from scipy.special import ndtr

            q = ndtr((value[bad] - t.age_ma) / sig[k]) if sig[k] > 0 else np.full(bad.sum(), 0.5)
            value[bad] = _truncated_normal(
                t.age_ma, sig[k], lower[bad], np.full(bad.sum(), np.inf), q
            )
        out[:, k] = value
        lower = value
    lower = np.zeros(n_draws)
    for k, t in enumerate(ordered):  # pass 2: the others, between their drawn neighbours
        if t.boundary_key:
            lower = out[:, k]
            continue
        below = next((j for j in keyed if j > k), None)
        upper = out[:, below] if below is not None else np.full(n_draws, np.inf)
        out[:, k] = _truncated_normal(t.age_ma, sig[k], lower, np.maximum(upper, lower), u[:, k])
        lower = out[:, k]
    return out


# ------------------------------------------------------------------ layout


@dataclass(frozen=True)
class _Layout:
    """Where the knots of one section lie. Column 0 of the increment array holds the top
    tie's age; each later column is either a segment of an interval or a hiatus jump."""

    levels: np.ndarray  # distinct tie positions (z), top down
    iv_top: np.ndarray  # per interval: sorted index of the tie at its top
    iv_base: np.ndarray  # per interval: sorted index of the tie at its base
    iv_len: np.ndarray  # interval length (m)
    iv_first: np.ndarray  # per interval: its first segment
    iv_count: np.ndarray  # per interval: its number of segments
    seg_iv: np.ndarray  # per segment: its interval
    seg_col: np.ndarray  # per segment: its increment column
    seg_start: np.ndarray  # top of each segment (z)
    seg_len: np.ndarray
    seg_shape: np.ndarray  # gamma shape of each segment
    seg_rho: np.ndarray  # share of a segment's time in its one jump: 1/√(shape + 1)
    jump_col: np.ndarray  # per hiatus: its increment column
    jump_top: np.ndarray  # per hiatus: sorted index of the younger tie
    jump_base: np.ndarray
    jump_z: np.ndarray  # per hiatus: its level
    n_cols: int  # increment columns including column 0
    other: np.ndarray  # segments whose gamma shape is not exactly 1


def _layout(z: np.ndarray, prior: Accumulation, max_segments: int) -> _Layout:
    """Segments of every interval (full ``segment_m`` ones from the top, then a shorter
    rest, or a sliver under 1 % folded into the last) and the column of every increment."""
    levels, starts, counts = np.unique(z, return_index=True, return_counts=True)
    top, length = levels[:-1], np.diff(levels)
    step = np.maximum(prior.segment_m, length / max_segments)
    n_full = np.floor(length / step).astype(np.intp)
    rest = length - n_full * step
    extra = (n_full == 0) | (rest > 0.01 * step)
    k = n_full + extra
    first = np.cumsum(k) - k
    seg_iv = np.repeat(np.arange(len(k)), k)
    local = np.arange(k.sum()) - first[seg_iv]
    seg_start = top[seg_iv] + local * step[seg_iv]
    nominal = step[seg_iv]
    nominal[first + k - 1] = np.where(extra, np.where(n_full == 0, length, rest), step + rest)
    seg_end = np.concatenate([seg_start[1:], levels[-1:]])
    seg_end[first + k - 1] = levels[1:]
    hiatus = counts == 2
    width = hiatus + np.concatenate([k, [0]])  # per level: its jump, then its segments
    offset = 1 + np.cumsum(width) - width
    # a full segment has exactly the prior's shape (1 by default: numpy's fast exponentials)
    seg_shape = np.where(nominal == prior.segment_m, prior.shape, prior.shape_per_m * nominal)
    jt = starts[hiatus]
    return _Layout(
        levels,
        starts[:-1] + counts[:-1] - 1,
        starts[1:],
        length,
        first,
        k,
        seg_iv,
        offset[seg_iv] + hiatus[seg_iv] + local,
        seg_start,
        seg_end - seg_start,
        seg_shape,
        1.0 / np.sqrt(seg_shape + 1.0),
        offset[hiatus],
        jt,
        jt + 1,
        levels[hiatus],
        int(1 + width.sum()),
        np.flatnonzero(seg_shape != 1.0),
    )


# ------------------------------------------------------------------ draws


def draw_section(
    positions: Sequence[float] | np.ndarray,
    ties: Sequence[Tie],
    position_kind: str,
    n_draws: int,
    seed: int,
    shared_offsets: Mapping[str, np.ndarray] | None = None,
    *,
    allow_extrapolation: bool = False,
    prior: Accumulation | None = None,
    max_segments: int = MAX_SEGMENTS,
    chunk_draws: int | None = None,
) -> SectionDraws:
    """Draw the ages of a section's samples (positions in metres, the section's own kind).

    ``seed`` is the section's own (see ``section_seed``: two sections with one seed would
    draw the same independent errors). ``shared_offsets`` maps every boundary key of the
    ties to its standard-normal vector of length ``n_draws`` (see ``shared_offsets``); None
    derives them with ``BOUNDARY_SEED``. ``prior``: the accumulation prior (None: the
    default). The result does not depend on ``chunk_draws``.
    """
    prior = Accumulation() if prior is None else prior
    if n_draws < 1:
        raise OptionError(
            f"the number of draws must be at least 1 (got {n_draws}).",
            "Ask for 1000 draws or more for stable percentiles.",
        )
    if not (prior.segment_m > 0 and prior.shape > 0 and max_segments >= 1):
        raise OptionError(
            f"the accumulation prior ({prior.describe()}) and the segments per interval "
            f"({max_segments}) must be positive.",
            f"The defaults are {Accumulation().describe()} and {MAX_SEGMENTS} segments.",
        )
    ordered = validate_ties(ties, position_kind)
    keys = [t.boundary_key for t in ordered if t.boundary_key]
    shared = dict(
        _offsets(keys, n_draws, BOUNDARY_SEED) if shared_offsets is None else shared_offsets
    )
    for key in keys:
        vec = shared.get(key)
        if vec is None or np.shape(vec) != (n_draws,):
            raise DomainError(
                f"no shared offsets of length {n_draws} for boundary {key!r}.",
                "Make them with shared_offsets(keys, n_draws, seed) over every "
                "boundary key of the sections drawn together.",
            )
    z_ties = _z(np.array([t.position_m for t in ordered], dtype=float), position_kind)
    # three streams, each consumed draw by draw, so chunking does not change the draws: tie
    # ages (then the gammas of segments whose shape is not 1), durations, jump marks
    tie_rng, dur_rng, mark_rng = (
        np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(3)
    )
    ages = _draw_ties(ordered, _tie_sigmas(ordered, z_ties), n_draws, tie_rng, shared)
    lay = _layout(z_ties, prior, max_segments)

    zs = _z(np.asarray(positions, dtype=float).ravel(), position_kind)
    n = zs.size
    flags = np.full(n, "", dtype=object)
    top, bottom = lay.levels[0], lay.levels[-1]
    known = np.isfinite(zs)
    inside = known & (zs >= top) & (zs <= bottom)
    flags[~known] = NO_POSITION
    flags[known & ~inside] = EXTRAPOLATED if allow_extrapolation else OUTSIDE
    if lay.jump_z.size:
        flags[inside & np.isin(zs, lay.jump_z)] = AT_HIATUS
    # Each sample: the knot it starts from, its segment and its fraction u of it.
    zc = np.where(inside, zs, top)
    s = _clip(np.searchsorted(lay.seg_start, zc, side="right") - 1, 0, len(lay.seg_start) - 1)
    u = _clip((zc - lay.seg_start[s]) / lay.seg_len[s], 0.0, 1.0)
    knot = lay.seg_col[s] - 1
    at_base = zc == bottom
    knot[at_base], u[at_base] = lay.n_cols - 1, 0.0  # the base level: the last knot
    slope = np.minimum(knot + 1, lay.n_cols - 1)
    # the one-jump bridge F = lo + ρ·1{J < u}: its linear part, its share and its threshold
    rho = lay.seg_rho[s]
    lo = (1.0 - rho) * u
    threshold = u.astype(np.float32)  # J is float32: P(J < u) = u to 6e-8
    up = np.flatnonzero(known & (zs < top))
    down = np.flatnonzero(known & (zs > bottom))

    out = np.empty((n_draws, n))
    step = chunk_draws or max(1, CHUNK_ELEMENTS // max(lay.n_cols, 1))
    sub = max(1, GATHER_ELEMENTS // max(n, 1))  # gather in cache-sized blocks of draws
    scratch = np.empty((min(sub, n_draws), n))
    frac = np.empty_like(scratch)
    mark = np.empty(scratch.shape, dtype=np.float32)
    for d0 in range(0, n_draws, step):
        d1 = min(d0 + step, n_draws)
        inc, knots, marks = _knots(lay, ages[d0:d1], (dur_rng, tie_rng, mark_rng))
        for e0 in range(0, d1 - d0, sub):
            e1 = min(e0 + sub, d1 - d0)
            m = e1 - e0
            block, buf, f = out[d0 + e0 : d0 + e1], scratch[:m], frac[:m]
            np.take(knots[e0:e1], knot, axis=1, out=block, mode="clip")
            np.take(inc[e0:e1], slope, axis=1, out=buf, mode="clip")
            np.take(marks[e0:e1], s, axis=1, out=mark[:m], mode="clip")
            np.less(mark[:m], threshold, out=f)  # 1 where the segment's jump lies above
            f *= rho
            f += lo
            buf *= f
            block += buf
        if not allow_extrapolation:
            continue
        a, block = ages[d0:d1], out[d0:d1]
        if up.size:  # above the top tie: the first interval's mean rate, back in time
            rate = (a[:, lay.iv_base[0]] - a[:, lay.iv_top[0]]) / lay.iv_len[0]
            block[:, up] = np.maximum(knots[:, :1] - rate[:, None] * (top - zs[up]), 0.0)
        if down.size:  # below the base tie: the last interval's mean rate
            rate = (a[:, lay.iv_base[-1]] - a[:, lay.iv_top[-1]]) / lay.iv_len[-1]
            block[:, down] = knots[:, -1:] + rate[:, None] * (zs[down] - bottom)
    out[:, ~inside & ~(allow_extrapolation & known)] = np.nan
    return SectionDraws(out, flags)


def _knots(
    lay: _Layout, ages: np.ndarray, rngs: tuple[np.random.Generator, ...]
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Increments, knot ages (one running sum) and the jump marks ``J`` (float32 uniforms,
    one per segment) of a chunk of draws; ``rngs``: durations, other gammas, marks.

    Segments of shape exactly 1 are exponentials (numpy's fastest gamma); the others are
    overwritten by gammas from the second stream, so that chunking does not change the draws.
    """
    c, m = ages.shape[0], lay.seg_shape.size
    g = rngs[0].standard_exponential((c, m))
    marks = rngs[2].random((c, m), dtype=np.float32)
    if lay.other.size:
        g[:, lay.other] = rngs[1].standard_gamma(lay.seg_shape[lay.other], (c, lay.other.size))
    total = np.add.reduceat(g, lay.iv_first, axis=1)
    empty = total < TINY  # durations underflowed (tiny shapes): spread evenly instead
    if empty.any():
        even = lay.seg_len / lay.iv_len[lay.seg_iv]
        g = np.where(empty[:, lay.seg_iv], even, g)
        total = np.add.reduceat(g, lay.iv_first, axis=1)
    scale = (ages[:, lay.iv_base] - ages[:, lay.iv_top]) / total
    inc = np.empty((c, lay.n_cols))
    inc[:, 0] = ages[:, 0]
    if lay.jump_col.size:
        inc[:, lay.seg_col] = g * np.repeat(scale, lay.iv_count, axis=1)
        inc[:, lay.jump_col] = ages[:, lay.jump_base] - ages[:, lay.jump_top]
    else:  # no hiatus: the segments fill columns 1.. in order
        np.multiply(g, np.repeat(scale, lay.iv_count, axis=1), out=inc[:, 1:])
    return inc, np.cumsum(inc, axis=1), marks


# ------------------------------------------------------------------ summaries


def summarise(draws: np.ndarray, chunk: int = 4096) -> Summary:
    """Median, σ (ddof=1), 2.5 and 97.5 percentiles per sample (column) of the draws."""
    d = np.asarray(draws, dtype=float)
    n = d.shape[1]
    med, sig, lo, hi = (np.full(n, np.nan) for _ in range(4))
    for c0 in range(0, n, chunk):
        part = d[:, c0 : c0 + chunk]
        good = np.isfinite(part)
        full = np.flatnonzero(good.all(axis=0))
        some = np.flatnonzero(good.any(axis=0) & ~good.all(axis=0))
        for cols, pct, std in ((full, np.percentile, np.std), (some, np.nanpercentile, np.nanstd)):
            if not cols.size:
                continue
            x = part[:, cols]
            p = pct(x, [2.5, 50.0, 97.5], axis=0)
            lo[c0 + cols], med[c0 + cols], hi[c0 + cols] = p
            with np.errstate(invalid="ignore", divide="ignore"):
                sig[c0 + cols] = std(x, axis=0, ddof=1) if x.shape[0] > 1 else 0.0
    return Summary(med, sig, lo, hi)


def stage_only(base_ma: float, top_ma: float) -> StageAge:
    """An age known only to lie within a stage: uniform over it, σ = span/√12 (either order)."""
    old, young = max(base_ma, top_ma), min(base_ma, top_ma)
    if not (math.isfinite(old) and math.isfinite(young)) or young < 0 or old == young:
        raise DomainError(
            f"a stage from {base_ma:g} to {top_ma:g} Ma has no usable span.",
            "Give the stage's base and top ages in Ma (base older).",
        )
    return StageAge((old + young) / 2, (old - young) / math.sqrt(12))


def parameters(
    n_draws: int,
    seed: int,
    *,
    allow_extrapolation: bool = False,
    prior: Accumulation | None = None,
    max_segments: int = MAX_SEGMENTS,
) -> dict[str, Any]:
    """The settings of one draw, for the chain of steps (what a reader needs to redo it)."""
    prior = Accumulation() if prior is None else prior
    return {
        "n_draws": n_draws,
        "seed": seed,
        "allow_extrapolation": allow_extrapolation,
        "accumulation_shape": prior.shape,
        "segment_m": prior.segment_m,
        "shape_per_m": prior.shape_per_m,
        "max_segments": max_segments,
        "within_segment": "one-jump bridge (moment-matched)",
        "superposition_sigmas": SUPERPOSITION_SIGMAS,
        "boundary_seed": BOUNDARY_SEED,
        "numpy": np.__version__,
    }


_offsets = shared_offsets  # draw_section's parameter of the same name hides the function
