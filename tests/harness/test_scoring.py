"""Tests of harness.scores against published formulas and reference libraries.

Sources used below:
- Gneiting & Raftery (2007), JASA 102(477): kernel form of the CRPS (eq. 21) and the CRPS of a
  Gaussian predictive, sigma [z (2 Phi(z) - 1) + 2 phi(z) - 1/sqrt(pi)] (also Gneiting,
  Raftery, Westveld & Goldman 2005, Monthly Weather Review 133, eq. 5).
- Gneiting & Ranjan (2011), JBES 29(3): CRPS = 2 integral_0^1 QS_alpha d alpha, the quantile
  weight functions and the threshold-weighted CRPS.
- Allen, Ginsbourger & Ziegel (2023), SIAM/ASA JUQ 11(3): twCRPS as CRPS of chained values.
- Silverman (1986), Density Estimation, eq. (3.31): rule-of-thumb bandwidth.
- Hyndman & Fan (1996), The American Statistician 50(4): sample quantile definitions 1 and 7.
- Reference libraries: numpy (nanquantile), scipy (integrate.quad, gaussian_kde, norm),
  properscoring (crps_gaussian, crps_ensemble).
"""

from __future__ import annotations

import subprocess
import sys
import textwrap

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp
from scipy import integrate, stats

from harness import scores as sc


def _gaussian_crps(y, mu, sigma):
    """Closed form of Gneiting & Raftery (2007): sigma [z(2Phi(z)-1) + 2phi(z) - 1/sqrt(pi)]."""
    z = (y - mu) / sigma
    return sigma * (z * (2 * stats.norm.cdf(z) - 1) + 2 * stats.norm.pdf(z) - 1 / np.sqrt(np.pi))


def _case(n=40, m=25, seed=0):
    rng = np.random.default_rng(seed)
    y = rng.normal(0, 1.5, n)
    x = rng.normal(0.3, 1.0, (n, m))
    x[1, 10:] = np.nan  # a partly missing ensemble
    x[2, :] = np.nan  # a failed task
    y[3] = np.nan  # truth not yet published
    x[4, :5] = np.round(x[4, :5], 0)  # ties
    x[4, 5:10] = x[4, 0]
    y[4] = x[4, 0]  # observation tied with draws
    return y, x


# --------------------------------------------------------------------------- CRPS


def test_crps_sorted_matches_all_pairs_reference_with_nans():
    """The sort-based CRPS equals the all-pairs kernel form (G&R 2007 eq. 21), NaN where expected."""
    y, x = _case()
    a = sc.crps_sorted(y, x)
    b = sc.crps_pairs_reference(y, x)
    np.testing.assert_array_equal(np.isnan(a), np.isnan(b))
    assert np.isnan(a[2]) and np.isnan(a[3]) and not np.isnan(a[1])
    np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-12)


@settings(max_examples=60, deadline=None)
@given(hnp.arrays(np.float64, st.tuples(st.integers(1, 6), st.integers(1, 9)),
                  elements=st.floats(-1e3, 1e3, allow_nan=False)),
       st.floats(-1e3, 1e3))
def test_crps_sorted_equals_reference_property(draws, y0):
    """For any small ensemble the fast and the reference CRPS agree (properscoring-style check)."""
    y = np.full(draws.shape[0], y0)
    np.testing.assert_allclose(sc.crps_sorted(y, draws), sc.crps_pairs_reference(y, draws),
                               rtol=1e-9, atol=1e-9)


def test_crps_ensemble_agrees_with_sorted_nans_included():
    """properscoring's compiled path and ours agree, including missing obs and draws."""
    y, x = _case(seed=1)
    a = sc.crps_ensemble(y, x)
    b = sc.crps_sorted(y, x)
    np.testing.assert_array_equal(np.isnan(a), np.isnan(b))
    np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-12)


def test_crps_float32_draws_match_float64():
    """float32 draws give the CRPS of the same values held in float64."""
    y, x = _case(seed=2)
    x32 = x.astype(np.float32)
    np.testing.assert_allclose(sc.crps_sorted(y, x32), sc.crps_sorted(y, x32.astype(np.float64)),
                               rtol=1e-12)


