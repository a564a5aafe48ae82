"""Apply a RuleSet to records: one outcome per (record, rule), one status per record.

Outcomes: ``pass``, ``fail``, ``warn`` (a rule of severity ``warn`` was broken),
``untested`` (the rule applies but the data cannot decide it: missing value, censored value
that straddles the limit, mixed concentration basis, zero denominator, too small a group),
``not applicable`` (the record lies outside the rule's scope). Every outcome has a detail
text saying why.

Scope: a record whose age, component, mineralogy or setting is known and outside the scope
is "not applicable". When the rule is scoped on a variable the record lacks (no age yet —
pending dating — or no component), it is "untested", never "pass": nobody can say the rule
does not apply.

Censored values are bounds: ``<x`` means at most x, ``>x`` at least x, ``bdl`` at most the
detection limit (and undecidable when none is recorded); a comparison the bound decides is
decided, otherwise the outcome is untested.

Overall state per record (``screening/overall.py``): ``fail`` if any rule of severity fail
failed; else ``untested`` unless the rule set's minimum evidence for the record's component
was tested (without ``[[evidence]]``: one applicable rule); else ``warn`` if a warn rule was
broken; else ``pass`` — with a reason naming the rules (or the missing ones). With
``untested_passes=True`` an applicable but untested rule counts as a tested pass. These are
rules of thumb: the user's judgement and their lab's practice decide what a flag means.

Each rule is screened by its kind's evaluator (``screen_*`` here, bound in ``kinds.KINDS``),
which gives an outcome code per record; scope then overrides it. Everything is vectorised
(numpy/pyarrow; covariance by sorted groups and prefix sums); the input is read, never
changed.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, NamedTuple

import numpy as np
from strata13.compile.screening.overall import STATES
from strata13.compile.screening.overall import overall as record_states
from strata13.compile.screening.rules import (
    NUMERIC_FIELDS,
    AllowedValues,
    Covariance,
    RatioLimit,
    Rule,
    RuleSet,
    ValueLimit,
)

from strata13.errors import DomainError

if TYPE_CHECKING:
    import pyarrow as pa

OUTCOMES = ("pass", "fail", "warn", "untested", "not applicable")
PASS, FAIL, WARN, UNTESTED, NA = range(5)
OVERALL = STATES  # pass, warn, fail, untested (screening/overall.py)
PASS_WORDS = {"below": "below", "at_most": "at most", "above": "above", "at_least": "at least"}


class Screening(NamedTuple):
    """What ``evaluate`` returns (a tuple: ``results, overall, groups = evaluate(…)``)."""

    results: pa.Table  # record_id, rule, outcome, detail — one row per (rule, record)
    overall: pa.Table  # record_id, screen, reason — one row per record, in input order
    groups: pa.Table  # covariance statistics, one row per group (or window)


# --- reading columns -------------------------------------------------------------------


class _Columns:
    """Read-only access to the record columns as numpy/pyarrow arrays (absent = null)."""

    def __init__(self, table: pa.Table) -> None:
        self.table = table
        self.n = table.num_rows
        self._num: dict[str, np.ndarray] = {}
        self._text: dict[str, pa.Array] = {}
        self.bounds: dict[str, _Bounds] = {}  # censored values as bounds, per column

    def has(self, name: str) -> bool:
        return name in self.table.column_names

    def num(self, name: str) -> np.ndarray:
        if name not in self._num:
            import pyarrow as pa
            import pyarrow.compute as pc

            if not self.has(name):
                self._num[name] = np.full(self.n, np.nan)
            else:
                col = pc.cast(self.table.column(name), pa.float64())
                arr = col.to_numpy() if col.num_chunks else np.empty(0)
                self._num[name] = np.asarray(arr, dtype=float)
        return self._num[name]

    def text(self, name: str) -> pa.Array:
        if name not in self._text:
            import pyarrow as pa

            if not self.has(name):
                self._text[name] = pa.nulls(self.n, pa.string())
            else:
                col = self.table.column(name)
                arr = col.combine_chunks() if col.num_chunks else pa.array([], col.type)
                if pa.types.is_dictionary(arr.type):
                    arr = arr.dictionary_decode()
                if not pa.types.is_string(arr.type):
                    arr = arr.cast(pa.string())
                self._text[name] = arr
        return self._text[name]

    def codes(self, name: str) -> tuple[np.ndarray, pa.Array]:
        """Integer codes (−1 for null) and the distinct values of a text column."""
        import pyarrow.compute as pc

        enc = pc.dictionary_encode(self.text(name))
        idx = pc.fill_null(enc.indices, -1).to_numpy(zero_copy_only=False)
        return idx.astype(np.int64), enc.dictionary


def _mask(arr: Any) -> np.ndarray:
    """A pyarrow boolean (nulls false) as numpy."""
    import pyarrow.compute as pc

    return np.asarray(pc.fill_null(arr, False).to_numpy(zero_copy_only=False), dtype=bool)


def _num_text(v: np.ndarray, digits: int = 4) -> pa.Array:
    """Numbers to text at ``digits`` significant digits (vectorised; NaN -> null)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    v = np.asarray(v, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        mag = np.floor(np.log10(np.abs(v)))
        dec = np.where(np.isfinite(mag), np.clip(digits - 1 - mag, 0, 12), 0)
        scale = 10.0**dec
        out = np.where(np.isfinite(v), np.round(v * scale) / scale, v)
    return pc.cast(pa.array(out, from_pandas=True), pa.string())


def _join(*parts: Any) -> pa.Array:
    import pyarrow.compute as pc

    return pc.binary_join_element_wise(*parts, "")


def _pick(index: np.ndarray, texts: list[str]) -> pa.Array:
    """``texts[index]`` per record as a string array, without a Python loop."""
    import pyarrow as pa

    return pa.DictionaryArray.from_arrays(pa.array(index), pa.array(texts, pa.string())).cast(
        pa.string()
    )


def _decode(values: pa.Array, codes: np.ndarray) -> pa.Array:
    """Codes from ``_Columns.codes`` back to text (−1 -> null)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    return pc.take(values, pa.array(codes, pa.int64(), mask=codes < 0))


def _fmt(x: float) -> str:
    return f"{x:.4g}"


def _join_at(mask: np.ndarray, parts: list[Any]) -> pa.Array:
    """``_join(*parts)`` built only where ``mask`` (null elsewhere): a million records
    need no million texts when only a few are kept."""
    import pyarrow as pa
    import pyarrow.compute as pc

    n = len(mask)
    idx = np.flatnonzero(mask)
    if idx.size == n:
        return _join(*parts)
    if idx.size == 0:
        return pa.nulls(n, pa.string())
    sel = pa.array(idx)
    joined = _join(*[p if isinstance(p, str) else pc.take(p, sel) for p in parts])
    inv = np.full(n, -1, dtype=np.int64)
    inv[idx] = np.arange(idx.size)
    return pc.take(joined, pa.array(inv, mask=inv < 0))


class _Detail:
    """Detail texts: the first claim on a record wins; constants are dictionary-encoded.

    With ``keep_all`` False (the derive engine, for large stores) passes and "not
    applicable" get no text: the outcome says it all, and the texts would dominate memory.
    """

    def __init__(self, n: int, keep_all: bool = True) -> None:
        self.n = n
        self.keep_all = keep_all
        self.idx = np.full(n, -1, dtype=np.int32)
        self.claimed = np.zeros(n, dtype=bool)
        self.consts: list[str] = []
        self.dyn: list[tuple[np.ndarray, pa.Array]] = []

    def const(self, mask: np.ndarray, text: str) -> np.ndarray:
        take = mask & ~self.claimed
        if take.any() and not self.keep_all and text.startswith("not applicable"):
            self.claimed |= take  # claimed, no text
        elif take.any():
            self.consts.append(text)
            self.idx[take] = len(self.consts) - 1
            self.claimed |= take
        return take

    def dynamic(self, mask: np.ndarray, texts: pa.Array) -> np.ndarray:
        take = mask & ~self.claimed
        if take.any():
            self.dyn.append((take, texts))
            self.claimed |= take
        return take

    def build(self) -> pa.Array:
        import pyarrow as pa
        import pyarrow.compute as pc

        if not self.keep_all:
            return self._coded()
        if not self.consts and len(self.dyn) == 1 and self.dyn[0][0].all():
            return self.dyn[0][1]  # every record has its own text
        idx = pa.array(self.idx, mask=self.idx < 0)
        out = pa.DictionaryArray.from_arrays(idx, pa.array(self.consts or [""], pa.string()))
        arr = out.cast(pa.string())
        for mask, texts in self.dyn:
            arr = pc.if_else(pa.array(mask), texts, arr)
        return arr

    def _coded(self) -> pa.Array:
        """The texts dictionary-encoded, never materialised per record: the constants and
        each distinct per-record text once, an int32 index per record (null: no text)."""
        import pyarrow as pa

        words: list[str] = list(self.consts)
        idx = self.idx.astype(np.int32)
        for mask, texts in self.dyn:
            rows = np.flatnonzero(mask)
            if not rows.size:
                continue
            enc = texts.take(pa.array(rows)).dictionary_encode()
            codes = enc.indices.to_numpy(zero_copy_only=False)
            idx[rows] = np.where(
                np.isnan(codes.astype(float)), -1, np.nan_to_num(codes.astype(float)) + len(words)
            ).astype(np.int32)
            words += enc.dictionary.to_pylist()
        return pa.DictionaryArray.from_arrays(
            pa.array(idx, mask=idx < 0), pa.array(words or [""], pa.string())
        )


# --- scope -----------------------------------------------------------------------------


def _scope(rule: Rule, cols: _Columns, detail: _Detail) -> tuple[np.ndarray, np.ndarray]:
    """(outside, unknown) masks; claims the detail of those records."""
    import pyarrow as pa
    import pyarrow.compute as pc

    s = rule.scope
    outside = np.zeros(cols.n, dtype=bool)
    unknown = np.zeros(cols.n, dtype=bool)
    reasons_unknown: list[tuple[np.ndarray, str]] = []
    if s.age_min_ma is not None or s.age_max_ma is not None:
        age = cols.num("age_ma")
        lo = -np.inf if s.age_min_ma is None else s.age_min_ma
        hi = np.inf if s.age_max_ma is None else s.age_max_ma
        known = np.isfinite(age)
        out = known & ((age < lo) | (age > hi))
        bounds = _age_bounds(s.age_min_ma, s.age_max_ma)
        outside |= detail.const(out, f"not applicable: age outside the rule's scope ({bounds})")
        reasons_unknown.append(
            (
                ~known,
                f"untested: no age_ma (pending or not reported) and the rule is scoped to {bounds}",
            )
        )
    for key in ("component", "mineralogy", "setting"):
        terms = getattr(s, key)
        if not terms:
            continue
        vals = cols.text(key)
        present = _mask(pc.is_valid(vals))
        inside = _mask(pc.is_in(vals, value_set=pa.array(list(terms), pa.string())))
        listed = ", ".join(terms)
        outside |= detail.const(
            present & ~inside, f"not applicable: {key} outside the rule's scope ({listed})"
        )
        reasons_unknown.append(
            (~present, f"untested: no {key} recorded and the rule is scoped to {key} {listed}")
        )
    for mask, text in reasons_unknown:  # known-and-outside wins over unknown
        unknown |= detail.const(mask & ~outside, text)
    return outside, unknown


def _age_bounds(lo: float | None, hi: float | None) -> str:
    if lo is not None and hi is not None:
        return f"{_fmt(lo)}–{_fmt(hi)} Ma"
    return f"≤ {_fmt(hi)} Ma" if hi is not None else f"≥ {_fmt(lo or 0.0)} Ma"


# --- censored values as bounds ---------------------------------------------------------


class _Bounds(NamedTuple):
    lo: np.ndarray
    hi: np.ndarray
    exact: np.ndarray
    missing: np.ndarray
    bdl_no_dl: np.ndarray
    text: pa.Array  # how the value was reported ("250", "<5", "bdl (DL 5)")


def _bounds(column: str, cols: _Columns) -> _Bounds:
    if column not in cols.bounds:
        cols.bounds[column] = _read_bounds(column, cols)
    return cols.bounds[column]


def _read_bounds(column: str, cols: _Columns) -> _Bounds:
    import pyarrow as pa
    import pyarrow.compute as pc

    f = NUMERIC_FIELDS[column]
    v = cols.num(column)
    n = cols.n
    finite = np.isfinite(v)
    if f.censor is None:
        empty = np.zeros(n, dtype=bool)
        return _Bounds(v, v, finite, ~finite, empty, _num_text(v))
    q = cols.text(f"{f.censor}_qualifier")
    dl = cols.num(f"{f.censor}_dl")
    lt = _mask(pc.equal(q, "<")) & finite
    gt = _mask(pc.equal(q, ">")) & finite
    bdl = _mask(pc.equal(pc.utf8_lower(q), "bdl"))
    exact = finite & ~lt & ~gt & ~bdl
    bdl_dl = bdl & np.isfinite(dl)
    bdl_no = bdl & ~np.isfinite(dl)
    floor = 0.0 if f.ppm_factor is not None else -np.inf  # concentrations are ≥ 0
    lo = np.where(exact | gt, v, np.where(lt | bdl, floor, np.nan))
    hi = np.where(exact | lt, v, np.where(gt | bdl_no, np.inf, np.where(bdl_dl, dl, np.nan)))
    missing = ~(exact | lt | gt | bdl)
    text = vt = _num_text(v)
    if lt.any():
        text = pc.if_else(pa.array(lt), _join("<", vt), text)
    if gt.any():
        text = pc.if_else(pa.array(gt), _join(">", vt), text)
    if bdl_dl.any():
        text = pc.if_else(pa.array(bdl_dl), _join("bdl (DL ", _num_text(dl), ")"), text)
    if bdl_no.any():
        text = pc.if_else(pa.array(bdl_no), pa.scalar("bdl (no DL)"), text)
    return _Bounds(lo, hi, exact, missing, bdl_no, text)


def _decide(
    lo: np.ndarray, hi: np.ndarray, pass_if: str, limit: float
) -> tuple[np.ndarray, np.ndarray]:
    """(passes, fails) for a true value known to lie in [lo, hi]; neither = undecided."""
    with np.errstate(invalid="ignore"):
        if pass_if == "below":
            return hi < limit, lo >= limit
        if pass_if == "at_most":
            return hi <= limit, lo > limit
        if pass_if == "above":
            return lo > limit, hi <= limit
        return lo >= limit, hi < limit  # at_least


def _verdicts(
    rule: Rule,
    lead: list[Any],
    passes: np.ndarray,
    fails: np.ndarray,
    valid: np.ndarray,
    cond: str,
    detail: _Detail,
) -> np.ndarray:
    """Outcome codes from the decisions, with "<lead>; <cond> — <verdict>" details."""
    code = np.full(detail.n, UNTESTED, dtype=np.int8)
    broke = FAIL if rule.severity == "fail" else WARN
    code[valid & passes] = PASS
    code[valid & fails] = broke
    word = "fails" if rule.severity == "fail" else "warning"
    tails = [
        f"; passes if {cond} — passes",
        f"; passes if {cond} — {word}",
        f"; passes if {cond} — the censored value cannot decide it",
    ]
    which = np.where(passes, 0, np.where(fails, 1, 2)).astype(np.int8)
    keep = valid if detail.keep_all else valid & ~passes
    detail.dynamic(keep, _join_at(keep, [*lead, _pick(which, tails)]))
    return code


# --- rule kinds (each evaluator is bound to its kind in kinds.KINDS) --------------------


class Verdict(NamedTuple):
    """What a kind's evaluator gives for one rule: an outcome code per record (scope is
    applied afterwards) and, for a kind that tests groups, their statistics table."""

    codes: np.ndarray
    groups: pa.Table | None = None


def screen_value_limit(
    rule: Rule, spec: ValueLimit, cols: _Columns, detail: _Detail, in_scope: np.ndarray
) -> Verdict:
    """Each record's value (a bound when censored) against the limit in the stored unit."""
    f = NUMERIC_FIELDS[spec.field]
    b = _bounds(spec.field, cols)
    limit = spec.limit_stored
    detail.const(b.missing, f"untested: no {f.label} value")
    detail.const(
        b.bdl_no_dl, f"untested: {f.label} below detection limit, but no detection limit recorded"
    )
    passes, fails = _decide(b.lo, b.hi, spec.pass_if, limit)
    unit = f" {f.stored_unit}"
    lead = [f"{f.label} ", b.text, unit]
    cond = f"{PASS_WORDS[spec.pass_if]} {_fmt(limit)}{unit}"
    return Verdict(_verdicts(rule, lead, passes, fails, ~b.missing, cond, detail))


