"""Where strata13 may write: output paths are checked before any work starts.

A report, a query result or an export never overwrites the sheet or the mapping being
read, never lands inside a store folder (its catalog and data files belong to DuckLake),
and names a folder that exists. Each refusal is an OptionError (exit 2).
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path

from strata13.errors import OptionError


def _inside(path: Path, folder: Path) -> bool:
    return path == folder or path.is_relative_to(folder)


def _resolved(path: Path, option: str) -> Path:
    """``path`` resolved, or OptionError for a name the system cannot take or follow."""
    from strata13.compile.read.inputs import usable_name

    from strata13.errors import InputFileError

    try:
        usable_name(path, option, "")
        return path.resolve()
    except InputFileError as exc:
        raise OptionError(exc.message, "Choose a shorter, plain file name.") from None
    except (OSError, RuntimeError, ValueError) as exc:  # a symlink loop on the way
        raise OptionError(
            f"{option} {path} cannot be followed ({exc}).", "Write somewhere else."
        ) from None


def _not_special(p: Path, path: Path, option: str) -> None:
    """An existing target must be a regular file (writing to a named pipe waits forever)."""
    import os
    import stat

    try:
        mode = os.stat(p).st_mode
    except OSError:
        return
    if not stat.S_ISREG(mode) and not stat.S_ISDIR(mode) and str(p) != os.devnull:
        raise OptionError(
            f"{option} {path} is not a regular file (a named pipe or a device).",
            "Write to a new file, or to stdout and pipe it.",
        )


def output_file(
    path: Path, *, option: str, protect: Iterable[Path] = (), stores: Iterable[Path] = ()
) -> Path:
    """Check a file to be written; return it resolved."""
    p = _resolved(path, option)
    _not_special(p, path, option)
    if p.is_dir():
        raise OptionError(
            f"{option} {path} is a folder; a file name is needed.",
            f"Example: {option} {path / 'out.csv'}",
        )
    if not p.parent.is_dir():
        raise OptionError(
            f"{option} {path}: the folder {path.parent} does not exist.",
            "Create the folder first, or write somewhere else.",
        )
    for q in protect:
        if q.exists() and p == q.resolve():
            raise OptionError(
                f"{option} {path} would overwrite {q.name}, which this command reads.",
                "Write the output to a new file.",
            )
    for s in stores:
        if _inside(p, s.resolve()):
            raise OptionError(
                f"{option} {path} is inside the store folder {s}.",
                "Write outputs outside the store; its files belong to the store.",
            )
    return p


def output_dir(path: Path, *, option: str, stores: Iterable[Path] = ()) -> Path:
    """Check a folder to be written into (created if missing); return it resolved."""
    p = _resolved(path, option)
    if p.exists() and not p.is_dir():
        raise OptionError(
            f"{option} {path} is a file; a folder is needed.", "Name a new or existing folder."
        )
    if not p.exists() and not p.parent.is_dir():
        raise OptionError(
            f"{option} {path}: the folder {path.parent} does not exist.",
            "Create it first, or write somewhere else.",
        )
    for s in stores:
        s = s.resolve()
        if _inside(p, s) or (p.exists() and (p / "strata13-store.json").exists()):
            raise OptionError(
                f"{option} {path} is (inside) a store folder.",
                "Export to a folder outside the store.",
            )
    return p
