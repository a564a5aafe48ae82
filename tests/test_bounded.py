"""Bounded answers and exact codes: bad option values exit 2, empty filter values are
refused, redate reports paleolatitude changes in degrees, an unclosed quote is reported as
such, and `compact` removes the data files no version references while every version stays
readable."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import pytest
from strata13.compile import api

from tests.conftest import run_cli, tree_bytes
from tests.test_store import MAPPING


@pytest.mark.parametrize(
    "args,said",
    [
        (["--fraction", "5"], "--fraction 5 is not between 0 and 1 (exclusive)."),
        (["--fraction", "nan"], "--fraction nan is not between 0 and 1 (exclusive)."),
        (["--direction", "up"], "--direction 'up' is not one of auto, negative, positive."),
    ],
)
def test_bad_excursion_options_exit_2(demo_store: Path, args: list[str], said: str) -> None:
    res = run_cli("excursion", "--interval", "Toarcian", *args, "--store", demo_store)
    assert res.code == 2 and res.err.splitlines()[0] == f"error: {said}", res.err


@pytest.mark.parametrize("flag", ["--interval", "--region", "--paleolat", "--time-scale"])
def test_an_empty_filter_value_is_refused_not_ignored(demo_store: Path, flag: str) -> None:
    res = run_cli("query", flag, "", "--store", demo_store)
    assert res.code == 2 and res.err.splitlines()[0] == f"error: {flag} is empty.", res.err
    assert res.out == ""


def test_redate_reports_paleolatitude_changes_in_degrees(demo_store: Path) -> None:
    from strata13.compile.demo import demo_folder

    folder = demo_folder()
    placed = run_cli(
        "replace-rotations",
        folder / "rotations.toml",
        folder / "plates.geojson",
        "--store",
        demo_store,
    )
    assert placed.code == 0, placed.err
    res = run_cli("redate", "--time-scale", "ICS2012", "--store", demo_store)
    assert res.code == 0, res.err
    lines = {
        m.group(1): m.group(2)
        for m in re.finditer(
            r"  (\w+): \d+ values changed; largest change [0-9.e+-]+( Myr|°| ‰)", res.err
        )
    }
    assert lines.get("age_ma") == " Myr" and lines.get("paleolat") == "°", res.err
    assert "paleolat" in lines and not re.search(r"paleol\w+: .* Myr", res.err)


def test_an_unclosed_quote_is_reported_as_such_not_as_no_data_rows(tmp_path: Path) -> None:
    (tmp_path / "q.csv").write_text('Sample,Height,d13C\n"a,1,1.0\n', encoding="utf-8")
    (tmp_path / "o.toml").write_text(MAPPING.format(file="q.csv"), encoding="utf-8")
    store = api.init_store(tmp_path / "st")
    before = tree_bytes(store.path)
    res = run_cli("ingest", "--map", tmp_path / "o.toml", "--store", store.path)
    assert res.code == 1, res.err
    assert "unclosed quote" in res.err and "no data rows" not in res.err
    assert tree_bytes(store.path) == before


def _counts(store: api.Store) -> list[int]:
    return [len(api.query(store, as_of=v)) for v in range(1, store.latest_version() + 1)]


def test_compact_removes_unreferenced_files_and_keeps_every_version(demo_store: Path) -> None:
    store = api.open_store(demo_store)
    counts = _counts(store)
    data = demo_store / "data" / "main"
    live = next((data / "analyses").glob("*.parquet"))
    left = [data / "analyses" / "strata13-killed-1.parquet", data / "sources" / "killed-2.parquet"]
    shutil.copy(live, left[0])  # what a writer killed between writing and committing leaves
    shutil.copy(next((data / "sources").glob("*.parquet")), left[1])
    with_orphans = tree_bytes(demo_store)

    res = run_cli("compact", "--dry-run", "--store", demo_store)
    assert res.code == 0 and "dry run: 2 unreferenced data files" in res.err, res.err
    assert tree_bytes(demo_store) == with_orphans

    res = run_cli("compact", "--no-merge", "--store", demo_store)
    assert res.code == 0 and res.err.startswith("removed 2 data files"), res.err
    assert not any(p.exists() for p in left)
    after = tree_bytes(demo_store)
    for p in left:
        with_orphans.pop(str(p.relative_to(demo_store)))
    assert after == with_orphans  # nothing else touched, no new version
    assert _counts(store) == counts
    assert run_cli("compact", "--no-merge", "--store", demo_store).err.startswith("no unreferenced")


def test_compact_merges_small_files_and_every_version_reads_the_same_rows(
    demo_store: Path, tmp_path: Path
) -> None:
    store = api.open_store(demo_store)
    latest = store.latest_version()
    before = {v: api.query_arrow(store, as_of=v) for v in range(1, latest + 1)}
    files = len(list((demo_store / "data").rglob("*.parquet")))
    assert run_cli("export", "--out", tmp_path / "a", "--as-of", 3, "--store", demo_store).code == 0
    res = run_cli("compact", "--store", demo_store)
    assert res.code == 0, res.err
    assert f"recorded as version {latest + 2}" in res.err, res.err
    store = api.open_store(demo_store)
    for v, table in before.items():
        assert api.query_arrow(store, as_of=v).equals(table), v
    assert api.query_arrow(store).equals(before[latest])
    assert len(list((demo_store / "data").rglob("*.parquet"))) < files / 2
    last = api.history(store)[-1]
    assert (last.version, last.command) == (latest + 2, "compact")
    assert last.summary["merge_version"] == latest + 1
    assert last.summary["data_files_after"] < last.summary["data_files_before"]
    # an old version's export is byte for byte what it was before the merge
    assert run_cli("export", "--out", tmp_path / "b", "--as-of", 3, "--store", demo_store).code == 0
    assert tree_bytes(tmp_path / "a") == tree_bytes(tmp_path / "b")


def test_a_write_merges_the_files_once_the_store_holds_many(
    demo_store: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from strata13.compile.store import files

    store = api.open_store(demo_store)
    rows = api.query_arrow(store)
    with store.transaction("test", "a write") as tx:
        tx.record({"test": 1}, "")
    assert api.history(store)[-1].command == "test"  # under the threshold: no merge
    monkeypatch.setattr(files, "AUTO_MERGE_FILES", 5)
    with store.transaction("test", "another write") as tx:
        tx.record({"test": 2}, "")
    last = api.history(store)[-1]
    assert last.command == "compact" and last.version == tx.version + 2
    assert api.query_arrow(store).equals(rows)
