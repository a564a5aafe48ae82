"""One screen state per record from its rules' outcomes and the rule set's minimum evidence.

Four states, stored as such: ``fail`` (a rule of severity fail failed), ``untested`` (the
minimum evidence for the record's component was not tested: the reason names the missing
rules), ``warn`` (evidence met, nothing failed, a warn rule was broken) and ``pass``
(evidence met, nothing failed or warned). A rule counts as tested when its outcome is pass,
warn or fail; "not applicable" and "untested" do not (with ``untested_passes`` an untested
rule counts as a tested pass, the user's explicit choice). Without ``[[evidence]]`` for a
component, one applicable rule tested is enough. The evidence entries are rules of thumb
too: the user's judgement and their lab's practice decide.

Reasons are built once per distinct combination (component entry, failed and warned rules,
missing groups), so a million records cost a handful of strings.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import pyarrow as pa
    from strata13.compile.screening.rules import Evidence, RuleSet

STATES = ("pass", "warn", "fail", "untested")
PASS, WARN, FAIL, UNTESTED = range(4)


def overall(
    m: np.ndarray, rules: RuleSet, component: pa.Array, untested_passes: bool = False
) -> tuple[np.ndarray, pa.Array]:
    """State codes (index into STATES) and a reason per record.

    ``m`` holds the outcome codes, one row per rule (in ``rules.rules`` order), one column
    per record; ``component`` the records' component terms (null allowed).
    """
    import pyarrow as pa
    import pyarrow.compute as pc
    from strata13.compile.screening.evaluate import FAIL as _FAIL
    from strata13.compile.screening.evaluate import NA as _NA
    from strata13.compile.screening.evaluate import PASS as _PASS
    from strata13.compile.screening.evaluate import UNTESTED as _UNTESTED
    from strata13.compile.screening.evaluate import WARN as _WARN

    k, n = m.shape
    tested = (m == _PASS) | (m == _WARN) | (m == _FAIL)
    if untested_passes:
        tested |= m == _UNTESTED
    failed, warned = m == _FAIL, m == _WARN
    applicable = (m != _NA).any(axis=0) if k else np.zeros(n, bool)

    entries = rules.evidence
    enc = pc.dictionary_encode(component.cast(pa.string()))
    codes = pc.fill_null(enc.indices, -1).to_numpy(zero_copy_only=False).astype(np.int64)
    terms = enc.dictionary.to_pylist()
    index = {name: i for i, name in enumerate(r.name for r in rules.rules)}
    # entry per distinct component (len(entries) = none covers it), then per record
    per_term = [_entry_index(entries, rules, t) for t in terms] + [
        _entry_index(entries, rules, None)
    ]
    entry = np.asarray(per_term, np.int64)[codes] if n else np.empty(0, np.int64)
    width = max((len(e.requires) for e in entries), default=0)
    missing = np.zeros((width, n), bool)
    for e_i, e in enumerate(entries):
        rows = entry == e_i
        if not rows.any():
            continue
        for g_i, group in enumerate(e.requires):
            got = tested[[index[g] for g in group]].any(axis=0)
            missing[g_i] = np.where(rows, ~got, missing[g_i])
    no_entry = entry == len(entries)
    met = np.where(no_entry, tested.any(axis=0) if k else False, ~missing.any(axis=0))

    any_failed = failed.any(axis=0) if k else np.zeros(n, bool)
    any_warned = warned.any(axis=0) if k else np.zeros(n, bool)
    state = np.where(
        any_failed, FAIL, np.where(~met, UNTESTED, np.where(any_warned, WARN, PASS))
    ).astype(np.int8)

    # one reason per distinct (state, entry, applicable, failed, warned, missing) row
    bits = np.concatenate(
        [state[None, :] == FAIL, applicable[None, :], failed, warned, missing], axis=0
    )
    key = np.concatenate(
        [
            np.stack([state.astype(np.uint8), entry.astype(np.uint8)]),
            np.packbits(bits, axis=0),
        ]
    ).T
    if n == 0:
        return state, pa.array([], pa.string())
    rows_u, inverse = np.unique(np.ascontiguousarray(key), axis=0, return_inverse=True)
    first = np.zeros(len(rows_u), np.int64)
    first[inverse.ravel()] = np.arange(n)  # a record of each combination (all alike)
    names = [r.name for r in rules.rules]
    reasons = [
        _reason(
            int(state[j]),
            entries[int(entry[j])] if entry[j] < len(entries) else None,
            bool(applicable[j]),
            [names[i] for i in np.flatnonzero(failed[:, j])],
            [names[i] for i in np.flatnonzero(warned[:, j])],
            np.flatnonzero(missing[:, j]).tolist(),
        )
        for j in first
    ]
    return state, pa.DictionaryArray.from_arrays(
        pa.array(inverse.ravel().astype(np.int32)), pa.array(reasons, pa.string())
    )


def _entry_index(entries: tuple[Evidence, ...], rules: RuleSet, component: str | None) -> int:
    e = rules.evidence_for(component)
    return len(entries) if e is None else entries.index(e)


def _reason(
    state: int,
    entry: Evidence | None,
    applicable: bool,
    failed: list[str],
    warned: list[str],
    missing: list[int],
) -> str:
    """Why a record has its state, in one line."""
    also = f"; warned by {', '.join(warned)}" if warned else ""
    if state == FAIL:
        return f"fail: {', '.join(failed)}" + also
    if state == UNTESTED:
        if entry is None:
            why = (
                "no applicable rule could be tested"
                if applicable
                else "no rule applies (outside every rule's scope)"
            )
            return f"untested: {why}" + also
        needs = "; ".join(
            ("needs " if len(g) == 1 else "needs one of ") + ", ".join(g)
            for g in (entry.requires[i] for i in missing)
        )
        return f"untested: evidence ({_entry_name(entry)}) not tested: {needs}" + also
    tail = f"; evidence tested ({_entry_name(entry)})" if entry is not None else ""
    if state == WARN:
        return f"warn: {', '.join(warned)}" + tail
    return "pass: nothing failed or warned" + tail


def _entry_name(entry: Evidence) -> str:
    return entry.description or (
        ", ".join(entry.components) if entry.components else "every other component"
    )
