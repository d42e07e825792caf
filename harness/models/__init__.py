"""Forecasting models: the protocol, the registry and the built-in families.

Built-in names: ``nochange``, ``ar``, ``bvar``, ``bvar_sv``; any other class is reachable by its
path ``package.module:Class`` (e.g. ``harness.models.adapter:FitPredictModel``).
"""

from __future__ import annotations

from harness.models.adapter import FitPredictModel
from harness.models.ar import AutoRegression
from harness.models.base import (
    BaseModel,
    ForecastModel,
    available_models,
    get_model_class,
    make_model,
    register,
)
from harness.models.bridge import BridgeEquations  # noqa: F401  (registers "bridge")
from harness.models.bvar import BayesianVAR
from harness.models.bvar_sv import BayesianVARSV
from harness.models.dfm import DynamicFactorModel  # noqa: F401  (registers "dfm")
from harness.models.errors import (
    InsufficientDataError,
    ModelError,
    ModelParameterError,
    UnknownModelError,
)
from harness.models.nochange import NoChange

__all__ = [
    "AutoRegression",
    "BaseModel",
    "BayesianVAR",
    "BayesianVARSV",
    "FitPredictModel",
    "ForecastModel",
    "InsufficientDataError",
    "ModelError",
    "ModelParameterError",
    "NoChange",
    "UnknownModelError",
    "available_models",
    "get_model_class",
    "make_model",
    "register",
]
