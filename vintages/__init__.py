"""Every release of every series, kept as published, and what was known on any past day.

This package is the data side: it knows nothing of models or scores. Its public front is the
list below (``vintages.__all__``); :mod:`harness` imports from here only. Names load on first
use, so ``from vintages import VintageStore`` does not import xarray.

* The store: :class:`VintageStore` (append-only Parquet release log and manifest),
  :func:`open_store`, :func:`read_releases` / :func:`validate_table` (validated readers),
  :func:`atomic_write_bytes` (the one atomic write every file goes through).
* What was known when: :class:`Cube` (variable × period × release, vectorised as-of),
  :class:`Vintage`.
* Information sets and truths: :func:`build_infosets`, :class:`InfoSet`, :class:`Targets`,
  :func:`make_targets`, :func:`truth_values`, :func:`parse_truth`.
* Calendars (origins), transformations, periods, chronologies (recessions), revisions and the
  long-run variance shared with the comparison tests.
"""

from __future__ import annotations

import importlib

_PUBLIC: dict[str, str] = {
    # errors
    "VintageError": "vintages.errors",
    "InputError": "vintages.errors",
    "OptionError": "vintages.errors",
    "UnknownNameError": "vintages.errors",
    "LookAheadError": "vintages.errors",
    "ReleaseConflictError": "vintages.errors",
    "StoreCorruptError": "vintages.errors",
    "StoreLockedError": "vintages.errors",
    "StoreNotFoundError": "vintages.errors",
    "MetadataConflictError": "vintages.errors",
    "FileAccessError": "vintages.errors",
    # option vocabularies
    "FREQS": "vintages._types",
    "LAYOUTS": "vintages._types",
    # store and ingest
    "AppendResult": "vintages.store",
    "VintageStore": "vintages.store",
    "open_store": "vintages.store",
    "atomic_write_bytes": "vintages.store",
    "sha256_file": "vintages.store",
    "sha256_matches": "vintages.store",
    "atomic_writer": "vintages.store",
    "CleanupResult": "vintages.store",
    "STORE_FORMAT": ("vintages.store", "FORMAT"),
    "clear_verified_cache": "vintages.store",
    "read_releases": "vintages.ingest",
    "validate_table": "vintages.ingest",
    "read_sdmx_csv": "vintages.sdmx",
    # periods
    "parse_periods": "vintages.periods",
    "format_periods": "vintages.periods",
    "period_index": "vintages.periods",
    "period_end": "vintages.periods",
    "period_of_date": "vintages.periods",
    "freq_of": "vintages.periods",
    "period_problem": "vintages.periods",
    "YEAR_MIN": "vintages.periods",
    "YEAR_MAX": "vintages.periods",
    "NO_PERIOD": "vintages.periods",
    # release index
    "Cube": "vintages.cube",
    "Vintage": "vintages.cube",
    # information sets and truths
    "InfoSet": "vintages.contract",
    "SeriesSpec": "vintages.contract",
    "Targets": "vintages.contract",
    "TruthRule": "vintages.contract",
    "POLICIES": "vintages.contract",
    "MODES": "vintages.contract",
    "PANEL_LAYOUTS": "vintages.contract",
    "TRANSFORMS": "vintages.contract",
    "TRUTH_FORMS": "vintages.contract",
    "make_targets": "vintages.contract",
    "build_infoset": "vintages.infosets",
    "build_infosets": "vintages.infosets",
    "parse_truth": "vintages.truths",
    "truth_table": "vintages.truths",
    "truth_values": "vintages.truths",
    # transformations
    "CONVERSIONS": "vintages.transforms",
    "PARTIAL_POLICIES": "vintages.transforms",
    "register_transform": "vintages.transforms",
    "transform_names": "vintages.transforms",
    # calendars
    "RULES": "vintages.calendar",
    "check_origins": "vintages.calendar",
    "parse_schedule": "vintages.calendar",
    "release_calendar": "vintages.calendar",
    # chronologies
    "RECESSION": "vintages.chronology",
    "EXPANSION": "vintages.chronology",
    "read_chronology": "vintages.chronology",
    "parse_chronology_frame": "vintages.chronology",
    "regimes": "vintages.chronology",
    "harding_pagan": "vintages.chronology",
    # long-run variances (shared with the comparison tests)
    "KERNELS": "vintages.hac",
    "daniell_covariance": "vintages.hac",
    "daniell_variance": "vintages.hac",
    "Kernel": "vintages.hac",
    "kernel_weights": "vintages.hac",
    "long_run_covariance": "vintages.hac",
    "long_run_variance": "vintages.hac",
    "newey_west_lags": "vintages.hac",
    "ols_hac": "vintages.hac",
    # revisions
    "revision_stats": "vintages.revisions",
    "revisions_table": "vintages.revisions",
    # the invented demo economy
    "build_demo_store": "vintages.demo",
    "simulate_demo": ("vintages.demo", "simulate"),
    "write_demo_chronology": ("vintages.demo", "write_chronology"),
}

__all__ = sorted(_PUBLIC)


def __getattr__(name: str):
    target = _PUBLIC.get(name)
    if target is None:
        raise AttributeError(f"module 'vintages' has no attribute {name!r}")
    module, attr = target if isinstance(target, tuple) else (target, name)
    value = getattr(importlib.import_module(module), attr)
    globals()[name] = value  # later lookups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
