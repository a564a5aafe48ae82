"""One process-wide record that the user pressed Ctrl-C, and of what this process committed.

Libraries in C (DuckDB) may swallow a SIGINT that arrives while they run, or turn it into
their own exception (DuckDB's ``InterruptException``); the command line's handler sets
``pressed`` first, so long operations can check it at safe points and the exit code stays
truthful (130). Every store transaction notes here the version it committed, so whatever
moment a Ctrl-C lands — before the commit, during it, or while the answer is printed —
the last words say truthfully whether a version landed (:func:`verdict`).
"""

from __future__ import annotations

import contextlib
import threading
import weakref
from pathlib import Path
from typing import Any

pressed = threading.Event()
_open: weakref.WeakSet[Any] = weakref.WeakSet()  # DuckDB connections a Ctrl-C should stop
committed: dict[str, int] = {}  # store folder -> the newest version this process committed


def check() -> None:
    """Raise KeyboardInterrupt if Ctrl-C was pressed since the command started."""
    if pressed.is_set():
        raise KeyboardInterrupt


def watch(con: Any) -> Any:
    """Register a DuckDB connection so that :func:`stop` can interrupt what it runs."""
    _open.add(con)
    return con


def stop() -> None:
    """Ctrl-C: note it and interrupt every statement DuckDB is running for this process
    (DuckDB does not always stop a statement on a signal by itself)."""
    pressed.set()
    for con in list(_open):
        with contextlib.suppress(Exception):  # a closed connection has nothing to stop
            con.interrupt()


def is_interrupt(exc: BaseException) -> bool:
    """Whether ``exc`` is Ctrl-C in any of its guises (ours, DuckDB's, a library's)."""
    if isinstance(exc, KeyboardInterrupt) or type(exc).__name__ == "InterruptException":
        return True
    if isinstance(exc, RuntimeError) and "interrupted" in str(exc).lower():
        return True
    return pressed.is_set() and not isinstance(exc, (SystemExit, GeneratorExit))


def landed(store: Path, version: int) -> None:
    """Note that this process committed ``version`` to the store in ``store``."""
    committed[str(store)] = int(version)


def forget(store: Path) -> None:
    """A store folder that was removed again (a new store whose creation did not finish)."""
    committed.pop(str(store), None)


def verdict() -> str:
    """What an interrupted command must say: the version it committed, or that it wrote
    nothing."""
    if not committed:
        return "interrupted: nothing was written"
    (store, version), *more = sorted(committed.items(), key=lambda kv: kv[1])[::-1]
    where = f" of {store}" if more else ""
    return f"interrupted: the commit landed as version {version}{where}"
