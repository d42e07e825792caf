"""Bridge equations: quarterly targets on quarterly aggregates of monthly indicators.

The approach of Baffigi, Golinelli & Parigi (2004): each indicator's unpublished months are
forecast by its own autoregression, the completed months are aggregated to the quarter, and the
quarterly target is regressed by OLS on the quarterly aggregates of the indicators.
"""

from __future__ import annotations

from typing import ClassVar

import numpy as np
import xarray as xr

from harness.models.ar import AutoRegression
from harness.models.base import BaseModel, output_array, register
from harness.models.dfm_native import NativeLayout
from harness.models.errors import InsufficientDataError
from harness.models.params import Boolean, Interval, Options
from vintages import InfoSet, Targets

__all__ = ["BridgeEquations", "aggregate_months"]

_MM = np.array([1.0, 2.0, 3.0, 2.0, 1.0]) / 3.0


def aggregate_months(x: np.ndarray, last_rows: np.ndarray, how: str) -> np.ndarray:
    """Quarterly aggregates of monthly series at each quarter's last month.

    Parameters
    ----------
    x : ndarray (..., T, k)
        Monthly values (leading axes, e.g. draws, broadcast).
    last_rows : ndarray (Q,)
        Row of each quarter's last month.
    how : {"mean", "mm"}
        ``mean``: the average of the quarter's three months (a level, e.g. a survey);
        ``mm``: ``(x_t + 2 x_{t-1} + 3 x_{t-2} + 2 x_{t-3} + x_{t-4}) / 3``, the quarterly
        growth of the quarter's average level implied by monthly growth rates (Mariano &
        Murasawa 2003).

    Returns
    -------
    ndarray (..., Q, k)
        NaN where a month needed is missing (or before the panel starts).
    """
    w = np.full(3, 1.0 / 3.0) if how == "mean" else _MM
    span = len(w)
    rows = last_rows[:, None] - np.arange(span)[None, :]  # newest first
    ok = rows >= 0
    vals = x[..., np.clip(rows, 0, None), :]  # (..., Q, span, k)
    vals = np.where(ok[:, :, None], vals, np.nan)
    return np.einsum("s,...qsk->...qk", w, vals)


