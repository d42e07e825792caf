"""Every release of every series, kept as published, and what was known on any past day.

Public front: :class:`VintageStore` (on-disk, append-only), :class:`Cube` (variable × period ×
release, vectorised as-of), :func:`read_releases` (validated readers).
"""

from __future__ import annotations

from vintages.cube import Cube, Vintage
from vintages.errors import (
    InputError,
    LookAheadError,
    ReleaseConflictError,
    StoreCorruptError,
    StoreLockedError,
    StoreNotFoundError,
    VintageError,
)
from vintages.ingest import read_releases, validate_table
from vintages.store import AppendResult, VintageStore, open_store

__all__ = [
    "AppendResult",
    "Cube",
    "InputError",
    "LookAheadError",
    "ReleaseConflictError",
    "StoreCorruptError",
    "StoreLockedError",
    "StoreNotFoundError",
    "Vintage",
    "VintageError",
    "VintageStore",
    "open_store",
    "read_releases",
    "validate_table",
]