def screen_ratio_limit(
    rule: Rule, spec: RatioLimit, cols: _Columns, detail: _Detail, in_scope: np.ndarray
) -> Verdict:
    """Each record's ratio (an interval when an input is censored) against the limit;
    untested where an input is missing, the denominator is zero or the bases differ."""
    import pyarrow as pa
    import pyarrow.compute as pc

    fn, fd = NUMERIC_FIELDS[spec.numerator], NUMERIC_FIELDS[spec.denominator]
    nb, db = _bounds(spec.numerator, cols), _bounds(spec.denominator, cols)
    detail.const(nb.missing, f"untested: no {fn.label} value for {spec.label}")
    detail.const(db.missing, f"untested: no {fd.label} value for {spec.label}")
    zero = db.exact & (db.lo == 0)
    detail.const(zero, f"untested: {fd.label} is zero, so {spec.label} is undefined")
    nbasis, dbasis = cols.text(f"{fn.censor}_basis"), cols.text(f"{fd.censor}_basis")
    mixed = _mask(
        pc.and_(pc.and_(pc.is_valid(nbasis), pc.is_valid(dbasis)), pc.not_equal(nbasis, dbasis))
    )
    if mixed.any():
        detail.dynamic(
            mixed & ~nb.missing & ~db.missing,
            _join(
                f"untested: {fn.label} and {fd.label} are on different bases (",
                nbasis,
                " vs ",
                dbasis,
                f"), so {spec.label} is not meaningful",
            ),
        )
    valid = ~nb.missing & ~db.missing & ~zero & ~mixed
    k = spec.factor
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        lo = np.where(np.isinf(db.hi), 0.0, nb.lo / db.hi) * k
        hi = np.where(db.lo > 0, nb.hi / db.lo, np.where(nb.hi == 0, 0.0, np.inf)) * k
    lo = np.where(valid, lo, np.nan)
    hi = np.where(valid, hi, np.nan)
    passes, fails = _decide(lo, hi, spec.pass_if, spec.limit)
    point = np.isclose(lo, hi, rtol=1e-12, atol=0.0)
    lo_t = _num_text(lo)
    shown = _join(" = ", lo_t)
    if (valid & ~point).any():  # censored inputs: the ratio is an interval
        shown = pc.if_else(pa.array(point), shown, _join(" in [", lo_t, ", ", _num_text(hi), "]"))
    lead = [
        spec.label,
        shown,
        f" ({fn.label} ",
        nb.text,
        f" {fn.stored_unit}, {fd.label} ",
        db.text,
        f" {fd.stored_unit})",
    ]
    cond = f"{PASS_WORDS[spec.pass_if]} {_fmt(spec.limit)}"
    return Verdict(_verdicts(rule, lead, passes, fails, valid, cond, detail))


