"""The store: refusal leaves it unchanged, re-ingest diffs by record id, versions, export
reproducibility, the sql guard, concurrency and a kill -9 during a commit."""

from __future__ import annotations

import hashlib
import json
import multiprocessing as mp
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from strata13.compile import api

from strata13.errors import (
    DomainError,
    InstructionError,
    QueryRefused,
    RefusedError,
    ValidationFailed,
)
from tests.conftest import tree_bytes

MAPPING = """
[source]
id = "obrien-delta-2019"
citation = "O'Brien–Δ 2019 (invented)"
[table]
file = "{file}"
[columns]
"Sample" = "sample_id"
"Height" = {{ field = "position", unit = "m" }}
"d13C" = {{ field = "d13c_carb", scale = "VPDB" }}
[constants]
section_id = "O'Brien–Δ 2019"
position_kind = "height"
[[localities]]
id = "l1"
lat = 10.0
lon = 20.0
"""


def write_source(folder: Path, rows: list[tuple[str, float, str]], name: str = "o.csv") -> Path:
    (folder / name).write_text(
        "Sample,Height,d13C\n" + "".join(f"{s},{h},{d}\n" for s, h, d in rows), encoding="utf-8"
    )
    m = folder / "o.toml"
    m.write_text(MAPPING.format(file=name), encoding="utf-8")
    return m


def test_reingest_reports_added_removed_changed_and_keeps_ids(
    tmp_path: Path, catalog: str | None
) -> None:
    m = write_source(tmp_path, [("a", 1, "1.0"), ("b", 2, "1.5"), ("c", 3, "2.0")])
    store = api.init_store(tmp_path / "st", catalog=catalog)
    first = api.ingest(store, None, m)
    assert (first.added, first.removed, first.changed) == (3, 0, 0)
    before = api.query(store)
    ids_before = dict(zip(before["sample_id"], before["record_id"], strict=True))
    m = write_source(tmp_path, [("a", 1, "1.0"), ("b", 2, "9.9"), ("d", 4, "0.5")])
    second = api.ingest(store, None, m)
    assert (second.added, second.removed, second.changed) == (1, 1, 1)
    after = api.query(store)
    assert dict(zip(after["sample_id"], after["record_id"], strict=False))["a"] == ids_before["a"]
    assert dict(zip(after["sample_id"], after["record_id"], strict=False))["b"] == ids_before["b"]
    again = api.ingest(store, None, m)
    assert again.unchanged and again.version is None


def test_refused_ingest_leaves_store_bytes_unchanged(tmp_path: Path, catalog: str | None) -> None:
    m = write_source(tmp_path, [("a", 1, "1.0")])
    store = api.init_store(tmp_path / "st", catalog=catalog)
    api.ingest(store, None, m)
    before = tree_bytes(store.path)
    m = write_source(tmp_path, [("a", 1, "1.0"), ("b", 2, "abc"), ("", 3, "1")])
    with pytest.raises(ValidationFailed) as err:
        api.ingest(store, None, m)
    assert {i.cell for i in err.value.report.errors} >= {"C3", "A4"}
    assert tree_bytes(store.path) == before


def test_keep_valid_reconciles_counts(tmp_path: Path) -> None:
    (tmp_path / "k.csv").write_text(
        "Sample,Height,d13C\na,1,1.0\n\nb,2,abc\nc,3,2\n", encoding="utf-8"
    )
    (tmp_path / "o.toml").write_text(MAPPING.format(file="k.csv"), encoding="utf-8")
    store = api.init_store(tmp_path / "st")
    r = api.ingest(store, None, tmp_path / "o.toml", keep_valid=True)
    assert (r.committed, r.quarantined, r.report.rows_blank) == (2, 1, 1)
    assert r.report.rows_read == r.committed + r.quarantined + r.report.rows_blank
    assert api.sql(store, "SELECT count(*) FROM quarantine").rows == [(1,)]


def test_pending_values_are_not_copied(tmp_path: Path) -> None:
    # δ13C on VPDB-LSVEC needs the authors' anchors: pending, never copied
    m = write_source(tmp_path, [("a", 1, "-30.0")])
    m.write_text(m.read_text().replace('scale = "VPDB"', 'scale = "VPDB-LSVEC"'))
    s2 = api.init_store(tmp_path / "st")
    r = api.ingest(s2, None, m)
    assert r.pending["d13c_carb"] == 1
    row = api.query(s2).iloc[0]
    assert row.d13c_carb != row.d13c_carb and row.d13c_carb_reported == -30.0  # NaN: not copied
    assert row.d13c_carb_status.startswith("pending")


