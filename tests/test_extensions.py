"""Extension loading: signatures are checked by DuckDB once per file, and again whenever
the file is not the one that was checked."""

from __future__ import annotations

import json
from collections.abc import Iterator
from pathlib import Path

import duckdb
import pytest
from strata13.compile.store import extensions


def _unsigned_allowed(con: duckdb.DuckDBPyConnection) -> bool:
    row = con.execute("SELECT current_setting('allow_unsigned_extensions')").fetchone()
    return bool(row and row[0])


@pytest.fixture()
def cache_home(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Iterator[Path]:
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    extensions._verified.cache_clear()
    yield tmp_path
    extensions._verified.cache_clear()


def test_the_first_load_checks_signatures_and_records_the_files(cache_home: Path) -> None:
    con = extensions.connect()
    assert not _unsigned_allowed(con)  # DuckDB checked the signatures
    recorded = json.loads((cache_home / "strata13" / "verified-extensions.json").read_text())
    files = extensions.extension_files()
    paths = [files[n] for n in extensions.EMBEDDED if files[n]]
    assert paths and all(any(r.startswith(p + "|") for r in recorded) for p in paths)
    again = extensions.connect()
    assert _unsigned_allowed(again)  # the same files: not checked again
    assert (
        again.execute(
            "SELECT count(*) FROM duckdb_extensions() WHERE loaded AND "
            "extension_name IN ('ducklake', 'sqlite_scanner')"
        ).fetchone()[0]
        == 2
    )


def test_a_file_that_changed_since_its_check_is_checked_again(cache_home: Path) -> None:
    target = cache_home / "strata13" / "verified-extensions.json"
    target.parent.mkdir(parents=True)
    stale = [f"{p}|1|1|1" for p in extensions.extension_files().values() if p]
    target.write_text(json.dumps(stale))
    assert not _unsigned_allowed(extensions.connect())


def test_an_unreadable_cache_only_costs_time(cache_home: Path) -> None:
    target = cache_home / "strata13" / "verified-extensions.json"
    target.parent.mkdir(parents=True)
    target.write_text("not json")
    con = extensions.connect()
    assert con.execute("SELECT 1").fetchone() == (1,)