def test_crps_of_many_draws_matches_gaussian_closed_form():
    """CRPS of a large ensemble equals the Gaussian closed form (Gneiting & Raftery 2007)."""
    m = 10_000
    u = (np.arange(m) + 0.5) / m  # quantile draws: deterministic, error O(1/m^2) here
    y = np.array([-2.5, -0.3, 0.0, 0.7, 3.1])
    mu = np.array([0.2, -0.1, 0.0, 1.0, 0.5])
    sigma = np.array([1.0, 2.0, 0.5, 1.5, 1.0])
    draws = mu[:, None] + sigma[:, None] * stats.norm.ppf(u)[None, :]
    expected = _gaussian_crps(y, mu, sigma)
    np.testing.assert_allclose(sc.crps_sorted(y, draws), expected, atol=1e-6)
    # the closed form typed here agrees with properscoring's crps_gaussian (reference library)
    import properscoring

    np.testing.assert_allclose(properscoring.crps_gaussian(y, mu, sigma), expected, rtol=1e-12)


def test_crps_of_random_draws_within_monte_carlo_error():
    """CRPS of 20,000 random N(0,1) draws is within 4 simulation standard errors of the closed form."""
    rng = np.random.default_rng(11)
    reps, m, y = 200, 20_000, 0.8
    draws = rng.standard_normal((reps, m))
    est = sc.crps_sorted(np.full(reps, y), draws)
    se = est.std(ddof=1)  # spread of the estimate across replications
    assert abs(est[0] - _gaussian_crps(y, 0.0, 1.0)) < 4 * se
    assert abs(est.mean() - _gaussian_crps(y, 0.0, 1.0)) < 4 * se / np.sqrt(reps) + 1e-4


def test_crps_is_twice_integrated_quantile_score_on_ensemble_step_quantile():
    """2 * integral of QS over the ensemble's (inverted-CDF) quantile function is its CRPS (G&R 2011)."""
    rng = np.random.default_rng(3)
    for m in (1, 2, 7, 12):
        x = np.sort(rng.normal(size=m))
        for y in (-3.0, float(x[0]), 0.1, 4.0):
            def integrand(a, x=x, m=m, y=y):
                q = x[min(int(np.ceil(a * m)) - 1, m - 1)] if a > 0 else x[0]
                return float(sc.pinball_loss(np.array([y]), np.array([[q]]), [a])[0, 0]) if 0 < a < 1 else 0.0

            val, _ = integrate.quad(integrand, 0, 1, points=np.arange(1, m) / m, limit=200)
            np.testing.assert_allclose(2 * val, sc.crps_sorted(np.array([y]), x[None, :])[0],
                                       rtol=1e-8, atol=1e-10)


def test_crps_is_twice_integrated_quantile_score_for_gaussian():
    """2 * integral of QS_alpha(Phi^{-1}(alpha), y) equals the Gaussian CRPS (G&R 2011, G&R 2007)."""
    for y in (-1.7, 0.0, 2.2):
        val, _ = integrate.quad(
            lambda a, y=y: float(sc.pinball_loss(np.array([y]), np.array([[stats.norm.ppf(a)]]), [a])[0, 0]),
            0, 1, limit=200)
        np.testing.assert_allclose(2 * val, _gaussian_crps(y, 0.0, 1.0), rtol=1e-7)


def test_crps_pairs_reference_refuses_large_inputs():
    """The all-pairs reference is limited to small inputs and says so."""
    with pytest.raises(ValueError, match="crps_sorted"):
        sc.crps_pairs_reference(np.zeros(20), np.zeros((20, 2000)))


def test_input_shapes_are_checked():
    """Mismatched shapes raise ValueError naming the function and the shapes."""
    with pytest.raises(ValueError, match=r"crps_sorted: obs has 3 rows but draws has 2"):
        sc.crps_sorted(np.zeros(3), np.zeros((2, 5)))
    with pytest.raises(ValueError, match=r"draws must be 2-D"):
        sc.crps_sorted(np.zeros(3), np.zeros(3))


# --------------------------------------------------------------------------- memory guard


def _raise_all_pairs(*args, **kwargs):
    raise AssertionError("the all-pairs O(m^2) path was called")