def test_vsmow_oxygen_is_harmonised_with_the_iupac_relation(demo_store: Path) -> None:
    # δ18O(VPDB) = 0.97001 δ18O(VSMOW) − 29.99 (Brand et al. 2014; IUPAC/CIAAW)
    df = api.query(api.open_store(demo_store), api.Filters(source=["quillar-2011"]))
    df = df[df.d18o_carb_reported.notna()]
    assert len(df) == 26
    expected = 0.97001 * df.d18o_carb_reported - 29.99
    assert (abs(df.d18o_carb - expected) < 1e-9).all()
    assert set(df.d18o_carb_status) == {"harmonised"}


def test_interval_and_region_query_returns_exactly_the_matching_records(demo_store: Path) -> None:
    store = api.open_store(demo_store)
    got = api.query(
        store, api.Filters(interval=(182.5, 183.5), region=api.region(store, "northern shelf"))
    )
    everything = api.query(store)
    expected = everything[
        (everything.age_ma >= 182.5)
        & (everything.age_ma <= 183.5)
        & everything.lat.between(45.5, 49.5)
        & everything.lon.between(8.0, 14.0)
    ]
    assert sorted(got.record_id) == sorted(expected.record_id)
    assert len(got) > 0


def test_export_is_byte_stable_and_as_of_reproduces(demo_store: Path, tmp_path: Path) -> None:
    store = api.open_store(demo_store)
    a = api.export(store, tmp_path / "a")
    m = write_source(tmp_path, [("z", 1, "=cmd()"), ("y", 2, "-3.2")])
    (tmp_path / "o.csv").write_text("Sample,Height,d13C\n=cmd(),1,-3.2\n", encoding="utf-8")
    api.ingest(store, None, m)
    b = api.export(store, tmp_path / "b", as_of=a.version)
    for name in ("records.parquet", "records.csv", "bibliography.bib", "manifest.json"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()
    manifest = json.loads((tmp_path / "a" / "manifest.json").read_text())
    for f in manifest["files"]:
        digest = hashlib.sha256((tmp_path / "a" / f["path"]).read_bytes()).hexdigest()
        assert f["sha256"] == digest and len(digest) == 64
    latest = api.export(store, tmp_path / "c", api.Filters(source=["obrien-delta-2019"]))
    csv_text = (tmp_path / "c" / "records.csv").read_text()
    assert "'=cmd()" in csv_text and ",-3.2," in csv_text
    assert latest.version == b.version + 1


@pytest.mark.parametrize(
    "statement",
    [
        "DELETE FROM records",
        "COPY records TO 'x.csv'",
        "ATTACH 'x.db' AS y",
        "INSTALL httpfs",
        "SET threads = 1",
        "PRAGMA version",
        "SELECT * FROM read_csv('/etc/passwd')",
        "SELECT * FROM __ducklake_metadata_lake.ducklake_snapshot",
        "SELECT * FROM sqlite_scan('catalog.sqlite', 'ducklake_snapshot')",
        "SELECT * FROM lake.analyses",
        "SELECT 1; DROP TABLE records",
    ],
)
def test_sql_refuses_anything_but_reading_views(demo_store: Path, statement: str) -> None:
    store = api.open_store(demo_store)
    before = tree_bytes(demo_store)
    with pytest.raises(QueryRefused):
        api.sql(store, statement)
    assert tree_bytes(demo_store) == before


def test_sql_reads_views_with_row_cap(demo_store: Path) -> None:
    res = api.sql(api.open_store(demo_store), "SELECT record_id FROM records", row_cap=5)
    assert len(res.rows) == 5 and res.truncated


def _ingest_worker(store: str, mapping: str) -> None:
    api.ingest(store, None, mapping)


def two_sources(tmp_path: Path, prefix: str, rows: int) -> list[Path]:
    """Two mapping files, sources ``{prefix}-0`` and ``{prefix}-1``, in folders of their own."""
    maps = []
    for k in range(2):
        d = tmp_path / f"src{k}"
        d.mkdir()
        m = write_source(d, [(f"s{k}-{i}", i, "1.0") for i in range(rows)])
        m.write_text(m.read_text().replace("obrien-delta-2019", f"{prefix}-{k}"))
        maps.append(m)
    return maps


@pytest.mark.slow
def test_concurrent_ingests_both_land_and_a_reader_sees_one_snapshot(
    tmp_path: Path, catalog: str | None
) -> None:
    store = api.init_store(tmp_path / "st", catalog=catalog)
    maps = two_sources(tmp_path, "conc", 50)
    con, version = store.reader()
    n_before = con.execute("SELECT count(*) FROM records").fetchone()[0]
    ctx = mp.get_context("spawn")
    procs = [ctx.Process(target=_ingest_worker, args=(str(store.path), str(m))) for m in maps]
    for p in procs:
        p.start()
    for p in procs:
        p.join(120)
    # the pinned reader still sees its snapshot
    assert con.execute("SELECT count(*) FROM records").fetchone()[0] == n_before
    con.close()
    assert all(p.exitcode == 0 for p in procs)
    assert {s["source_id"] for s in api.sources(store)} == {"conc-0", "conc-1"}
    assert store.latest_version() == version + 2


HOOK = """
import contextlib, os, sys, time
from strata13.compile import api
from strata13.compile.store import lake as st

real_writer = st.Store.writer
marker, when = sys.argv[3], sys.argv[4]


class Proxy:
    def __init__(self, con):
        self._con = con

    def execute(self, sql, *args):
        if sql == "COMMIT" and when == "before":
            open(marker, "w").close()
            time.sleep(60)
        if sql == "COMMIT" and when == "fault":
            raise RuntimeError("injected fault before COMMIT")
        out = self._con.execute(sql, *args)
        if sql == "COMMIT" and when == "after":
            open(marker, "w").close()
            time.sleep(60)
        return out

    def __getattr__(self, name):
        return getattr(self._con, name)


@contextlib.contextmanager
def writer(self, *args):
    with real_writer(self, *args) as con:
        yield Proxy(con)


st.Store.writer = writer
if len(sys.argv) > 5 and sys.argv[5] == "cli":
    from strata13.cli.app import main
    main(["ingest", sys.argv[2].replace(".toml", ".csv"), "--map", sys.argv[2],
          "--store", sys.argv[1]])
api.ingest(sys.argv[1], None, sys.argv[2])
"""


@pytest.mark.slow
@pytest.mark.parametrize("when", ["before", "after"])
def test_kill_9_around_commit_is_all_or_nothing(
    tmp_path: Path, when: str, catalog: str | None
) -> None:
    m = write_source(tmp_path, [(f"a{i}", i, "1.0") for i in range(20)])
    store = api.init_store(tmp_path / "st", catalog=catalog)
    api.ingest(store, None, m)
    v = store.latest_version()
    m2 = write_source(tmp_path, [(f"b{i}", i, "2.0") for i in range(500)], "big.csv")
    marker = tmp_path / "at-commit"
    proc = subprocess.Popen(
        [sys.executable, "-c", HOOK, str(store.path), str(m2), str(marker), when]
    )
    deadline = time.monotonic() + 120
    while not marker.exists() and time.monotonic() < deadline and proc.poll() is None:
        time.sleep(0.05)
    assert marker.exists(), "the ingest never reached its commit"
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    n = api.sql(store, "SELECT count(*) FROM records").rows[0][0]
    if when == "before":
        assert store.latest_version() == v and n == 20
    else:
        assert store.latest_version() == v + 1 and n == 500
    # the store still takes writes after the crash (the kernel released the lock)
    api.ingest(store, None, write_source(tmp_path, [("c", 1, "0.1")], "c.csv"))
    assert api.sql(store, "SELECT count(*) FROM records").rows[0][0] == 1


def test_fault_before_commit_leaves_store_unchanged(tmp_path: Path, catalog: str | None) -> None:
    m = write_source(tmp_path, [(f"a{i}", i, "1.0") for i in range(5)])
    store = api.init_store(tmp_path / "st", catalog=catalog)
    api.ingest(store, None, m)
    v = store.latest_version()
    m2 = write_source(tmp_path, [("x", 1, "3.0")], "x.csv")
    files_before = sorted((store.path / "data").rglob("*.parquet"))
    res = subprocess.run(
        [sys.executable, "-c", HOOK, str(store.path), str(m2), str(tmp_path / "unused"), "fault"],
        capture_output=True,
        text=True,
    )
    assert res.returncode != 0 and "injected fault" in res.stderr
    assert store.latest_version() == v
    assert api.sql(store, "SELECT count(*) FROM records").rows == [(5,)]
    # the Parquet file written for the failed transaction was removed
    assert sorted((store.path / "data").rglob("*.parquet")) == files_before


JUNK = st.one_of(
    st.text(max_size=10),
    st.sampled_from(
        [
            "n.d.",
            "bdl",
            "<0.5",
            "−1,5",
            "1,234",
            "2021-03-04",
            "=A1",
            "—",
            "1e400",
            "nan",
            "'",
            '"',
            ";",
            "\t",
            "′",
        ]
    ),
)


@pytest.mark.slow
@settings(
    max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(cells=st.lists(st.tuples(JUNK, JUNK, JUNK), min_size=1, max_size=6))
def test_junk_cells_never_crash_ingest_and_refusal_changes_nothing(
    tmp_path: Path, cells: list
) -> None:
    import csv as _csv
    import tempfile

    folder = Path(tempfile.mkdtemp(dir=tmp_path))
    with (folder / "j.csv").open("w", encoding="utf-8", newline="") as fh:
        w = _csv.writer(fh)
        w.writerow(["Sample", "Height", "d13C"])
        w.writerows(cells)
    (folder / "o.toml").write_text(MAPPING.format(file="j.csv"), encoding="utf-8")
    store = api.init_store(folder / "st")
    before = tree_bytes(store.path)
    try:
        r = api.ingest(store, None, folder / "o.toml")
    except (RefusedError, InstructionError):
        assert tree_bytes(store.path) == before
    else:
        assert r.report.rows_read == r.committed + r.quarantined + r.report.rows_blank


@pytest.mark.slow
@pytest.mark.parametrize(
    "when,said", [("before", "nothing was written"), ("after", "commit landed as version")]
)
def test_ctrl_c_exits_130_and_tells_whether_the_commit_landed(
    tmp_path: Path, when: str, said: str
) -> None:
    store = api.init_store(tmp_path / "st")
    v = store.latest_version()
    m = write_source(tmp_path, [("a", 1, "1.0")], "o.csv")
    marker = tmp_path / "at-commit"
    proc = subprocess.Popen(
        [sys.executable, "-c", HOOK, str(store.path), str(m), str(marker), when, "cli"],
        stderr=subprocess.PIPE,
        text=True,
    )
    deadline = time.monotonic() + 120
    while not marker.exists() and time.monotonic() < deadline and proc.poll() is None:
        time.sleep(0.05)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130
    assert said in err
    assert store.latest_version() == (v if when == "before" else v + 1)


def test_a_source_is_never_replaced_by_an_empty_one(tmp_path: Path) -> None:
    store = api.init_store(tmp_path / "st")
    api.ingest(store, None, write_source(tmp_path, [("a", 1, "1.0"), ("b", 2, "1.1")]))
    before = tree_bytes(store.path)
    # every row invalid, even with --keep-valid
    (tmp_path / "k.csv").write_text("Sample,Height,d13C\na,1,abc\nb,2,xyz\n", encoding="utf-8")
    (tmp_path / "o.toml").write_text(MAPPING.format(file="k.csv"), encoding="utf-8")
    with pytest.raises(ValidationFailed, match="all 2 rows"):
        api.ingest(store, None, tmp_path / "o.toml", keep_valid=True)
    # a header without rows
    (tmp_path / "k.csv").write_text("Sample,Height,d13C\n", encoding="utf-8")
    with pytest.raises(DomainError, match="no data rows"):
        api.ingest(store, None, tmp_path / "o.toml")
    assert tree_bytes(store.path) == before


@pytest.mark.slow
def test_two_first_ingests_into_a_new_folder_both_land(tmp_path: Path) -> None:
    maps = two_sources(tmp_path, "first", 30)
    target = tmp_path / "fresh"
    ctx = mp.get_context("spawn")
    procs = [ctx.Process(target=_ingest_worker, args=(str(target), str(m))) for m in maps]
    for p in procs:
        p.start()
    for p in procs:
        p.join(120)
    assert all(p.exitcode == 0 for p in procs)
    store = api.open_store(target)
    assert {s["source_id"] for s in api.sources(store)} == {"first-0", "first-1"}
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".fresh.creating")]


