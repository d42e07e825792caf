"""Mixed-frequency dynamic factor model for nowcasting quarterly targets from monthly indicators.

The model, its state-space form and the algorithms are described in
:mod:`harness.models.dfm_ssm` (model and references), :mod:`harness.models.dfm_fast` (compiled
filter and smoother) and :mod:`harness.models.dfm_em` (EM estimation); this module holds the
model class that the vintage-harness runs.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np
import pandas as pd
import xarray as xr

from harness.models.base import BaseModel, output_array, register
from harness.models.dfm_em import EMResult, em_fit
from harness.models.dfm_native import NativeLayout
from harness.models.dfm_ssm import DFMParams, StateLayout, StateSpace, simulation_smoother, system
from harness.models.errors import InsufficientDataError
from harness.models.params import Boolean, Interval, Options
from vintages import InfoSet, Targets

__all__ = ["DFMFit", "DynamicFactorModel"]

_MIN_MONTHLY_OBS = 24
_MIN_QUARTERLY_OBS = 8


@dataclass(frozen=True)
class DFMFit:
    """A fitted factor model at one origin.

    Attributes
    ----------
    params : DFMParams
        On the standardised data.
    layout : StateLayout
    mean, scale : ndarray (n,)
        Standardisation of each series inside the vintage (``x = (y - mean) / scale``).
    variables : list of str
    periods : pandas.PeriodIndex
        Months of the estimation sample (through the last month with any value).
    x : ndarray (T, n)
        Standardised panel (NaN where unpublished).
    em : EMResult
    """

    params: DFMParams
    layout: StateLayout
    mean: np.ndarray
    scale: np.ndarray
    variables: list[str]
    periods: pd.PeriodIndex
    x: np.ndarray
    em: EMResult

    def system(self) -> StateSpace:
        return system(self.params, self.layout)

    def row_of(self, month: pd.Period) -> int:
        """Row of a month relative to the first month of the sample (may be beyond it)."""
        return int(month.ordinal - self.periods[0].ordinal)


@register
class DynamicFactorModel(BaseModel):
    """Dynamic factor model with monthly and quarterly series, estimated by EM at each origin.

    Monthly indicators load on ``r`` common factors following a VAR(``factor_lags``); each
    quarterly variable loads on the Mariano & Murasawa (2003) aggregate
    ``f_t + 2 f_{t-1} + 3 f_{t-2} + 2 f_{t-3} + f_{t-4}`` of the monthly factors and of its own
    monthly idiosyncratic term, and is observed at its quarter's last month. The parameters are
    maximum-likelihood estimates by the EM algorithm for arbitrary patterns of missing data
    (Bańbura & Modugno 2014), accelerated by SQUAREM; unlike statsmodels' ``DynamicFactorMQ``,
    whose EM leaves the loadings at their starting values when the idiosyncratic terms are
    AR(1), the loadings are updated too (an ECM step); see :mod:`harness.models.dfm_em`.

    Predictive draws for each quarterly target and horizon come from the simulation smoother of
    Durbin & Koopman (2002) run on the window from the earliest unpublished target month to the
    latest target month (exact by the Markov property, see
    :func:`harness.models.dfm_ssm.simulation_smoother`), then mapped back to the target's units
    (the vintage's mean and standard deviation). They include the uncertainty of the factors and
    idiosyncratic terms given the data (the state) and of future shocks; the quarterly series'
    idiosyncratic term is part of the state, so this is also their observation uncertainty.
    **Parameter uncertainty is not included**: the EM estimates are used as if known (no
    bootstrap), so the predictive spread is too narrow by that much in short samples. Targets
    already published are returned as published.

    Parameters
    ----------
    n_factors : int, default 1
        Number of common factors ``r`` (at most the number of monthly indicators).
    factor_lags : int, default 2
        VAR order of the factors.
    idiosyncratic : {"ar1", "white_noise"}, default "ar1"
        AR(1) idiosyncratic terms (in the state) or white noise (monthly: measurement error).
    standardize : bool, default True
        Standardise each series with the mean and standard deviation (ddof 1, as pandas and
        statsmodels) of the vintage at hand, and undo it for the draws. False only removes the
        vintage mean (the model has no intercepts).
    tol : float, default 1e-6
        EM stops when the relative change of the log-likelihood falls below it.
    max_iter : int, default 500
        Maximum number of EM E-steps.

    Notes
    -----
    ``infoset_layout = "native"``: the model needs a native-frequency information set
    (``InfoSet.freq == "M"`` with ``native_freq``); given a quarterly panel it raises a
    ``ValueError`` naming the model, the variable and the origin. Every monthly indicator
    needs at least 24 observations and every quarterly variable 8; a constant series cannot be
    standardised. These raise :class:`~harness.models.errors.InsufficientDataError`. Other
    quarterly variables in the panel enter the model like the targets.

    References
    ----------
    Bańbura, M. and Modugno, M. (2014). Maximum likelihood estimation of factor models on
    datasets with arbitrary pattern of missing data. *Journal of Applied Econometrics* 29(1),
    133-160.
    Mariano, R. S. and Murasawa, Y. (2003). A new coincident index of business cycles based on
    monthly and quarterly series. *Journal of Applied Econometrics* 18(4), 427-443.
    Durbin, J. and Koopman, S. J. (2002). A simple and efficient simulation smoother for state
    space time series analysis. *Biometrika* 89(3), 603-615.
    Varadhan, R. and Roland, C. (2008). Simple and globally convergent methods for accelerating
    the convergence of any EM algorithm. *Scandinavian Journal of Statistics* 35(2), 335-353.
    """

    name = "dfm"
    version = "1"
    #: the information-set form the model needs: "native" (monthly axis, quarterly targets)
    infoset_layout: ClassVar[str] = "native"
    #: modules whose code the results depend on (for a cache key beyond this module's source)
    source_modules: ClassVar[tuple[str, ...]] = (
        "harness.models.dfm", "harness.models.dfm_em", "harness.models.dfm_fast",
        "harness.models.dfm_native", "harness.models.dfm_ssm")
    param_constraints = {
        "n_factors": [Interval(int, 1, 10)],
        "factor_lags": [Interval(int, 1, 12)],
        "idiosyncratic": [Options("ar1", "white_noise")],
        "standardize": [Boolean()],
        "tol": [Interval(float, 0, 1, closed="neither")],
        "max_iter": [Interval(int, 1, 100_000)],
    }

    def __init__(self, n_factors: int = 1, factor_lags: int = 2, idiosyncratic: str = "ar1",
                 standardize: bool = True, tol: float = 1e-6, max_iter: int = 500):
        self.n_factors = n_factors
        self.factor_lags = factor_lags
        self.idiosyncratic = idiosyncratic
        self.standardize = standardize
        self.tol = tol
        self.max_iter = max_iter

    @classmethod
    def check_cases(cls):
        """A native information set (monthly indicators, quarterly target): the form this model needs."""
        from harness.models.dfm_native import native_check_case

        return [native_check_case(cls(), "native")]

    # -- estimation ---------------------------------------------------------------
    def fit_layout(self, lay: NativeLayout) -> DFMFit:
        """Estimate on a validated native layout (see :meth:`fit`)."""
        p = self.validate()
        y = lay.values
        names = lay.variables
        origin = lay.origin
        counts = np.isfinite(y).sum(axis=0)
        for j, v in enumerate(names):
            need = _MIN_QUARTERLY_OBS if lay.quarterly[j] else _MIN_MONTHLY_OBS
            if counts[j] < need:
                kind = "quarterly" if lay.quarterly[j] else "monthly"
                raise InsufficientDataError(
                    f"model {self.name!r}: {kind} variable {v!r} has {counts[j]} observation(s) "
                    f"at origin {origin}; at least {need} are needed")
        n_monthly = int((~lay.quarterly).sum())
        if n_monthly < p["n_factors"]:
            raise InsufficientDataError(
                f"model {self.name!r}: {p['n_factors']} factor(s) need at least as many monthly "
                f"indicators; the information set at origin {origin} has {n_monthly} "
                f"(variables {names})")
        mean = np.nanmean(y, axis=0)
        if p["standardize"]:
            scale = np.nanstd(y, axis=0, ddof=1)
            flat = np.flatnonzero(~(scale > 1e-10 * np.maximum(1.0, np.abs(mean))))
            if len(flat):
                raise InsufficientDataError(
                    f"model {self.name!r}: variable {names[flat[0]]!r} is constant at origin "
                    f"{origin} and cannot be standardised")
        else:
            scale = np.ones(len(names))
        x = (y - mean) / scale
        layout = StateLayout(lay.quarterly.copy(), p["n_factors"], p["factor_lags"],
                             p["idiosyncratic"] == "ar1")
        try:
            em = em_fit(x, layout, tol=p["tol"], max_iter=p["max_iter"])
        except (np.linalg.LinAlgError, FloatingPointError) as exc:
            raise InsufficientDataError(
                f"model {self.name!r}: estimation failed at origin {origin} (singular panel? "
                f"variables {names}): {exc}") from None
        return DFMFit(em.params, layout, mean, scale, list(names), lay.periods, x, em)

    def fit(self, info: InfoSet, targets: Targets | None = None) -> DFMFit:
        """Estimate the model on a native information set.

        Parameters
        ----------
        info : InfoSet
            Native-frequency information set.
        targets : Targets, optional
            Only validated (default: the first quarterly variable at horizon 0).
        """
        if targets is None:
            q = [v for v in info.variables if (info.native_freq or {}).get(v) == "Q"]
            targets = Targets((q[0] if q else info.variables[0],), (0,), "Q",
                              pd.Period(pd.Timestamp(info.origin), freq="Q"))
        lay = NativeLayout.build(self.name, info, targets, 1, np.random.default_rng(0),
                                 min_months=_MIN_MONTHLY_OBS)
        return self.fit_layout(lay)

    # -- forecasting ---------------------------------------------------------------
    def forecast(self, info: InfoSet, targets: Targets, n_draws: int,
                 rng: np.random.Generator) -> xr.DataArray:
        """Predictive draws, dims ``(draw, variable, horizon)``, in the targets' units."""
        self.validate()
        lay = NativeLayout.build(self.name, info, targets, n_draws, rng,
                                 min_months=_MIN_MONTHLY_OBS)
        fit = self.fit_layout(lay)
        return output_array(self.draw_fit(fit, lay, rng), lay, self)

    def draw_fit(self, fit: DFMFit, lay: NativeLayout, rng: np.random.Generator) -> np.ndarray:
        """Draws ``(n_draws, n_targets, n_horizons)`` of the targets (see the class docstring)."""
        out = np.zeros((lay.n_draws, *lay.target_rows.shape))
        pending = ~lay.observed
        if not pending.any():
            return out
        nt = fit.x.shape[0]
        rows = lay.target_rows[pending]
        tau = min(int(rows.min()), nt)
        t_end = int(rows.max())
        fo = fit.em.filter
        ss = fit.system()
        window = np.full((t_end - tau + 1, fit.x.shape[1]), np.nan)
        stop = min(nt, t_end + 1)
        if stop > tau:
            window[: stop - tau] = fit.x[tau:stop]
        states, _ = simulation_smoother(window, ss, fo.a_pred[tau], fo.pred_cov(tau), lay.n_draws, rng)
        for j, k in zip(*np.nonzero(pending), strict=True):
            col = lay.columns[j]
            sig = ss.Z[col] @ states[lay.target_rows[j, k] - tau]  # (D,)
            out[:, j, k] = fit.mean[col] + fit.scale[col] * sig
        return out

    def nowcast_mean(self, fit: DFMFit, variable: str, quarter: pd.Period) -> float:
        """Point nowcast/forecast ``E[y | data]`` of a quarterly variable, in its units."""
        col = fit.variables.index(variable)
        row = fit.row_of(quarter.asfreq("M", how="end"))
        nt = fit.x.shape[0]
        fo = fit.em.filter
        ss = fit.system()
        tau = min(row, nt)
        window = np.full((row - tau + 1, fit.x.shape[1]), np.nan)
        window[: max(0, min(nt, row + 1) - tau)] = fit.x[tau:min(nt, row + 1)]
        _, mean = simulation_smoother(window, ss, fo.a_pred[tau], fo.pred_cov(tau), 1,
                                      np.random.default_rng(0))
        return float(fit.mean[col] + fit.scale[col] * (ss.Z[col] @ mean[-1]))
