"""One output folder: its files, their SHA-256 sums and one manifest written last.

Every command that writes a folder (``export``, ``curve``, ``excursion`` and ``coverage``
with ``--out``) writes through an :class:`Artifact`: each file is registered as it is
written, its sum is taken from the bytes on disk, and :meth:`Artifact.finish` writes the
manifest once, after every file, listing each by its path relative to the folder. Nothing
in a manifest depends on the clock or on where the folder is, so the same command on the
same store version gives the same bytes.

A part of a folder written by another step (the curve beside an export) is a
:meth:`sub` artifact: its files are listed in the parent's manifest under the part's
folder name, and the part may keep a manifest of its own.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path
from typing import Any

from strata13.errors import OptionError

__all__ = ["Artifact", "sha256_of"]


def sha256_of(path: Path) -> str:
    """The SHA-256 of a file's bytes, as hex."""
    return hashlib.sha256(path.read_bytes()).hexdigest()


class Artifact:
    """The files of one output folder, hashed as they are written, and its manifest."""

    def __init__(
        self,
        folder: Path,
        manifest: str = "manifest.json",
        *,
        _parent: Artifact | None = None,
        _prefix: str = "",
    ) -> None:
        if folder.exists() and not folder.is_dir():
            raise OptionError(f"--out {folder} is a file, not a folder.", "Name a folder.")
        self.folder = folder
        self.manifest_name = manifest
        self.files: dict[str, str] = {}  # path relative to the folder -> sha256
        self.sizes: dict[str, int] = {}  # path relative to the folder -> bytes
        self._parent = _parent
        self._prefix = _prefix
        self._finished = False

    def open(self) -> Path:
        """Create the folder (and its parents) if missing; return it."""
        self.folder.mkdir(parents=True, exist_ok=True)
        return self.folder

    def path(self, name: str) -> Path:
        """Where to write the file ``name`` (relative to the folder); register it with
        :meth:`add` once written."""
        self._check_open()
        return self.folder / name

    def add(self, name: str) -> str:
        """Register a file already written in the folder; returns its SHA-256."""
        self._check_open()
        p = self.folder / name
        if not p.is_file():
            raise FileNotFoundError(p)
        digest = sha256_of(p)
        self.files[name] = digest
        self.sizes[name] = p.stat().st_size
        if self._parent is not None:
            self._parent._take(f"{self._prefix}{name}", digest, self.sizes[name])
        return digest

    def write_text(self, name: str, text: str) -> str:
        """Write a UTF-8 text file into the folder and register it; returns its SHA-256."""
        self.path(name).write_text(text, encoding="utf-8")
        return self.add(name)

    def sub(self, folder: str, manifest: str = "manifest.json") -> Artifact:
        """A part of this folder in subfolder ``folder``: its files are listed here as
        ``folder/name``; its own manifest (if it finishes) is not."""
        return Artifact(self.folder / folder, manifest, _parent=self, _prefix=f"{folder}/")

    def finish(self, fields: dict[str, Any]) -> Path:
        """Write the manifest: ``fields`` and the list of files with their sums. Once only,
        after every file."""
        self._check_open()
        manifest = {
            **fields,
            "files": [
                {"path": k, "sha256": v, "bytes": self.sizes[k]}
                for k, v in sorted(self.files.items())
            ],
        }
        p = self.folder / self.manifest_name
        p.write_text(
            json.dumps(manifest, indent=1, sort_keys=True, ensure_ascii=False, default=str) + "\n",
            encoding="utf-8",
        )
        self._finished = True
        return p

    def _take(self, name: str, digest: str, size: int) -> None:
        self._check_open()
        self.files[name] = digest
        self.sizes[name] = size

    def _check_open(self) -> None:
        if self._finished:
            raise RuntimeError(f"the manifest of {self.folder} is written; the folder is closed")
