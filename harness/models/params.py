"""Hyperparameter constraints for model classes (the shared constraint types of :mod:`harness.constraints`)."""

from __future__ import annotations

from harness.constraints import (
    Boolean,
    Constraint,
    HasMethods,
    ImportPath,
    Interval,
    JSONTable,
    Options,
    PerVariable,
    coerce_toml,
    describe,
    validate_params,
)

__all__ = ["Boolean", "Constraint", "HasMethods", "ImportPath", "Interval", "JSONTable", "Options",
           "PerVariable", "coerce_toml", "describe", "validate_params"]
