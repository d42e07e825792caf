"""The no-change benchmark: a random walk for levels, a constant for growth rates."""

from __future__ import annotations

import numpy as np
import xarray as xr

from harness.models.base import BaseModel, register, trailing_run
from vintages import InfoSet, Targets

__all__ = ["NoChange"]


@register
class NoChange(BaseModel):
    """No-change forecasts with Gaussian or empirical predictive densities, per target variable.

    Point forecast of ``y_{T+h}`` from the variable's last observation ``y_T``:

    * ``level=True``: random walk ``y_T + h * mu``, with drift ``mu = 0`` (``mean="zero"``) or
      the sample mean of the one-period changes (``mean="sample"``);
    * ``level=False`` (the series is already a growth rate or change): ``0`` (``mean="zero"``,
      no change in the level) or the sample mean of the series (``mean="sample"``).

    The density around the point comes from the model's own in-sample h-step errors, computed
    within the information set only (pseudo in-sample, overlapping):
    ``e_{t,h} = y_{t+h} - (y_t + h mu)`` for levels, ``e_t = y_t - point`` for growth rates.
    ``density="gaussian"`` uses ``N(point, mean(e^2))``; ``density="empirical"`` adds errors
    resampled with replacement (an error bootstrap).

    Parameters
    ----------
    level : bool, default True
        Whether the series is a level (random walk) or a growth rate (constant forecast).
    mean : {"zero", "sample"}, default "zero"
        Expected one-period change (levels) or expected value (growth rates).
    density : {"gaussian", "empirical"}, default "gaussian"
        Shape of the predictive density.

    Notes
    -----
    Each target variable uses the contiguous stretch of its own observations that ends at its
    last observation; steps are counted from there (the ragged edge is handled per variable).
    At least two in-sample errors are needed per horizon, i.e. ``T >= h + 2`` observations for
    levels and ``T >= 2`` for growth rates; otherwise :class:`InsufficientDataError` is raised.

    References
    ----------
    Atkeson, A. and Ohanian, L. E. (2001). Are Phillips curves useful for forecasting inflation?
    *Federal Reserve Bank of Minneapolis Quarterly Review* 25(1), 2-11 (no-change benchmark).
    Efron, B. and Tibshirani, R. J. (1993). *An Introduction to the Bootstrap*, Chapman & Hall.
    """

    name = "nochange"
    version = "1"

    def __init__(self, level: bool = True, mean: str = "zero", density: str = "gaussian"):
        self.level = level
        self.mean = mean
        self.density = density

    def _validate(self) -> None:
        if not isinstance(self.level, (bool, np.bool_)):
            raise self._bad_param("level", "True or False", self.level)
        self._check_choice("mean", self.mean, ("zero", "sample"))
        self._check_choice("density", self.density, ("empirical", "gaussian"))

    def forecast(self, info: InfoSet, targets: Targets, n_draws: int,
                 rng: np.random.Generator) -> xr.DataArray:
        """Predictive draws ``(draw, variable, horizon)``; see the class docstring."""
        self._validate()
        lay = self._layout(info, targets, n_draws, rng)
        nv, nh = lay.observed.shape
        draws = np.zeros((n_draws, nv, nh))
        runs = [trailing_run(lay.values[:, col]) for col in lay.columns]
        for name, (start, stop) in zip(targets.variables, runs, strict=True):
            if stop - start < 2:
                raise self._fail(f"variable {name!r} needs at least 2 observations, got {stop - start}")
        steps = lay.steps(np.array([lay.ordinals[stop - 1] for _, stop in runs]))
        scales = {}
        for j, col in enumerate(lay.columns):
            start, stop = runs[j]
            y = lay.values[start:stop, col]
            name = targets.variables[j]
            for k in np.flatnonzero(steps[j] > 0):
                s = int(steps[j, k])
                point, err = self._point_and_errors(y, s, name)
                if self.density == "gaussian":
                    scale = np.sqrt(np.mean(err * err))
                    draws[:, j, k] = point + scale * rng.standard_normal(n_draws)
                    scales[(name, s)] = float(scale)
                else:
                    draws[:, j, k] = point + err[rng.integers(0, len(err), size=n_draws)]
        self.scales_ = scales
        return self._output(draws, lay)

    def _point_and_errors(self, y: np.ndarray, s: int, name: str) -> tuple[float, np.ndarray]:
        """Point forecast ``s`` steps after the last value, and the in-sample errors of that rule."""
        if self.level:
            if len(y) < s + 2:
                raise self._fail(f"variable {name!r}: {s}-step errors of a random walk need at "
                                 f"least {s + 2} observations, got {len(y)}")
            drift = float(np.mean(np.diff(y))) if self.mean == "sample" else 0.0
            err = y[s:] - y[:-s] - s * drift
            return float(y[-1] + s * drift), err
        point = float(np.mean(y)) if self.mean == "sample" else 0.0
        return point, y - point
