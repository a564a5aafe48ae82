"""Shared fixtures: the demo folder and a built demo store (built once per session)."""

from __future__ import annotations

import contextlib
import io
import shutil
from collections.abc import Iterator
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


# ------------------------------------------------------------ a real PostgreSQL server
WRITER, READER = "strata13_writer", "strata13_reader"


@dataclass
class PgServer:
    """A PostgreSQL server the tests may use: its administrator's connection string
    (trusted), and the loopback address group members reach it on with passwords."""

    admin: str
    host: str
    port: int
    passfile: Path
    folder: Path | None  # set when the tests started the server themselves

    def sql(self, statement: str, dbname: str = "postgres") -> None:
        import psycopg

        with psycopg.connect(self.admin, dbname=dbname, autocommit=True) as con:
            con.execute(statement)

    def database(self) -> str:
        """A new, empty database owned by the writer role, readable by the reader role
        (the grants a group's administrator makes); its name."""
        import uuid

        name = f"t_{uuid.uuid4().hex[:12]}"
        self.sql(f"CREATE DATABASE {name} OWNER {WRITER}")
        self.sql(f"GRANT CONNECT ON DATABASE {name} TO {READER}", name)
        self.sql(f"GRANT USAGE ON SCHEMA public TO {READER}", name)
        self.sql(
            f"ALTER DEFAULT PRIVILEGES FOR ROLE {WRITER} IN SCHEMA public "
            f"GRANT SELECT ON TABLES TO {READER}",
            name,
        )
        return name

    def conninfo(self, dbname: str) -> str:
        """How a group names the catalog: no role and no password (each member's PGUSER
        and password file say those)."""
        return f"host={self.host} port={self.port} dbname={dbname}"


def _prepare(admin: str, folder: Path | None, passdir: Path) -> PgServer:
    """Make the members' roles and their password file on the server ``admin`` reaches."""
    import psycopg
    from psycopg.conninfo import conninfo_to_dict

    with psycopg.connect(admin, autocommit=True) as con:
        for role in (WRITER, READER):
            con.execute(
                f"DO $$BEGIN CREATE ROLE {role} LOGIN PASSWORD '{role}-pw'; "
                "EXCEPTION WHEN duplicate_object OR unique_violation THEN NULL; END$$"
            )
    port = int(str(conninfo_to_dict(admin).get("port", 5432)))
    passfile = passdir / "pgpass"
    passfile.write_text(
        "".join(f"127.0.0.1:{port}:*:{r}:{r}-pw\n" for r in (WRITER, READER)), encoding="utf-8"
    )
    passfile.chmod(0o600)
    return PgServer(admin, "127.0.0.1", port, passfile, folder)


def _no_server(exc: Exception) -> None:
    """Skip with the reason, or fail when STRATA13_REQUIRE_PG is set (CI sets it)."""
    import os

    reason = f"no PostgreSQL server could be started or reached ({exc})"
    if os.environ.get("STRATA13_REQUIRE_PG"):
        pytest.fail(reason + "; STRATA13_REQUIRE_PG is set, so this is a failure")
    pytest.skip(reason)


def own_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[PgServer]:
    """A server started for the caller alone (tests that stop it)."""
    import tempfile

    from tests import pg_server

    folder = Path(tempfile.mkdtemp(prefix="s13pg-"))  # short: socket paths are limited
    try:
        server = _prepare(pg_server.start(folder), folder, tmp_path_factory.mktemp("pgpass"))
    except Exception as exc:
        pg_server.stop(folder)
        shutil.rmtree(folder, ignore_errors=True)
        _no_server(exc)
        raise
    try:
        yield server
    finally:
        pg_server.stop(folder)
        shutil.rmtree(folder, ignore_errors=True)


@pytest.fixture(scope="session")
def pg_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[PgServer]:
    """A real server: CI's (STRATA13_TEST_PG, the administrator's connection string) or
    one started here; skipped with the reason when none can be had (failed in CI)."""
    import os

    given = os.environ.get("STRATA13_TEST_PG")
    if not given:
        yield from own_server(tmp_path_factory)
        return
    try:
        server = _prepare(given, None, tmp_path_factory.mktemp("pgpass"))
    except Exception as exc:
        _no_server(exc)
        raise
    yield server


@pytest.fixture()
def pg(pg_server: PgServer, monkeypatch: pytest.MonkeyPatch) -> PgServer:
    """The server, this test's libpq acting as the writer member (PGUSER, password file)."""
    monkeypatch.setenv("PGPASSFILE", str(pg_server.passfile))
    monkeypatch.setenv("PGUSER", WRITER)
    return pg_server


@pytest.fixture(params=["embedded", "postgres"])
def catalog(request: pytest.FixtureRequest) -> str | None:
    """Where a test's store keeps its catalog: the embedded file (None) or a fresh
    database on the real server (``postgres:CONNINFO``)."""
    if request.param == "embedded":
        return None
    server: PgServer = request.getfixturevalue("pg")
    return "postgres:" + server.conninfo(server.database())
