"""Errors and warnings of :mod:`harness.pools`; each subclasses a builtin."""

from __future__ import annotations

from harness.errors import HarnessError


class PoolError(HarnessError, ValueError):
    """A pool cannot be formed from the inputs; the message names the argument, expected and got."""


class PoolWarning(UserWarning):
    """A pool used its documented fallback somewhere (the result's ``warnings`` list the cells)."""