def test_guard_without_numba_never_calls_all_pairs(monkeypatch):
    """With numba unimportable, crps_ensemble uses the sort-based path, not properscoring's all-pairs one."""
    from properscoring import _crps

    # what properscoring binds when numba is missing, made to fail loudly if reached
    monkeypatch.setattr(_crps, "_crps_ensemble_vectorized", _raise_all_pairs)
    monkeypatch.setattr(_crps, "_crps_ensemble_core", _raise_all_pairs)
    monkeypatch.setitem(sys.modules, "numba", None)  # "import numba" now raises ImportError
    y, x = _case(seed=4)
    np.testing.assert_allclose(sc.crps_ensemble(y, x), sc.crps_sorted(y, x), rtol=0, atol=0)


def test_guard_detects_properscoring_fallback_even_with_numba(monkeypatch):
    """If properscoring's core is its all-pairs fallback, crps_ensemble refuses it."""
    from properscoring import _crps

    monkeypatch.setattr(_crps, "_crps_ensemble_vectorized", _raise_all_pairs)
    monkeypatch.setattr(_crps, "_crps_ensemble_core", _raise_all_pairs)
    assert sc.crps._properscoring_compiled() is None
    y, x = _case(seed=5)
    np.testing.assert_allclose(sc.crps_ensemble(y, x), sc.crps_sorted(y, x), rtol=0, atol=0)


def test_guard_uses_properscoring_when_compiled(monkeypatch):
    """With numba present, crps_ensemble goes through properscoring.crps_ensemble."""
    from properscoring import _crps

    calls = []
    real = _crps.crps_ensemble
    monkeypatch.setattr(_crps, "crps_ensemble", lambda *a, **k: calls.append(1) or real(*a, **k))
    y, x = _case(seed=6)
    sc.crps_ensemble(y, x)
    assert calls


def test_guard_in_fresh_interpreter_without_numba():
    """A real numba-less import of properscoring falls back to all-pairs; our wrapper never calls it."""
    code = textwrap.dedent("""
        import sys
        sys.modules["numba"] = None
        import numpy as np
        from properscoring import _crps
        assert _crps._crps_ensemble_core is _crps._crps_ensemble_vectorized
        def boom(*a, **k):
            raise SystemExit("all-pairs path called")
        _crps._crps_ensemble_vectorized = boom
        _crps._crps_ensemble_core = boom
        from harness.scores import crps_ensemble, crps_sorted
        rng = np.random.default_rng(0)
        y, x = rng.normal(size=30), rng.normal(size=(30, 50))
        assert np.array_equal(crps_ensemble(y, x), crps_sorted(y, x))
        print("ok")
    """)
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr + res.stdout
    assert res.stdout.strip() == "ok"


# --------------------------------------------------------------------------- quantiles


@pytest.mark.parametrize("method", ["linear", "inverted_cdf"])
def test_ensemble_quantiles_match_numpy_nanquantile(method):
    """Our sorted-array quantiles equal numpy.nanquantile (Hyndman & Fan definitions 7 and 1)."""
    _, x = _case(seed=7)
    levels = [0.01, 0.05, 0.1, 0.25, 0.5, 0.7, 0.9, 0.99]
    rows = ~np.isnan(x).all(axis=1)
    ours = sc.ensemble_quantiles(x, levels, method=method)
    ref = np.nanquantile(x[rows], levels, axis=1, method=method).T
    np.testing.assert_allclose(ours[rows], ref, rtol=1e-13, atol=1e-13)
    assert np.isnan(ours[~rows]).all()


def test_quantile_score_at_median_is_half_absolute_error():
    """QS_0.5 of the ensemble median equals half its absolute error (G&R 2011 convention)."""
    y, x = _case(seed=8)
    qs = sc.quantile_score(y, x, [0.5])[:, 0]
    med = np.nanmedian(np.where(np.isnan(x).all(axis=1)[:, None], 0.0, x), axis=1)
    ok = ~np.isnan(qs)
    np.testing.assert_allclose(qs[ok], 0.5 * np.abs(med - y)[ok], rtol=1e-12)
    np.testing.assert_allclose(qs, 0.5 * sc.point_errors(y, x)["ae_median"], rtol=1e-12)


def test_pinball_loss_hand_values():
    """QS_alpha(q, y) = (1{y<q} - alpha)(q - y): 0.1 * 2 when y is above q, 0.9 * 2 when below."""
    out = sc.pinball_loss(np.array([3.0, 1.0]), np.array([[1.0], [3.0]]), [0.1])
    np.testing.assert_allclose(out[:, 0], [0.2, 1.8])


