"""One process-wide record that the user pressed Ctrl-C.

Libraries in C (DuckDB) may swallow a SIGINT that arrives while they run; the command
line's handler sets ``pressed`` first, so long operations can check it at safe points
and the exit code stays truthful (130).
"""

from __future__ import annotations

import threading

pressed = threading.Event()


def check() -> None:
    """Raise KeyboardInterrupt if Ctrl-C was pressed since the command started."""
    if pressed.is_set():
        raise KeyboardInterrupt