def test_mapping_comment_edit_makes_no_version_but_a_citation_edit_does(tmp_path: Path) -> None:
    m = write_source(tmp_path, [("a", 1, "1.0")])
    store = api.init_store(tmp_path / "st")
    api.ingest(store, None, m)
    m.write_text(m.read_text() + "\n# a comment only\n")
    assert api.ingest(store, None, m).unchanged
    m.write_text(m.read_text().replace("(invented)", "(invented, corrected)"))
    r = api.ingest(store, None, m)
    assert not r.unchanged and (r.added, r.removed, r.changed) == (0, 0, 0)
    assert "corrected" in api.sources(store)[0]["citation"]


def test_a_store_from_before_a_new_column_reads_and_migrates(
    tmp_path: Path, catalog: str | None
) -> None:
    store = api.init_store(tmp_path / "st", catalog=catalog)
    api.ingest(store, None, write_source(tmp_path, [("a", 1, "1.0")]))
    with store.writer() as con:  # make it look like a store written before the column existed
        con.execute("ALTER TABLE lake.analyses DROP COLUMN locality_name")
    old = store.latest_version()
    assert api.sql(store, "SELECT count(locality_name) FROM records").rows == [(0,)]
    api.ingest(store, None, write_source(tmp_path, [("a", 1, "1.0"), ("b", 2, "2.0")]))
    assert api.sql(store, "SELECT count(*) FROM records").rows == [(2,)]
    assert len(api.query(store, as_of=old)) == 1  # the older version still reads


