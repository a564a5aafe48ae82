"""A store's catalog on a PostgreSQL server, shared by a group's writers and readers.

The store folder keeps the Parquet data (on storage every member mounts) and names the
catalog with a libpq connection string or service name; credentials never go in it: libpq
finds them in the user's environment (``PGPASSWORD``, ``PGUSER`` …), service file
(``~/.pg_service.conf``) or password file (``~/.pgpass``). DuckDB reaches the catalog
through its postgres extension; this module reaches the server with psycopg for what
DuckDB cannot do: the writer lock and the questions around it.

The writer lock is a session-level PostgreSQL advisory lock, taken on a connection of its
own before the write's DuckDB transaction begins and held until it ends. The server
releases it when that connection ends for any reason (a killed writer, a lost network), so
a lock is never left behind. Whoever holds it writes one row (host, pid, command, since)
into ``strata13_writer``, so a writer that times out can say who it waited for.
"""

from __future__ import annotations

import contextlib
import os
import socket
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from strata13.errors import OptionError, StoreError

if TYPE_CHECKING:
    import psycopg

# the advisory lock's key: two int4 (namespace "STRA", 13); one store catalog per database
LOCK_KEY = (0x53545241, 13)
HOLDER_TABLE = "strata13_writer"
CONNECT_TIMEOUT_S = 10  # unless the connection string says otherwise
# what libpq and the DuckDB postgres extension say when the server is not there (any case)
_GONE = (
    "unable to connect",
    "could not connect",
    "connection refused",
    "server closed the connection",
    "terminating connection",
    "no connection to the server",
    "could not send data",
    "could not receive data",
    "eof detected",
    "the database system is shutting down",
    "the database system is starting up",
    "connection timed out",
    "timeout expired",
    "broken pipe",
)
# what they say when the server is there but refuses this role
_REFUSED = (
    "fe_sendauth",
    "password authentication failed",
    "no password supplied",
    "does not exist",
    "permission denied",
    "no pg_hba.conf entry",
)
_SHOWN_KEYS = ("service", "host", "hostaddr", "port", "dbname", "user")
last_lock_wait_s: float | None = None  # how long the last writer_lock waited (benchmarks)


def _conninfo_dict(conninfo: str) -> dict[str, str]:
    from psycopg import conninfo as ci

    try:
        return {k: str(v) for k, v in ci.conninfo_to_dict(conninfo).items()}
    except Exception as exc:  # psycopg.ProgrammingError: not a libpq connection string
        raise OptionError(
            f"postgres:{conninfo} is not a libpq connection string ({exc}).",
            "Example: --catalog 'postgres:host=db.example.org dbname=group_store', "
            "or a service name from ~/.pg_service.conf: --catalog postgres:group_store.",
        ) from None


