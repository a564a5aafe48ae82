"""Shared fixtures: the demo folder and a built demo store (built once per session)."""

from __future__ import annotations

import shutil
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
    return {str(p.relative_to(path)): p.read_bytes() for p in sorted(path.rglob("*"))
            if p.is_file() and p.name != "writer.lock" and not p.name.endswith(("-wal", "-shm"))}
