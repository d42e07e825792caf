"""Every built-in model passes the conformance checks of harness.testing.check_model."""

from __future__ import annotations

import numpy as np
import pytest

from harness.models import AutoRegression, BayesianVAR, BayesianVARSV, NoChange
from harness.testing import check_model, make_infoset, make_targets, model_checks

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


@pytest.mark.parametrize("key", sorted(MODELS))
def test_builtin_model_passes_check_model(key):
    """check_model finds no failure for the built-in model configuration."""
    check_model(MODELS[key])


def test_check_model_catches_a_model_that_ignores_the_seed():
    """The checker is not vacuous: a model using global randomness fails the seed checks."""

    class GlobalRandom(NoChange):
        def forecast(self, info, targets, n_draws, rng):
            return super().forecast(info, targets, n_draws, np.random.default_rng(np.random.randint(1 << 30)))  # noqa: NPY002

    with pytest.raises(AssertionError, match="check_seed_determinism"):
        check_model(GlobalRandom())


def test_check_model_catches_a_model_that_reads_panel_attributes():
    """The checker flags a model whose draws depend on extra attributes of the panel."""

    class Peeker(NoChange):
        def forecast(self, info, targets, n_draws, rng):
            out = super().forecast(info, targets, n_draws, rng)
            return out + float("release_date" in info.panel.coords)

    info = make_infoset(np.random.default_rng(0).standard_normal((40, 2)).cumsum(axis=0), ["a", "b"])
    info.panel.coords["release_date"] = ("period", np.zeros(40))
    with pytest.raises(AssertionError, match="check_reads_only_infoset"):
        check_model(Peeker(), info, make_targets(info, ["a"], (-1, 0, 2)))


def test_model_checks_are_listed():
    """model_checks yields every check, each with a one-line docstring."""
    checks = list(model_checks())
    assert len(checks) >= 10 and all(c.__doc__ for c in checks)
