"""Every release of every series, kept as published, and what was known on any past day.

Public front: :class:`VintageStore` (on-disk, append-only), :class:`Cube` (variable × period ×
release, vectorised as-of), :func:`read_releases` (validated readers).
"""

from __future__ import annotations

from vintages.calendar import check_origins, parse_schedule
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
from vintages.infoset import (
    InfoSet,
    SeriesSpec,
    Targets,
    build_infoset,
    build_infosets,
    make_targets,
    parse_truth,
    truth_table,
    truth_values,
)
from vintages.ingest import read_releases, validate_table
from vintages.store import AppendResult, VintageStore, open_store
from vintages.transforms import register_transform

__all__ = [
    "AppendResult",
    "InfoSet",
    "SeriesSpec",
    "Targets",
    "build_infoset",
    "build_infosets",
    "check_origins",
    "make_targets",
    "parse_schedule",
    "parse_truth",
    "register_transform",
    "revision_stats",
    "revisions_table",
    "truth_table",
    "truth_values",
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


def __getattr__(name: str):
    # the revision analysis needs scipy.stats (slow to import): load it on first use
    if name in ("revision_stats", "revisions_table"):
        from vintages import revisions

        return getattr(revisions, name)
    raise AttributeError(f"module 'vintages' has no attribute {name!r}")
