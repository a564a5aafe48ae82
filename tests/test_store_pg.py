"""A group's store on a PostgreSQL catalog, against a real server (tests/pg_server.py).

Writers from several processes, the lock's timeout naming its holder, the server going away
mid-ingest, a read-only role, and moving a store's catalog there and back. (The store tests
that run on both catalogs are in test_store.py, through the ``catalog`` fixture.)
"""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
from strata13.compile import api
from strata13.compile.store import lake

from tests.conftest import READER, PgServer, own_server, run_cli
from tests.test_store import write_source

pytestmark = pytest.mark.slow


def _store(pg: PgServer, tmp_path: Path, rows: int = 5) -> tuple[lake.Store, str]:
    spec = "postgres:" + pg.conninfo(pg.database())
    store = api.init_store(tmp_path / "st", catalog=spec)
    api.ingest(store, None, write_source(tmp_path, [(f"a{i}", i, "1.0") for i in range(rows)]))
    return store, spec


def test_the_store_file_names_the_catalog_and_no_password(
    pg: PgServer, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    store, spec = _store(pg, tmp_path)
    marker = json.loads((store.path / lake.MARKER).read_text())
    assert marker["catalog"] == spec and "pw" not in json.dumps(marker)
    assert not (store.path / "catalog.sqlite").exists()
    # the password came from the password file: without it the server refuses the role
    monkeypatch.setenv("PGPASSFILE", str(tmp_path / "no-such-file"))
    ran = run_cli("query", "--store", store.path)
    assert ran.code == 1 and "refused the connection" in ran.err and "Traceback" not in ran.err
    monkeypatch.setenv("PGPASSFILE", str(pg.passfile))
    # a password in the connection string is refused before anything is made
    ran = run_cli("init", "--store", tmp_path / "st2", "--catalog", spec + " password=x")
    assert ran.code == 2 and "password" in ran.err and not (tmp_path / "st2").exists()
    # a database that already holds a store is not given a second one
    ran = run_cli("init", "--store", tmp_path / "st3", "--catalog", spec)
    assert ran.code == 1 and "already holds" in ran.err and not (tmp_path / "st3").exists()


HOLDER = """
import sys, time
from strata13.compile.store.postgres import PostgresCatalog
with PostgresCatalog.from_conninfo(sys.argv[1]).writer_lock("ingest", 30):
    open(sys.argv[2], "w").close()
    time.sleep(120)
"""


def _wait_for(path: Path, proc: subprocess.Popen[bytes], limit: float = 60) -> None:
    deadline = time.monotonic() + limit
    while not path.exists() and time.monotonic() < deadline and proc.poll() is None:
        time.sleep(0.05)
    assert path.exists(), "the other process never got there"


def test_a_writer_that_cannot_get_the_lock_names_its_holder_and_changes_nothing(
    pg: PgServer, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    store, spec = _store(pg, tmp_path)
    v = store.latest_version()
    held = tmp_path / "held"
    holder = subprocess.Popen([sys.executable, "-c", HOLDER, spec[len("postgres:") :], held])
    try:
        _wait_for(held, holder)
        monkeypatch.setattr(lake, "LOCK_TIMEOUT_S", 1.0)
        m = write_source(tmp_path, [("b", 1, "2.0")], "b.csv")
        ran = run_cli("ingest", "--map", m, "--store", store.path)
        assert ran.code == 1, ran.err
        assert "has been held for over 1 s by ingest (pid " in ran.err
        assert f"(pid {holder.pid} on {socket.gethostname()}, since " in ran.err
        assert " UTC), so nothing was written" in ran.err
        assert store.latest_version() == v
    finally:
        holder.kill()
        holder.wait()
    # the server let go of the dead holder's lock: the same ingest now lands
    assert api.ingest(store, None, m).version == v + 1


def test_writers_in_several_processes_all_land_with_distinct_versions(
    pg: PgServer, tmp_path: Path
) -> None:
    store, _ = _store(pg, tmp_path)
    v = store.latest_version()
    procs = []
    for k in range(4):  # four members, each in a working folder of their own
        work = tmp_path / f"member{k}"
        work.mkdir()
        m = write_source(work, [(f"m{k}-{i}", i, "1.5") for i in range(30)])
        m.write_text(m.read_text().replace("obrien-delta-2019", f"member-{k}"))
        procs.append(
            subprocess.Popen(
                [sys.executable, "-m", "strata13", "ingest", "--map", m, "--store", store.path],
                cwd=work,
                stdout=subprocess.PIPE,
                stderr=subprocess.PIPE,
            )
        )
    outs = [p.communicate(timeout=300) for p in procs]
    assert all(p.returncode == 0 for p in procs), [o[1] for o in outs]
    history = api.history(store)
    versions = [h.version for h in history]
    assert versions == list(range(1, v + 5))  # no gap, no duplicate
    assert {h.detail for h in history[-4:]} == {f"member-{k}" for k in range(4)}
    snaps = api.sql(store, "SELECT count(*), count(DISTINCT version) FROM commits").rows
    assert snaps == [(v + 4, v + 4)]


WAITING = """
import contextlib, sys, time
from pathlib import Path
from strata13.compile.store import lake

real_writer = lake.Store.writer
marker, go = Path(sys.argv[1]), Path(sys.argv[2])
# waits at the ingest's first INSERT for the test to stop the server or cut the connection


class Proxy:
    def __init__(self, con):
        self._con = con

    def execute(self, sql, *args):
        if sql.startswith("INSERT INTO lake.") and not marker.exists():  # mid-ingest
            marker.touch()
            while not go.exists():
                time.sleep(0.05)
        return self._con.execute(sql, *args)

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


@pytest.fixture(scope="module")
def private_pg(tmp_path_factory: pytest.TempPathFactory) -> Iterator[PgServer]:
    """A server of this module's own: its tests stop it and cut its connections."""
    yield from own_server(tmp_path_factory)


@pytest.mark.parametrize("fault", ["server stopped", "connection cut"])
def test_the_server_going_away_mid_ingest_is_one_sentence_and_a_retry_lands(
    private_pg: PgServer, tmp_path: Path, monkeypatch: pytest.MonkeyPatch, fault: str
) -> None:
    from tests import pg_server

    monkeypatch.setenv("PGPASSFILE", str(private_pg.passfile))
    monkeypatch.setenv("PGUSER", "strata13_writer")
    store, spec = _store(private_pg, tmp_path)
    db = spec.rsplit("dbname=", 1)[1]
    v = store.latest_version()
    m = write_source(tmp_path, [(f"b{i}", i, "2.0") for i in range(40)], "b.csv")
    marker, go = tmp_path / "at-commit", tmp_path / "go"
    proc = subprocess.Popen(
        [sys.executable, "-c", WAITING, marker, go, "ingest", "--map", m, "--store", store.path],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    _wait_for(marker, proc)  # type: ignore[arg-type]
    assert private_pg.folder is not None
    if fault == "server stopped":
        pg_server.pg_ctl(private_pg.folder, "stop")
    else:
        private_pg.sql(
            "SELECT pg_terminate_backend(pid) FROM pg_stat_activity "
            f"WHERE datname = '{db}' AND pid <> pg_backend_pid()"
        )
    go.touch()
    _, err = proc.communicate(timeout=120)
    if fault == "server stopped":
        pg_server.pg_ctl(private_pg.folder, "start")
    assert proc.returncode == 1, err
    lines = [x for x in err.splitlines() if x.strip()]
    assert "Traceback" not in err and len(lines) <= 2, err  # the sentence and its hint
    assert "nothing was written" in err.lower()
    assert store.latest_version() == v
    assert api.sql(store, "SELECT count(*) FROM records").rows == [(5,)]
    assert api.ingest(store, None, m).version == v + 1  # the retry lands
    assert api.sql(store, "SELECT count(*) FROM records").rows == [(40,)]


def test_a_read_only_role_reads_everything_and_is_refused_every_write(
    pg: PgServer, tmp_path: Path, demo_sheets: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from strata13.compile.demo import SHEETS

    spec = "postgres:" + pg.conninfo(pg.database())
    store = api.init_store(tmp_path / "st", catalog=spec)
    for sheet, mapping in SHEETS[:2]:
        api.ingest(store, demo_sheets / sheet, demo_sheets / mapping)
    v = store.latest_version()
    s = store.path
    monkeypatch.setenv("PGUSER", READER)
    reads = [
        ("query", "--interval", "Toarcian"),
        ("sql", "SELECT count(*) AS n FROM records"),
        ("export", "--out", tmp_path / "ex"),
        ("curve", "--out", tmp_path / "curve"),
        ("history",),
        ("sources",),
        ("overlaps",),
        ("corrections",),
        ("agemodel", "quillar-ridge"),
    ]
    for args in reads:
        ran = run_cli(*args, "--store", s)
        assert ran.code == 0, (args, ran.err)
    assert "may only read" not in run_cli("export", "--out", tmp_path / "e2", "--store", s).err
    m = write_source(tmp_path, [("b", 1, "2.0")], "b.csv")
    writes = [
        ("ingest", "--map", m),
        ("reharmonise",),
        ("redate",),
        ("compact",),
        ("move-catalog", "--to", "embedded"),
    ]
    for args in writes:
        ran = run_cli(*args, "--store", s)
        assert ran.code == 1, (args, ran.out, ran.err)
        assert f"the role {READER} may only read the store catalog" in ran.err, (args, ran.err)
    assert not (s / "catalog.sqlite").exists()
    monkeypatch.setenv("PGUSER", "strata13_writer")
    assert store.latest_version() == v
    # `sql` stays read-only whatever the role, the writer's included
    for statement in (
        "DELETE FROM records",
        "SELECT * FROM postgres_query('lake', 'SELECT 1')",
        "SELECT * FROM __ducklake_metadata_lake.ducklake_snapshot",
    ):
        ran = run_cli("sql", statement, "--store", s)
        assert ran.code == 1 and ("refused" in ran.err or "only SELECT" in ran.err), ran.err
    assert store.latest_version() == v


def test_moving_a_store_to_the_server_and_back_keeps_every_version_byte_for_byte(
    pg: PgServer, tmp_path: Path, demo_store: Path
) -> None:
    def exports(tag: str, versions: list[int]) -> dict[int, dict[str, bytes]]:
        out = {}
        for v in versions:
            folder = tmp_path / f"{tag}-{v}"
            api.export(api.open_store(demo_store), folder, as_of=v)
            out[v] = {p.name: p.read_bytes() for p in sorted(folder.iterdir()) if p.is_file()}
        return out

    store = api.open_store(demo_store)
    versions = [h.version for h in api.history(store)]
    before = exports("before", versions)
    history = [(h.version, h.time, h.command, h.detail) for h in api.history(store)]
    spec = "postgres:" + pg.conninfo(pg.database())
    ran = run_cli("move-catalog", "--to", spec, "--store", demo_store)
    assert ran.code == 0, ran.err
    assert f"{len(versions)} versions" in ran.err
    assert not (demo_store / "catalog.sqlite").exists()
    assert api.open_store(demo_store).catalog.spec() == spec
    assert exports("on-server", versions) == before
    moved = api.open_store(demo_store)
    assert [(h.version, h.time, h.command, h.detail) for h in api.history(moved)] == history
    # the group writes on the server, then the store comes home with that version too
    m = write_source(tmp_path, [("g", 1, "0.5")], "g.csv")
    new = api.ingest(api.open_store(demo_store), None, m).version
    assert new == versions[-1] + 1
    after_write = exports("written", [new])
    ran = run_cli("move-catalog", "--to", "embedded", "--store", demo_store)
    assert ran.code == 0, ran.err
    assert (demo_store / "catalog.sqlite").is_file()
    assert exports("home", [*versions, new]) == {**before, **after_write}
    # a second move to the same database is refused: it holds the store's versions now
    ran = run_cli("move-catalog", "--to", spec, "--store", demo_store)
    assert ran.code == 1 and "already holds" in ran.err
    assert os.path.exists(demo_store / "catalog.sqlite")


@pytest.mark.parametrize(
    ("catalog", "code", "says"),
    [
        ("mysql:host=x", 2, "neither 'embedded' nor postgres:CONNINFO"),
        ("postgres:", 2, "needs a connection string or a service name"),
        ("postgres:host=db dbname=s password=secret", 2, "holds a password"),
        ("postgres:postgresql://ann:secret@db/s", 2, "holds a password"),
        ("postgres:host=db dbname='unclosed", 2, "is not a libpq connection string"),
        ("postgres:host=127.0.0.1 port=1 dbname=s connect_timeout=2", 1, "cannot be reached"),
    ],
)
def test_a_catalog_that_cannot_be_used_is_refused_before_anything_is_made(
    tmp_path: Path, catalog: str, code: int, says: str
) -> None:
    ran = run_cli("init", "--store", tmp_path / "st", "--catalog", catalog)
    assert ran.code == code and says in ran.err and "Traceback" not in ran.err, ran.err
    assert not any(tmp_path.iterdir())


def test_move_catalog_refuses_a_target_it_cannot_use(tmp_path: Path) -> None:
    store = api.init_store(tmp_path / "st")
    before = store.latest_version()
    ran = run_cli("move-catalog", "--to", "embedded", "--store", store.path)
    assert ran.code == 2 and "already uses the catalog" in ran.err
    ran = run_cli("move-catalog", "--to", "sqlite:x", "--store", store.path)
    assert ran.code == 2 and "neither" in ran.err
    ran = run_cli(
        "move-catalog",
        "--to",
        "postgres:host=127.0.0.1 port=1 connect_timeout=2",
        "--store",
        store.path,
    )
    assert ran.code == 1 and "cannot be reached" in ran.err
    assert json.loads((store.path / lake.MARKER).read_text())["catalog"] == "catalog.sqlite"
    assert api.open_store(store.path).latest_version() == before
