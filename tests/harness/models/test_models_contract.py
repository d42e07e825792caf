"""The model contract: every registered model passes check_model, and the output validator."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
import xarray as xr

import harness.contrib
from harness.errors import TaskOutputError
from harness.models import AutoRegression, BayesianVAR, BayesianVARSV, NoChange
from harness.models.base import BaseModel
from harness.models.contract import CheckCase, check_cases_of, validate_forecast
from harness.testing import (
    check_model,
    default_case,
    make_infoset,
    make_targets,
    model_checks,
    registered_cases,
)

# Every case of every registered model (each class's check_cases()), and the contributed models:
# a newly registered model is checked here without editing this file (the idea of
# scikit-learn's parametrize_with_checks).
CASES = registered_cases(extra=harness.contrib.MODELS)

# Further configurations of the built-ins, beyond the cases their classes declare.
MODELS = {
    "nochange": NoChange(),
    "nochange_growth_empirical": NoChange(level=False, mean="sample", density="empirical"),
    "ar": AutoRegression(),
    "ar_fixed": AutoRegression(max_lags=2, ic=None, param_uncertainty=False),
    "bvar": BayesianVAR(),
    "bvar_full_prior_student": BayesianVAR(lags=2, prior_mean={"output": 1.0, "prices": 0.5, "jobs": 0.0},
                                           sum_of_coefficients=1.0, co_persistence=1.0,
                                           shocks="student"),
    "bvar_sv": BayesianVARSV(n_iter=150, burn=50),
}
# random walks without drift (and constant growth) continue a constant, not a line
EXACT = {"nochange": "constant", "nochange_growth_empirical": "constant"}


@pytest.mark.parametrize("case", [pytest.param(c, id=i) for i, c in CASES])
def test_registered_model_passes_check_model(case):
    """Each check case of each registered (and contributed) model passes every conformance check."""
    check_model(case).raise_if_failed()


def test_the_registry_loop_covers_every_registered_model():
    """The contract test's cases include every name of available_models() and every contrib model."""
    from harness.models import available_models

    ids = [i for i, _ in CASES]
    for name in available_models():
        assert any(i == name or i.startswith(f"{name}[") for i in ids), name
    for path in harness.contrib.MODELS:
        assert any(i.startswith(path) for i in ids), path


@pytest.mark.parametrize("key", sorted(MODELS))
def test_builtin_model_passes_check_model(key):
    """check_model finds no failure for the built-in model configuration."""
    check_model(MODELS[key], exact_path=EXACT.get(key, "linear")).raise_if_failed()


def test_check_model_catches_a_model_that_ignores_the_seed():
    """The checker is not vacuous: a model using global randomness fails the seed checks."""

    class GlobalRandom(NoChange):
        def forecast(self, info, targets, n_draws, rng):
            return super().forecast(info, targets, n_draws, np.random.default_rng(np.random.randint(1 << 30)))  # noqa: NPY002

    with pytest.raises(AssertionError, match="check_seed_determinism"):
        check_model(GlobalRandom(), exact_path="constant").raise_if_failed()


def test_check_model_catches_a_model_that_reads_panel_attributes():
    """The checker flags a model whose draws depend on extra attributes of the panel."""

    class Peeker(NoChange):
        def forecast(self, info, targets, n_draws, rng):
            out = super().forecast(info, targets, n_draws, rng)
            return out + float("release_date" in info.panel.coords)

    info = make_infoset(np.random.default_rng(0).standard_normal((40, 2)).cumsum(axis=0), ["a", "b"])
    info.panel.coords["release_date"] = ("period", np.zeros(40))
    with pytest.raises(AssertionError, match="check_reads_only_infoset"):
        check_model(Peeker(), info, make_targets(info, ["a"], (-1, 0, 2)), strict=True)


class OneHorizonOff(AutoRegression):
    """A deliberately broken AR: the draws for each target are those of the period after it."""

    def draw(self, layout, rng):
        # the classic off-by-one: steps counted from one period too early
        return super().draw(replace(layout, target_ordinals=layout.target_ordinals + 1), rng)


def test_a_model_one_horizon_off_fails_the_trend_law_and_only_it():
    """On a noise-free linear trend a model one horizon off misses by one step; the law says so."""
    report = check_model(OneHorizonOff())
    assert [r.name for r in report.failed] == ["check_deterministic_trend"]
    assert "+1.00 periods of the path" in report["check_deterministic_trend"].message
    # the same law passes the correct model on the same case
    assert check_model(AutoRegression())["check_deterministic_trend"].passed


class ReadsPanel(NoChange):
    """A deliberately broken model: it drops the partial flags and uses every panel value."""

    def forecast(self, info, targets, n_draws, rng):
        return super().forecast(replace(info, partial=None), targets, n_draws, rng)


def test_a_model_that_treats_partial_quarters_as_published_fails():
    """A model reading the panel directly (ignoring InfoSet.partial) fails the partial-quarter law."""
    report = check_model(ReadsPanel(), exact_path="constant")
    assert [r.name for r in report.failed] == ["check_partial_is_unobserved"]
    assert "returned as a published value" in report["check_partial_is_unobserved"].message


