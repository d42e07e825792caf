"""Gaussian-process autoregression against scikit-learn's GaussianProcessRegressor."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import stats

from harness.contrib import gp
from harness.contrib.gp import GaussianProcessAR, fit_gp, gp_log_marginal_likelihood
from harness.models import get_model_class, make_model
from harness.models.errors import InsufficientDataError, ModelParameterError
from harness.testing import make_infoset, make_targets

pytest.importorskip("sklearn")


@pytest.fixture(autouse=True)
def _one_blas_thread():
    """Small matrices: one BLAS thread for both implementations (threads only contend here)."""
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        yield

CONFIGS = [("squared_exponential", True), ("matern52", True), ("squared_exponential", False),
           ("matern52", False)]


def _growth(column: str = "realgdp") -> np.ndarray:
    """Annualised quarterly growth of a statsmodels macrodata series (open reference data)."""
    from statsmodels.datasets import macrodata

    return 400 * np.diff(np.log(macrodata.load_pandas().data[column].to_numpy()))


def _design(y: np.ndarray, p: int = 2):
    z = (y - y.mean()) / y.std()
    return gp._lag_matrix(z, p)


def _sk_kernel(kernel: str, linear: bool, hyper: dict):
    """The same covariance in scikit-learn's kernel algebra, with the same bounds."""
    from sklearn.gaussian_process.kernels import RBF, DotProduct, Matern, WhiteKernel
    from sklearn.gaussian_process.kernels import ConstantKernel as C

    b = gp._BOUNDS
    stat = (RBF(hyper["length_scale"], b["length_scale"]) if kernel == "squared_exponential"
            else Matern(hyper["length_scale"], b["length_scale"], nu=2.5))
    k = C(hyper["signal_var"], b["signal_var"]) * stat
    if linear:
        k = k + C(hyper["linear_var"], b["linear_var"]) * DotProduct(1.0, "fixed")
    return k + WhiteKernel(hyper["noise_var"], b["noise_var"])


def _start(linear: bool) -> dict:
    return dict(zip(("signal_var", "length_scale", "linear_var", "noise_var"), gp._STARTS[0],
                    strict=True))


@pytest.mark.parametrize("kernel, linear", CONFIGS)
def test_log_marginal_likelihood_and_gradient_equal_sklearn(kernel, linear):
    """LML and its log-hyperparameter gradient equal GaussianProcessRegressor's (R&W 2006, eqs. 2.30, 5.9)."""
    from sklearn.gaussian_process import GaussianProcessRegressor

    x, y = _design(_growth())
    hyper = {"signal_var": 0.7, "length_scale": 1.3, "linear_var": 0.2, "noise_var": 0.6}
    theta = np.log([hyper[k] for k in gp._names(linear)])
    ref = GaussianProcessRegressor(_sk_kernel(kernel, linear, hyper), alpha=0.0, optimizer=None).fit(x, y)
    # scikit-learn orders theta by the kernel tree: [signal, length, (linear), noise], as ours
    lml_ref, grad_ref = ref.log_marginal_likelihood(ref.kernel_.theta, eval_gradient=True)
    lml, grad = gp_log_marginal_likelihood(theta, x, y, kernel, linear)
    np.testing.assert_allclose(lml, lml_ref, rtol=1e-10)
    np.testing.assert_allclose(grad, grad_ref, rtol=1e-7, atol=1e-9)


@pytest.mark.parametrize("kernel, linear", CONFIGS)
def test_predictive_mean_and_sd_equal_sklearn_at_fixed_hyperparameters(kernel, linear):
    """Predictive mean and s.d. of a new observation equal sklearn's to 1e-9 of the s.d.

    Reference: GaussianProcessRegressor(kernel, alpha=0, optimizer=None).predict(return_std=True),
    whose s.d. includes the WhiteKernel noise, as ours does (Rasmussen & Williams 2006, Alg. 2.1).
    """
    from sklearn.gaussian_process import GaussianProcessRegressor

    x, y = _design(_growth("realcons"))
    hyper = {"signal_var": 0.5, "length_scale": 0.8, "linear_var": 0.3, "noise_var": 0.4}
    xs = np.vstack([x[-6:] + 0.25, [[3.0, -2.0]]])  # near the data and far outside it
    ref = GaussianProcessRegressor(_sk_kernel(kernel, linear, hyper), alpha=0.0, optimizer=None).fit(x, y)
    m_ref, sd_ref = ref.predict(xs, return_std=True)
    m, v = fit_gp(x, y, kernel=kernel, linear=linear, hyper=hyper).predict(xs)
    assert np.max(np.abs(m - m_ref) / sd_ref) < 1e-9
    assert np.max(np.abs(np.sqrt(v) - sd_ref) / sd_ref) < 1e-9


@pytest.mark.parametrize("column, kernel, linear", [
    ("realgdp", "squared_exponential", True), ("cpi", "matern52", True),
    ("realinv", "squared_exponential", False), ("realgdp", "matern52", False)])
