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


def output_file(
    path: Path, *, option: str, protect: Iterable[Path] = (), stores: Iterable[Path] = ()
) -> Path:
    """Check a file to be written; return it resolved."""
    p = path.resolve()
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
    p = path.resolve()
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
