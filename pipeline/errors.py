"""One exception tree, translated once by the CLI (exit codes in DESIGN.md).

Messages say what was expected, what was found and where (file, byte offset or line),
with a hint when there is a fix. Anything that is not a TandemError is a bug (exit 1).
"""

from __future__ import annotations


class TandemError(Exception):
    """Base of every error a user can cause and fix."""

    exit_code = 1


class FormatError(TandemError):
    """The bytes are not what the format requires (not STDF, damaged, unsupported)."""

    exit_code = 3

    def __init__(self, message: str, offset: int | None = None):
        super().__init__(message if offset is None else f"{message} (at byte {offset})")
        self.offset = offset


class InputError(TandemError):
    """An input file cannot be used (unreadable, bad CSV, too large)."""

    exit_code = 3


class ConfigError(TandemError):
    """A block map or option is invalid."""

    exit_code = 2


class StoreError(TandemError):
    """The store cannot be opened, locked or written."""

    exit_code = 1


class UsageError(TandemError):
    """Bad command-line arguments."""

    exit_code = 2