def screen_allowed_values(
    rule: Rule, spec: AllowedValues, cols: _Columns, detail: _Detail, in_scope: np.ndarray
) -> Verdict:
    """Each record's category against the allowed (or excluded) terms, ignoring case."""
    import pyarrow as pa
    import pyarrow.compute as pc

    vals = cols.text(spec.field)
    norm = pc.utf8_lower(pc.utf8_trim_whitespace(vals))
    terms = [t.strip().lower() for t in (spec.allowed or spec.excluded or ())]
    listed = _mask(pc.is_in(norm, value_set=pa.array(terms, pa.string())))
    present = _mask(pc.is_valid(vals))
    ok = present & (listed if spec.allowed is not None else ~listed)
    code = np.full(cols.n, UNTESTED, dtype=np.int8)
    code[ok] = PASS
    code[present & ~ok] = FAIL if rule.severity == "fail" else WARN
    detail.const(~present, f"untested: no {spec.field} recorded")
    which = "allowed" if spec.allowed is not None else "excluded"
    word = "fails" if rule.severity == "fail" else "warning"
    terms_text = ", ".join(spec.allowed or spec.excluded or ())
    if detail.keep_all:
        detail.dynamic(
            ok, _join_at(ok, [f"{spec.field} '", vals, f"' — passes ({which}: {terms_text})"])
        )
    bad = present & ~ok
    detail.dynamic(
        bad, _join_at(bad, [f"{spec.field} '", vals, f"' — {word} ({which}: {terms_text})"])
    )
    return Verdict(code)


