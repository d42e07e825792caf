"""The model registry, the protocol, and input validation shared by every model."""

from __future__ import annotations

import numpy as np
import pytest

from harness.models import (
    AutoRegression,
    BaseModel,
    BayesianVAR,
    BayesianVARSV,
    ForecastModel,
    NoChange,
    available_models,
    get_model_class,
    make_model,
    register,
)
from harness.models.errors import ModelParameterError, UnknownModelError
from harness.testing import make_infoset, make_targets


def test_builtin_names_are_registered_and_sorted():
    """The four built-in names resolve to their classes and are listed sorted."""
    assert available_models() == ["ar", "bridge", "bvar", "bvar_sv", "dfm", "nochange"]
    assert get_model_class("nochange") is NoChange
    assert get_model_class("ar") is AutoRegression
    assert get_model_class("bvar") is BayesianVAR
    assert get_model_class("bvar_sv") is BayesianVARSV


def test_unknown_name_lists_the_valid_names_sorted():
    """An unknown model name raises a ValueError listing the registered names, sorted."""
    with pytest.raises(ValueError, match=r"\['ar', 'bridge', 'bvar', 'bvar_sv', 'dfm', 'nochange'\]"):
        get_model_class("arima")


def test_paths_resolve_and_bad_paths_say_what_failed():
    """A 'package.module:Class' path resolves; a missing module or attribute is named."""
    assert get_model_class("harness.models.bvar:BayesianVAR") is BayesianVAR
    with pytest.raises(UnknownModelError, match="cannot import module 'no_such_pkg.mod'"):
        get_model_class("no_such_pkg.mod:Model")
    with pytest.raises(UnknownModelError, match="has no attribute 'Nope'"):
        get_model_class("harness.models.bvar:Nope")


def test_make_model_rejects_unknown_parameters_listing_valid_ones():
    """make_model checks parameter names against the constructor and lists the valid ones."""
    assert make_model("ar", max_lags=2).max_lags == 2
    with pytest.raises(ModelParameterError, match=r"unknown parameter\(s\) \['lag'\]; valid "
                                                  r"parameters: \['ic', 'max_lags', 'param_uncertainty'\]"):
        make_model("ar", lag=2)


def test_register_refuses_a_second_class_under_a_taken_name():
    """Registering another class under an existing name raises instead of shadowing it."""

    class Impostor(BaseModel):
        name = "ar"
        version = "1"

        def forecast(self, info, targets, n_draws, rng):
            raise NotImplementedError

    with pytest.raises(ValueError, match="already registered"):
        register(Impostor)
    assert get_model_class("ar") is AutoRegression


def test_builtins_satisfy_the_protocol():
    """Every built-in instance is a ForecastModel by duck typing."""
    for name in available_models():
        assert isinstance(make_model(name), ForecastModel)


def test_inputs_are_validated_with_actionable_messages():
    """Unknown target variables, a wrong frequency and a bad rng raise with what was expected."""
    info = make_infoset(np.random.default_rng(0).standard_normal((30, 2)), ["a", "b"])
    model = NoChange()
    bad = make_targets(info, ["a", "zeta"], (0,))
    with pytest.raises(ValueError, match=r"\['zeta'\] are not in the information set; available: \['a', 'b'\]"):
        model.forecast(info, bad, 10, np.random.default_rng(0))
    with pytest.raises(TypeError, match="numpy.random.Generator"):
        model.forecast(info, make_targets(info), 10, np.random.RandomState(0))
    with pytest.raises(ValueError, match="n_draws must be an integer >= 1"):
        model.forecast(info, make_targets(info), 0, np.random.default_rng(0))


def test_models_do_no_work_in_init():
    """Invalid hyperparameters are accepted by __init__ and reported at forecast time."""
    model = BayesianVAR(lags=-1)
    assert model.lags == -1
    info = make_infoset(np.random.default_rng(0).standard_normal((30, 2)), ["a", "b"])
    with pytest.raises(ModelParameterError, match="'lags' must be an integer >= 1, got -1"):
        model.forecast(info, make_targets(info), 10, np.random.default_rng(0))


def test_realigned_panels_are_read_through_the_shifts():
    """Under vertical realignment a target's value is looked up in the row of period + shift."""
    from dataclasses import replace

    rng = np.random.default_rng(0)
    y = rng.standard_normal((40, 2)).cumsum(axis=0)
    y[-1, 1] = np.nan  # b ends one period earlier: its last reference period is row 38
    shifted = np.full_like(y, np.nan)
    shifted[:, 0] = y[:, 0]
    shifted[1:, 1] = y[:-1, 1]  # realigned: the row labelled p holds b's value for p - 1
    info = replace(make_infoset(shifted, ["a", "b"]), policy="realign", shifts={"a": 0, "b": 1})
    out = NoChange().forecast(info, make_targets(info, ["b"], (-2, -1)), 200, np.random.default_rng(1))
    assert np.all(out.sel(horizon=-2).values == y[38, 1])  # observed reference period
    assert out.sel(horizon=-1).std() > 0  # reference period 39 is not observed yet
