"""The shared forecast template: partial quarters are left out of the target layout."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
import xarray as xr

from harness.models import available_models, make_model
from harness.models.base import TargetLayout, output_array, partial_mask
from harness.models.bvar import BayesianVAR, NIWPosterior
from harness.models.conditional import conditional_moments
from harness.testing import make_infoset, make_targets


def _flags(info, cells) -> xr.DataArray:
    f = np.zeros((len(info.periods), len(info.variables)), dtype=bool)
    for row, col in cells:
        f[row, col] = True
    return xr.DataArray(f, dims=("period", "variable"),
                        coords={"period": info.periods, "variable": info.variables})


def test_partial_cells_are_unobserved_in_the_layout_and_the_info_set_is_untouched():
    """A flagged cell is NaN in layout.values, not observed, recorded in left_out; info unchanged."""
    y = np.arange(20.0).reshape(10, 2)
    info = make_infoset(y, ["q", "m"])
    info = replace(info, partial=_flags(info, [(9, 1)]))
    tg = make_targets(info, ["q", "m"], (-1,))
    lay = TargetLayout.build("t", info, tg, 5, np.random.default_rng(0))
    assert np.isnan(lay.values[9, 1]) and lay.left_out[9, 1] and lay.left_out.sum() == 1
    assert lay.observed.tolist() == [[True], [False]]
    assert info.values()[9, 1] == 19.0  # the information set keeps its value
    # flags given in another variable order are aligned by coordinate, not by position
    swapped = replace(info, partial=info.partial.isel(variable=[1, 0]))
    np.testing.assert_array_equal(partial_mask(swapped), partial_mask(info))


def test_output_array_fills_published_targets_and_refuses_a_wrong_shape():
    """Published targets are filled in; a draws array of the wrong shape is a TaskOutputError."""
    from harness.errors import TaskOutputError

    info = make_infoset(np.arange(20.0).reshape(10, 2), ["a", "b"])
    tg = make_targets(info, ["a"], (-1, 0))
    lay = TargetLayout.build("t", info, tg, 3, np.random.default_rng(0))
    out = output_array(np.zeros((3, 1, 2)), lay, make_model("nochange"))
    assert out.sel(variable="a", horizon=-1).values.tolist() == [18.0] * 3 and out.attrs["model"] == "nochange"
    with pytest.raises(TaskOutputError, match=r"draws have shape \(3, 2, 2\), expected \(3, 1, 2\)"):
        output_array(np.zeros((3, 2, 2)), lay, make_model("nochange"))


# ---------------------------------------------------------------------------- the BVAR's tail
# A known VAR(1) in (gdp, ip, survey): y_t = c + A y_{t-1} + e_t, e_t ~ N(0, S).
C = np.array([0.5, 0.2, -0.1])
A = np.array([[0.5, 0.2, 0.1], [0.1, 0.6, 0.1], [0.0, 0.2, 0.5]])
S = np.array([[1.0, 0.5, 0.3], [0.5, 1.5, 0.4], [0.3, 0.4, 0.8]])
COEF = np.vstack([A.T, C[None, :]])  # rows [lag 1 (3), intercept]


class FixedPosterior(NIWPosterior):
    """A degenerate posterior: every draw has the parameters (COEF, S)."""

    def sample(self, n_draws, rng):
        chol = np.linalg.cholesky(self.scale)
        return (np.broadcast_to(self.coef_mean, (n_draws, *self.coef_mean.shape)).copy(),
                np.broadcast_to(chol, (n_draws, *chol.shape)).copy())


class FixedBVAR(BayesianVAR):
    """The BVAR's forecast path (layout, ragged split, conditioning) with parameters held fixed."""

    def fit_sample(self, y, variables):
        return FixedPosterior(COEF, np.zeros((4, 4)), S, 100.0)


def _ragged_panel(partial_value: float):
    rng = np.random.default_rng(3)
    t = 60
    y = np.zeros((t + 2, 3))
    for s in range(1, t + 2):
        y[s] = C + A @ y[s - 1] + np.linalg.cholesky(S) @ rng.standard_normal(3)
    y[t:, 0] = np.nan  # gdp ends with the balanced block
    y[t + 1, 1] = partial_value  # ip's last quarter: one month only, flagged partial
    return y, t