def test_weighted_crps_uniform_equals_crps():
    """Quantile-weighted CRPS with uniform weight equals the CRPS (G&R 2011), up to grid error."""
    rng = np.random.default_rng(9)
    m = 2000
    x = rng.standard_normal((100, m))
    y = rng.normal(0, 1.5, 100)
    crps = sc.crps_sorted(y, x)
    # midpoint rule, 99 nodes: measured grid error about 0.2 %; 0.5 % allowed
    for method in ("inverted_cdf", "linear"):
        w = sc.weighted_crps_quantile(y, x, "uniform", 99, method=method)
        np.testing.assert_allclose(w, crps, rtol=5e-3)
    # with the step quantile function and n_levels a multiple of m, the midpoint rule is exact
    # (the integrand is linear in alpha on every step)
    w = sc.weighted_crps_quantile(y, x, "uniform", 10 * m, method="inverted_cdf")
    np.testing.assert_allclose(w, crps, rtol=1e-10)


@pytest.mark.parametrize("weight,integral", [("centre", 1 / 6), ("tails", 1 / 3), ("left", 1 / 3),
                                             ("right", 1 / 3), ("uniform", 1.0)])
def test_quantile_weights_integrals_as_documented(weight, integral):
    """The weight functions integrate to 1/6, 1/3, 1/3, 1/3 and 1 (G&R 2011 weights, by quad)."""
    val, _ = integrate.quad(lambda a: float(sc.QUANTILE_WEIGHTS[weight](np.array(a))), 0, 1)
    assert val == pytest.approx(integral, rel=1e-10)


@pytest.mark.parametrize("weight", ["centre", "tails", "left", "right"])
def test_weighted_crps_of_gaussian_ensemble_matches_quadrature(weight):
    """Quantile-weighted CRPS of a fine Gaussian ensemble matches 2 * quad of QS w (G&R 2011)."""
    m = 4000
    draws = stats.norm.ppf((np.arange(m) + 0.5) / m)[None, :]
    w = sc.QUANTILE_WEIGHTS[weight]
    for y in (-2.0, 0.3, 1.5):
        ref, _ = integrate.quad(
            lambda a, y=y: float(w(np.array(a)) * sc.pinball_loss(np.array([y]), np.array([[stats.norm.ppf(a)]]), [a])[0, 0]),
            0, 1, limit=200)
        got = sc.weighted_crps_quantile(np.array([y]), draws, weight, 999)[0]
        np.testing.assert_allclose(got, 2 * ref, rtol=2e-3)


def test_weighted_crps_rejects_unknown_weight():
    """An unknown weight name lists the valid ones, sorted."""
    with pytest.raises(ValueError, match=r"\['centre', 'left', 'right', 'tails', 'uniform'\]"):
        sc.weighted_crps_quantile(np.zeros(2), np.zeros((2, 3)), "middle")


# --------------------------------------------------------------------------- threshold-weighted


def _tw_by_quad(y, x, w, r):
    """Definition: integral (F_m(z) - 1{y <= z})^2 w(z) dz, by quad between the integrand's kinks."""
    x = np.sort(x)
    lo, hi = min(x[0], y) - 12, max(x[-1], y) + 12

    def f(z):
        return (np.searchsorted(x, z, side="right") / x.size - float(y <= z)) ** 2 * w(z)

    pts = np.sort(np.concatenate([x, [y, r]]))
    val, _ = integrate.quad(f, lo, hi, points=pts, limit=500)
    return val


@pytest.mark.parametrize("weight,side", [("indicator", "lower"), ("indicator", "upper"),
                                         ("gaussian", "lower"), ("gaussian", "upper")])
def test_threshold_weighted_crps_matches_definition(weight, side):
    """twCRPS by chaining (Allen et al. 2023) equals the integral definition (G&R 2011)."""
    rng = np.random.default_rng(10)
    x = rng.normal(size=(3, 15))
    y = np.array([-0.8, 0.2, 1.9])
    r, s = 0.4, 0.7
    if weight == "indicator":
        w = (lambda z: float(z <= r)) if side == "lower" else (lambda z: float(z >= r))
    else:
        w = (lambda z: float(stats.norm.sf((z - r) / s))) if side == "lower" else \
            (lambda z: float(stats.norm.cdf((z - r) / s)))
    got = sc.threshold_weighted_crps(y, x, r, side=side, weight=weight, scale=s)
    ref = [_tw_by_quad(y[i], x[i], w, r) for i in range(3)]
    np.testing.assert_allclose(got, ref, rtol=1e-6, atol=1e-8)