def test_model_checks_are_listed():
    """model_checks yields every check, each with a one-line docstring."""
    checks = list(model_checks())
    assert len(checks) >= 10 and all(c.__doc__ for c in checks)


# ---------------------------------------------------------------------------- check cases
def test_check_cases_default_to_the_default_instance_and_a_native_layout_must_declare():
    """A class without check_cases gets its default instance; a native-layout class must declare."""

    class Plain:
        name = "plain"
        version = "1"

        def forecast(self, info, targets, n_draws, rng):
            raise NotImplementedError

    (case,) = check_cases_of(Plain)
    assert case.id == "plain" and isinstance(case.model, Plain) and case.exact_path == "linear"

    class Native(BaseModel):
        name = "native"
        infoset_layout = "native"

    with pytest.raises(TypeError, match="infoset_layout='native' but no check_cases"):
        check_cases_of(Native)

    info = make_infoset(np.arange(30.0)[:, None], ["m"], start="2000-01", freq="M")

    class DeclaredNative(Native):
        @classmethod
        def check_cases(cls):
            return [CheckCase("monthly", cls(), info=info)]

    (case,) = check_cases_of(DeclaredNative)
    assert case.info is info


def test_check_cases_are_validated():
    """Bad declarations (no reason for a skipped law, duplicate ids, wrong types) raise."""
    with pytest.raises(ValueError, match="needs a reason"):
        CheckCase("x", NoChange(), exact_path=None)
    with pytest.raises(ValueError, match=r"\['constant', 'linear'\]"):
        CheckCase("x", NoChange(), exact_path="quadratic")

    class Dup(NoChange):
        @classmethod
        def check_cases(cls):
            return [CheckCase("a", cls()), CheckCase("a", cls(mean="sample"))]

    with pytest.raises(TypeError, match=r"duplicates \['a'\]"):
        check_cases_of(Dup)


def test_a_case_without_a_deterministic_path_skips_the_law_with_its_reason():
    """exact_path=None records the trend law as skipped, with the reason, not as passed."""
    case = CheckCase("growth_zero", NoChange(level=False), exact_path=None,
                     reason="forecasts zero growth whatever the data")
    report = check_model(case)
    assert report.ok and report["check_deterministic_trend"].status == "skipped"


# ---------------------------------------------------------------------------- the validator
def _good(targets, n=8):
    data = np.zeros((n, len(targets.variables), len(targets.horizons)))
    return xr.DataArray(data, dims=("draw", "variable", "horizon"),
                        coords={"variable": list(targets.variables), "horizon": list(targets.horizons)})


def test_validate_forecast_accepts_the_contract_and_transposes():
    """A valid forecast passes and comes back in (draw, variable, horizon) order."""
    _, targets = default_case()
    da = _good(targets).transpose("horizon", "draw", "variable")
    out = validate_forecast(da, targets, 8, model="m")
    assert out.dims == ("draw", "variable", "horizon")


@pytest.mark.parametrize("mutate, match", [
    (lambda da: da.values, r"model 'm': forecast\(\) returned ndarray, expected an xarray.DataArray"),
    (lambda da: da.rename(horizon="step"), r"returned dims \('draw', 'variable', 'step'\)"),
    (lambda da: da.isel(draw=slice(0, 7)), "returned 7 draws, expected 8"),
    (lambda da: da.assign_coords(variable=["prices", "output"]),
     r"variables \['prices', 'output'\], expected \['output', 'prices'\]"),
    (lambda da: da.assign_coords(horizon=[-1, 0, 1, 5]), r"horizons \[-1, 0, 1, 5\], expected \[-1, 0, 1, 4\]"),
    (lambda da: da.astype(np.float32), "dtype float32, expected float64"),
    (lambda da: da.where(da.horizon != 4), "16 NaN or infinite draw.*'output' at horizon 4"),
])
def test_validate_forecast_refuses_each_breach_in_one_line_naming_the_model(mutate, match):
    """Each breach of the output contract raises TaskOutputError with a one-line message."""
    _, targets = default_case()
    with pytest.raises(TaskOutputError, match=match) as exc:
        validate_forecast(mutate(_good(targets)), targets, 8, model="m")
    assert "\n" not in str(exc.value)
    assert isinstance(exc.value, ValueError)  # TaskOutputError subclasses a builtin


def test_output_array_uses_the_validator():
    """A model whose draw() yields NaN gets the validator's TaskOutputError naming it."""

    class NaNDraws(NoChange):
        def draw(self, layout, rng):
            return np.full((layout.n_draws, *layout.observed.shape), np.nan)

    info, targets = default_case()
    with pytest.raises(TaskOutputError, match=r"model 'nochange': forecast\(\) returned \d+ NaN"):
        NaNDraws().forecast(info, targets, 4, np.random.default_rng(0))