def screen_covariance(
    rule: Rule, spec: Covariance, cols: _Columns, detail: _Detail, in_scope: np.ndarray
) -> Verdict:
    """Per-record outcome from its group's (or window's) statistics, and the group table.
    Only records in scope join a group: the others must not move its statistics."""
    import pyarrow as pa
    import pyarrow.compute as pc
    from strata13.compile.screening.stats import interval_stats

    n = cols.n
    fx, fy = NUMERIC_FIELDS[spec.x], NUMERIC_FIELDS[spec.y]
    x, y = cols.num(spec.x), cols.num(spec.y)
    src, src_vals = cols.codes("source_id")
    sec, sec_vals = cols.codes("section_id")
    keys = [src, sec]
    detail.const(in_scope & (sec < 0), "untested: no section_id")
    ok = in_scope & (sec >= 0)
    unit_vals = None
    if spec.group_by == "section-unit":
        unit, unit_vals = cols.codes("lithostrat_unit")
        detail.const(ok & (unit < 0), "untested: no lithostrat_unit to group by")
        ok &= unit >= 0
        keys.append(unit)
    pos = cols.num("position_m")
    mid = (cols.num("top_m") + cols.num("base_m")) / 2.0
    pos = np.where(np.isfinite(pos), pos, mid)
    if spec.group_by == "window":
        detail.const(ok & ~np.isfinite(pos), "untested: no position for a moving window")
        ok &= np.isfinite(pos)
    both = np.isfinite(x) & np.isfinite(y)
    detail.const(ok & ~both, f"untested: needs both {fx.label} and {fy.label}")
    ok &= both

    idx = np.flatnonzero(ok)
    combined = np.zeros(idx.size, dtype=np.int64)
    for k in keys:  # mixed-radix code of (source, section[, unit])
        combined = combined * (int(k.max(initial=0)) + 2) + (k[idx] + 1)
    p_sort = np.where(np.isfinite(pos[idx]), pos[idx], np.inf)  # no position: last
    order = np.lexsort((p_sort, combined))  # by group, then position (stable on ties)
    rec, combined, ps = idx[order], combined[order], p_sort[order]
    new_group = np.r_[True, combined[1:] != combined[:-1]] if rec.size else np.empty(0, bool)
    g = np.cumsum(new_group) - 1
    xs, ys = x[rec], y[rec]
    ng = int(new_group.sum())
    cnt = np.bincount(g, minlength=ng).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        xs = xs - (np.bincount(g, xs, ng) / cnt)[g]  # centred per group: prefix sums stay exact
        ys = ys - (np.bincount(g, ys, ng) / cnt)[g]
    pair_ok = (g[1:] == g[:-1]) & np.isfinite(ps[1:]) & np.isfinite(ps[:-1])
    starts = np.flatnonzero(new_group)
    ends = np.r_[starts[1:], g.size].astype(np.int64)
    if spec.group_by == "window":
        width = _window_width(spec)
        span = np.maximum(ps[ends - 1] - ps[starts], 0.0) if g.size else np.empty(0)
        offset = np.r_[0.0, np.cumsum(span + 2.0 * width + 1.0)][:-1] - ps[starts]
        key = ps + offset[g]
        half = width / 2.0
        lo = np.searchsorted(key, key - half, side="left")
        hi = np.searchsorted(key, key + half, side="right")
        owner = np.arange(g.size)  # interval i belongs to sorted record i
        centre = ps
    else:
        lo, hi = starts, ends
        owner = np.repeat(np.arange(ng), ends - starts)
        centre = np.full(ng, np.nan)
    st = interval_stats(xs, ys, pair_ok, lo, hi, spec.lag1_correction)

    small = st.n < spec.min_n
    flat = ~small & ~np.isfinite(st.r)
    thin = ~small & ~flat & ~np.isfinite(st.p)
    tested = ~small & ~flat & ~thin
    warned = tested & (st.r >= spec.min_r) & (st.p < spec.alpha)
    broke = FAIL if rule.severity == "fail" else WARN
    icode = np.where(warned, broke, np.where(tested, PASS, UNTESTED)).astype(np.int8)

    # group labels: source/section[/unit][@position]
    first = rec[lo] if g.size else rec
    src_t, sec_t = _decode(src_vals, src[first]), _decode(sec_vals, sec[first])
    label = _join(pc.fill_null(src_t, "(no source)"), "/", sec_t)
    unit_t = pa.nulls(len(first), pa.string())
    if unit_vals is not None:
        unit_t = _decode(unit_vals, keys[2][first])
        label = _join(label, "/", unit_t)
    if spec.group_by == "window":
        label = _join(label, " @ ", _num_text(centre), " m")
    r_t, n_t, ne_t = (
        _num_text(st.r, 3),
        pc.cast(pa.array(st.n), pa.string()),
        _num_text(st.n_eff, 3),
    )
    stats_t = _join(
        label,
        ": r = ",
        r_t,
        ", r² = ",
        _num_text(st.r**2, 3),
        ", n = ",
        n_t,
        ", n_eff = ",
        ne_t,
        ", p = ",
        _num_text(st.p, 3),
    )
    rule_t = f"warn if r ≥ {_fmt(spec.min_r)} and p < {_fmt(spec.alpha)}"
    word = "fails" if rule.severity == "fail" else "warning"
    itext = pc.if_else(
        pa.array(warned),
        _join(stats_t, f" — {word} ({rule_t})"),
        _join(stats_t, f" — passes ({rule_t})"),
    )
    itext = pc.if_else(
        pa.array(small),
        _join(label, ": untested: n = ", n_t, f" records, fewer than min_n = {spec.min_n}"),
        itext,
    )
    itext = pc.if_else(
        pa.array(flat), _join(label, ": untested: no spread in ", fx.label, " or ", fy.label), itext
    )
    itext = pc.if_else(
        pa.array(thin),
        _join(label, ": untested: too few effectively independent records (n_eff = ", ne_t, ")"),
        itext,
    )

    code = np.full(n, UNTESTED, dtype=np.int8)
    code[rec] = icode[owner]
    texts = pc.take(itext, pa.array(owner)) if owner.size else pa.array([], pa.string())
    full = pa.nulls(n, pa.string())
    if rec.size:
        inv = np.full(n, -1, dtype=np.int64)
        inv[rec] = np.arange(rec.size)
        full = pc.take(texts, pa.array(inv, mask=inv < 0))
    detail.dynamic(ok if detail.keep_all else ok & (code != PASS), full)

    groups = pa.table(
        {
            "rule": pa.array([rule.name] * len(lo), pa.string()),
            "group": label,
            "source_id": src_t,
            "section_id": sec_t,
            "lithostrat_unit": unit_t,
            "centre_m": pa.array(centre, from_pandas=True),
            "n": pa.array(st.n, pa.int64()),
            "n_eff": pa.array(st.n_eff, from_pandas=True),
            "r": pa.array(st.r, from_pandas=True),
            "r2": pa.array(st.r**2, from_pandas=True),
            "p": pa.array(st.p, from_pandas=True),
            "rho1_x": pa.array(st.rho_x, from_pandas=True),
            "rho1_y": pa.array(st.rho_y, from_pandas=True),
            "outcome": pa.DictionaryArray.from_arrays(pa.array(icode), pa.array(OUTCOMES)).cast(
                pa.string()
            ),
        }
    )
    return Verdict(code, groups)