@register
class BridgeEquations(BaseModel):
    """Bridge equations with autoregressive completion of the indicators' ragged edge.

    For each quarterly target ``y``: every monthly indicator ``x_i`` in the information set is
    extended over its unpublished months, up to the last target quarter, by its own AR(p) with
    intercept (``p`` chosen by BIC over ``0..max_lags`` on a common sample; Schwarz 1978) fitted
    on the indicator's trailing run of observations. The months are aggregated to quarters
    (:func:`aggregate_months`) and the bridge equation

    .. math:: y_q = c + \\sum_i \\beta_i \\bar x_{i,q} + \\sum_{l=1}^{L} \\phi_l y_{q-l} + u_q

    is fitted by OLS on the quarters where the target and every indicator's aggregate are
    published (aggregates of published months only). Draws propagate every source of
    uncertainty the model has: each indicator's path is simulated (with AR parameter draws when
    ``param_uncertainty``) and aggregated per draw; the bridge coefficients and the residual
    variance are drawn from their posterior under the flat prior
    :math:`p(\\beta, \\sigma^2) \\propto 1/\\sigma^2` (Zellner 1971); a Gaussian residual is added.
    With ``target_lags > 0``, unpublished earlier quarters enter through their own draws.

    Parameters
    ----------
    max_lags : int, default 6
        Largest AR order of the indicator equations.
    aggregate : {"mean", "mm"}, default "mean"
        How months become a quarterly regressor: the three-month average (levels) or the
        Mariano-Murasawa weights for monthly growth rates.
    target_lags : int, default 0
        Lags ``L`` of the target in the bridge equation.
    param_uncertainty : bool, default True
        Draw the AR and bridge parameters from their posteriors (else use the estimates).

    Notes
    -----
    ``infoset_layout = "native"`` (see :mod:`harness.models.dfm_native`). Indicators are forecast
    one by one: the correlation between their forecast errors is ignored, as in the bridge
    literature. Quarterly variables other than the targets are not used. Each indicator needs
    ``2 * max_lags + 3`` consecutive observations, and the regression at least
    ``k + 5`` quarters for ``k`` coefficients; otherwise
    :class:`~harness.models.errors.InsufficientDataError`, naming the model, the variable and
    the origin. Collinear aggregates raise it too.

    References
    ----------
    Baffigi, A., Golinelli, R. and Parigi, G. (2004). Bridge models to forecast the euro area
    GDP. *International Journal of Forecasting* 20(3), 447-460.
    Mariano, R. S. and Murasawa, Y. (2003). A new coincident index of business cycles based on
    monthly and quarterly series. *Journal of Applied Econometrics* 18(4), 427-443.
    Schwarz, G. (1978). Estimating the dimension of a model. *Annals of Statistics* 6(2), 461-464.
    Zellner, A. (1971). *An Introduction to Bayesian Inference in Econometrics*, Wiley, ch. 3.
    """

    name = "bridge"
    version = "1"
    #: the information-set form the model needs: "native" (monthly axis, quarterly targets)
    infoset_layout: ClassVar[str] = "native"
    #: modules whose code the results depend on (for a cache key beyond this module's source)
    source_modules: ClassVar[tuple[str, ...]] = (
        "harness.models.ar", "harness.models.bridge", "harness.models.dfm_native")
    param_constraints = {
        "max_lags": [Interval(int, 0, 24)],
        "aggregate": [Options("mean", "mm")],
        "target_lags": [Interval(int, 0, 8)],
        "param_uncertainty": [Boolean()],
    }

    def __init__(self, max_lags: int = 6, aggregate: str = "mean", target_lags: int = 0,
                 param_uncertainty: bool = True):
        self.max_lags = max_lags
        self.aggregate = aggregate
        self.target_lags = target_lags
        self.param_uncertainty = param_uncertainty



    @classmethod
    def check_cases(cls):
        """A native information set (monthly indicators, quarterly target): the form this model needs."""
        from harness.models.dfm_native import native_check_case

        return [native_check_case(cls(), "native")]
    def forecast(self, info: InfoSet, targets: Targets, n_draws: int,
                 rng: np.random.Generator) -> xr.DataArray:
        """Predictive draws, dims ``(draw, variable, horizon)``, in the targets' units."""
        p = self.validate()
        lay = NativeLayout.build(self.name, info, targets, n_draws, rng, min_months=12)
        return output_array(self._draw(lay, p, rng), lay, self)

    def _draw(self, lay: NativeLayout, p: dict, rng: np.random.Generator) -> np.ndarray:
        y = lay.values
        nt = y.shape[0]
        mon = np.flatnonzero(~lay.quarterly)
        names = [lay.variables[i] for i in mon]
        if not len(mon):
            raise InsufficientDataError(f"model {self.name!r}: the information set at origin "
                                        f"{lay.origin} has no monthly indicator")
        d = lay.n_draws
        t_end = int(lay.target_rows.max())
        horizon = max(t_end + 1, nt)
        # rows of quarters' last months (months 3, 6, 9, 12)
        q_rows = np.arange((3 - lay.periods[0].month % 3) % 3, horizon, 3)
        todo = [self._todo(y[:, col], lay.target_rows[jt], q_rows, p["target_lags"])
                for jt, col in enumerate(lay.columns)]
        rows = [q_rows[i] for t in todo for i in t]
        # simulated paths are kept from the first month an aggregate to draw needs
        s0 = max(0, min(rows) - 4) if rows else horizon
        # -- indicators: published months plus simulated unpublished ones, (D, horizon - s0, k)
        paths = np.empty((d, horizon - s0, len(mon)))
        ar = AutoRegression(max_lags=p["max_lags"], ic="bic",
                            param_uncertainty=p["param_uncertainty"])
        need = 2 * p["max_lags"] + 3
        for j, (col, nm) in enumerate(zip(mon, names, strict=True)):
            series = y[:, col]
            ok = np.flatnonzero(np.isfinite(series))
            if not len(ok):
                raise InsufficientDataError(f"model {self.name!r}: indicator {nm!r} has no "
                                            f"observation at origin {lay.origin}")
            last = int(ok[-1])
            gaps = np.flatnonzero(~np.isfinite(series[: last + 1]))
            run = series[(int(gaps[-1]) + 1 if len(gaps) else 0): last + 1]
            if len(run) < need:
                raise InsufficientDataError(
                    f"model {self.name!r}: indicator {nm!r} has {len(run)} consecutive "
                    f"observation(s) at origin {lay.origin}; max_lags={p['max_lags']} needs "
                    f"{need}")
            if last >= s0:
                paths[:, : last + 1 - s0, j] = series[None, s0: last + 1]
            steps = horizon - last - 1
            if steps > 0 and horizon > s0:
                sim = ar._paths(ar.fit_series(run, nm), steps, d, rng)
                keep = min(steps, horizon - s0)
                paths[:, horizon - s0 - keep:, j] = sim[:, steps - keep:]
        pub = np.full((horizon, len(mon)), np.nan)
        pub[:nt] = y[:, mon]
        out = np.zeros((d, *lay.target_rows.shape))
        self.equations_ = {}
        for jt, col in enumerate(lay.columns):
            out[:, jt, :] = self._target(lay, y[:, col], paths, s0, pub, q_rows, todo[jt], names,
                                         jt, p, rng)
        return out

    @staticmethod
    def _todo(target, target_rows, q_rows, nlag) -> list[int]:
        """Indices (into ``q_rows``) of the quarters to draw for one target, in order.

        The unpublished target quarters; with target lags also every unpublished quarter
        between the target's last published one and the last quarter wanted.
        """
        nt = len(target)
        pub = np.isfinite(np.where(q_rows < nt, target[np.clip(q_rows, 0, nt - 1)], np.nan))
        wanted = {int(r) for r in target_rows if not (r < nt and np.isfinite(target[r]))}
        if not wanted:
            return []
        last_pub = int(q_rows[pub].max()) if pub.any() else -1
        top = max(wanted)
        return [i for i, r in enumerate(q_rows) if not pub[i] and r <= top
                and (int(r) in wanted or (nlag > 0 and r > last_pub))]

    def _target(self, lay, target, paths, s0, pub, q_rows, todo, names, jt, p,
                rng) -> np.ndarray:
        """Draws ``(D, n_horizons)`` for one target variable."""
        nt = len(target)
        d = paths.shape[0]
        agg_pub = aggregate_months(pub[None], q_rows, p["aggregate"])[0]  # published months only
        nlag = p["target_lags"]
        yq = np.where(q_rows < nt, target[np.clip(q_rows, 0, nt - 1)], np.nan)
        lagm = np.column_stack([np.concatenate([np.full(lag, np.nan), yq[:-lag]]) if lag else yq
                                for lag in range(1, nlag + 1)]) if nlag else np.zeros((len(yq), 0))
        xreg = np.column_stack([np.ones(len(yq)), agg_pub, lagm])
        use = np.isfinite(yq) & np.isfinite(xreg).all(axis=1)
        k = xreg.shape[1]
        tname = lay.targets.variables[jt]
        if use.sum() < k + 5:
            raise InsufficientDataError(
                f"model {self.name!r}: target {tname!r} has {int(use.sum())} quarter(s) with "
                f"every indicator published at origin {lay.origin}; {k} coefficients need at "
                f"least {k + 5}")
        xu, yu = xreg[use], yq[use]
        qm, rm = np.linalg.qr(xu)
        if np.linalg.matrix_rank(rm) < k:
            raise InsufficientDataError(
                f"model {self.name!r}: the quarterly aggregates of indicators {names} are "
                f"collinear for target {tname!r} at origin {lay.origin}")
        beta = np.linalg.solve(rm, qm.T @ yu)
        resid = yu - xu @ beta
        dof = len(yu) - k
        ssr = float(resid @ resid)
        self.equations_[tname] = {"coef": beta, "sigma2": ssr / dof,
                                  "regressors": ["const", *names,
                                                 *[f"{tname}.L{i}" for i in range(1, nlag + 1)]],
                                  "quarters": [str(lay.periods[r].asfreq("Q"))
                                               for r in q_rows[use]]}
        if p["param_uncertainty"]:
            sigma2 = ssr / rng.chisquare(dof, size=d)
            betas = beta[None, :] + np.sqrt(sigma2)[:, None] * (
                rng.standard_normal((d, k)) @ np.linalg.inv(rm).T)
        else:
            sigma2 = np.full(d, ssr / dof)
            betas = np.broadcast_to(beta, (d, k))
        # target draws quarter by quarter, so unpublished lags enter through their own draws
        ydraw = np.broadcast_to(yq, (d, len(yq))).copy()
        wanted = {int(r) for r in lay.target_rows[jt] if not (r < nt and np.isfinite(target[r]))}
        agg = aggregate_months(paths, q_rows[todo] - s0, p["aggregate"]) if todo else None
        for a_i, qi in enumerate(todo):
            lags = [ydraw[:, qi - lag] if qi - lag >= 0 else np.full(d, np.nan)
                    for lag in range(1, nlag + 1)]
            xq = np.column_stack([np.ones(d), agg[:, a_i, :], *lags])
            val = np.einsum("dk,dk->d", betas, xq) + np.sqrt(sigma2) * rng.standard_normal(d)
            ydraw[:, qi] = val
        out = np.zeros((d, lay.target_rows.shape[1]))
        for kk, row in enumerate(lay.target_rows[jt]):
            if int(row) in wanted:
                qi = int(np.flatnonzero(q_rows == row)[0]) if np.any(q_rows == row) else -1
                if qi < 0:
                    raise ValueError(f"model {self.name!r}: target {tname!r} row {row} is not a "
                                     f"quarter's last month at origin {lay.origin}")
                vals = ydraw[:, qi]
                if not np.isfinite(vals).all():
                    raise InsufficientDataError(
                        f"model {self.name!r}: target {tname!r} at horizon "
                        f"{lay.targets.horizons[kk]} needs quarters before the panel starts "
                        f"(origin {lay.origin})")
                out[:, kk] = vals
        return out
