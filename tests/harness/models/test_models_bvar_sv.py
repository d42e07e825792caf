"""BVAR with stochastic volatility: mixture table, samplers' building blocks, volatility recovery."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import special, stats

from harness.models import sv_kernels
from harness.models.base import InsufficientDataError, ar1_scales
from harness.models.bvar_sv import BayesianVARSV
from harness.models.mcmc import effective_sample_size
from harness.models.sv_blocks import (
    draw_coefficients,
    draw_impacts,
    draw_vol_var,
    log_vol_marginal,
    sample_log_volatility,
)
from harness.models.sv_kernels import _fast_kernels, _indicators_reference, _tridiag_draw_reference
from harness.models.sv_sampler import _minnesota_independent, sv_gibbs
from harness.models.sv_tables import KSC_MEANS, KSC_OFFSET, KSC_PROBS, KSC_VARIANCES
from harness.testing import make_infoset, make_targets, simulated_panel


def _compiled(name):
    """The numba-compiled kernel ``name`` of harness.models.sv_kernels (compiled on first use)."""
    _fast_kernels()
    return getattr(sv_kernels, name)


def _packed_products(x):
    """``x_tq x_td`` for ``d <= q`` packed by rows, as the compiled coefficient sweep expects."""
    lo, hi = np.tril_indices(x.shape[1])
    return np.ascontiguousarray(x[:, lo] * x[:, hi])


def _compiled_sweep(yt, x, coefs, u, a, inv_lam, b0, inv_v0, z):
    """One compiled coefficient sweep with the signature of draw_coefficients."""
    t, n = yt.shape
    k = x.shape[1]
    ok = _compiled("_coef_sweep_loop")(
        yt, x, np.ascontiguousarray(x.T), _packed_products(x), b0, inv_v0, coefs, u, a, inv_lam,
        z.ravel(), np.empty((k, k)), np.empty(k), np.empty((t, n)), np.empty((n, t)),
        np.empty(t), np.empty(t))
    assert ok

# Kim, Shephard & Chib (1998), Review of Economic Studies 65(3), Table 4: q_j, m_j, v_j^2 of the
# 7-component approximation to log chi^2_1 (means before the -1.2704 shift). Typed from the
# published table (values from memory, cross-checked against independent public copies).
TABLE4 = np.array([
    [0.00730, -10.12999, 5.79596],
    [0.10556, -3.97281, 2.61369],
    [0.00002, -8.56686, 5.17950],
    [0.04395, 2.77786, 0.16735],
    [0.34001, 0.61942, 0.64009],
    [0.24566, 1.79518, 0.34023],
    [0.25750, -1.08819, 1.26261],
])


def test_mixture_constants_equal_ksc_table_4():
    """The 7-component constants equal Kim, Shephard & Chib (1998) Table 4, offset -1.2704."""
    np.testing.assert_array_equal(KSC_PROBS, TABLE4[:, 0])
    np.testing.assert_array_equal(KSC_MEANS, TABLE4[:, 1])
    np.testing.assert_array_equal(KSC_VARIANCES, TABLE4[:, 2])
    assert KSC_OFFSET == -1.2704


def test_mixture_matches_the_log_chi_square_law():
    """Mixture mean/variance match E, Var of log chi^2_1 (digamma/trigamma) and its density (scipy)."""
    means = KSC_MEANS + KSC_OFFSET
    mean = KSC_PROBS @ means
    var = KSC_PROBS @ (KSC_VARIANCES + means**2) - mean**2
    # E log chi^2_1 = psi(1/2) + log 2, Var = psi'(1/2) = pi^2/2 (Abramowitz & Stegun 1964, 6.3, 6.4)
    assert abs(mean - (special.digamma(0.5) + np.log(2))) < 1e-3
    assert abs(var - special.polygamma(1, 0.5)) < 1e-3
    w = np.linspace(-15, 4, 2001)
    exact = stats.chi2.pdf(np.exp(w), 1) * np.exp(w)
    mix = (KSC_PROBS * stats.norm.pdf(w[:, None], means, np.sqrt(KSC_VARIANCES))).sum(axis=1)
    assert np.abs(mix - exact).max() < 0.02


def test_compiled_tridiagonal_sampler_matches_scipy_and_dense_algebra():
    """h = K^{-1} b + L^{-T} z agrees between the kernel, SciPy's banded solver and dense algebra."""
    rng = np.random.default_rng(0)
    m = 50
    off = -rng.uniform(0.5, 2.0, m - 1)
    diag = np.abs(np.r_[off, 0]) + np.abs(np.r_[0, off]) + rng.uniform(0.1, 1.0, m)
    rhs, z = rng.standard_normal(m), rng.standard_normal(m)
    fast = _fast_kernels()["tridiag"](diag, off, rhs, z)
    np.testing.assert_allclose(fast, _tridiag_draw_reference(diag, off, rhs, z), rtol=1e-10)
    k = np.diag(diag) + np.diag(off, 1) + np.diag(off, -1)
    chol = np.linalg.cholesky(k)
    np.testing.assert_allclose(fast, np.linalg.solve(k, rhs) + np.linalg.solve(chol.T, z), rtol=1e-10)


