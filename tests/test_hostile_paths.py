"""Paths that are not regular files — a named pipe, a symlink loop, an embedded NUL, a
300-character name, a folder — wherever a command takes a file: one sentence, exit 2,
never a wait or an internal error, and the store unchanged."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
from strata13.compile import api

from tests.conftest import Ran, run_cli, tree_bytes
from tests.test_store import MAPPING, write_source

LONG = "x" * 300


@pytest.fixture()
def place(tmp_path: Path) -> Path:
    """A folder with a good sheet and mapping, a named pipe, a symlink loop and a store."""
    write_source(tmp_path, [("a", 1, "1.0")])
    os.mkfifo(tmp_path / "pipe.csv")
    os.mkfifo(tmp_path / "pipe.toml")
    (tmp_path / "loop.csv").symlink_to(tmp_path / "loop.csv")
    (tmp_path / "folder.csv").mkdir()
    api.init_store(tmp_path / "st")
    return tmp_path


def _one_sentence_exit_2(
    res: Ran | subprocess.CompletedProcess[str], store: Path, before: dict[str, bytes]
) -> str:
    err = res.stderr
    first = err.splitlines()[0] if err else ""
    assert res.returncode == 2, err
    assert first.startswith("error: ") and first.endswith("."), err
    assert "internal error" not in err and "Traceback" not in err
    assert tree_bytes(store) == before
    return first


@pytest.mark.parametrize(
    "args,said",
    [
        (["loop.csv", "--map", "o.toml"], "sheet loop.csv is a loop of symbolic links."),
        (["folder.csv", "--map", "o.toml"], "sheet folder.csv is a folder."),
        ([f"{LONG}.csv", "--map", "o.toml"], "has a name longer than the system allows"),
        (["--map", "loop.csv"], "mapping file loop.csv is a loop of symbolic links."),
        (["--map", f"{LONG}.toml"], "has a name longer than the system allows"),
        (["--map", "folder.csv"], "mapping file folder.csv is a folder."),
        (["--map", "o.toml", "--report", f"{LONG}.csv"], "has a name longer than"),
        (["--map", "o.toml", "--report", "pipe.csv"], "is not a regular file (a named pipe"),
    ],
)
def test_ingest_refuses_odd_paths_on_the_command_line(
    place: Path, args: list[str], said: str, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.chdir(place)
    before = tree_bytes(place / "st")
    first = _one_sentence_exit_2(run_cli("ingest", *args, "--store", "st"), place / "st", before)
    assert said in first


@pytest.mark.parametrize(
    "file,said",
    [
        ("pipe.csv", "pipe.csv is a named pipe, not a regular file."),
        ("loop.csv", "[table] file = 'loop.csv' cannot be followed (Symlink loop"),
        (f"{LONG}.csv", "has a name longer than the system allows"),
        ("a\\u0000b.csv", "cannot be followed"),
        ("folder.csv", "is a folder"),
    ],
)
def test_odd_paths_inside_a_mapping(place: Path, file: str, said: str) -> None:
    (place / "m.toml").write_text(MAPPING.format(file=file), encoding="utf-8")
    before = tree_bytes(place / "st")
    res = run_cli("ingest", "--map", place / "m.toml", "--store", place / "st")
    assert said in _one_sentence_exit_2(res, place / "st", before)


@pytest.mark.parametrize(
    "args",
    [
        ["ingest", "pipe.csv", "--map", "o.toml"],
        ["ingest", "--map", "pipe.toml"],
        ["ingest", "--map", "o.toml", "--report", "pipe.csv"],
        ["screen", "--rules", "pipe.toml"],
        ["query", "--region", "pipe.csv"],
    ],
)
def test_a_named_pipe_never_makes_a_command_wait(place: Path, args: list[str]) -> None:
    """Run as a user would; a read or write that blocked on the pipe would time out."""
    before = tree_bytes(place / "st")
    res = subprocess.run(
        [sys.executable, "-m", "strata13", *args, "--store", "st"],
        capture_output=True,
        text=True,
        cwd=place,
        timeout=60,
    )
    assert "named pipe" in _one_sentence_exit_2(res, place / "st", before)


def test_store_and_output_names_the_system_cannot_take(place: Path) -> None:
    for args in (
        ["query", "--store", LONG],
        ["init", "--store", place / LONG],
        ["export", "--out", place / LONG, "--store", place / "st"],
        ["query", "--region", LONG + ".geojson", "--store", place / "st"],
    ):
        res = run_cli(*args)
        assert res.code == 2 and "longer than the system allows" in res.err, args
        assert "internal error" not in res.err
    assert not (place / "st" / LONG[:10]).exists()
