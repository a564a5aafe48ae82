"""Reading the small text files a command names: mappings' tables, rules, charts, models.

One place says what a missing, folder or non-UTF-8 file gets (an InstructionError, exit 2),
so every file option answers the same way.
"""

from __future__ import annotations

from pathlib import Path

from strata13.errors import ConfigError, InputFileError


def read_text(path: Path | str, what: str, hint: str) -> str:
    """The file's text (UTF-8, a BOM dropped); ``what`` names it, ``hint`` says where it
    was given (e.g. "Check --rules.")."""
    p = Path(path)
    if p.is_dir():
        raise InputFileError(f"{what} {p} is a folder.", hint)
    if not p.is_file():
        raise InputFileError(f"{what} {p} does not exist.", hint)
    try:
        return p.read_bytes().decode("utf-8-sig")
    except UnicodeDecodeError:
        raise ConfigError(f"{p.name} is not UTF-8 text.", f"Save the {what} as UTF-8.") from None
    except OSError as exc:
        raise InputFileError(f"{what} {p} cannot be read ({exc.strerror}).", hint) from None