def _window_width(spec: Covariance) -> float:
    """The moving window's width in metres. The rule-file parser requires window_m with
    group_by "window"; a Covariance built by hand without one is refused, not guessed."""
    if spec.window_m is None:
        raise ValueError('a covariance rule with group_by = "window" needs window_m')
    return spec.window_m


# --- the public functions --------------------------------------------------------------


def _as_table(records: Any) -> pa.Table:
    import pyarrow as pa

    if isinstance(records, pa.Table):
        return records
    try:
        import pandas as pd
    except ImportError:  # pragma: no cover - pandas is a dependency
        pd = None
    if pd is not None and isinstance(records, pd.DataFrame):
        return pa.Table.from_pandas(records, preserve_index=False)
    raise TypeError("records must be a pyarrow Table or a pandas DataFrame")


def _group_schema() -> pa.Schema:
    import pyarrow as pa

    return pa.schema(
        [
            ("rule", pa.string()),
            ("group", pa.string()),
            ("source_id", pa.string()),
            ("section_id", pa.string()),
            ("lithostrat_unit", pa.string()),
            ("centre_m", pa.float64()),
            ("n", pa.int64()),
            ("n_eff", pa.float64()),
            ("r", pa.float64()),
            ("r2", pa.float64()),
            ("p", pa.float64()),
            ("rho1_x", pa.float64()),
            ("rho1_y", pa.float64()),
            ("outcome", pa.string()),
        ]
    )


