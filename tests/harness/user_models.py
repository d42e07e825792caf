"""Deliberately awkward user models, loaded by ``package.module:Class`` in the runner tests."""

from __future__ import annotations

import numpy as np
import xarray as xr


class FailingModel:
    """Raises at chosen origins (every other quarter) and returns NaN at none."""

    name = "failing"
    version = "1"

    def __init__(self, fail_every: int = 2):
        self.fail_every = fail_every

    def params(self) -> dict:
        return {"fail_every": self.fail_every}

    def forecast(self, info, targets, n_draws, rng):
        if info.current.ordinal % self.fail_every == 0:
            raise RuntimeError(f"deliberate failure at {info.current}")
        data = rng.normal(size=(n_draws, len(targets.variables), len(targets.horizons)))
        return xr.DataArray(data, dims=("draw", "variable", "horizon"),
                            coords={"variable": list(targets.variables), "horizon": list(targets.horizons)})


class NaNModel(FailingModel):
    """Returns NaN draws: the runner must record it as a failure, not store it."""

    name = "nan"

    def forecast(self, info, targets, n_draws, rng):
        data = np.full((n_draws, len(targets.variables), len(targets.horizons)), np.nan)
        return xr.DataArray(data, dims=("draw", "variable", "horizon"),
                            coords={"variable": list(targets.variables), "horizon": list(targets.horizons)})


class SlowModel(FailingModel):
    """Never fails; sleeps a little so that a run can be interrupted midway."""

    name = "slow"

    def __init__(self, seconds: float = 0.3):
        self.seconds = seconds

    def params(self) -> dict:
        return {"seconds": self.seconds}

    def forecast(self, info, targets, n_draws, rng):
        import time

        time.sleep(self.seconds)
        data = info.values()[-8:].mean() + rng.normal(size=(n_draws, len(targets.variables), len(targets.horizons)))
        return xr.DataArray(data, dims=("draw", "variable", "horizon"),
                            coords={"variable": list(targets.variables), "horizon": list(targets.horizons)})
