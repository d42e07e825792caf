"""docs/model_template.py passes the conformance suite unmodified and draws what it documents."""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from harness.testing import check_model, make_infoset, make_targets

TEMPLATE = Path(__file__).resolve().parents[3] / "docs" / "model_template.py"


@pytest.fixture(scope="module")
def template():
    """The template imported from its file, as a user would import their copy."""
    spec = importlib.util.spec_from_file_location("model_template", TEMPLATE)
    module = importlib.util.module_from_spec(spec)
    sys.modules["model_template"] = module  # pickling finds the class by module name
    spec.loader.exec_module(module)
    yield module
    sys.modules.pop("model_template", None)


def test_template_passes_check_model_unmodified(template):
    """The template model passes every conformance check with no check skipped."""
    report = check_model(template.LocalDrift()).raise_if_failed()
    assert not report.skipped


def test_template_docstring_states_every_contract_rule(template):
    """The module docstring lists the rules a user model must follow."""
    doc = template.__doc__
    for rule in ("name and version", "keyword-only", "params()", "Only info and rng",
                 "returned as published", "InsufficientDataError", "pickles", "partial quarter"):
        assert rule in doc, rule


def test_template_one_step_predictive_is_the_diffuse_prior_student_t(template):
    """One step ahead the draws are t_{m-1}(y_T + mean(d), s_d sqrt(1 + 1/m)) (Zellner 1971, ch. 3)."""
    rng = np.random.default_rng(4)
    y = np.cumsum(0.3 + rng.standard_normal(60))
    info = make_infoset(y[:, None], ["lvl"])
    draws = template.LocalDrift(window=30).forecast(info, make_targets(info, horizons=(0,)), 40_000,
                                                    np.random.default_rng(0)).values.ravel()
    d = np.diff(y)[-30:]
    m = len(d)
    scale = d.std(ddof=1) * np.sqrt(1 + 1 / m)
    assert stats.kstest(draws, stats.t(df=m - 1, loc=y[-1] + d.mean(), scale=scale).cdf).pvalue > 1e-3


def test_template_raises_on_too_little_data(template):
    """Three observations (two changes) raise InsufficientDataError naming the variable."""
    from harness.models.errors import InsufficientDataError

    info = make_infoset(np.arange(3.0)[:, None], ["lvl"])
    with pytest.raises(InsufficientDataError, match="'lvl' needs at least 4 .* got 3"):
        template.LocalDrift().forecast(info, make_targets(info), 10, np.random.default_rng(0))