def test_threshold_weighted_crps_far_threshold_is_crps():
    """With w = 1{z <= r} and r above every value, the twCRPS is the CRPS."""
    y, x = _case(seed=12)
    np.testing.assert_allclose(sc.threshold_weighted_crps(y, x, 1e6),
                               sc.crps_sorted(y, x), rtol=1e-10)


# --------------------------------------------------------------------------- log score, PIT


def test_log_score_matches_scipy_gaussian_kde():
    """-log KDE density equals scipy.stats.gaussian_kde with the same kernel sd."""
    rng = np.random.default_rng(13)
    x = rng.normal(size=(4, 300))
    y = np.array([-1.0, 0.0, 0.5, 2.5])
    h = 0.35
    got = sc.log_score(y, x, bandwidth=h)
    for i in range(4):
        kde = stats.gaussian_kde(x[i], bw_method=h / x[i].std(ddof=1))
        assert got[i] == pytest.approx(-np.log(kde(y[i])[0]), rel=1e-10)


def test_silverman_bandwidth_hand_formula():
    """Silverman (1986, eq. 3.31): 0.9 min(sd, IQR/1.34) m^(-1/5), worked on four numbers."""
    x = np.array([[1.0, 2.0, 4.0, 8.0]])
    sd = np.std(x, ddof=1)  # 3.0957...
    iqr = 5.0 - 1.75  # numpy linear quartiles 1.75 and 5.0
    expected = 0.9 * min(sd, iqr / 1.34) * 4 ** -0.2
    assert sc.silverman_bandwidth(x)[0] == pytest.approx(expected, rel=1e-12)


def test_log_score_no_underflow_and_floor():
    """Far observations give the exact Gaussian log density (no underflow) until the floor caps them."""
    x = np.zeros((2, 1))
    y = np.array([30.0, 1e6])
    h = 1.0
    got = sc.log_score(y, x, bandwidth=h, density_floor=1e-300)
    exact0 = 0.5 * 30.0**2 + np.log(np.sqrt(2 * np.pi))  # -log N(30; 0, 1), exp underflows at ~1e-196
    assert got[0] == pytest.approx(exact0, rel=1e-12)
    assert got[1] == pytest.approx(-np.log(1e-300))
    default = sc.log_score(np.array([50.0]), np.zeros((1, 5)) + np.arange(5), "silverman")
    assert default[0] == pytest.approx(-np.log(sc.DEFAULT_DENSITY_FLOOR))


def test_pit_mid_rank_ties_hand_values():
    """PIT = (#below + #equal / 2) / m: 0.5 for y = 2 among 1,2,2,3; 0.75 for 2.5; NaN for missing."""
    x = np.array([[1.0, 2.0, 2.0, 3.0]] * 3)
    np.testing.assert_allclose(sc.pit(np.array([2.0, 2.5, np.nan]), x), [0.5, 0.75, np.nan])


def test_pit_random_ties_stay_in_the_atom_and_are_reproducible():
    """Randomised ties fall between F(y-) and F(y), and the same seed gives the same values."""
    x = np.tile([1.0, 2.0, 2.0, 2.0, 3.0], (500, 1))
    y = np.full(500, 2.0)
    a = sc.pit(y, x, ties="random", seed=3)
    assert ((a >= 0.2) & (a <= 0.8)).all() and a.std() > 0.1
    np.testing.assert_array_equal(a, sc.pit(y, x, ties="random", seed=3))


def test_coverage_hits_of_central_intervals():
    """Hits are 1 inside the closed interval [q_{(1-c)/2}, q_{(1+c)/2}] of numpy's linear quantiles."""
    x = np.tile(np.arange(11.0), (4, 1))  # quantile at level a is 10a
    y = np.array([5.0, 2.5, 2.0, np.nan])
    hits = sc.coverage(y, x, [0.5, 0.6])  # intervals [2.5, 7.5] and [2, 8]
    np.testing.assert_array_equal(hits[:3], [[1, 1], [1, 1], [0, 1]])
    assert np.isnan(hits[3]).all()