@dataclass(frozen=True)
class PostgresCatalog:
    """A DuckLake catalog in one PostgreSQL database (its ``public`` schema)."""

    conninfo: str  # as the store file says it: no password
    extensions: tuple[str, ...] = ("ducklake", "postgres_scanner")
    _params: dict[str, str] = field(default_factory=dict, compare=False, repr=False)

    @classmethod
    def from_conninfo(cls, text: str) -> PostgresCatalog:
        """Check a connection string (or a bare service name) and refuse a password in it."""
        text = text.strip()
        if not text:
            raise OptionError(
                "postgres: needs a connection string or a service name after it.",
                "Example: --catalog 'postgres:host=db.example.org dbname=group_store'.",
            )
        if "=" not in text and "://" not in text:
            text = f"service={text}"
        params = _conninfo_dict(text)
        if "password" in params or (
            "://" in text and ":" in text.split("://", 1)[1].split("@", 1)[0] and "@" in text
        ):
            raise OptionError(
                "the catalog's connection string holds a password, which the store file "
                "would keep in plain text.",
                "Leave it out and put it in ~/.pgpass (or PGPASSWORD, or a service file); "
                "see README 'Share a store with your group'.",
            )
        return cls(text, _params=params)

    # ------------------------------------------------------------ the Catalog interface
    def libpq(self) -> str:
        """The connection string libpq is given (a connect timeout unless one is set)."""
        if "connect_timeout" in self._params or os.environ.get("PGCONNECT_TIMEOUT"):
            return self.conninfo
        from psycopg import conninfo as ci

        return ci.make_conninfo(self.conninfo, connect_timeout=str(CONNECT_TIMEOUT_S))

    def exists(self) -> bool:
        return True  # asked of the server when a command attaches it

    def target(self) -> str:
        return "ducklake:postgres:" + self.libpq()

    def writer_options(self) -> list[str]:
        return []

    def describe(self) -> str:
        shown = " ".join(f"{k}={self._params[k]}" for k in _SHOWN_KEYS if k in self._params)
        return f"postgres:{shown or self.conninfo}"

    def spec(self) -> str:
        return "postgres:" + self.conninfo

    def unreachable(self, exc: BaseException) -> StoreError | None:
        """The sentence for a DuckDB or libpq failure that is the server refusing this
        role, or going away (asked of the server when the message does not say)."""
        if not type(exc).__module__.startswith(("duckdb", "_duckdb", "psycopg")):
            return None
        text = str(exc)
        lines = [x.strip() for x in text.splitlines() if x.strip()]
        refused = next((x for x in lines if any(r in x.lower() for r in _REFUSED)), None)
        if refused is not None and "connect" in text.lower():
            return StoreError(
                f"the server of the store catalog {self.describe()} refused the connection "
                f"({refused.split('failed: ')[-1].rstrip('.')[:160]}).",
                "Check your role (PGUSER or the service file) and its password "
                "(~/.pgpass, PGPASSWORD); nothing was written.",
            )
        why = next((x for x in reversed(lines) if any(g in x.lower() for g in _GONE)), None)
        if why is None:
            if self._answers():
                return None
            why = "the server does not answer"
        return StoreError(
            f"the store catalog {self.describe()} cannot be reached "
            f"({why.split('failed: ')[-1].rstrip('.')[:160]}).",
            "Nothing was written. Check that the PostgreSQL server is running and that "
            "your libpq settings reach it, then run the command again.",
        )

    def _answers(self) -> bool:
        """Whether the server takes a connection now (a short try)."""
        import psycopg
        from psycopg import conninfo as ci

        try:
            quick = ci.make_conninfo(self.conninfo, connect_timeout="3")
            with psycopg.connect(quick, autocommit=True) as con:
                con.execute("SELECT 1")
            return True
        except psycopg.Error:
            return False

    def connect(self) -> psycopg.Connection[Any]:
        """A psycopg connection to the catalog's database (autocommit)."""
        import psycopg

        try:
            return psycopg.connect(self.libpq(), autocommit=True, application_name="strata13")
        except psycopg.Error as exc:
            raise self.unreachable(exc) or StoreError(
                f"the store catalog {self.describe()} refused the connection ({_first(exc)}).",
                "Check the role and its password (~/.pgpass, PGPASSWORD or the service file).",
            ) from None

    def is_fresh(self) -> bool:
        with self.connect() as con:
            row = con.execute(
                "SELECT to_regclass('ducklake_snapshot') IS NOT NULL, "
                "to_regclass('ducklake_snapshot_changes') IS NOT NULL"
            ).fetchone()
            if not row or not row[0]:
                return True
            top = con.execute("SELECT coalesce(max(snapshot_id), 0) FROM ducklake_snapshot")
            got = top.fetchone()
            return bool(got is None or int(got[0]) == 0)

    def latest_version(self) -> int:
        """The newest snapshot id (0 for a database without a store catalog)."""
        with self.connect() as con:
            if not _has_table(con, "ducklake_snapshot"):
                return 0
            row = con.execute("SELECT coalesce(max(snapshot_id), 0) FROM ducklake_snapshot")
            got = row.fetchone()
            return int(got[0]) if got else 0

    @contextlib.contextmanager
    def writer_lock(self, command: str, timeout_s: float) -> Iterator[_AdvisoryLock]:
        global last_lock_wait_s
        import psycopg
        from psycopg import errors

        con = self.connect()
        try:
            self._refuse_readers(con, command)
            t0 = time.monotonic()
            try:
                con.execute(f"SET lock_timeout = '{max(1, int(timeout_s * 1000))}ms'")
                con.execute("SELECT pg_advisory_lock(%s, %s)", LOCK_KEY)
            except errors.LockNotAvailable:
                raise self._held_by(con, timeout_s) from None
            except psycopg.Error as exc:
                raise self.unreachable(exc) or StoreError(
                    f"the writer lock of {self.describe()} could not be taken ({_first(exc)}).",
                    "Nothing was written; run the command again.",
                ) from None
            last_lock_wait_s = time.monotonic() - t0
            _say_who(con, command)
            yield _AdvisoryLock(con)
        finally:
            with contextlib.suppress(Exception):
                con.execute("SELECT pg_advisory_unlock(%s, %s)", LOCK_KEY)
            with contextlib.suppress(Exception):
                con.close()

    # ------------------------------------------------------------ helpers
    def _refuse_readers(self, con: psycopg.Connection[Any], command: str) -> None:
        """A role that may only read is told so before it waits for the lock."""
        row = con.execute(
            "SELECT current_user, CASE WHEN to_regclass('ducklake_snapshot') IS NULL "
            "THEN has_schema_privilege(coalesce(current_schema(), 'public'), 'CREATE') "
            "ELSE has_table_privilege('ducklake_snapshot', 'INSERT') "
            "AND has_table_privilege('ducklake_data_file', 'INSERT,UPDATE,DELETE') END"
        ).fetchone()
        if row and not row[1]:
            raise StoreError(
                f"the role {row[0]} may only read the store catalog {self.describe()}, "
                f"and {command} writes to it.",
                "Read commands (query, sql, export, curve …) work; to write, use a role "
                "the catalog's owner has granted INSERT, UPDATE and DELETE.",
            )

    def _held_by(self, con: psycopg.Connection[Any], timeout_s: float) -> StoreError:
        """Who holds the lock, from the holder's row and the server's lock table."""
        who = "another writer"
        with contextlib.suppress(Exception):
            holder = con.execute(
                "SELECT l.pid FROM pg_locks l WHERE l.locktype = 'advisory' AND l.granted "
                "AND l.classid = %s AND l.objid = %s AND l.objsubid = 2 "
                "AND l.database = (SELECT oid FROM pg_database WHERE datname = "
                "current_database())",
                LOCK_KEY,
            ).fetchone()
            server_pid = int(holder[0]) if holder else None
            who = f"another writer (server process {server_pid})" if server_pid else who
            if server_pid and _has_table(con, HOLDER_TABLE):
                row = con.execute(
                    f"SELECT command, pid, host, to_char(since AT TIME ZONE 'UTC', "
                    f"'YYYY-MM-DD HH24:MI:SS') FROM {HOLDER_TABLE} WHERE server_pid = %s",
                    (server_pid,),
                ).fetchone()
                if row:
                    who = f"{row[0]} (pid {row[1]} on {row[2]}, since {row[3]} UTC)"
        return StoreError(
            f"the store catalog {self.describe()} has been held for over {timeout_s:g} s "
            f"by {who}, so nothing was written.",
            "Wait for it to finish and run the command again (STRATA13_LOCK_TIMEOUT sets "
            "the wait in seconds); a writer that died releases the lock by itself.",
        )


