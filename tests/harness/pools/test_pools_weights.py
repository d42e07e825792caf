"""Pool weights: equal, inverse mean score, and the optimal log-score pool against references."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from scipy import optimize, stats

from harness.pools import (
    PoolError,
    equal_weights,
    inverse_score_weights,
    mean_log_pool,
    optimal_weights,
)


def _gaussian_member_densities(rng, n, locs, scales):
    """Densities of Gaussian members N(loc, scale^2) at standard normal truths: shape (1, M, n)."""
    y = rng.standard_normal(n)
    return np.stack([stats.norm.pdf(y, mu, s) for mu, s in zip(locs, scales, strict=True)])[None]


def test_equal_weights_share_among_available_members():
    """Equal weights are 1/k over the k available members, 0 for the others, NaN if none."""
    w = equal_weights(np.array([[True, True, False], [False, False, False]]))
    np.testing.assert_allclose(w[0], [0.5, 0.5, 0.0])
    assert np.isnan(w[1]).all()


def test_inverse_score_weights_equal_the_formula_on_properscoring_crps():
    """w_m = (1/mean CRPS_m) / sum_j (1/mean CRPS_j), CRPS from properscoring (Gneiting & Raftery 2007)."""
    import properscoring as ps

    rng = np.random.default_rng(0)
    y = rng.standard_normal(30)
    draws = [rng.normal(mu, s, (30, 400)) for mu, s in ((0, 1), (0.5, 1), (0, 2))]
    crps = np.stack([ps.crps_ensemble(y, d) for d in draws])  # (M, W)
    mask = np.ones((1, 30), bool)
    mask[0, :5] = False  # slots outside the window are ignored
    w = inverse_score_weights(crps[None], mask)
    inv = 1.0 / crps[:, 5:].mean(axis=1)
    np.testing.assert_allclose(w[0], inv / inv.sum(), rtol=1e-12)


def test_inverse_score_weights_zero_scores_take_the_limit_and_negative_raise():
    """Members with zero mean loss share the weight (limit of 1/s); a negative mean loss raises."""
    scores = np.array([[[0.0, 0.0], [1.0, 2.0], [0.0, 0.0]]])
    np.testing.assert_allclose(inverse_score_weights(scores, np.ones((1, 2), bool))[0], [0.5, 0, 0.5])
    with pytest.raises(PoolError, match="non-negative loss"):
        inverse_score_weights(-np.ones((1, 2, 3)), np.ones((1, 3), bool), score="log_score")


def _grid_simplex(m, step):
    """Every point of the simplex grid with spacing ``step`` (m = 2 or 3)."""
    k = round(1 / step)
    pts = [c for c in itertools.product(range(k + 1), repeat=m - 1) if sum(c) <= k]
    g = np.array([[*c, k - sum(c)] for c in pts], dtype=float) / k
    return g


@pytest.mark.parametrize(("locs", "scales", "step", "groups"), [
    ((0.0, 0.8), (1.6, 0.7), 0.0005, None),
    ((0.0, 1.5), (1.0, 1.0), 0.0005, None),  # optimum at the vertex of the unbiased member
    ((0.0, 0.7, -0.5), (2.0, 0.8, 1.0), 0.002, None),
    # twin members (only their total weight is identified) and a useless one
    ((0.3, 0.3, 3.0), (1.0, 1.0, 1.0), 0.002, [[0, 1], [2]]),
])
def test_optimal_weights_match_a_brute_force_simplex_grid(locs, scales, step, groups):
    """The solver's objective is at least the best of a fine simplex grid of the concave objective.

    Reference: brute-force evaluation of (1/n) sum_t log sum_m w_m f_mt on every grid point
    (Geweke & Amisano 2011, eq. 4's objective), computed here with plain numpy.
    """
    rng = np.random.default_rng(5)
    f = _gaussian_member_densities(rng, 120, locs, scales)
    grid = _grid_simplex(len(locs), step)
    grid_obj = np.log(grid @ f[0]).mean(axis=1)
    best = grid_obj.argmax()
    fit = optimal_weights(f, np.ones((1, 120), bool))
    assert fit.converged.all()
    assert fit.objective[0] >= grid_obj[best] - 1e-12
    groups = groups or [[m] for m in range(len(locs))]
    total = np.array([[row[g].sum() for g in groups] for row in (fit.weights[0], grid[best])])
    assert np.abs(total[0] - total[1]).max() <= 2 * step + 1e-3
    # and the certified gap really bounds the distance to the grid's best
    assert grid_obj[best] - fit.objective[0] <= fit.gap[0] + 1e-12
    np.testing.assert_allclose(fit.weights.sum(), 1.0, rtol=0, atol=1e-12)
    assert (fit.weights >= 0).all()


def test_optimal_weights_agree_with_scipy_slsqp_on_many_cells():
    """Vectorised solution equals scipy.optimize SLSQP's, cell by cell (reference library)."""
    rng = np.random.default_rng(9)
    cells = [_gaussian_member_densities(rng, 60, rng.normal(0, 1, 4), rng.uniform(0.5, 2, 4))
             for _ in range(25)]
    f = np.concatenate(cells)
    mask = rng.random((25, 60)) < 0.9
    fit = optimal_weights(f, mask)
    for c in range(25):
        fc = f[c][:, mask[c]].T

        def neg(w, fc=fc):
            p = fc @ w
            return -np.log(p).mean(), -(fc / p[:, None]).mean(axis=0)

        ref = optimize.minimize(neg, np.full(4, 0.25), jac=True, method="SLSQP",
                                bounds=[(0, 1)] * 4,
                                constraints=[{"type": "eq", "fun": lambda w: w.sum() - 1}],
                                options={"ftol": 1e-14, "maxiter": 1000})
        assert fit.objective[c] >= -ref.fun - 1e-9
        np.testing.assert_allclose(fit.weights[c], ref.x, atol=2e-3)


def test_optimal_objective_equals_mean_log_pool():
    """OptimalFit.objective is the average log pool density at its weights (one definition)."""
    rng = np.random.default_rng(1)
    f = _gaussian_member_densities(rng, 40, (0, 1), (1, 1))
    mask = np.ones((1, 40), bool)
    fit = optimal_weights(f, mask)
    np.testing.assert_allclose(fit.objective, mean_log_pool(f, mask, fit.weights), rtol=1e-13)


def test_identical_members_keep_equal_weights():
    """When every member has the same density at every truth, the objective is flat: equal weights."""
    f = np.full((1, 3, 10), 0.3)
    fit = optimal_weights(f, np.ones((1, 10), bool))
    np.testing.assert_allclose(fit.weights, 1 / 3)
    assert fit.gap[0] == 0.0


def test_optimal_weights_refuse_bad_input():
    """Empty windows, mismatched shapes or non-positive densities raise a PoolError naming them."""
    with pytest.raises(PoolError, match="at least one scored forecast"):
        optimal_weights(np.ones((1, 2, 3)), np.zeros((1, 3), bool))
    with pytest.raises(PoolError, match=r"density \(C, M, W\)"):
        optimal_weights(np.ones((1, 2, 3)), np.ones((2, 3), bool))
    with pytest.raises(PoolError, match="finite and positive"):
        optimal_weights(np.zeros((1, 2, 3)), np.ones((1, 3), bool))
