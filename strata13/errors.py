"""The one exception tree of strata13.

::

    Strata13Error                 every expected failure; .hint says what to do
    ├── InstructionError          the instructions are wrong            -> exit 2
    │   ├── OptionError           a command-line option or value
    │   ├── ConfigError           a mapping/rules/regions/model file is malformed
    │   └── InputFileError        a named file is missing, unreadable or not a spreadsheet
    └── RefusedError              the data or the request were refused  -> exit 1
        ├── ValidationFailed      a sheet broke rules; .report holds every problem
        ├── NotAStoreError        the folder is not a strata13 store
        ├── StoreError            the store refused an operation (lock, version, commit)
        ├── QueryRefused          a filter or a `sql` statement was refused
        └── DomainError           a request that contradicts the data (unknown record …)
    Interrupted                   Ctrl-C during a write; .landed   -> exit 130

The CLI maps InstructionError to exit 2, RefusedError to exit 1 and KeyboardInterrupt to
130. Library users catch the class that matters to them.
"""

from __future__ import annotations

from typing import Any


class Strata13Error(Exception):
    """Base of all expected failures: a one-sentence message and a hint."""

    exit_code = 1

    def __init__(self, message: str, hint: str = "") -> None:
        super().__init__(message)
        self.message = message
        self.hint = hint

    def __str__(self) -> str:
        return self.message


class InstructionError(Strata13Error):
    exit_code = 2


class OptionError(InstructionError):
    pass


class ConfigError(InstructionError):
    pass


class InputFileError(InstructionError):
    pass


class RefusedError(Strata13Error):
    exit_code = 1


class ValidationFailed(RefusedError):
    """A sheet broke validation rules; ``report`` lists every problem at once."""

    def __init__(self, message: str, report: Any, hint: str = "") -> None:
        super().__init__(message, hint)
        self.report = report


class NotAStoreError(RefusedError):
    pass


class StoreError(RefusedError):
    pass


class QueryRefused(RefusedError):
    pass


class DomainError(RefusedError):
    pass


class Interrupted(Strata13Error):
    """Ctrl-C during a write; ``landed`` says truthfully whether the commit made it."""

    exit_code = 130

    def __init__(self, message: str, landed: bool) -> None:
        super().__init__(message, "")
        self.landed = landed
