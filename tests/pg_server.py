"""A throwaway PostgreSQL server on loopback for the tests, CI and benchmarks (a real server).

``python tests/pg_server.py start DIR`` makes a cluster in DIR (initdb), starts it on a free
loopback port and prints the administrator's connection string; ``stop DIR`` stops it.
When run as root the server runs as the ``postgres`` system user (runuser), since
PostgreSQL refuses to run as root. Local (socket) connections are trusted, loopback TCP
connections need a password (SCRAM): the tests reach the server over TCP with roles whose
passwords are in a password file, as a group's members would.
"""

from __future__ import annotations

import glob
import os
import shutil
import socket
import subprocess
import sys
from pathlib import Path

ADMIN = "strata13_admin"


def bindir() -> Path | None:
    """Where initdb and pg_ctl are: STRATA13_PG_BIN, PATH, or Debian's versioned folders."""
    given = os.environ.get("STRATA13_PG_BIN")
    if given:
        return Path(given)
    on_path = shutil.which("initdb")
    if on_path:
        return Path(on_path).parent
    found = sorted(
        glob.glob("/usr/lib/postgresql/*/bin/initdb"), key=lambda p: int(p.split("/")[4])
    )
    return Path(found[-1]).parent if found else None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _as_server_user(cmd: list[str]) -> list[str]:
    if os.geteuid() != 0:
        return cmd
    return ["runuser", "-u", "postgres", "--", *cmd]


def start(folder: Path, durable: bool = False) -> str:
    """Make and start a cluster in ``folder``; the administrator's connection string.

    ``durable`` False turns fsync off (tests kill clients, not the server's machine)."""
    bins = bindir()
    if bins is None:
        raise RuntimeError("no PostgreSQL server binaries (initdb) were found")
    folder.mkdir(parents=True, exist_ok=True)
    if os.geteuid() == 0:
        shutil.chown(folder, "postgres", "postgres")
    data = folder / "data"
    pw = folder / "admin.pw"
    pw.write_text("admin-not-secret\n")
    if os.geteuid() == 0:
        shutil.chown(pw, "postgres", "postgres")
    run = subprocess.run(
        _as_server_user(
            [
                str(bins / "initdb"),
                "-D",
                str(data),
                "-U",
                ADMIN,
                "--pwfile",
                str(pw),
                "--auth-local=trust",
                "--auth-host=scram-sha-256",
                "-E",
                "UTF8",
                "--locale=C",
                "--no-sync",
            ]
        ),
        capture_output=True,
        text=True,
    )
    if run.returncode:
        raise RuntimeError(f"initdb failed: {run.stderr.strip() or run.stdout.strip()}")
    port = _free_port()
    opts = f"-p {port} -k {folder} -c listen_addresses=127.0.0.1 -c max_connections=200"
    if not durable:
        opts += " -c fsync=off -c synchronous_commit=off -c full_page_writes=off"
    run = subprocess.run(
        _as_server_user(
            [
                str(bins / "pg_ctl"),
                "-D",
                str(data),
                "-o",
                opts,
                "-l",
                str(folder / "server.log"),
                "-w",
                "-t",
                "60",
                "start",
            ]
        ),
        capture_output=True,
        text=True,
    )
    if run.returncode:
        raise RuntimeError(f"pg_ctl start failed: {run.stderr.strip() or run.stdout.strip()}")
    (folder / "port").write_text(f"{port}\n")
    return f"host={folder} port={port} user={ADMIN} dbname=postgres"


def pg_ctl(folder: Path, action: str) -> None:
    """``stop`` (fast) or ``start`` the cluster in ``folder`` again (same port)."""
    bins = bindir()
    assert bins is not None
    port = (folder / "port").read_text().strip()
    opts = f"-p {port} -k {folder} -c listen_addresses=127.0.0.1 -c max_connections=200"
    opts += " -c fsync=off -c synchronous_commit=off -c full_page_writes=off"
    cmd = [str(bins / "pg_ctl"), "-D", str(folder / "data"), "-w", "-t", "60"]
    if action == "stop":
        cmd += ["-m", "fast", "stop"]
    else:
        cmd += ["-o", opts, "-l", str(folder / "server.log"), "start"]
    subprocess.run(_as_server_user(cmd), capture_output=True, check=True)


def stop(folder: Path) -> None:
    if (folder / "data" / "postmaster.pid").exists():
        pg_ctl(folder, "stop")


if __name__ == "__main__":
    if len(sys.argv) != 3 or sys.argv[1] not in ("start", "stop"):
        sys.exit("usage: pg_server.py start|stop DIR")
    where = Path(sys.argv[2]).resolve()
    if sys.argv[1] == "start":
        try:
            print(start(where))
        except RuntimeError as exc:
            sys.exit(str(exc))
    else:
        stop(where)
