"""Reading the files a command names: sheets, mappings' tables, rules, charts, models.

One place says what a missing, folder, non-regular (a named pipe, a device) or non-UTF-8
file gets (an InstructionError, exit 2), so every file option answers the same way — and
none of them waits: a file is opened without blocking and read only once the open file is
known to be a regular file.
"""

from __future__ import annotations

import errno
import os
import stat
from pathlib import Path

from strata13.errors import ConfigError, InputFileError

KINDS = {
    stat.S_IFIFO: "a named pipe",
    stat.S_IFCHR: "a character device",
    stat.S_IFBLK: "a block device",
    stat.S_IFSOCK: "a socket",
}


def _name(p: Path) -> str:
    """The path for a message: shortened when very long, control characters shown."""
    text = repr(str(p))[1:-1]
    return text if len(text) <= 120 else text[:60] + "…" + text[-40:]


def _os_problem(exc: OSError) -> str:
    if exc.errno == errno.ELOOP:
        return "is a loop of symbolic links"
    if exc.errno == errno.ENAMETOOLONG:
        return "has a name longer than the system allows (255 bytes a part)"
    if exc.errno in (errno.ENOENT, errno.ENOTDIR):
        return "does not exist"
    if exc.errno in (errno.EACCES, errno.EPERM):
        return "cannot be read (permission denied)"
    return f"cannot be read ({exc.strerror or exc})"


NAME_MAX = 255  # bytes in one part of a path (Linux, macOS)
PATH_MAX = 4095


def usable_name(path: Path | str, what: str, hint: str) -> Path:
    """``path`` if the system can take its name at all (no NUL, parts of at most 255 bytes),
    checked without touching the disk; else InputFileError."""
    p = Path(path)
    text = str(p)
    if "\x00" in text:
        raise InputFileError(f"the name of the {what} {_name(p)} holds a NUL character.", hint)
    encoded = os.fsencode(text)
    if len(encoded) > PATH_MAX or any(len(os.fsencode(x)) > NAME_MAX for x in p.parts):
        raise InputFileError(
            f"{what} {_name(p)} has a name longer than the system allows "
            f"({NAME_MAX} bytes a part).",
            hint,
        )
    return p


def check_file(path: Path | str, what: str, hint: str) -> Path:
    """``path`` if it names a regular file; else InputFileError saying what it is instead."""
    p = usable_name(path, what, hint)
    try:
        mode = os.stat(p).st_mode
    except OSError as exc:
        raise InputFileError(f"{what} {_name(p)} {_os_problem(exc)}.", hint) from None
    except ValueError as exc:  # a name the system cannot take at all
        raise InputFileError(f"{what} {_name(p)} is not a usable name ({exc}).", hint) from None
    if stat.S_ISDIR(mode):
        raise InputFileError(f"{what} {_name(p)} is a folder.", hint)
    if not stat.S_ISREG(mode):
        kind = KINDS.get(stat.S_IFMT(mode), "not a regular file")
        raise InputFileError(
            f"{what} {_name(p)} is {kind}, not a regular file.", "Name a file saved on disk."
        )
    return p


def exists(path: Path) -> bool:
    """Whether anything is at ``path``; False for a name the system cannot take."""
    try:
        return path.exists()
    except (OSError, ValueError):
        return False


def read_bytes(path: Path | str, what: str, hint: str) -> bytes:
    """The bytes of a regular file, opened without blocking (a pipe swapped in after the
    check cannot make the read wait)."""
    p = check_file(path, what, hint)
    try:
        fd = os.open(p, os.O_RDONLY | os.O_NONBLOCK)
    except OSError as exc:
        raise InputFileError(f"{what} {_name(p)} {_os_problem(exc)}.", hint) from None
    try:
        if not stat.S_ISREG(os.fstat(fd).st_mode):
            raise InputFileError(f"{what} {_name(p)} is not a regular file.", hint)
        with os.fdopen(fd, "rb", closefd=False) as fh:
            return fh.read()
    except OSError as exc:
        raise InputFileError(f"{what} {_name(p)} {_os_problem(exc)}.", hint) from None
    finally:
        os.close(fd)


def read_text(path: Path | str, what: str, hint: str) -> str:
    """The file's text (UTF-8, a BOM dropped); ``what`` names it, ``hint`` says where it
    was given (e.g. "Check --rules.")."""
    p = Path(path)
    data = read_bytes(p, what, hint)
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise ConfigError(f"{p.name} is not UTF-8 text.", f"Save the {what} as UTF-8.") from None
