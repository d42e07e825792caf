"""Exceptions raised by the forecasting models; each subclasses a builtin so callers may catch broadly."""

from __future__ import annotations


class ModelError(Exception):
    """Base class of every error raised by :mod:`harness.models`."""


class InsufficientDataError(ModelError, ValueError):
    """The information set is too short (or too sparse) to estimate the model.

    Raised instead of returning NaN draws; the message names the model, the variable or block,
    how many observations were needed and how many were found.
    """


class ModelParameterError(ModelError, ValueError):
    """A hyperparameter is invalid; the message names it, the expected values and the value got."""


class UnknownModelError(ModelError, ValueError):
    """A model name or ``package.module:Class`` path does not resolve to a model class."""