def test_bvar_draws_given_the_tail_match_the_analytic_conditional_leaving_the_partial_cell_out():
    """BVAR draws equal the Gaussian conditional given the tail without the partial cell (Waggoner & Zha 1999)."""
    y, t = _ragged_panel(partial_value=8.0)  # far from its conditional mean: conditioning on it shows
    info = make_infoset(y, ["gdp", "ip", "survey"])
    info = replace(info, partial=_flags(info, [(t + 1, 1)]))
    # horizons -2, -1, 0 are rows t, t + 1 and the period after the panel: steps 1, 2, 3
    tg = make_targets(info, ["gdp", "ip"], (-2, -1, 0))
    d = 40_000
    out = FixedBVAR(lags=1).forecast(info, tg, d, np.random.default_rng(7)).values
    init = y[t - 1:t]
    kept = y[t:t + 2].copy()
    kept[1, 1] = np.nan
    mean, cov = conditional_moments(COEF, S, init, 3, kept)
    wrong_mean, _ = conditional_moments(COEF, S, init, 3, y[t:t + 2])
    # the unobserved targets: gdp at steps 1-3, ip at steps 2 (the partial quarter) and 3
    cells = [(0, 0, 1), (0, 1, 2), (0, 2, 3), (1, 1, 2), (1, 2, 3)]  # (variable, horizon, step)
    x = np.column_stack([out[:, j, k] for j, k, _ in cells])
    idx = [(s - 1) * 3 + j for j, _, s in cells]  # position in the stacked path (variable j, step s)
    mu = np.array([mean[s - 1, j] for j, _, s in cells])
    v = cov[np.ix_(idx, idx)]
    se = np.sqrt(np.diag(v) / d)
    assert np.all(np.abs(x.mean(axis=0) - mu) < 5 * se)
    # sampling s.d. of a Gaussian sample covariance: sqrt((v_ii v_jj + v_ij^2) / d) (Anderson
    # 2003, sec. 3.3)
    cse = np.sqrt((np.outer(np.diag(v), np.diag(v)) + v * v) / d)
    assert np.all(np.abs(np.cov(x.T) - v) < 5 * cse)
    # conditioning on the partial value would have moved the gdp nowcast far away
    wrong = np.array([wrong_mean[s - 1, j] for j, _, s in cells])
    assert abs(x[:, 0].mean() - wrong[0]) > 20 * se[0]
    # and the partial quarter is a forecast, not a point mass at the partial mean
    assert out[:, 1, 1].std() > 0.5 and not np.any(out[:, 1, 1] == 8.0)


def test_flagged_tail_cell_gives_the_draws_of_a_missing_cell_for_the_bvar():
    """For the BVAR (random parameters), flagging a tail cell partial equals deleting it."""
    y, t = _ragged_panel(partial_value=8.0)
    info = make_infoset(y, ["gdp", "ip", "survey"])
    flagged = replace(info, partial=_flags(info, [(t + 1, 1)]))
    cut = y.copy()
    cut[t + 1, 1] = np.nan
    missing = make_infoset(cut, ["gdp", "ip", "survey"])
    tg = make_targets(info, ["gdp", "ip"], (-2, -1, 0, 2))
    a = BayesianVAR(lags=2).forecast(flagged, tg, 200, np.random.default_rng(1)).values
    b = BayesianVAR(lags=2).forecast(missing, tg, 200, np.random.default_rng(1)).values
    np.testing.assert_array_equal(a, b)


# ---------------------------------------------------------------------------- the demo case
@pytest.fixture(scope="module")
def demo_cube(tmp_path_factory):
    from vintages.demo import build_demo_store

    return build_demo_store(tmp_path_factory.mktemp("demo") / "store").cube()


IP = {"transform": "dlog_ann", "convert": "mean"}


def _fast(name):
    # the stochastic-volatility sampler's default chain is long; a short one is enough here
    return make_model(name, **({"n_iter": 300, "burn": 100} if name == "bvar_sv" else {}))


def _quarterly_models():
    # native-frequency models never see a converted (partial) quarter: monthly data stay monthly
    from harness.models import get_model_class

    return [m for m in available_models() if getattr(get_model_class(m), "infoset_layout", "") != "native"]


@pytest.mark.parametrize("name", _quarterly_models())
def test_demo_partial_quarter_nowcast_is_a_forecast_not_the_partial_mean(demo_cube, name):
    """At 2012-03-20 the demo's ip 2012Q1 rests on January only: every model forecasts it."""
    from harness.scores import DEFAULT_DENSITY_FLOOR, log_score
    from vintages import build_infoset, truth_values
    from vintages import make_targets as targets_for

    info = build_infoset(demo_cube, "2012-03-20", {"ip": IP}, partial="keep")
    assert bool(info.partial.sel(variable="ip").values[-1])  # the reproducer's premise
    partial_mean = float(info.panel.sel(variable="ip").values[-1])
    tg = targets_for(info, ["ip"], [0])
    draws = _fast(name).forecast(info, tg, 2000, np.random.default_rng(0)).values[:, 0, 0]
    truth = truth_values(demo_cube, "first", "ip", IP, tg.periods())[0]
    assert np.isfinite(truth).all() and abs(truth[0] - partial_mean) > 0.3
    assert draws.std() > 0.1 and not np.any(draws == partial_mean)
    score = log_score(truth, draws[None, :])[0]
    assert score < -np.log(DEFAULT_DENSITY_FLOOR) - 10  # far from the cap of a point mass


def test_demo_bvar_does_not_condition_gdp_on_the_partial_indicator(demo_cube):
    """The BVAR's gdp nowcast at 2012-03-20 is the one it makes with ip's partial quarter deleted."""
    from vintages import build_infoset
    from vintages import make_targets as targets_for

    info = build_infoset(demo_cube, "2012-03-20", {"gdp": "dlog_ann", "ip": IP}, partial="keep")
    part = info.partial.transpose("period", "variable").values
    assert part[-1, info.variables.index("ip")]
    cut = info.values().copy()
    cut[part] = np.nan
    missing = replace(info, panel=info.panel.copy(data=cut), partial=None)
    tg = targets_for(info, ["gdp", "ip"], [0, 1])
    a = BayesianVAR(lags=2).forecast(info, tg, 500, np.random.default_rng(2)).values
    b = BayesianVAR(lags=2).forecast(missing, tg, 500, np.random.default_rng(2)).values
    np.testing.assert_array_equal(a, b)