def test_point_errors_match_numpy():
    """Errors of the mean and median equal numpy's mean and median of the draws."""
    rng = np.random.default_rng(14)
    x = rng.normal(size=(6, 9))
    y = rng.normal(size=6)
    pe = sc.point_errors(y, x)
    np.testing.assert_allclose(pe["se_mean"], (x.mean(1) - y) ** 2, rtol=1e-12)
    np.testing.assert_allclose(pe["ae_median"], np.abs(np.median(x, 1) - y), rtol=1e-12)


# --------------------------------------------------------------------------- score_all


def test_score_all_equals_the_single_scores():
    """score_all's one-pass values equal the standalone functions, names as documented."""
    y, x = _case(n=60, m=40, seed=15)
    out = sc.score_all(y, x, chunk_rows=7)
    expected_names = ["crps", "crps_centre", "crps_tails", "crps_left", "crps_right", "log_score",
                      "log_score_floored", "se_mean", "ae_mean", "se_median", "ae_median", "qs_05", "qs_10", "qs_25",
                      "qs_50", "qs_75", "qs_90", "qs_95", "cover_50", "cover_70", "cover_90",
                      "interval_50", "interval_80", "pit"]
    assert list(out) == expected_names
    ref = {"crps": sc.crps_sorted(y, x), "log_score": sc.log_score(y, x), "pit": sc.pit(y, x)}
    # the floor indicator: the standalone log score at its cap -log(floor) (tested in test_log_score_floor.py)
    ref["log_score_floored"] = np.where(np.isnan(ref["log_score"]), np.nan,
                                        ref["log_score"] >= -np.log(sc.DEFAULT_DENSITY_FLOOR) * (1 - 1e-12))
    for w in ("centre", "tails", "left", "right"):
        ref[f"crps_{w}"] = sc.weighted_crps_quantile(y, x, w)
    ref.update(sc.point_errors(y, x))
    qs = sc.quantile_score(y, x, sc.DEFAULT_QUANTILE_LEVELS)
    for j, a in enumerate(sc.DEFAULT_QUANTILE_LEVELS):
        ref[f"qs_{round(a * 100):02d}"] = qs[:, j]
    cov = sc.coverage(y, x)
    for j, c in enumerate(sc.DEFAULT_COVERAGE_LEVELS):
        ref[f"cover_{round(c * 100):02d}"] = cov[:, j]
    isc = sc.interval_score(y, x, sc.DEFAULT_INTERVAL_LEVELS)
    for j, c in enumerate(sc.DEFAULT_INTERVAL_LEVELS):
        ref[f"interval_{round(c * 100):02d}"] = isc[:, j]
    for name in expected_names:
        np.testing.assert_allclose(out[name], ref[name], rtol=1e-12, atol=1e-14, err_msg=name)
        assert np.isnan(out[name][[2, 3]]).all(), name


def test_score_all_chunking_and_threads_do_not_change_results():
    """Chunk size and thread count leave every score unchanged."""
    y, x = _case(n=50, m=30, seed=16)
    a = sc.score_all(y, x.astype(np.float32))
    b = sc.score_all(y, x.astype(np.float32), chunk_rows=3, n_threads=2)
    for k in a:  # BLAS may round the weighted sums differently by chunk shape: ulps only
        np.testing.assert_allclose(a[k], b[k], rtol=1e-13, atol=1e-15, err_msg=k)


def test_score_all_rejects_unnameable_levels():
    """A level that is not a whole percentage cannot be named qs_NN."""
    with pytest.raises(ValueError, match="qs_NN"):
        sc.score_all(np.zeros(2), np.zeros((2, 3)), quantile_levels=(0.025,))


# --------------------------------------------------------------------------- aggregation


def _frame():
    rows = []
    for model, bias in (("ar", 0.0), ("rw", 1.0)):
        for i, tp in enumerate(["2008Q1", "2008Q2", "2008Q3", "2008Q4", "2009Q1", "2009Q2"]):
            rows.append({"model": model, "variable": "gdp", "horizon": 1, "origin": f"o{i}",
                         "target_period": tp, "crps": 1.0 + bias + i, "log_score": 0.5 * i - bias,
                         "cover_90": float(i % 2), "pit": 0.5})
    df = pd.DataFrame(rows)
    df.loc[5, ["crps", "log_score", "cover_90", "pit"]] = np.nan  # ar, 2009Q2: truth missing
    return df


