"""Fuzz: 320 seeded hostile ingests (sheets, workbooks, mappings, odd paths; see
tests/hostile_cases.py) through the command line, in four chunks the workers share. Each
must be answered honestly — no traceback, no internal error, exit 0, 1 or 2, the store's
files unchanged unless a version landed (a dry run creates nothing) — within 20 s (a hang
fails the case)."""

from __future__ import annotations

import collections
import signal
from pathlib import Path

import pytest
from strata13.compile import api

from tests.conftest import tree_bytes
from tests.hostile_cases import cases, judge

SEED = 19
N = 320
CHUNKS = 4
CASE_LIMIT_S = 20


@pytest.mark.parametrize("chunk", range(CHUNKS))
def test_hostile_ingests_are_answered_honestly(tmp_path: Path, chunk: int) -> None:
    store = api.init_store(tmp_path / "st").path

    def too_long(signum: int, frame: object) -> None:
        raise TimeoutError(f"a case ran longer than {CASE_LIMIT_S} s")

    previous = signal.signal(signal.SIGALRM, too_long)
    outcomes = []
    try:
        for k, case in enumerate(cases(SEED, N)):
            if k % CHUNKS != chunk:
                continue
            signal.alarm(CASE_LIMIT_S)
            try:
                outcomes.append(judge(case, tmp_path / case.name, store, tree_bytes))
            finally:
                signal.alarm(0)
    finally:
        signal.signal(signal.SIGALRM, previous)
    assert [(o.name, o.problems) for o in outcomes if o.problems] == []
    assert len(outcomes) == N // CHUNKS
    assert {o.code for o in outcomes} == {0, 1, 2}  # the corpus reaches every answer
    assert any(o.committed for o in outcomes)


def test_the_corpus_holds_every_kind_and_is_deterministic() -> None:
    first = [(c.name, c.files, c.args) for c in cases(SEED, N)]
    assert first == [(c.name, c.files, c.args) for c in cases(SEED, N)]
    kinds = collections.Counter(name.split("-", 1)[1] for name, _, _ in first)
    assert set(kinds) == {"csv", "xlsx", "ods", "mapping", "path", "valid"}
    assert min(kinds.values()) >= 8, kinds