def evaluate(
    records: Any, rules: RuleSet, untested_passes: bool = False, all_details: bool = True
) -> Screening:
    """Screen ``records`` (a pyarrow Table or pandas DataFrame with the stored columns).

    ``all_details`` False (the derive engine) leaves passes and "not applicable" without a
    detail text and keeps rule and outcome dictionary-encoded: the long results of a
    million records then fit in a fraction of the memory.

    Returns ``Screening(results, overall, groups)``: the long results (record_id, rule,
    outcome, detail), the overall status per record in input order (record_id, screen) and
    the covariance statistics per group (rule, group, source_id, section_id,
    lithostrat_unit, centre_m, n, n_eff, r, r2, p, rho1_x, rho1_y, outcome).
    """
    import pyarrow as pa
    from strata13.compile.screening.kinds import kind_of  # kinds imports this module

    table = _as_table(records)
    if "record_id" not in table.column_names:
        raise DomainError(
            "the records to screen have no record_id column.",
            "Screen records read from a store or built by validate.",
        )
    cols = _Columns(table)
    n = cols.n
    rid = cols.text("record_id")
    codes: list[np.ndarray] = []
    details: list[pa.Array] = []
    group_tables: list[pa.Table] = []
    for rule in rules.rules:
        detail = _Detail(n, all_details)
        outside, unknown = _scope(rule, cols, detail)
        in_scope = ~outside & ~unknown
        verdict = kind_of(rule.spec).screen(rule, rule.spec, cols, detail, in_scope)
        if verdict.groups is not None:
            group_tables.append(verdict.groups)
        code = np.where(outside, NA, np.where(unknown, UNTESTED, verdict.codes)).astype(np.int8)
        codes.append(code)
        details.append(detail.build())

    k = len(codes)
    outcomes = pa.array(OUTCOMES, pa.string())
    names = pa.array([r.name for r in rules.rules], pa.string())
    coded = pa.dictionary(pa.int8(), pa.string())

    def text(arr: pa.Array) -> pa.Array:
        return arr.cast(pa.string()) if all_details else arr

    batches = [
        pa.record_batch(
            {
                "record_id": rid,
                "rule": text(
                    pa.DictionaryArray.from_arrays(pa.array(np.full(n, i, np.int8)), names)
                ),
                "outcome": text(pa.DictionaryArray.from_arrays(pa.array(code), outcomes)),
                "detail": det,
            }
        )
        for i, (code, det) in enumerate(zip(codes, details, strict=True))
    ]
    kind = pa.string() if all_details else coded
    schema = pa.schema(
        [
            ("record_id", pa.string()),
            ("rule", kind),
            ("outcome", kind),
            ("detail", pa.string() if all_details else pa.dictionary(pa.int32(), pa.string())),
        ]
    )
    results = pa.Table.from_batches(batches, schema)

    m = np.stack(codes) if k else np.empty((0, n), np.int8)
    status, reason = record_states(m, rules, cols.text("component"), untested_passes)
    overall = pa.table(
        {
            "record_id": rid,
            "screen": pa.DictionaryArray.from_arrays(pa.array(status), pa.array(OVERALL)).cast(
                pa.string()
            ),
            "reason": reason.cast(pa.string()) if all_details else reason,
        }
    )
    groups = (
        pa.concat_tables([t.cast(_group_schema()) for t in group_tables])
        if group_tables
        else _group_schema().empty_table()
    )
    return Screening(results, overall, groups)


