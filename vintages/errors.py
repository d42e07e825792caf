"""Exceptions raised by the vintage store; each subclasses a builtin so callers may catch broadly."""

from __future__ import annotations


class VintageError(Exception):
    """Base class of every error raised by :mod:`vintages`."""


class InputError(VintageError, ValueError):
    """A release file or table is malformed; the message names file, line and field."""

    def __init__(self, message: str, *, file: str | None = None, line: int | None = None,
                 field: str | None = None):
        message = _clip(str(message))
        where = [printable_path(file)] if file is not None else []
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


#: Longest message part kept in an error (a 4 MB cell must never reach a terminal whole).
MAX_MESSAGE = 500


def _clip(text: str, limit: int = MAX_MESSAGE) -> str:
    """``text`` cut to ``limit`` characters with an ellipsis (messages stay one readable line)."""
    return text if len(text) <= limit else text[: limit - 1] + "\u2026"


def printable_path(path) -> str:
    """A file name safe to print: undecodable bytes (surrogate escapes) shown as ``\\xNN``."""
    text = str(path)
    try:
        text.encode("utf-8")
    except UnicodeEncodeError:
        text = text.encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")
    return text


class OptionError(VintageError, ValueError):
    """An argument names something that does not exist or is malformed: a truth rule, a
    transformation, a variable, a model, a score. A usage error (the command line's exit code 2),
    unlike :class:`InputError`, which is about the data read."""


class UnknownNameError(OptionError, KeyError):
    """A name looked up is not there (a variable of the store, a model of the run); also a KeyError."""

    def __str__(self) -> str:  # KeyError would quote the message
        return str(self.args[0]) if self.args else ""


class ReleaseConflictError(VintageError, ValueError):
    """A batch would change a value already published for the same (variable, period, release)."""


class StoreLockedError(VintageError, RuntimeError):
    """Another writer holds the store's lock."""


class StoreCorruptError(VintageError, RuntimeError):
    """The store's manifest or a listed file fails verification; the message names the file."""


class MetadataConflictError(VintageError, ValueError):
    """An ingest gives units or a description that differ from a variable's recorded ones.

    Metadata change only through :meth:`vintages.store.VintageStore.describe`, which keeps an
    audit record of the old and the new value.
    """


class FileAccessError(VintageError, OSError):
    """A file could not be read or written (full disk, permissions, a directory in the way).

    The message names the file; ``errno`` and ``filename`` are those of the underlying error.
    """

    def __init__(self, message: str, *, errno: int | None = None, filename: str | None = None):
        super().__init__(message)
        self.errno, self.filename = errno, filename
        if filename is not None:
            self.strerror = message

    def __str__(self) -> str:
        return str(self.args[0]) if self.args else ""

    def __reduce__(self):
        return (_file_access_error, (str(self), self.errno, self.filename))


def _file_access_error(message, errno, filename) -> FileAccessError:
    return FileAccessError(message, errno=errno, filename=filename)


class StoreNotFoundError(VintageError, FileNotFoundError):
    """The path is not an initialised vintage store."""


class LookAheadError(VintageError, ValueError):
    """A request would need data released after the origin (or after the last release)."""
