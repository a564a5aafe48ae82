"""Find records of different sources that are probably the same measurement.

Why: a later paper re-publishes earlier samples (re-scaled, re-dated, heights in metres
instead of feet); counted twice, one section weighs double in curves and counts. This
module only *proposes* pairs; the user confirms or rejects them in a decisions file, and
confirmed duplicates are left out of views — nothing is ever deleted.

A pair is listed only when it meets every tolerance:

* **locality** — the same locality group: equal ``locality_id``, names equal ignoring case,
  accents and punctuation, or linked through ``aliases`` (groups are transitive), or
  coordinates at most ``coord_tol_km`` apart by the haversine formula on a sphere of radius
  6371.0 km (the mean Earth radius, a common convention);
* **position** — ``position_m`` (else the midpoint of ``top_m``/``base_m``) within
  ``position_tol_m``, and the same ``position_kind`` when both records state one;
* **values** — harmonised δ13C within ``value_tol_permil``, and δ18O too when both have it.

Tolerance comparisons allow 1e-9 for floating-point noise.

Score (our own rule): the weighted mean of per-criterion closeness in [0, 1], where
closeness is 1 − Δ/tolerance — position (weight 1), δ13C (weight 2), δ18O (weight 1, only
when both have it), locality (weight 1; 1 for the same group, else 1 − distance/coord_tol),
and the sample id (weight 1, counted only when the normalised ids are equal, closeness 1).
Declared lineage — ``declared[b]`` lists ``a``, or a record of ``b`` names ``a`` as its
``original_source_id`` (either direction) — halves the distance to 1:
score = base + ½ (1 − base). Scores are rounded to 6 decimals.

One-to-one: a record pairs with at most one record of each other source. Pairs are taken
greedily by score (ties: record ids), so a re-publication of 30 records gives 30 pairs.

Orientation: ``record_a`` is the original when lineage says which source re-publishes the
other; otherwise the record of the alphabetically first source.

Speed: records are blocked by locality group; within the blocks, sorted by position,
``searchsorted`` windows give the candidates (never all pairs of the compilation), examined
in chunks of at most 2 million. Measured on the development machine (2 cores, busy): 100 000
invented records (400 localities, 9 sources, 20 % re-published) in about 1 s (20 000 pairs);
a worst case — 100 000 records of 10 sources in one 1000 m section, δ13C spread
0.3 ‰ (1σ) (1.3 million candidates, 300 000 pairs) — in 7–10 s, mostly writing the reasons.
"""

from __future__ import annotations

import csv
import unicodedata
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any, NamedTuple, TypedDict

import numpy as np

from strata13.errors import ConfigError, DomainError, OptionError

if TYPE_CHECKING:
    import pandas as pd

EARTH_RADIUS_KM = 6371.0  # mean Earth radius (common convention)
WEIGHTS = {"locality": 1.0, "position": 1.0, "d13c": 2.0, "d18o": 1.0, "sample": 1.0}
LINEAGE_PULL = 0.5  # declared lineage moves the score this share of the way to 1
COLUMNS = (
    "record_a",
    "source_a",
    "record_b",
    "source_b",
    "locality",
    "position_a_m",
    "position_b_m",
    "d13c_a",
    "d13c_b",
    "score",
    "reasons",
)
DECISIONS = ("confirm", "reject")
DECISION_HEADER = ("record_a", "record_b", "decision", "note")
_SLACK = 1e-9  # floating-point noise allowed at a tolerance's edge
_CHUNK = 2_000_000  # candidate pairs examined at a time (bounds memory)


class Decision(NamedTuple):
    """One line of a decisions file."""

    record_a: str
    record_b: str
    decision: str  # "confirm" or "reject"
    note: str


# ------------------------------------------------------------------ small helpers


def haversine_km(
    lat1: Any, lon1: Any, lat2: Any, lon2: Any, radius_km: float = EARTH_RADIUS_KM
) -> np.ndarray:
    """Great-circle distance (km) by the haversine formula on a sphere (degrees in).

    d = 2R·asin(√(sin²(Δφ/2) + cos φ1 cos φ2 sin²(Δλ/2))); well conditioned at small
    distances, which is where localities are compared.
    """
    p1, p2 = np.radians(np.asarray(lat1, float)), np.radians(np.asarray(lat2, float))
    dp = p2 - p1
    dl = np.radians(np.asarray(lon2, float) - np.asarray(lon1, float))
    h = np.sin(dp / 2) ** 2 + np.cos(p1) * np.cos(p2) * np.sin(dl / 2) ** 2
    d: np.ndarray = 2.0 * radius_km * np.arcsin(np.sqrt(np.clip(h, 0.0, 1.0)))
    return d


