"""The benchmark runner's inputs match the schema and its query case runs (small sizes).

Times are never asserted here; the runner itself compares them in benchmarks/.
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

BENCH = Path(__file__).resolve().parents[1] / "benchmarks"


@pytest.fixture()
def bench(tmp_path: Path, monkeypatch: pytest.MonkeyPatch):  # type: ignore[no-untyped-def]
    monkeypatch.syspath_prepend(str(BENCH))
    import generate
    import run

    monkeypatch.setattr(generate, "DATA", tmp_path / "data")
    yield generate, run
    for name in ("generate", "run", "table"):
        sys.modules.pop(name, None)


def test_generated_sheet_ingests_whole(bench, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    from strata13.compile import api

    generate, _ = bench
    sheet = generate.make_sheet(600, tmp_path / "sheet")
    store = api.init_store(tmp_path / "store")
    result = api.ingest(store, None, sheet.mapping)
    assert result.version is not None
    assert result.report.rows_valid == 600 and not result.report.errors


def test_query_case_gives_a_row_not_an_error(bench) -> None:  # type: ignore[no-untyped-def]
    _, run = bench
    outcome = run.case_query(20_000, 1)
    verdicts = [r.verdict for r in outcome.rows]
    assert verdicts and "ERROR" not in verdicts, outcome.notes
