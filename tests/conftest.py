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
        """A new, empty database owned by the writer role; its name."""
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

    def conninfo(self, dbname: str, role: str = WRITER) -> str:
        """How a member names the catalog: no password (it is in the password file)."""
        return f"host={self.host} port={self.port} user={role} dbname={dbname}"


def _start_pg(tmp_path_factory: pytest.TempPathFactory) -> tuple[str, Path | None]:
    """The administrator's connection string: CI's server (STRATA13_TEST_PG), or one
    started here in a temporary folder."""
    import os

    given = os.environ.get("STRATA13_TEST_PG")
    if given:
        return given, None
    from tests import pg_server

    folder = Path(tempfile_dir())
    return pg_server.start(folder), folder


def tempfile_dir() -> str:
    """A short folder for the server (socket paths are limited to ~100 characters)."""
    import tempfile

    return tempfile.mkdtemp(prefix="s13pg-")


@pytest.fixture(scope="session")
def pg_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[PgServer]:
    """A real server; skipped with the reason when none can be had, failed instead when
    STRATA13_REQUIRE_PG is set (CI sets it: there the tests must not skip)."""
    import os

    import psycopg

    try:
        admin, folder = _start_pg(tmp_path_factory)
        with psycopg.connect(admin, autocommit=True) as con:
            for role in (WRITER, READER):
                con.execute(
                    f"DO $$BEGIN CREATE ROLE {role} LOGIN PASSWORD '{role}-pw'; "
                    "EXCEPTION WHEN duplicate_object THEN NULL; END$$"
                )
    except Exception as exc:
        reason = f"no PostgreSQL server could be started or reached ({exc})"
        if os.environ.get("STRATA13_REQUIRE_PG"):
            pytest.fail(reason + "; STRATA13_REQUIRE_PG is set, so this is a failure")
        pytest.skip(reason)
    from psycopg.conninfo import conninfo_to_dict

    port = int(str(conninfo_to_dict(admin).get("port", 5432)))
    passfile = tmp_path_factory.mktemp("pgpass") / "pgpass"
    passfile.write_text(
        "".join(f"127.0.0.1:{port}:*:{r}:{r}-pw\n" for r in (WRITER, READER)), encoding="utf-8"
    )
    passfile.chmod(0o600)
    yield PgServer(admin, "127.0.0.1", port, passfile, folder)
    if folder is not None:
        from tests import pg_server as server

        server.stop(folder)


@pytest.fixture()
def pg(pg_server: PgServer, monkeypatch: pytest.MonkeyPatch) -> PgServer:
    """The server, with this test's libpq reading the members' password file."""
    monkeypatch.setenv("PGPASSFILE", str(pg_server.passfile))
    return pg_server


@pytest.fixture(params=["embedded", "postgres"])
def catalog(request: pytest.FixtureRequest) -> str | None:
    """Where a test's store keeps its catalog: the embedded file (None) or a fresh
    database on the real server (``postgres:CONNINFO``)."""
    if request.param == "embedded":
        return None
    server: PgServer = request.getfixturevalue("pg")
    return "postgres:" + server.conninfo(server.database())
