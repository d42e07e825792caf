"""Exceptions raised by :mod:`harness`; each subclasses a builtin."""

from __future__ import annotations

from vintages import OptionError, UnknownNameError

__all__ = ["HarnessError", "OptionError", "RunError", "SpecError", "TaskOutputError", "UnknownNameError"]


class HarnessError(Exception):
    """Base class of every error raised by :mod:`harness`."""


class SpecError(HarnessError, ValueError):
    """The spec file is invalid; the message names the file, the key and the allowed values."""


class RunError(HarnessError, RuntimeError):
    """A run directory is missing, incomplete, or belongs to another spec."""


class TaskOutputError(HarnessError, ValueError):
    """A model returned draws of the wrong shape, coordinates, or with NaN."""