def test_log_volatility_draws_have_the_gaussian_posterior_moments():
    """Precision-sampler draws have mean K^{-1} b and covariance K^{-1} (Chan & Jeliazkov 2009)."""
    rng = np.random.default_rng(1)
    t, n = 12, 2
    ystar = rng.standard_normal((t, n))
    mm, vv = rng.uniform(-2, 0, (t, n)), rng.uniform(0.5, 2.0, (t, n))
    phi, h1, v1 = np.array([0.1, 0.3]), np.array([0.5, -0.5]), 4.0
    d = 40_000
    draws = np.stack([sample_log_volatility(ystar, mm, vv, phi, h1, v1, rng) for _ in range(d)])
    for i in range(n):
        h = np.diff(np.eye(t), axis=0)
        kprior = h.T @ h / phi[i]
        kprior[0, 0] += 1 / v1
        k = kprior + np.diag(1 / vv[:, i])
        b = (ystar[:, i] - mm[:, i]) / vv[:, i]
        b[0] += h1[i] / v1
        cov = np.linalg.inv(k)
        se = np.sqrt(np.diag(cov) / d)
        assert np.all(np.abs(draws[:, :, i].mean(axis=0) - cov @ b) < 5 * se)
        np.testing.assert_allclose(np.cov(draws[:, :, i].T), cov, atol=0.03 * cov.max())


def test_indicator_kernel_matches_reference_and_posterior_probabilities():
    """Compiled and NumPy indicator draws agree; frequencies match q_j N(dev; m_j, v_j) / sum."""
    rng = np.random.default_rng(2)
    dev = rng.normal(-1.3, 2.5, 5000)
    u = rng.random(5000)
    fast = _fast_kernels()["indicators"](dev, u)
    np.testing.assert_array_equal(fast, _indicators_reference(dev, u))
    d = np.full(200_000, -2.0)
    got = np.bincount(_fast_kernels()["indicators"](d, rng.random(len(d))), minlength=7) / len(d)
    w = KSC_PROBS * stats.norm.pdf(-2.0, KSC_MEANS + KSC_OFFSET, np.sqrt(KSC_VARIANCES))
    np.testing.assert_allclose(got, w / w.sum(), atol=4e-3)


@pytest.mark.parametrize("sweep", [draw_coefficients, _compiled_sweep],
                         ids=["reference", "compiled"])
def test_triangular_coefficient_sweeps_target_the_joint_posterior(sweep):
    """Equation-by-equation draws with A, h fixed reach the joint GLS posterior (CCCM 2022)."""
    rng = np.random.default_rng(3)
    t, n, k = 60, 3, 4
    x = np.column_stack([rng.standard_normal((t, k - 1)), np.ones(t)])
    a = np.array([[1.0, 0, 0], [0.5, 1.0, 0], [-0.3, 0.8, 1.0]])
    h = rng.normal(0, 0.5, (t, n))
    yt = x @ rng.standard_normal((k, n)) + rng.standard_normal((t, n)) @ np.linalg.inv(a).T
    b0, v0 = np.zeros((k, n)), np.full((k, n), 2.0)
    # joint posterior of vec(B): precision sum_t (A' Lam_t^{-1} A) (x) x_t x_t' + V0^{-1}
    prec = np.diag(1 / v0.T.ravel())
    rhs = np.zeros(n * k)
    for s in range(t):
        q = a.T @ np.diag(np.exp(-h[s])) @ a
        prec += np.kron(q, np.outer(x[s], x[s]))
        rhs += np.kron(q @ yt[s], x[s])
    cov = np.linalg.inv(prec)
    mean = cov @ rhs
    coefs = np.zeros((k, n))
    u = yt - x @ coefs
    keep = []
    for it in range(6000):
        sweep(yt, x, coefs, u, a, np.exp(-h), b0, 1 / v0, rng.standard_normal((n, k)))
        if it >= 500:
            keep.append(coefs.T.ravel().copy())
    keep = np.array(keep)
    np.testing.assert_allclose(keep.mean(axis=0), mean, atol=6 * np.sqrt(np.diag(cov)).max() / np.sqrt(len(keep) / 10))
    np.testing.assert_allclose(np.cov(keep.T), cov, atol=0.1 * np.abs(cov).max())
    np.testing.assert_allclose(u, yt - x @ coefs, atol=1e-10)


