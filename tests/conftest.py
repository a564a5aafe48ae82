"""Shared fixtures: the demo folder and a built demo store (built once per session)."""

from __future__ import annotations

import contextlib
import io
import shutil
from dataclasses import dataclass
from pathlib import Path

import pytest
from strata13.compile import api
from strata13.compile.demo import SHEETS, TIES, demo_folder


@pytest.fixture(scope="session")
def demo_sheets() -> Path:
    return demo_folder() / "sheets"


@pytest.fixture(scope="session")
def demo_store_session(tmp_path_factory: pytest.TempPathFactory, demo_sheets: Path) -> Path:
    path = tmp_path_factory.mktemp("demo") / "compilation"
    store = api.init_store(path, regions=demo_folder() / "regions.geojson")
    for sheet, mapping in SHEETS:
        api.ingest(store, demo_sheets / sheet, demo_sheets / mapping)
    api.ingest(store, None, demo_sheets / TIES)
    return path


@pytest.fixture()
def demo_store(demo_store_session: Path, tmp_path: Path) -> Path:
    """A private copy of the demo store (tests may write to it)."""
    dst = tmp_path / "compilation"
    shutil.copytree(demo_store_session, dst)
    return dst


def tree_bytes(path: Path) -> dict[str, bytes]:
    """Every file of a folder with its bytes (lock file excluded), to prove nothing changed."""
    return {
        str(p.relative_to(path)): p.read_bytes()
        for p in sorted(path.rglob("*"))
        if p.is_file() and p.name != "writer.lock" and not p.name.endswith(("-wal", "-shm"))
    }


@dataclass
class Ran:
    """One in-process command line: exit code and what it wrote."""

    code: int
    out: str
    err: str

    # the names of subprocess.CompletedProcess, for tests written against either
    @property
    def returncode(self) -> int:
        return self.code

    @property
    def stdout(self) -> str:
        return self.out

    @property
    def stderr(self) -> str:
        return self.err


def run_cli(*args: object) -> Ran:
    """The command line in this process (the entry point's dispatch and exit codes), which
    saves an interpreter start per call; test_cli.py runs the real thing in subprocesses."""
    from strata13.cli.app import _run

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = _run([str(a) for a in args])
    return Ran(code, out.getvalue(), err.getvalue())