def test_stored_record_ids_are_the_documented_hash(tmp_path: Path) -> None:
    import hashlib

    from strata13.compile.check.tables import record_id

    store = api.init_store(tmp_path / "st")
    api.ingest(store, None, write_source(tmp_path, [("a", 1, "1.0")]))
    got = api.query(store).record_id.tolist()
    key = "\x1f".join(["obrien-delta-2019", "O'Brien–Δ 2019", "a", "1"])
    assert got == [record_id("obrien-delta-2019", "O'Brien–Δ 2019", "a", 1)]
    assert got == [hashlib.sha256(key.encode("utf-8")).hexdigest()[:20]]


def test_reharmonise_is_one_commit_that_reports_its_changes(demo_store: Path) -> None:
    store = api.open_store(demo_store)
    before_version = store.latest_version()
    before = api.query(store).set_index("record_id")
    same = api.reharmonise(store)
    assert same.version is None and not same.changed  # "0 changed", no new version
    res = api.reharmonise(store, vsmow_constants="Coplen-1983")
    # the VSMOW-reported values move, and so do in-house run values normalised to NBS-18,
    # whose accepted δ18O (CIAAW, +7.20 ‰ VSMOW) goes through the same relation
    raw = int(((before.d18o_carb_scale == "raw") & before.d18o_carb.notna()).sum())
    vsmow_n = int(((before.d18o_carb_scale == "VSMOW") & before.d18o_carb.notna()).sum())
    assert raw > 0 and vsmow_n == 26
    assert res.version == before_version + 1 and res.changed == {"d18o_carb": vsmow_n + raw}
    # Coplen et al. 1983 (1.03091, 30.91; from memory) vs IUPAC (0.97001, −29.99): a
    # 0.01 ‰-level difference near −2 ‰ (as the reference values note)
    assert 0 < res.max_change["d18o_carb"] < 0.01
    after = api.query(store).set_index("record_id")
    vsmow = (before.d18o_carb_scale == "VSMOW") & before.d18o_carb_reported.notna()
    expected = (after.d18o_carb_reported[vsmow] - 30.91) / 1.03091
    assert (abs(after.d18o_carb[vsmow] - expected) < 1e-9).all()
    assert (after.d13c_carb.fillna(0) == before.d13c_carb.fillna(0)).all()
    old = api.query(store, as_of=before_version).set_index("record_id")
    assert (old.d18o_carb.fillna(0) == before.d18o_carb.fillna(0)).all()
    assert api.reharmonise(store, vsmow_constants="Coplen-1983").version is None