def test_maximum_likelihood_fit_agrees_with_sklearn_from_the_same_start(column, kernel, linear):
    """Optimised from the same start and bounds, the LML and predictions agree with sklearn's.

    Both run L-BFGS-B on the log hyperparameters with analytic gradients, so they reach the same
    optimum: LML within 1e-6, predictive mean and s.d. within 1e-4 of the s.d. (tolerance for
    the optimisers' stopping rules). With restarts ours is never worse.
    """
    from sklearn.gaussian_process import GaussianProcessRegressor

    x, y = _design(_growth(column))
    xs = x[-5:] + 0.1
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # sklearn warns when a bound is reached
        ref = GaussianProcessRegressor(_sk_kernel(kernel, linear, _start(linear)), alpha=0.0,
                                       n_restarts_optimizer=0).fit(x, y)
    m_ref, sd_ref = ref.predict(xs, return_std=True)
    ours = fit_gp(x, y, kernel=kernel, linear=linear, restarts=0)
    m, v = ours.predict(xs)
    assert abs(ours.log_marginal_likelihood - ref.log_marginal_likelihood_value_) < 1e-6
    assert np.max(np.abs(m - m_ref) / sd_ref) < 1e-4
    assert np.max(np.abs(np.sqrt(v) - sd_ref) / sd_ref) < 1e-4
    best = fit_gp(x, y, kernel=kernel, linear=linear, restarts=2)
    assert best.log_marginal_likelihood >= ref.log_marginal_likelihood_value_ - 1e-8


def test_one_step_draws_follow_sklearns_predictive_on_the_data_scale():
    """The model's 1-step draws are N(sklearn mean, sklearn s.d.) after undoing the standardisation."""
    from sklearn.gaussian_process import GaussianProcessRegressor

    y = _growth("realinv")
    info = make_infoset(y[:, None], ["inv"])
    model = GaussianProcessAR(lags=2)
    draws = model.forecast(info, make_targets(info, horizons=(0,)), 20_000,
                           np.random.default_rng(0)).values.ravel()
    fit = model.fits_["inv"]
    x, target = _design(y)
    ref = GaussianProcessRegressor(_sk_kernel("squared_exponential", True, fit["hyper"]),
                                   alpha=0.0, optimizer=None).fit(x, target)
    z_last = ((y[-2:] - y.mean()) / y.std())[::-1]  # newest first: (z_T, z_{T-1})
    m, sd = ref.predict(z_last[None, :], return_std=True)
    dist = stats.norm(fit["mean"] + fit["scale"] * m[0], fit["scale"] * sd[0])
    assert stats.kstest(draws, dist.cdf).pvalue > 1e-3


def test_a_nonlinear_ar_is_fitted_better_than_by_a_linear_kernel_alone():
    """On a simulated threshold AR the SE part raises the marginal likelihood over the linear part.

    The process (Tong 1990's self-exciting threshold AR, invented coefficients) has slopes 0.8
    and -0.5 either side of 0; a linear AR cannot represent it.
    """
    rng = np.random.default_rng(5)
    y = np.zeros(200)
    for t in range(1, 200):
        y[t] = (0.8 if y[t - 1] < 0 else -0.5) * y[t - 1] + 0.3 + 0.3 * rng.standard_normal()
    x, target = _design(y, 1)
    lin_only = fit_gp(x, target, kernel="squared_exponential", linear=True,
                      hyper={"signal_var": 1e-6, "length_scale": 1.0, "linear_var": 1.0,
                             "noise_var": 0.5})
    both = fit_gp(x, target, kernel="squared_exponential", linear=True, restarts=2)
    assert both.hyper["signal_var"] > 0.05
    assert both.log_marginal_likelihood > lin_only.log_marginal_likelihood + 5


def test_short_series_raise_and_parameters_are_checked():
    """Fewer than lags + 10 observations raise; a bad kernel names the valid ones; keyword-only."""
    info = make_infoset(np.arange(11.0)[:, None], ["y"])
    with pytest.raises(InsufficientDataError, match="at least lags \\+ 10 = 12 .* got 11"):
        GaussianProcessAR().forecast(info, make_targets(info), 5, np.random.default_rng(0))
    with pytest.raises(ModelParameterError, match=r"\['matern52', 'squared_exponential'\]"):
        GaussianProcessAR(kernel="rbf").forecast(info, make_targets(info), 5, np.random.default_rng(0))
    with pytest.raises(TypeError):
        GaussianProcessAR(2)  # hyperparameters are keyword-only


def test_reachable_by_path_not_by_a_short_name():
    """The contributed model resolves by its import path and stays out of the built-in registry."""
    cls = get_model_class("harness.contrib.gp:GaussianProcessAR")
    assert cls is GaussianProcessAR
    assert make_model("harness.contrib.gp:GaussianProcessAR", lags=3).lags == 3
    from harness.models import available_models

    assert "gp_ar" not in available_models()
