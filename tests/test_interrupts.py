"""Ctrl-C tells the truth for every writing command: a SIGINT sent once the new snapshot is
visible ends with exit 130 and "interrupted: the commit landed as version N" (and the store
holds version N); one sent before the commit ends with "interrupted: nothing was written"
and the store's files unchanged. The signal lands while DuckDB runs a statement (a long
query the hook adds around COMMIT), the case where DuckDB raises its own "interrupted"
error instead of KeyboardInterrupt."""

from __future__ import annotations

import csv
import signal
import sqlite3
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import pytest
from strata13.compile import api
from strata13.compile.demo import demo_folder

from tests.conftest import tree_bytes
from tests.test_store import write_source

HOOK = """
import contextlib, sys
from strata13.compile.store import lake

marker, when = sys.argv[1], sys.argv[2]
real_writer = lake.Store.writer
LONG = "SELECT sum(range % 7) FROM range(100000000000)"  # minutes: only Ctrl-C ends it


class Proxy:
    def __init__(self, con):
        self._con = con

    def execute(self, sql, *args):
        if sql == "COMMIT" and when == "before":
            open(marker, "w").close()
            self._con.execute(LONG)
        out = self._con.execute(sql, *args)
        if sql == "COMMIT" and when == "after":
            open(marker, "w").close()
            self._con.execute(LONG)
        return out

    def __getattr__(self, name):
        return getattr(self._con, name)


@contextlib.contextmanager
def writer(self, *args):
    with real_writer(self, *args) as con:
        yield Proxy(con)


lake.Store.writer = writer
from strata13.cli.app import main

main(sys.argv[3:])
"""


def _snapshots(store: Path) -> int:
    """The newest snapshot, read straight from the catalog file (a reader beside the writer)."""
    con = sqlite3.connect(f"file:{store / 'catalog.sqlite'}?mode=ro", uri=True, timeout=30)
    try:
        return int(con.execute("SELECT max(snapshot_id) FROM ducklake_snapshot").fetchone()[0])
    finally:
        con.close()


def _interrupt(
    tmp_path: Path, args: list[str], when: str, visible: Callable[[], bool]
) -> subprocess.CompletedProcess[str]:
    marker = tmp_path / f"at-commit-{when}"
    proc = subprocess.Popen(
        [sys.executable, "-c", HOOK, str(marker), when, *args],
        stderr=subprocess.PIPE,
        stdout=subprocess.DEVNULL,
        text=True,
        cwd=tmp_path,
    )
    deadline = time.monotonic() + 240
    while not marker.exists() and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.05)
    assert marker.exists(), proc.communicate(timeout=60)[1]
    assert visible()
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    return subprocess.CompletedProcess(proc.args, proc.returncode, "", err)


def _decisions(store: api.Store, path: Path) -> Path:
    pairs = api.overlaps(store)
    with path.open("w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["record_a", "record_b", "decision", "note"])
        for r in pairs.itertuples():
            w.writerow([r.record_a, r.record_b, "reject", "not the same sample"])
    return path


def _command(name: str, store: Path, tmp_path: Path) -> list[str]:
    """A command line that makes one new version of the demo store."""
    s = api.open_store(store)
    if name == "ingest":
        return ["ingest", "--map", str(write_source(tmp_path, [("a", 1, "1.0")]))]
    if name == "correct":
        rid = api.query(s).record_id.iloc[0]
        return ["correct", rid, "d13c_carb", "1.234", "--why", "typo in the table (invented)"]
    if name == "screen":
        return ["screen", "--untested", "passes"]
    if name == "redate":
        return ["redate", "--draws", "300"]
    if name == "reharmonise":
        return ["reharmonise", "--vsmow-constants", "Coplen-1983"]
    if name == "replace-rotations":
        model = tmp_path / "rotations.toml"
        text = (demo_folder() / "rotations.toml").read_text(encoding="utf-8")
        model.write_text(text.replace('name = "', 'name = "b-', 1), encoding="utf-8")
        return ["replace-rotations", str(model), str(demo_folder() / "plates.geojson")]
    if name == "overlaps":
        return ["overlaps", "--confirm", str(_decisions(s, tmp_path / "decisions.csv"))]
    raise AssertionError(name)


WRITERS = [
    "ingest",
    "correct",
    "screen",
    "redate",
    "reharmonise",
    "replace-rotations",
    "overlaps",
]


@pytest.mark.slow
@pytest.mark.parametrize("name", WRITERS)
def test_ctrl_c_once_the_snapshot_is_visible_says_the_version_landed(
    demo_store: Path, tmp_path: Path, name: str
) -> None:
    before = _snapshots(demo_store)
    args = [*_command(name, demo_store, tmp_path), "--store", str(demo_store)]
    res = _interrupt(tmp_path, args, "after", lambda: _snapshots(demo_store) == before + 1)
    assert res.returncode == 130, res.stderr
    assert res.stderr.splitlines()[-1] == (
        f"error: interrupted: the commit landed as version {before + 1}"
    ), res.stderr
    assert "Traceback" not in res.stderr
    assert api.open_store(demo_store).latest_version() == before + 1


@pytest.mark.slow
@pytest.mark.parametrize("name", ["ingest", "screen", "overlaps"])
def test_ctrl_c_before_the_commit_says_nothing_was_written(
    demo_store: Path, tmp_path: Path, name: str
) -> None:
    args = [*_command(name, demo_store, tmp_path), "--store", str(demo_store)]
    files = tree_bytes(demo_store)
    before = _snapshots(demo_store)
    res = _interrupt(tmp_path, args, "before", lambda: _snapshots(demo_store) == before)
    assert res.returncode == 130, res.stderr
    assert res.stderr.splitlines()[-1] == "error: interrupted: nothing was written", res.stderr
    assert tree_bytes(demo_store) == files


@pytest.mark.slow
def test_ctrl_c_while_init_commits_leaves_no_store(tmp_path: Path) -> None:
    """init commits in a hidden folder that is renamed into place; stopped before the
    rename, the folder is removed and nothing was written."""
    target = tmp_path / "fresh"
    res = _interrupt(tmp_path, ["init", "--store", str(target)], "after", lambda: True)
    assert res.returncode == 130, res.stderr
    assert res.stderr.splitlines()[-1] == "error: interrupted: nothing was written"
    assert not target.exists() and not list(tmp_path.glob(".fresh.creating-*"))
