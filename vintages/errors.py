"""Exceptions raised by the vintage store; each subclasses a builtin so callers may catch broadly."""

from __future__ import annotations


class VintageError(Exception):
    """Base class of every error raised by :mod:`vintages`."""


class InputError(VintageError, ValueError):
    """A release file or table is malformed; the message names file, line and field."""

    def __init__(self, message: str, *, file: str | None = None, line: int | None = None,
                 field: str | None = None):
        where = [str(file)] if file is not None else []
        if line is not None:
            where.append(f"line {line}")
        if field is not None:
            where.append(f"field '{field}'")
        text = f"{', '.join(where)}: {message}" if where else message
        # One line, always: a message is shown in a terminal, a log line or a CI annotation.
        super().__init__(text.replace("\r\n", " ").replace("\n", " ").replace("\r", " "))
        self.file, self.line, self.field, self.reason = file, line, field, message

    def __reduce__(self):
        # Keep file/line/field when the error crosses a process boundary (joblib workers).
        return (_input_error, (self.reason, self.file, self.line, self.field))


def _input_error(message, file, line, field) -> InputError:
    return InputError(message, file=file, line=line, field=field)


class ReleaseConflictError(VintageError, ValueError):
    """A batch would change a value already published for the same (variable, period, release)."""


class StoreLockedError(VintageError, RuntimeError):
    """Another writer holds the store's lock."""


class StoreCorruptError(VintageError, RuntimeError):
    """The store's manifest or a listed file fails verification."""


class StoreNotFoundError(VintageError, FileNotFoundError):
    """The path is not an initialised vintage store."""


class LookAheadError(VintageError, ValueError):
    """A request would need data released after the origin (or after the last release)."""