def _sv_state(seed, t=70, n=3, k=4):
    """A random BVAR-SV Gibbs state: data, regressors, coefficients, unit lower-triangular A, h."""
    rng = np.random.default_rng(seed)
    x = np.column_stack([rng.standard_normal((t, k - 1)), np.ones(t)])
    yt = x @ rng.standard_normal((k, n)) + rng.standard_normal((t, n))
    a = np.eye(n) + np.tril(rng.normal(0, 0.5, (n, n)), -1)
    coefs = rng.standard_normal((k, n))
    h = rng.normal(0, 0.5, (t, n))
    b0, v0 = rng.normal(0, 0.1, (k, n)), rng.uniform(0.5, 2.0, (k, n))
    return rng, yt, x, coefs, a, h, b0, 1.0 / v0


def test_compiled_cholesky_draw_matches_dense_algebra():
    """The compiled kernel returns K^{-1} g + U^{-1} z for K = U'U, and False unless K is SPD."""
    rng = np.random.default_rng(6)
    dim = 7
    m = rng.standard_normal((dim, dim))
    prec = m @ m.T + dim * np.eye(dim)
    g, z = rng.standard_normal(dim), rng.standard_normal(dim)
    work, out = np.zeros((dim + 2, dim + 2)), np.zeros(dim + 2)  # only the leading block is used
    work[:dim, :dim], out[:dim] = np.triu(prec), g
    assert _compiled("_spd_draw_loop")(work, out, dim, z)
    upper = np.linalg.cholesky(prec).T  # K = U'U with U upper triangular
    np.testing.assert_allclose(out[:dim], np.linalg.solve(prec, g) + np.linalg.solve(upper, z),
                               rtol=1e-10)
    for bad in (np.diag([1.0, -1.0, 1.0]), np.diag([1.0, np.nan, 1.0])):
        assert not _compiled("_spd_draw_loop")(bad.copy(), np.ones(3), 3, np.zeros(3))


