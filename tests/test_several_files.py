"""One mapping, several files of one source (a lab's run files): `ingest FILE --map MAP`
reads FILE with the mapping's layout, and re-ingesting one file replaces only its rows."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest
from strata13.compile import api
from strata13.compile.demo import demo_folder

from strata13.errors import DomainError
from tests.conftest import tree_bytes

SHEETS = demo_folder() / "sheets"
RUNS = SHEETS / "orvanne_lab_run_2024.csv"
MAPPING = SHEETS / "orvanne_lab_run_2024.toml"


def split(tmp_path: Path) -> tuple[Path, Path, int]:
    """The demo's run file cut into one file a run; returns their paths and the sample rows."""
    head, *rows = RUNS.read_text(encoding="utf-8").splitlines()
    r1 = tmp_path / "run_r1.csv"
    r2 = tmp_path / "run_r2.csv"
    r1.write_text("\n".join([head, *(r for r in rows if r.startswith("R1,"))]) + "\n")
    r2.write_text("\n".join([head, *(r for r in rows if r.startswith("R2,"))]) + "\n")
    samples = sum(1 for r in rows if not r.endswith("standard"))
    return r1, r2, samples


def records(store: Path) -> list[tuple]:
    return api.sql(
        api.open_store(store),
        "SELECT file_name, sample_id, d13c_carb_reported FROM records ORDER BY 2",
    ).rows


def test_two_run_files_of_one_source_both_stay(tmp_path: Path) -> None:
    r1, r2, n_samples = split(tmp_path)
    shutil.copy(MAPPING, tmp_path / MAPPING.name)
    store = tmp_path / "store"
    first = api.ingest(store, r1, tmp_path / MAPPING.name)
    second = api.ingest(store, r2, tmp_path / MAPPING.name)
    assert (first.added, second.added, second.removed) == (6, 6, 0)
    rows = records(store)
    assert len(rows) == n_samples == 12
    assert {f for f, _, _ in rows} == {"run_r1.csv", "run_r2.csv"}
    src = api.sql(api.open_store(store), "SELECT file_name, n_records FROM sources").rows
    assert src == [("run_r1.csv; run_r2.csv", 12)]
    # the whole source matches one ingest of the uncut file, value for value
    whole = tmp_path / "whole"
    api.ingest(whole, RUNS, MAPPING)
    cut = {(s, v) for _, s, v in rows}
    assert cut == {(s, v) for _, s, v in records(whole)}
    d13c = "SELECT sample_id, round(d13c_carb, 9) FROM records ORDER BY 1"
    assert api.sql(api.open_store(store), d13c).rows == api.sql(api.open_store(whole), d13c).rows

    # re-ingesting the first file with one value changed replaces only its rows
    r1.write_text(r1.read_text().replace("TG-03,2.25,1.291", "TG-03,2.25,1.301"))
    again = api.ingest(store, r1, tmp_path / MAPPING.name)
    assert (again.added, again.removed, again.changed) == (0, 0, 1)
    after = records(store)
    assert [r for r in after if r[0] == "run_r2.csv"] == [r for r in rows if r[0] == "run_r2.csv"]
    assert ("run_r1.csv", "TG-03", 1.301) in after


def test_an_analysis_already_stored_from_another_file_is_refused(tmp_path: Path) -> None:
    r1, r2, _ = split(tmp_path)
    store = tmp_path / "store"
    api.ingest(store, r1, MAPPING)
    line = next(r for r in r1.read_text().splitlines() if r.startswith("R1,4,"))
    r2.write_text(r2.read_text() + line + "\n")
    before = tree_bytes(store)
    with pytest.raises(DomainError, match=r"sample 'TG-02' .* is already stored .* run_r1.csv"):
        api.ingest(store, r2, MAPPING)
    assert tree_bytes(store) == before