def summarise(records: Any, results: pa.Table) -> pa.Table:
    """Counts per (source_id, section_id, rule, outcome), sorted, from the long results.

    Columns: source_id, section_id, rule, outcome, n. A result whose record is not among
    ``records`` counts under a null source and section.
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    cols = _Columns(_as_table(records))
    rid = cols.text("record_id")
    where = []
    for chunk in results.column("record_id").chunks:  # evaluate's chunks are in record order
        if len(chunk) == cols.n and chunk.equals(rid):
            where.append(np.arange(cols.n, dtype=np.int64))
        else:
            hit = pc.index_in(chunk.cast(pa.string()), value_set=rid)
            where.append(pc.fill_null(hit, -1).to_numpy(zero_copy_only=False).astype(np.int64))
    row = np.concatenate(where) if where else np.empty(0, np.int64)
    src, src_vals = cols.codes("source_id")
    sec, sec_vals = cols.codes("section_id")
    found = row >= 0
    s_code = np.where(found, src[np.maximum(row, 0)], -1) + 1
    t_code = np.where(found, sec[np.maximum(row, 0)], -1) + 1
    parts = []
    for name in ("rule", "outcome"):
        enc = pc.dictionary_encode(results.column(name).combine_chunks().cast(pa.string()))
        parts.append((enc.indices.to_numpy(zero_copy_only=False).astype(np.int64), enc.dictionary))
    (r_code, r_vals), (o_code, o_vals) = parts
    radix = [len(sec_vals) + 1, len(r_vals) + 1, len(o_vals) + 1]
    key = ((s_code * radix[0] + t_code) * radix[1] + r_code) * radix[2] + o_code
    uniq, counts = np.unique(key, return_counts=True)
    o, rest = uniq % radix[2], uniq // radix[2]
    r, rest = rest % radix[1], rest // radix[1]
    t, s_ = rest % radix[0], rest // radix[0]

    def back(values: pa.Array, code: np.ndarray, shift: int) -> pa.Array:
        c = code - shift
        return pc.take(values, pa.array(c, mask=c < 0))

    out = pa.table(
        {
            "source_id": back(src_vals, s_, 1),
            "section_id": back(sec_vals, t, 1),
            "rule": back(r_vals, r, 0),
            "outcome": back(o_vals, o, 0),
            "n": pa.array(counts, pa.int64()),
        }
    )
    order = pc.sort_indices(
        out,
        [
            ("source_id", "ascending"),
            ("section_id", "ascending"),
            ("rule", "ascending"),
            ("outcome", "ascending"),
        ],
    )
    return out.take(order)