@dataclass
class _AdvisoryLock:
    con: psycopg.Connection[Any]

    def still_held(self) -> bool:
        try:
            row = self.con.execute(
                "SELECT count(*) FROM pg_locks WHERE locktype = 'advisory' AND granted "
                "AND pid = pg_backend_pid() AND classid = %s AND objid = %s AND objsubid = 2",
                LOCK_KEY,
            ).fetchone()
        except Exception:  # the lock's connection is gone, and the lock with it
            return False
        return bool(row and int(row[0]) > 0)


def _has_table(con: psycopg.Connection[Any], name: str) -> bool:
    row = con.execute("SELECT to_regclass(%s) IS NOT NULL", (name,)).fetchone()
    return bool(row and row[0])


def _say_who(con: psycopg.Connection[Any], command: str) -> None:
    """Write the holder's row (best effort: a writer without it still writes)."""
    import psycopg

    try:
        if not _has_table(con, HOLDER_TABLE):
            con.execute(
                f"CREATE TABLE IF NOT EXISTS {HOLDER_TABLE} (lock_key int PRIMARY KEY, "
                "server_pid int, pid int, host text, command text, since timestamptz)"
            )
        con.execute(
            f"INSERT INTO {HOLDER_TABLE} VALUES (1, pg_backend_pid(), %s, %s, %s, now()) "
            "ON CONFLICT (lock_key) DO UPDATE SET server_pid = excluded.server_pid, "
            "pid = excluded.pid, host = excluded.host, command = excluded.command, "
            "since = excluded.since",
            (os.getpid(), socket.gethostname(), command),
        )
    except psycopg.Error:
        return


def _first(exc: BaseException) -> str:
    lines = [x.strip() for x in str(exc).splitlines() if x.strip()]
    return (lines[0] if lines else type(exc).__name__).rstrip(".")[:160]
