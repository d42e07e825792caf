"""The no-change benchmark: a random walk for levels, a constant for growth rates."""

from __future__ import annotations

import numpy as np

from harness.models.base import BaseModel, CheckCase, TargetLayout, register
from harness.models.params import Boolean, Options

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
    param_constraints = {
        "level": [Boolean()],
        "mean": [Options("zero", "sample")],
        "density": [Options("empirical", "gaussian")],
    }

    def __init__(self, level: bool = True, mean: str = "zero", density: str = "gaussian"):
        self.level = level
        self.mean = mean
        self.density = density

    @classmethod
    def check_cases(cls) -> list[CheckCase]:
        """Without drift the forecast is the last level (or zero change): only a constant is exact."""
        return [CheckCase("nochange", cls(), exact_path="constant"),
                CheckCase("drift", cls(mean="sample"), exact_path="linear"),
                CheckCase("growth_sample_empirical", cls(level=False, mean="sample",
                                                         density="empirical"), exact_path="constant")]

    def draw(self, layout: TargetLayout, rng: np.random.Generator) -> np.ndarray:
        """Predictive draws ``(draw, variable, horizon)``; see the class docstring."""
        n_draws = layout.n_draws
        nv, nh = layout.observed.shape
        draws = np.zeros((n_draws, nv, nh))
        runs, steps = layout.own_runs()
        for name, (start, stop) in zip(layout.targets.variables, runs, strict=True):
            if stop - start < 2:
                raise self._fail(f"variable {name!r} needs at least 2 observations, got {stop - start}")
        scales = {}
        for j, col in enumerate(layout.columns):
            start, stop = runs[j]
            y = layout.values[start:stop, col]
            name = layout.targets.variables[j]
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
        return draws

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
