"""Loading the DuckLake, SQLite and PostgreSQL extensions, signatures checked once per file.

DuckDB checks an extension's signature on every LOAD, which costs ~0.1 s per extension and
connection — most of a small command's start. The binaries come from signed wheels in
site-packages and do not change between commands, so the check is done once per file: the
first load in a process runs with signature checking on; when it succeeds, the file's path,
size, modification time and inode are recorded in the user's cache folder, and later
connections load a file that still matches its record without checking it again. Any change
to the file (an upgrade, an edit) makes it a new file that is checked again. A cache that
cannot be read or written costs only the time: the check is then made every time.
"""

from __future__ import annotations

import json
import os
from functools import cache
from pathlib import Path
from typing import TYPE_CHECKING

from strata13.errors import StoreError

if TYPE_CHECKING:
    import duckdb

WHEELS = (
    ("ducklake", "duckdb_extension_ducklake"),
    ("sqlite_scanner", "duckdb_extension_sqlite_scanner"),
    ("postgres_scanner", "duckdb_extension_postgres_scanner"),
)
EMBEDDED = ("ducklake", "sqlite_scanner")  # what a store on its embedded catalog loads
PIP_NAMES = {
    "ducklake": "duckdb-extension-ducklake",
    "sqlite_scanner": "duckdb-extension-sqlite-scanner",
    "postgres_scanner": "duckdb-extension-postgres-scanner",
}


@cache
def extension_files() -> dict[str, str | None]:
    """Paths of the signed extension binaries shipped as wheels (None: no wheel here)."""
    out: dict[str, str | None] = {}
    for name, module in WHEELS:
        try:
            where = getattr(__import__(module), "__file__", None)
        except ImportError:
            where = None
        hits = sorted(Path(where).parent.glob("extensions/*/*.duckdb_extension")) if where else []
        out[name] = str(hits[-1]) if hits else None
    return out


def _cache_file() -> Path:
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "strata13" / "verified-extensions.json"


def _identity(path: str) -> str | None:
    """What makes a file the one that was checked: path, size, modification time, inode."""
    try:
        st = os.stat(path)
    except OSError:
        return None
    return f"{path}|{st.st_size}|{st.st_mtime_ns}|{st.st_ino}"


@cache
def _verified() -> frozenset[str]:
    try:
        data = json.loads(_cache_file().read_text(encoding="utf-8"))
        return frozenset(str(x) for x in data) if isinstance(data, list) else frozenset()
    except (OSError, ValueError):
        return frozenset()


def _remember(identities: list[str]) -> None:
    """Record files whose signatures DuckDB has just checked (best effort, atomic)."""
    target = _cache_file()
    known = sorted(set(_verified()) | set(identities))
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        tmp = target.with_name(f".{target.name}.{os.getpid()}")
        tmp.write_text(json.dumps(known, indent=0) + "\n", encoding="utf-8")
        os.replace(tmp, target)
    except OSError:
        return
    _verified.cache_clear()


def connect(names: tuple[str, ...] = EMBEDDED) -> duckdb.DuckDBPyConnection:
    """An in-memory DuckDB with the extensions ``names`` loaded (the catalog says which)."""
    import duckdb

    files = {n: p for n, p in extension_files().items() if n in names}
    ids = [_identity(p) if p else None for p in files.values()]
    checked = all(i is not None and i in _verified() for i in ids)
    config: dict[str, str | bool | int | float | list[str]] = (
        {"allow_unsigned_extensions": True} if checked else {}
    )
    con = duckdb.connect(":memory:", config=config)
    for name, path in files.items():
        try:
            if path:
                con.execute(f"LOAD '{path}'")
            else:  # no wheel for this platform: DuckDB's own signed INSTALL
                con.execute(f"INSTALL {name}")
                con.execute(f"LOAD {name}")
        except duckdb.Error as exc:
            con.close()
            raise StoreError(
                f"the DuckDB extension {name} could not be loaded ({exc}).",
                f"Install {PIP_NAMES.get(name, name)} matching your duckdb version.",
            ) from None
    if not checked:  # every LOAD above ran with DuckDB's signature check on
        _remember([i for i in ids if i is not None])
    from strata13.compile import interrupts

    interrupts.watch(con)  # a Ctrl-C interrupts what it runs
    return con