def test_compiled_blocks_match_the_numpy_blocks_for_the_same_normals():
    """Compiled coefficient, impact and volatility blocks equal draw_coefficients, draw_impacts, sample_log_volatility."""
    rng, yt, x, coefs, a, h, b0, inv_v0 = _sv_state(7)
    t, n = yt.shape
    k = x.shape[1]
    inv_lam = np.exp(-h)
    z = rng.standard_normal((n, k))
    ref_coefs, ref_u = coefs.copy(), yt - x @ coefs
    draw_coefficients(yt, x, ref_coefs, ref_u, a, inv_lam, b0, inv_v0, z)
    new_coefs, new_u = coefs.copy(), yt - x @ coefs
    _compiled_sweep(yt, x, new_coefs, new_u, a, inv_lam, b0, inv_v0, z)
    np.testing.assert_allclose(new_coefs, ref_coefs, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(new_u, ref_u, rtol=1e-10, atol=1e-12)
    # draw_impacts takes rows 1..n-1 of normals from the generator in turn: one contiguous run
    ref_a = a.copy()
    draw_impacts(ref_u, ref_a, inv_lam, 10.0, np.random.default_rng(8))
    new_a = a.copy()
    za = np.random.default_rng(8).standard_normal(n * (n - 1) // 2)
    assert _compiled("_impact_rows_loop")(ref_u, new_a, inv_lam, 10.0, za, np.empty((k, k)),
                                          np.empty(k), np.empty((t, n * (n + 1) // 2)),
                                          np.empty((n, t)))
    np.testing.assert_allclose(new_a, ref_a, rtol=1e-10, atol=1e-12)
    ystar = rng.standard_normal((t, n))
    mm, vv = rng.uniform(-2, 0, (t, n)), rng.uniform(0.5, 2.0, (t, n))
    phi, h1 = np.array([0.1, 0.3, 0.05]), np.array([0.5, -0.5, 0.0])
    ref_h = sample_log_volatility(ystar, mm, vv, phi, h1, 4.0, np.random.default_rng(9),
                                  reference=True)
    new_h = np.empty((t, n))
    _compiled("_volatility_loop")(ystar, mm, 1.0 / vv, phi, h1, 4.0,
                                  np.random.default_rng(9).standard_normal(n * t), new_h,
                                  *(np.empty((t, n)) for _ in range(3)))
    np.testing.assert_allclose(new_h, ref_h, rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("n_vars, lags, burn, thin", [(3, 1, 100, 2), (1, 2, 50, 1), (4, 2, 0, 3)])
def test_compiled_sampler_reproduces_the_reference_draw_for_draw(n_vars, lags, burn, thin):
    """sv_gibbs and sv_gibbs(reference=True) give the same draws for a seed and consume the generator alike."""
    y = simulated_panel(90, n_vars, seed=10 + n_vars, ragged=False)
    b0, v0 = _minnesota_independent(n_vars, lags, 0.2, 0.5, 1.0, np.zeros(n_vars), ar1_scales(y))
    args = (y, lags, b0, v0, 10.0, 5.0, 0.01, 400, burn, thin)
    rng_ref, rng_new = np.random.default_rng(11), np.random.default_rng(11)
    ref = sv_gibbs(*args, rng_ref, reference=True, chains=2)
    new = sv_gibbs(*args, rng_new, chains=2)
    assert new.phi.shape[0] == 2 * ((400 - burn) // thin) and new.chains == 2
    np.testing.assert_array_equal(new.phi_accept, ref.phi_accept)
    for field in ("coefs", "a", "log_vol", "phi"):
        np.testing.assert_allclose(getattr(new, field), getattr(ref, field), rtol=1e-7,
                                   atol=1e-9, err_msg=field)
    assert rng_ref.random() == rng_new.random()
    assert np.all(np.triu(new.a, 1) == 0) and np.all(np.diagonal(new.a, axis1=1, axis2=2) == 1)


def test_compiled_sampler_keeps_the_posterior_of_a_long_chain():
    """Long compiled and reference chains of the 4-variable default model agree in posterior means within Monte Carlo error."""
    y = simulated_panel(126, 4, seed=2, ragged=False)
    b0, v0 = _minnesota_independent(4, 2, 0.2, 0.5, 1.0, np.zeros(4), ar1_scales(y))
    args = (y, 2, b0, v0, 10.0, 5.0, 0.01, 1500, 500, 1)
    # different seeds: independent chains, compared by their Geyer (1992) effective sizes
    ref = sv_gibbs(*args, np.random.default_rng(12), reference=True)
    new = sv_gibbs(*args, np.random.default_rng(13))
    for field in ("coefs", "a", "log_vol", "phi"):
        r = getattr(ref, field).reshape(ref.phi.shape[0], -1)
        d = getattr(new, field).reshape(new.phi.shape[0], -1)
        keep = r.std(axis=0) > 0
        r, d = r[:, keep], d[:, keep]
        se = np.sqrt(r.var(axis=0) / effective_sample_size(r) + d.var(axis=0) / effective_sample_size(d))
        z = (d.mean(axis=0) - r.mean(axis=0)) / se
        # about 5 sigma for the largest of a few hundred nearly normal statistics
        assert np.abs(z).max() < 5.0, (field, np.abs(z).max())


@pytest.mark.parametrize("reference", [True, False])
def test_a_precision_that_is_not_positive_definite_raises(reference):
    """A negative prior variance of A makes its conditional precision indefinite: LinAlgError in both paths."""
    y = simulated_panel(40, 2, seed=3, ragged=False)
    b0, v0 = _minnesota_independent(2, 1, 0.2, 0.5, 1.0, np.zeros(2), ar1_scales(y))
    with pytest.raises(np.linalg.LinAlgError, match="not positive definite"):
        sv_gibbs(y, 1, b0, v0, -1e-12, 5.0, 0.01, 5, 0, 1, np.random.default_rng(0),
                 reference=reference)


@pytest.mark.parametrize("seed", [0, 1])
def test_sampler_recovers_a_known_volatility_path(seed):
    """The 90% posterior band covers >= 80% of a simulated true log-volatility path, informatively."""
    rng = np.random.default_rng(seed)
    t, n = 200, 2
    s = np.arange(t)
    htrue = np.column_stack([1.2 * np.sin(3 * np.pi * s / t), np.linspace(-1.5, 0.5, t)])
    a = np.array([[1.0, 0.0], [-0.4, 1.0]])
    b1 = np.array([[0.5, 0.1], [0.0, 0.3]])
    y = np.zeros((t + 1, n))
    for i in range(t):
        y[i + 1] = 0.2 + b1 @ y[i] + np.linalg.solve(a, np.exp(htrue[i] / 2) * rng.standard_normal(n))
    b0, v0 = _minnesota_independent(n, 1, 0.5, 0.5, 1.0, np.zeros(n), ar1_scales(y))
    post = sv_gibbs(y, 1, b0, v0, 10.0, 5.0, 0.01, 2000, 500, 1, np.random.default_rng(100 + seed))
    lo, hi = np.quantile(post.log_vol, [0.05, 0.95], axis=0)
    coverage = ((htrue >= lo) & (htrue <= hi)).mean(axis=0)
    assert np.all(coverage >= 0.8), coverage
    centre = post.log_vol.mean(axis=0)
    assert all(np.corrcoef(centre[:, i], htrue[:, i])[0, 1] > 0.8 for i in range(n))
    assert np.all((hi - lo).mean(axis=0) < np.ptp(htrue, axis=0))
    assert abs(post.a[:, 1, 0].mean() - a[1, 0]) < 0.15


def test_effective_sample_size_of_an_ar1_chain():
    """ESS of an AR(1) chain is close to N (1 - rho) / (1 + rho) (Geyer 1992; the AR(1) autocorrelation time is common practice)."""
    rng = np.random.default_rng(4)
    rho, n = 0.6, 200_000
    e = rng.standard_normal(n)
    x = np.empty(n)
    x[0] = e[0] / np.sqrt(1 - rho**2)
    for i in range(1, n):
        x[i] = rho * x[i - 1] + e[i]
    ess = effective_sample_size(np.column_stack([x, rng.standard_normal(n)]))
    assert abs(ess[0] / (n * (1 - rho) / (1 + rho)) - 1) < 0.05
    assert abs(ess[1] / n - 1) < 0.05


def test_forecast_sets_diagnostics_and_draws_future_volatility():
    """A forecast stores ESS/R-hat diagnostics over its chains (default 4) and its draws widen with the horizon."""
    rng = np.random.default_rng(5)
    y = rng.standard_normal((80, 2)).cumsum(axis=0) * 0.2
    info = make_infoset(np.diff(y, axis=0), ["a", "b"])
    model = BayesianVARSV(lags=1, n_iter=600, burn=200)
    out = model.forecast(info, make_targets(info, horizons=(0, 8)), 2000, np.random.default_rng(0))
    diag = model.diagnostics_
    assert diag["n_kept"] == 4 * 400 and diag["n_chains"] == 4
    assert set(diag["ess"]) >= {"own_lag1[a]", "vol_innov_var[b]"} and set(diag["rhat"]) == set(diag["ess"])
    assert model.posterior_.phi.shape == (1600, 2) and 0.1 < diag["vol_var_accept"]["a"] < 0.9
    assert all(v > 0 for v in diag["ess"].values())
    assert np.all(out.sel(horizon=8).std("draw") > 0.9 * out.sel(horizon=0).std("draw"))


def test_too_short_sample_raises_insufficient_data():
    """A balanced block shorter than lags + 3 raises InsufficientDataError."""
    info = make_infoset(np.random.default_rng(0).standard_normal((5, 2)), ["a", "b"])
    with pytest.raises(InsufficientDataError, match="lags \\+ 3"):
        BayesianVARSV(lags=4).forecast(info, make_targets(info), 10, np.random.default_rng(0))


def test_integrated_log_volatility_likelihood_equals_the_dense_gaussian():
    """log p(ystar | s, phi) from the banded factor equals scipy's multivariate normal logpdf with
    covariance D + Cov(h), Cov(h_s, h_t) = h1_var + phi (min(s, t) - 1) for a random walk (common
    practice), in the reference and the compiled kernel (Chan & Jeliazkov 2009)."""
    rng = np.random.default_rng(20)
    t, n = 15, 3
    ystar = rng.normal(-1, 2, (t, n))
    mm, vv = rng.uniform(-3, 1, (t, n)), rng.uniform(0.2, 5.0, (t, n))
    phi, h1, v1 = np.array([0.02, 0.3, 1.5]), np.array([0.5, -1.0, 0.0]), 4.0
    got = log_vol_marginal(ystar, mm, vv, phi, h1, v1)
    s = np.arange(t)
    for j in range(n):
        cov = v1 + phi[j] * np.minimum.outer(s, s) + np.diag(vv[:, j])
        want = stats.multivariate_normal(mm[:, j] + h1[j], cov).logpdf(ystar[:, j])
        assert got[j] == pytest.approx(want, rel=1e-10)
        fast = _compiled("_vol_loglik_loop")(ystar, mm, 1.0 / vv, j, phi[j], h1[j], v1)
        assert fast == pytest.approx(want, rel=1e-10)


def test_compiled_phi_step_matches_the_reference_step():
    """Compiled and NumPy Metropolis-Hastings steps of phi give the same draws, scales and counts."""
    rng = np.random.default_rng(21)
    t, n, steps = 40, 3, 5
    ystar, mm = rng.normal(-1, 2, (t, n)), rng.uniform(-3, 1, (t, n))
    vv = rng.uniform(0.2, 5.0, (t, n))
    phi, h1 = np.array([0.02, 0.3, 0.1]), np.array([0.5, -1.0, 0.0])
    z, u = rng.standard_normal((steps, n)), rng.random((steps, n))
    ref_step, ref_acc = np.zeros(n), np.zeros(n)
    ref = draw_vol_var(ystar, mm, vv, phi, h1, 4.0, 5.0, 0.01, ref_step, z, np.log(u), 0.3, ref_acc)
    new, new_step, new_acc = phi.copy(), np.zeros(n), np.zeros(n)
    _compiled("_vol_var_loop")(ystar, mm, 1.0 / vv, new, h1, 4.0, 5.0, 0.01, new_step, z.ravel(),
                               u.ravel(), 0.3, new_acc)
    np.testing.assert_allclose(new, ref, rtol=1e-12)
    np.testing.assert_allclose(new_step, ref_step, rtol=1e-12)
    np.testing.assert_array_equal(new_acc, ref_acc)
    assert 0 < ref_acc.sum() < steps * n


def test_phi_step_targets_its_conditional_posterior():
    """Many phi steps with the indicators fixed reach the posterior of log phi computed by
    quadrature of marginal likelihood x scaled inverse chi-square prior on a grid (common practice)."""
    rng = np.random.default_rng(22)
    t, n = 30, 1
    h = np.cumsum(rng.normal(0, 0.3, (t, n)), axis=0)
    comp = rng.choice(7, size=(t, n), p=KSC_PROBS / KSC_PROBS.sum())
    mm, vv = (KSC_MEANS + KSC_OFFSET)[comp], KSC_VARIANCES[comp]
    ystar = h + mm + np.sqrt(vv) * rng.standard_normal((t, n))
    grid = np.linspace(-9, 2, 2001)
    ll = np.array([log_vol_marginal(ystar, mm, vv, np.exp([g]), np.zeros(1), 4.0)[0] for g in grid])
    logpost = ll - 2.5 * grid - 2.5 * 0.01 * np.exp(-grid)  # df 5, scale 0.01, Jacobian
    w = np.exp(logpost - logpost.max())
    w /= w.sum()
    mean, sd = w @ grid, np.sqrt(w @ grid**2 - (w @ grid) ** 2)
    phi, step, acc = np.array([0.01]), np.zeros(1), np.zeros(1)
    draws = np.empty(20_000)
    kernel = _compiled("_vol_var_loop")
    for i in range(draws.size):
        kernel(ystar, mm, 1.0 / vv, phi, np.zeros(1), 4.0, 5.0, 0.01, step, rng.standard_normal(1),
               rng.random(1), 0.0, acc)
        draws[i] = np.log(phi[0])
    se = draws.std() / np.sqrt(effective_sample_size(draws))
    assert abs(draws.mean() - mean) < 4 * se
    assert draws.std() == pytest.approx(sd, rel=0.05)