def normalise_name(text: Any) -> str:
    """A name for comparison: accents dropped, case folded, only letters and digits kept."""
    if text is None or (isinstance(text, float) and np.isnan(text)):
        return ""
    decomposed = unicodedata.normalize("NFKD", str(text))
    return "".join(ch for ch in decomposed.casefold() if ch.isalnum())


def _num(x: float, digits: int = 2) -> str:
    """A number for the reasons text, with a true minus sign and no "−0.00"."""
    return f"{round(float(x), digits) + 0.0:.{digits}f}".replace("-", "\u2212")


def _text(records: pd.DataFrame, col: str) -> np.ndarray:
    """A text column as an object array (None where missing or absent)."""
    if col not in records.columns:
        return np.full(len(records), None, dtype=object)
    text: np.ndarray = records[col].astype("string").to_numpy(dtype=object, na_value=None)
    return text


def _float(records: pd.DataFrame, col: str) -> np.ndarray:
    import pandas as pd

    if col not in records.columns:
        return np.full(len(records), np.nan)
    values: np.ndarray = pd.to_numeric(records[col], errors="coerce").to_numpy(
        dtype=float, na_value=np.nan
    )
    return values


def _codes(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sorted integer codes (−1 for None) and the distinct values."""
    import pandas as pd

    codes, uniques = pd.factorize(values, sort=True, use_na_sentinel=True)
    return codes.astype(np.int64), np.asarray(uniques, dtype=object)


def _expand(lo: np.ndarray, hi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Pairs (k, j): for each k, every j in [lo[k], hi[k])."""
    counts = np.maximum(hi - lo, 0)
    k = np.repeat(np.arange(lo.size), counts)
    start = np.repeat(lo - (np.cumsum(counts) - counts), counts)
    return k, start + np.arange(int(counts.sum()))


def _check_tolerances(position_tol_m: float, value_tol_permil: float, coord_tol_km: float) -> None:
    for name, val, zero_ok in (
        ("position_tol_m", position_tol_m, False),
        ("value_tol_permil", value_tol_permil, False),
        ("coord_tol_km", coord_tol_km, True),
    ):
        ok = isinstance(val, int | float | np.floating | np.integer) and np.isfinite(val)
        if not ok or val < 0 or (val == 0 and not zero_ok):
            raise OptionError(
                f"the tolerance {name}={val!r} is not a positive number.",
                "Give e.g. position_tol_m=0.5, value_tol_permil=0.15, "
                "coord_tol_km=5 (0 turns coordinate matching off).",
            )


# ------------------------------------------------------------------ locality groups


def _components(n: int, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Connected-component label of each of n nodes joined by edges (a, b)."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    graph = coo_matrix((np.ones(a.size, dtype=np.int8), (a, b)), shape=(n, n))
    labels: np.ndarray = connected_components(graph, directed=False)[1].astype(np.int64)
    return labels


def _near_places(lat: np.ndarray, lon: np.ndarray, tol_km: float) -> tuple[np.ndarray, ...]:
    """Pairs of places at most tol_km apart: a latitude window, then the exact distance."""
    have = np.flatnonzero(np.isfinite(lat) & np.isfinite(lon))
    if tol_km <= 0 or have.size < 2:
        return np.empty(0, np.int64), np.empty(0, np.int64), np.empty(0)
    idx = have[np.argsort(lat[have], kind="stable")]
    la = lat[idx]
    dlat = np.degrees(tol_km / EARTH_RADIUS_KM) + 1e-9  # a latitude band never exceeds this
    lo = np.arange(idx.size) + 1
    hi = np.searchsorted(la, la + dlat, side="right")
    k, j = _expand(lo, hi)
    d = haversine_km(lat[idx[k]], lon[idx[k]], lat[idx[j]], lon[idx[j]])
    close = d <= tol_km + _SLACK
    return idx[k][close], idx[j][close], d[close]


def _locality_groups(
    loc_id: np.ndarray,
    loc_name: np.ndarray,
    lat: np.ndarray,
    lon: np.ndarray,
    aliases: Mapping[str, Iterable[str]] | None,
    coord_tol_km: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per record: its place code, its name group (ids, names, aliases) and its block.

    A place is a distinct (locality_id, locality_name, lat, lon). Name groups join places
    sharing a normalised id or name, or an alias link (one namespace for ids and names);
    blocks further join places whose coordinates are within ``coord_tol_km``.
    """
    import pandas as pd

    frame = pd.DataFrame({"i": loc_id, "n": loc_name, "la": lat, "lo": lon})
    place = frame.groupby(["i", "n", "la", "lo"], dropna=False, sort=False).ngroup()
    place = place.to_numpy(dtype=np.int64)
    first = np.unique(place, return_index=True)[1]
    n_place = first.size
    tokens: dict[str, int] = {}
    ea: list[int] = []
    eb: list[int] = []

    def token(text: Any) -> int | None:
        key = normalise_name(text)
        return tokens.setdefault(key, n_place + len(tokens)) if key else None

    for p, row in enumerate(first):
        for t in (token(loc_id[row]), token(loc_name[row])):
            if t is not None:
                ea.append(p)
                eb.append(t)
    for key, others in (aliases or {}).items():
        t0 = token(key)
        for other in [others] if isinstance(others, str) else others:
            t1 = token(other)
            if t0 is not None and t1 is not None:
                ea.append(t0)
                eb.append(t1)
    comp = _components(n_place + len(tokens), np.asarray(ea, np.int64), np.asarray(eb, np.int64))
    group = comp[:n_place]
    na, nb, _ = _near_places(lat[first], lon[first], coord_tol_km)
    _, rep = np.unique(group, return_index=True)  # one place stands for its name group
    pa = np.concatenate([np.arange(n_place), na])
    pb = np.concatenate([rep[np.unique(group, return_inverse=True)[1]], nb])
    block = _components(n_place, pa, pb)
    return place, group[place], block[place]


# ------------------------------------------------------------------ candidates


class _Recs(NamedTuple):
    """The record columns the finder uses, in one sorted order (by block, then position)."""

    rid: np.ndarray
    rid_rank: np.ndarray
    src: np.ndarray  # source code (sorted by name)
    orig: np.ndarray  # original_source_id as a source code (−1 none or unknown)
    pos: np.ndarray
    kind: np.ndarray  # position_kind code (−1 none)
    d13c: np.ndarray
    d18o: np.ndarray
    lat: np.ndarray
    lon: np.ndarray
    group: np.ndarray
    block: np.ndarray
    loc_id: np.ndarray
    loc_name: np.ndarray
    label: np.ndarray  # locality name, else id
    label_norm: np.ndarray
    sample: np.ndarray  # sample id ("" when none)
    sample_norm: np.ndarray


def _prepare(
    records: pd.DataFrame, aliases: Mapping[str, Iterable[str]] | None, coord_tol_km: float
) -> tuple[_Recs, np.ndarray, int]:
    """Usable records (a source, a position and a δ13C), sorted; the source names; the
    number left out."""
    needed = ["record_id", "source_id", "d13c_carb"]
    missing = [c for c in needed if c not in records.columns]
    if not ({"locality_id", "locality_name"} & set(records.columns)):
        missing.append("locality_id or locality_name")
    if "position_m" not in records.columns and not {"top_m", "base_m"} <= set(records.columns):
        missing.append("position_m or top_m/base_m")
    if missing:
        raise DomainError(
            f"the records lack the column(s) {', '.join(missing)} needed to find overlaps.",
            "Pass rows of the records view (query or sql).",
        )
    pos = _float(records, "position_m")
    mid = (_float(records, "top_m") + _float(records, "base_m")) / 2.0
    pos = np.where(np.isfinite(pos), pos, mid)
    d13c = _float(records, "d13c_carb")
    src_all = _text(records, "source_id")
    loc_id, loc_name = _text(records, "locality_id"), _text(records, "locality_name")
    usable = (
        np.isfinite(pos)
        & np.isfinite(d13c)
        & (src_all != None)  # noqa: E711  (element-wise on object arrays)
        & ((loc_id != None) | (loc_name != None))  # noqa: E711
    )
    rows = np.flatnonzero(usable)
    src, sources = _codes(src_all[rows])
    code_of = {s: k for k, s in enumerate(sources)}
    orig = np.array(
        [
            code_of.get(s, -1) if s is not None else -1
            for s in _text(records, "original_source_id")[rows]
        ],
        dtype=np.int64,
    )
    lat, lon = _float(records, "lat")[rows], _float(records, "lon")[rows]
    _, group, block = _locality_groups(
        loc_id[rows], loc_name[rows], lat, lon, aliases, coord_tol_km
    )
    p = pos[rows]
    order = np.lexsort((p, block))
    rid = _text(records, "record_id")[rows]
    sample = _text(records, "sample_id")[rows]
    s_codes, s_uniques = _codes(sample)
    s_norm = np.array([normalise_name(x) for x in s_uniques] + [""], dtype=object)
    label = np.where(loc_name[rows] != None, loc_name[rows], loc_id[rows])  # noqa: E711
    l_codes, l_uniques = _codes(label)
    l_norm = np.array([normalise_name(x) for x in l_uniques] + [""], dtype=object)
    recs = _Recs(
        rid=rid,
        rid_rank=_codes(rid)[0],
        src=src,
        orig=orig,
        pos=p,
        kind=_codes(_text(records, "position_kind")[rows])[0],
        d13c=d13c[rows],
        d18o=_float(records, "d18o_carb")[rows],
        lat=lat,
        lon=lon,
        group=group,
        block=block,
        loc_id=loc_id[rows],
        loc_name=loc_name[rows],
        label=label,
        label_norm=l_norm[l_codes],
        sample=np.where(sample != None, sample, ""),  # noqa: E711
        sample_norm=s_norm[s_codes],
    )
    recs = _Recs(*(a[order] for a in recs))
    return recs, sources, len(records) - rows.size


def _windows(r: _Recs, tol: float) -> tuple[np.ndarray, np.ndarray]:
    """For each record (sorted by block, then position): the later records of its block
    within ``tol`` metres, as [lo, hi) ranges of the sorted order."""
    n = r.pos.size
    if n == 0:
        return np.empty(0, np.int64), np.empty(0, np.int64)
    starts = np.flatnonzero(np.r_[True, r.block[1:] != r.block[:-1]])
    seg = np.repeat(np.arange(starts.size), np.diff(np.r_[starts, n]))
    base = r.pos[starts][seg]  # the block's lowest position
    ends = np.r_[starts[1:], n] - 1
    stride = float(np.max(r.pos[ends] - r.pos[starts])) + 2.0 * tol + 1.0
    key = (r.pos - base) + seg * stride  # blocks laid end to end, never within tol
    lo = np.arange(n) + 1
    hi = np.searchsorted(key, key + tol + _SLACK, side="right")
    return lo, hi


def _candidates(
    r: _Recs, only: int | None, ptol: float, vtol: float, ctol: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pairs (i, j) of the sorted records that meet every tolerance, with their distance
    in km (NaN where the locality group alone links them)."""
    lo, hi = _windows(r, ptol)
    counts = np.maximum(hi - lo, 0)
    cum = np.cumsum(counts)
    cuts = np.r_[
        0,
        np.searchsorted(cum, np.arange(_CHUNK, cum[-1] if cum.size else 0, _CHUNK), side="right"),
        counts.size,
    ]
    out_i, out_j, out_d = [], [], []
    for c0, c1 in zip(cuts[:-1], cuts[1:], strict=True):
        k, j = _expand(lo[c0:c1], hi[c0:c1])
        i = k + c0
        ok = r.src[i] != r.src[j]
        if only is not None:
            ok &= (r.src[i] == only) | (r.src[j] == only)
        ok &= (r.kind[i] == r.kind[j]) | (r.kind[i] < 0) | (r.kind[j] < 0)
        ok &= np.abs(r.pos[i] - r.pos[j]) <= ptol + _SLACK
        ok &= np.abs(r.d13c[i] - r.d13c[j]) <= vtol + _SLACK
        do = np.abs(r.d18o[i] - r.d18o[j])
        ok &= ~(do > vtol + _SLACK)  # NaN (one lacks δ18O) passes
        i, j = i[ok], j[ok]
        d = np.full(i.size, np.nan)
        other = r.group[i] != r.group[j]
        d[other] = haversine_km(r.lat[i[other]], r.lon[i[other]], r.lat[j[other]], r.lon[j[other]])
        keep = ~other | (d <= ctol + _SLACK)
        out_i.append(i[keep])
        out_j.append(j[keep])
        out_d.append(d[keep])
    if not out_i:
        return np.empty(0, np.int64), np.empty(0, np.int64), np.empty(0)
    return np.concatenate(out_i), np.concatenate(out_j), np.concatenate(out_d)


def _declared_codes(
    declared: Mapping[str, Iterable[str]] | None, sources: np.ndarray
) -> np.ndarray:
    """Declared lineage as codes re-publisher·S + original (sources absent are ignored)."""
    code_of = {s: k for k, s in enumerate(sources)}
    n = len(sources)
    out = []
    for rep, originals in (declared or {}).items():
        for orig in [originals] if isinstance(originals, str) else originals:
            if rep in code_of and orig in code_of:
                out.append(code_of[rep] * n + code_of[orig])
    return np.asarray(out, dtype=np.int64)


def _one_to_one(ka: np.ndarray, kb: np.ndarray, order: np.ndarray) -> np.ndarray:
    """Greedy in ``order``: keep a pair unless one of its keys (record × other source)
    is taken already."""
    taken: set[int] = set()
    keep: list[int] = []
    for p, x, y in zip(order.tolist(), ka[order].tolist(), kb[order].tolist(), strict=True):
        if x in taken or y in taken:
            continue
        taken.add(x)
        taken.add(y)
        keep.append(p)
    return np.asarray(keep, dtype=np.int64)


# ------------------------------------------------------------------ the finder


class Tolerances(TypedDict, total=False):
    """How close two records must be to count as one measurement (keywords of find_overlaps)."""

    position_tol_m: float
    value_tol_permil: float
    coord_tol_km: float


def find_overlaps(
    records: pd.DataFrame,
    *,
    source: str | None = None,
    position_tol_m: float = 0.5,
    value_tol_permil: float = 0.15,
    coord_tol_km: float = 5.0,
    aliases: dict[str, set[str]] | None = None,
    declared: dict[str, set[str]] | None = None,
) -> pd.DataFrame:
    """Candidate pairs of records of different sources that are probably one measurement.

    ``records``: rows of the records view (read, never changed). ``source``: only pairs
    involving this source. ``aliases``: locality name or id → other names of it.
    ``declared``: source → the sources it re-publishes. Columns: see ``COLUMNS``; one row
    per pair, sorted by score (highest first), then record_a, record_b. Records without a
    source, a position or a δ13C cannot be compared and are counted in
    ``attrs["left_out"]``. Scoring and matching rules: see the module docstring.
    """
    import pandas as pd

    _check_tolerances(position_tol_m, value_tol_permil, coord_tol_km)
    r, sources, left_out = _prepare(records, aliases, coord_tol_km)
    only = None
    if source is not None:
        hit = np.flatnonzero(sources == source)
        if hit.size == 0:
            raise DomainError(
                f"no comparable record has the source {source!r}.",
                "Check the id with `strata13 sources`; records need a "
                "position and a δ13C value to be compared.",
            )
        only = int(hit[0])
    i, j, dist = _candidates(r, only, position_tol_m, value_tol_permil, coord_tol_km)

    # orientation: the original first when lineage says so, else the first source by name
    n_src = max(len(sources), 1)
    codes = _declared_codes(declared, sources)
    dict_ij = np.isin(r.src[j] * n_src + r.src[i], codes)  # j's source re-publishes i's
    dict_ji = np.isin(r.src[i] * n_src + r.src[j], codes)
    orig_ij, orig_ji = r.orig[j] == r.src[i], r.orig[i] == r.src[j]
    ij, ji = dict_ij | orig_ij, dict_ji | orig_ji
    swap = (ji & ~ij) | ((ij == ji) & (r.src[i] > r.src[j]))
    a, b = np.where(swap, j, i), np.where(swap, i, j)
    dict_ab, dict_ba = np.where(swap, dict_ji, dict_ij), np.where(swap, dict_ij, dict_ji)
    orig_ab, orig_ba = np.where(swap, orig_ji, orig_ij), np.where(swap, orig_ij, orig_ji)

    # score: weighted mean closeness, pulled towards 1 by declared lineage
    w = WEIGHTS
    same_group = np.isnan(dist)
    c_loc = np.where(
        same_group, 1.0, 1.0 - np.nan_to_num(dist) / coord_tol_km if coord_tol_km > 0 else 1.0
    )
    dpos = np.abs(r.pos[a] - r.pos[b])
    dc = np.abs(r.d13c[a] - r.d13c[b])
    do = np.abs(r.d18o[a] - r.d18o[b])
    has_o = np.isfinite(do)
    same_sample = (r.sample_norm[a] == r.sample_norm[b]) & (r.sample_norm[a] != "")
    num = (
        w["locality"] * c_loc
        + w["position"] * (1.0 - dpos / position_tol_m)
        + w["d13c"] * (1.0 - dc / value_tol_permil)
        + np.where(has_o, w["d18o"] * (1.0 - np.nan_to_num(do) / value_tol_permil), 0.0)
        + np.where(same_sample, w["sample"], 0.0)
    )
    den = (
        w["locality"]
        + w["position"]
        + w["d13c"]
        + np.where(has_o, w["d18o"], 0.0)
        + np.where(same_sample, w["sample"], 0.0)
    )
    base = np.clip(num / den, 0.0, 1.0)
    lineage = ij | ji
    score = np.round(np.where(lineage, base + LINEAGE_PULL * (1.0 - base), base), 6)

    order = np.lexsort((r.rid_rank[b], r.rid_rank[a], -score))
    keep = _one_to_one(r.pos.size * r.src[b] + a, r.pos.size * r.src[a] + b, order)
    a, b = a[keep], b[keep]
    sel = (dist[keep], dict_ab[keep], dict_ba[keep], orig_ab[keep], orig_ba[keep])
    reasons = _reasons(r, sources, a, b, *sel)
    out = pd.DataFrame(
        {
            "record_a": r.rid[a],
            "source_a": sources[r.src[a]],
            "record_b": r.rid[b],
            "source_b": sources[r.src[b]],
            "locality": r.label[a],
            "position_a_m": r.pos[a],
            "position_b_m": r.pos[b],
            "d13c_a": r.d13c[a],
            "d13c_b": r.d13c[b],
            "score": score[keep],
            "reasons": np.asarray(reasons, dtype=object),
        },
        columns=list(COLUMNS),
    )
    out.attrs.update(
        {
            "position_tol_m": position_tol_m,
            "value_tol_permil": value_tol_permil,
            "coord_tol_km": coord_tol_km,
            "weights": dict(WEIGHTS),
            "lineage_pull": LINEAGE_PULL,
            "source": source,
            "candidates": int(i.size),
            "left_out": int(left_out),
        }
    )
    return out


def _fmt(*arrays: np.ndarray) -> list[np.ndarray]:
    """Numbers as text with two decimals and a true minus sign (each distinct value
    formatted once)."""
    sizes = [x.size for x in arrays]
    vals = np.round(np.concatenate(arrays), 2) + 0.0 if arrays else np.empty(0)
    uniq, inv = np.unique(vals, return_inverse=True)
    text = np.array([_num(v) for v in uniq] + [""], dtype=object)
    inv = np.where(np.isfinite(vals), inv, uniq.size)  # NaN -> ""
    return np.split(text[inv], np.cumsum(sizes)[:-1])


def _reasons(
    r: _Recs,
    sources: np.ndarray,
    a: np.ndarray,
    b: np.ndarray,
    dist: np.ndarray,
    dict_ab: np.ndarray,
    dict_ba: np.ndarray,
    orig_ab: np.ndarray,
    orig_ba: np.ndarray,
) -> np.ndarray:
    """The criteria each pair met and by how much, one line of text per pair."""

    def q(x: np.ndarray) -> np.ndarray:
        return "'" + x + "'"

    name_a, name_b = r.label[a], r.label[b]
    pa, pb, ca, cb, oa, ob = r.pos[a], r.pos[b], r.d13c[a], r.d13c[b], r.d18o[a], r.d18o[b]
    t = dict(
        zip(
            ["pa", "pb", "dp", "ca", "cb", "dc", "oa", "ob", "do", "km"],
            _fmt(pa, pb, np.abs(pa - pb), ca, cb, np.abs(ca - cb), oa, ob, np.abs(oa - ob), dist),
            strict=True,
        )
    )
    same_name = r.label_norm[a] == r.label_norm[b]
    same_id = (r.loc_id[a] != None) & (r.loc_id[a] == r.loc_id[b])  # noqa: E711
    pair = q(name_a) + " and " + q(name_b)
    loc = np.where(
        np.isfinite(dist),
        "localities " + pair + " " + t["km"] + " km apart",
        np.where(
            same_id,
            "same locality " + q(name_a),
            np.where(
                same_name,
                "same locality name " + q(name_a) + " / " + q(name_b),
                "localities " + pair + " linked by aliases",
            ),
        ),
    )
    parts = [
        loc,
        "positions " + t["pa"] + " m vs " + t["pb"] + " m (Δ " + t["dp"] + " m)",
        "δ13C " + t["ca"] + " vs " + t["cb"] + " ‰ (Δ " + t["dc"] + ")",
    ]
    both, one = np.isfinite(oa) & np.isfinite(ob), np.isfinite(oa) ^ np.isfinite(ob)
    parts.append(
        np.where(
            both,
            "δ18O " + t["oa"] + " vs " + t["ob"] + " ‰ (Δ " + t["do"] + ")",
            np.where(one, "δ18O in one record only", ""),
        )
    )
    sa, sb = r.sample[a], r.sample[b]
    has = (sa != "") & (sb != "")
    same = has & (r.sample_norm[a] == r.sample_norm[b]) & (r.sample_norm[a] != "")
    parts.append(
        np.where(
            same, "same sample id " + q(sa), np.where(has, "sample ids " + sa + " / " + sb, "")
        )
    )
    src_a, src_b = sources[r.src[a]].astype(object), sources[r.src[b]].astype(object)
    parts += [
        np.where(dict_ab, "declared lineage: " + src_b + " re-publishes " + src_a, ""),
        np.where(dict_ba, "declared lineage: " + src_a + " re-publishes " + src_b, ""),
        np.where(orig_ab, r.rid[b] + " names " + src_a + " as its original source", ""),
        np.where(orig_ba, r.rid[a] + " names " + src_b + " as its original source", ""),
    ]
    out = np.asarray(parts[0], dtype=object)
    for part in parts[1:]:
        part = np.asarray(part, dtype=object)
        out = np.where(part != "", out + "; " + part, out)
    return out


# ------------------------------------------------------------------ decisions


def read_decisions(path: str | Path) -> list[Decision]:
    """The user's verdicts on proposed pairs, from a CSV with the columns
    ``record_a,record_b,decision,note`` (the note may be left out or empty) in any order;
    other columns are ignored, so the CSV ``overlaps --format csv`` writes is accepted
    once its decision column is filled (rows left undecided there are skipped).

    Blank lines and lines starting with ``#`` are skipped; decisions are case-insensitive.
    Every bad line is named at once (ConfigError): an unknown decision, a missing id, a
    record paired with itself, too many fields, or a pair given opposite decisions. A pair
    repeated with the same decision is kept once. Whether the ids exist is for the caller
    to check against the store.
    """
    from strata13.compile.read.inputs import read_text

    p = Path(path)
    text = read_text(
        p,
        "the decisions file",
        "Check the path; the file is a CSV with the header record_a,record_b,decision,note.",
    )
    rows = [
        (n, row)
        for n, row in _csv_lines(text)
        if any(c.strip() for c in row) and not row[0].lstrip().startswith("#")
    ]
    hint = "Write one pair a line: record_a,record_b,confirm|reject,note (the note may be empty)."
    header = [c.strip().lower() for c in rows[0][1]] if rows else []
    if not set(DECISION_HEADER[:3]) <= set(header):
        raise ConfigError(
            f"the decisions file {p} has no header with {','.join(DECISION_HEADER[:3])} "
            "(and optionally note).",
            hint + " The CSV of `overlaps --format csv` works once its decisions are filled.",
        )
    at = {name: header.index(name) for name in DECISION_HEADER if name in header}
    proposals = bool(set(header) - set(DECISION_HEADER))  # `overlaps --format csv` output
    problems: list[str] = []
    seen: dict[frozenset[str], tuple[int, str]] = {}
    out: list[Decision] = []
    for line, row in rows[1:]:
        cells = [c.strip() for c in row]
        if len(cells) > len(header):
            problems.append(f"line {line}: {len(cells)} fields, at most {len(header)} expected")
            continue
        cells += [""] * (len(header) - len(cells))
        ra, rb, raw_decision = (cells[at[k]] for k in DECISION_HEADER[:3])
        decision, note = raw_decision.lower(), cells[at["note"]] if "note" in at else ""
        if not raw_decision and proposals:
            continue  # a proposed pair left undecided
        if not ra or not rb:
            problems.append(f"line {line}: a record id is missing")
        elif ra == rb:
            problems.append(f"line {line}: record {ra} is paired with itself")
        elif decision not in DECISIONS:
            problems.append(f"line {line}: decision '{raw_decision}' is not confirm or reject")
        else:
            key = frozenset((ra, rb))
            if key in seen and seen[key][1] != decision:
                problems.append(
                    f"line {line}: {decision} contradicts {seen[key][1]} on line "
                    f"{seen[key][0]} for the same pair"
                )
            elif key not in seen:
                seen[key] = (line, decision)
                out.append(Decision(ra, rb, decision, note))
    if problems:
        raise ConfigError(
            f"the decisions file {p} has {len(problems)} bad line(s): {'; '.join(problems)}.", hint
        )
    return out


def _csv_lines(text: str) -> Iterable[tuple[int, list[str]]]:
    """CSV rows with the (first) line number each starts on."""
    reader = csv.reader(text.splitlines(keepends=True))
    start = 1
    for row in reader:
        yield start, row
        start = reader.line_num + 1


def duplicates_to_drop(
    decisions: Iterable[Decision | tuple[str, str, str, str]],
    *,
    source_of: Mapping[str, str] | None = None,
    declared: Mapping[str, Iterable[str]] | None = None,
) -> set[str]:
    """Record ids a view leaves out: one record of each confirmed pair (never deleted).

    Rule: keep ``record_a`` and drop ``record_b`` — unless told otherwise: with
    ``source_of`` (record id → source id) and ``declared`` (source → sources it
    re-publishes), when record_a's source re-publishes record_b's (and not the reverse), the
    re-publisher's record (record_a) is dropped instead. Rejected pairs drop nothing; for a
    pair decided twice the last decision counts. Safety: in a cluster of records joined by
    confirmed pairs, at least one record is always kept (in a cycle of confirmations the
    record kept by the first of them).
    """
    last: dict[frozenset[str], tuple[str, str, str]] = {}
    for item in decisions:
        ra, rb, decision = str(item[0]), str(item[1]), str(item[2]).strip().lower()
        if decision not in DECISIONS:
            raise OptionError(
                f"the decision {item[2]!r} for {ra} / {rb} is not confirm or reject.",
                "Read the file with read_decisions, which checks it.",
            )
        last[frozenset((ra, rb))] = (ra, rb, decision)
    republishes: dict[str | None, set[str]] = {
        k: {v} if isinstance(v, str) else set(v) for k, v in (declared or {}).items()
    }
    parent: dict[str, str] = {}

    def root(x: str) -> str:
        while parent.setdefault(x, x) != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    first_kept: dict[str, tuple[int, str]] = {}  # cluster root → earliest keeper
    dropped: set[str] = set()
    for n, (ra, rb, decision) in enumerate(last.values()):
        if decision != "confirm":
            continue
        keep, drop = ra, rb
        if source_of is not None:
            sa, sb = source_of.get(ra), source_of.get(rb)
            if sb in republishes.get(sa, set()) and sa not in republishes.get(sb, set()):
                keep, drop = rb, ra
        dropped.add(drop)
        ka, kb = root(keep), root(drop)
        options = [first_kept.get(ka, (n, keep)), first_kept.get(kb, (n, keep))]
        parent[kb] = ka
        first_kept[ka] = min(options)
    members: dict[str, set[str]] = {}
    for x in list(parent):
        members.setdefault(root(x), set()).add(x)
    for top, group in members.items():
        if top in first_kept and group <= dropped:  # a cycle: keep its earliest keeper
            dropped.discard(first_kept[top][1])
    return dropped
