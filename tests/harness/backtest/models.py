"""Small user models of the backtest tests, loaded by ``package.module:Class``."""

from __future__ import annotations

import numpy as np
import xarray as xr


def _draws(targets, data):
    return xr.DataArray(data, dims=("draw", "variable", "horizon"),
                        coords={"variable": list(targets.variables), "horizon": list(targets.horizons)})


class DiagModel:
    """Normal draws around the last value; records nested diagnostics_ at even quarters only."""

    name = "diag"
    version = "1"

    def __init__(self, scale: float = 1.0):
        self.scale = scale

    def params(self) -> dict:
        return {"scale": self.scale}

    def forecast(self, info, targets, n_draws, rng):
        last = float(np.nanmean(info.values()[-4:]))
        if info.current.ordinal % 2 == 0:
            # nested like the stochastic-volatility BVAR's; a string is not a number: left out
            self.diagnostics_ = {"ess": {"a": 100.0 + info.current.ordinal, "b": float("nan")},
                                 "n_kept": 50, "at_bound": True, "note": "text"}
        return _draws(targets, last + self.scale * rng.normal(size=(n_draws, len(targets.variables),
                                                                      len(targets.horizons))))


class PidModel(DiagModel):
    """Records the process id it ran in (as a diagnostic), to tell inline from pooled tasks."""

    name = "pid"

    def forecast(self, info, targets, n_draws, rng):
        import os

        out = super().forecast(info, targets, n_draws, rng)
        self.diagnostics_ = {"pid": float(os.getpid())}
        return out


class PoolSleeper(DiagModel):
    """Sleeps ``seconds`` in a worker process and ``inline`` seconds in the driver.

    The driver's inline pilot sees a pace that makes the pool pay, so the run starts its pool;
    there every task blocks for long, which is what killing the driver must cut short.
    """

    name = "sleeper"

    def __init__(self, seconds: float = 60.0, inline: float = 0.3):
        self.seconds = seconds
        self.inline = inline

    def params(self) -> dict:
        return {"seconds": self.seconds, "inline": self.inline}

    def forecast(self, info, targets, n_draws, rng):
        import multiprocessing
        import time

        worker = multiprocessing.parent_process() is not None
        time.sleep(self.seconds if worker else self.inline)
        return super().forecast(info, targets, n_draws, rng)


class StickyChainModel(DiagModel):
    """Records the MCMC summary of a simulated chain: AR(1) with coefficient ``rho`` (sticky if near 1)."""

    name = "sticky"

    def __init__(self, scale: float = 1.0, rho: float = 0.0):
        super().__init__(scale)
        self.rho = rho

    def params(self) -> dict:
        return {"scale": self.scale, "rho": self.rho}

    def forecast(self, info, targets, n_draws, rng):
        from harness.models.mcmc import mcmc_diagnostics

        out = super().forecast(info, targets, n_draws, rng)
        e = rng.standard_normal((1000, 2))
        x = np.zeros_like(e)
        for t in range(1, len(e)):
            x[t] = self.rho * x[t - 1] + e[t]
        self.diagnostics_ = mcmc_diagnostics({"phi": x})
        return out