def test_aggregate_means_and_counts():
    """Cell means skip missing scores and n counts the forecasts actually scored."""
    agg = sc.aggregate(_frame())
    ar = agg[agg.model == "ar"].iloc[0]
    assert ar["n"] == 5 and ar["n_missing"] == 1
    assert ar["crps"] == pytest.approx(np.mean([1, 2, 3, 4, 5]))
    assert (agg["subperiod"] == "full").all()


def test_assign_subperiods_ranges_and_regimes_by_target_period():
    """Ranges contain whole target periods; regimes map by target quarter; rows repeat per sub-period."""
    df = _frame()
    reg = pd.Series(["expansion", "recession", "recession", "recession", "expansion"],
                    index=pd.period_range("2008Q1", periods=5, freq="Q"))
    long = sc.assign_subperiods(df, {"crisis": ("2008-07", "2009Q1")}, reg)
    agg = sc.aggregate(long)
    assert list(agg["subperiod"].cat.categories) == ["full", "crisis", "expansion", "recession"]
    crisis_ar = agg[(agg.subperiod == "crisis") & (agg.model == "ar")].iloc[0]
    assert crisis_ar["n"] == 3 and crisis_ar["crps"] == pytest.approx(np.mean([3, 4, 5]))
    rec = agg[(agg.subperiod == "recession") & (agg.model == "rw")].iloc[0]
    assert rec["n"] == 3 and rec["crps"] == pytest.approx(np.mean([3, 4, 5]))
    # 2009Q2 lies outside the regime series: only in "full"
    exp = agg[(agg.subperiod == "expansion") & (agg.model == "rw")].iloc[0]
    assert exp["n"] == 2


def test_aggregate_with_boolean_masks():
    """A mapping of boolean masks yields those sub-periods plus full."""
    df = _frame()
    agg = sc.aggregate(df, subperiods={"late": df["target_period"] >= "2009Q1"})
    late = agg[(agg.subperiod == "late") & (agg.model == "rw")].iloc[0]
    assert late["n"] == 2 and late["crps"] == pytest.approx(np.mean([6, 7]))


def test_relative_to_and_best_per_column():
    """Ratios to the benchmark (1 for itself), log score as a difference, minimum marked."""
    agg = sc.aggregate(_frame())
    rel = sc.relative_to(agg, "rw")
    ar = rel[rel.model == "ar"].iloc[0]
    assert ar["crps"] == pytest.approx(3.0 / 4.5)  # each model's own scored forecasts
    assert rel[rel.model == "rw"].iloc[0]["crps"] == pytest.approx(1.0)
    assert "log_score" not in rel and "pit" not in rel and "cover_90" not in rel
    assert ar["log_score_diff"] == pytest.approx(1.0 - 0.25)
    best = sc.best_per_column(agg)
    assert bool(best[best.model == "ar"]["crps"].iloc[0]) and not bool(best[best.model == "rw"]["crps"].iloc[0])
    with pytest.raises(ValueError, match=r"models are \['ar', 'rw'\]"):
        sc.relative_to(agg, "bvar")


def test_common_sample_compares_like_with_like():
    """On the common sample the target missing for one model is dropped for all models."""
    common = sc.common_sample(_frame())
    assert len(common) == 10
    rel = sc.relative_to(sc.aggregate(common), "rw")
    assert rel[rel.model == "ar"].iloc[0]["crps"] == pytest.approx(3.0 / 4.0)


def test_assign_subperiods_errors_name_the_problem():
    """A bad label names the row; a reversed range names both ends."""
    df = _frame()
    df.loc[2, "target_period"] = "2008X3"
    with pytest.raises(ValueError, match="row 2"):
        sc.assign_subperiods(df)
    with pytest.raises(ValueError, match="starts"):
        sc.assign_subperiods(_frame(), {"bad": ("2009Q1", "2008Q1")})


def test_tidy_scores_checks_lengths():
    """tidy_scores refuses score arrays of the wrong length."""
    keys = pd.DataFrame({"model": ["a", "b"]})
    with pytest.raises(ValueError, match="expected \\(2,\\)"):
        sc.tidy_scores(keys, {"crps": np.zeros(3)})
