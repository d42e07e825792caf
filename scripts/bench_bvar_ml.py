"""Benchmark of the BVAR's data-driven hyperparameters: extra time per task of the "ml" choices.

Case (the brief's target): a 3-variable, 4-lag BVAR forecast task, 160 quarters of the
invented Veldmark toy panel (``harness.testing.simulated_panel``), 2,000 draws, horizons 0-7.
Figures (seconds, wall clock, BLAS on one thread as in ``bench_models.py``, best of 5 after a
warm-up, fixed and "ml" models timed alternately in one run):

* ``bvar_fixed_task_s``: ``BayesianVAR(lags=4)`` (tightness 0.2);
* ``bvar_ml_tightness_task_s`` / ``..._extra_s``: ``tightness="ml"`` and its extra time over the
  fixed task (target <= 0.2 s);
* ``bvar_ml_all3_task_s`` / ``..._extra_s``: tightness, sum-of-coefficients and co-persistence
  all chosen, random-walk prior mean on the cumulated panel (levels), GLP hyperprior;
* ``ml_evaluations_*``: marginal likelihood evaluations each choice used, and
  ``log_ml_evaluation_us`` the cost of one (microseconds).

Run ``python scripts/bench_bvar_ml.py``; it prints ``name: value`` lines. ``run()`` returns them.
"""

from __future__ import annotations

import time

import numpy as np

TARGET_EXTRA_S = 0.2


def run() -> dict[str, float]:
    """Run the benchmark and return its figures (names as printed)."""
    from threadpoolctl import threadpool_limits

    from harness.models.base import ar1_scales
    from harness.models.bvar import BayesianVAR, log_marginal_likelihood, minnesota_dummies
    from harness.testing import make_infoset, make_targets, simulated_panel

    y = simulated_panel(160, 3, seed=1, ragged=False)
    levels = np.cumsum(y, axis=0)
    names = ["v0", "v1", "v2"]
    cases = {
        "fixed": (y, BayesianVAR(lags=4)),
        "ml_tightness": (y, BayesianVAR(lags=4, tightness="ml")),
        "ml_all3": (levels, BayesianVAR(lags=4, tightness="ml", sum_of_coefficients="ml",
                                        co_persistence="ml", prior_mean=1.0, hyperprior="glp")),
        "fixed_levels": (levels, BayesianVAR(lags=4, prior_mean=1.0, sum_of_coefficients=1.0,
                                             co_persistence=1.0)),
    }
    tasks = {}
    for key, (data, model) in cases.items():
        info = make_infoset(data, names)
        tasks[key] = (model, info, make_targets(info, horizons=tuple(range(8))))
    out: dict[str, float] = {}
    with threadpool_limits(limits=1):
        for model, info, tg in tasks.values():  # warm-up: imports, caches
            model.forecast(info, tg, 100, np.random.default_rng(0))
        best = dict.fromkeys(tasks, np.inf)
        for _ in range(5):  # alternate, so a load spike hits every case alike
            for key, (model, info, tg) in tasks.items():
                t0 = time.perf_counter()
                model.forecast(info, tg, 2_000, np.random.default_rng(1))
                best[key] = min(best[key], time.perf_counter() - t0)
        out["bvar_fixed_task_s"] = best["fixed"]
        out["bvar_ml_tightness_task_s"] = best["ml_tightness"]
        out["bvar_ml_tightness_extra_s"] = best["ml_tightness"] - best["fixed"]
        out["bvar_ml_all3_task_s"] = best["ml_all3"]
        out["bvar_ml_all3_extra_s"] = best["ml_all3"] - best["fixed_levels"]
        out["bvar_ml_extra_target_s"] = TARGET_EXTRA_S
        out["ml_evaluations_tightness"] = tasks["ml_tightness"][0].diagnostics_["ml_evaluations"]
        out["ml_evaluations_all3"] = tasks["ml_all3"][0].diagnostics_["ml_evaluations"]
        scales = ar1_scales(y)
        y_d, x_d = minnesota_dummies(y, 4, 0.2, 1.0, np.zeros(3), scales)
        t0 = time.perf_counter()
        for _ in range(500):
            log_marginal_likelihood(y, 4, y_d, x_d)
        out["log_ml_evaluation_us"] = (time.perf_counter() - t0) / 500 * 1e6
    return out


if __name__ == "__main__":
    for name, value in run().items():
        print(f"{name}: {value:.6g}")
