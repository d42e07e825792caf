"""Benchmark of the comparison tests over the cells of an evaluation (harness.evaluation.cells).

Case: 5 models x 84 quarterly origins x 2 variables x 9 horizons (0..8), three sub-periods
(full, a two-run recession sample 2009-10 + 2020, since 2015), four score columns (crps,
se_mean, log_score, qs_05), PITs and 70 % coverage hits; invented losses. Figures (seconds, wall
clock, best of 3 after a warm-up):

* ``pairwise_fixed_m_s``: :func:`cells.pairwise_tests` against one benchmark with the registered
  default (fixed-m DM); ``pairwise_hln_s`` the same with ``method = "hln"``, and their ratio.
* ``pairwise_matrix_s``: every ordered pair (:func:`cells.pairwise_matrix`), and
  ``matrix_over_benchmark_ratio`` its ratio to the benchmark-only run (20 vs 4 pairs per cell).
* ``calibration_s``: :func:`cells.calibration_tests` (Rossi-Sekhposyan bootstraps included).
* ``dm_call_us``: one fixed-m :func:`harness.compare.diebold_mariano` call on 84 pairs.

Run ``python scripts/bench_compare.py``; it prints ``name: value`` lines. ``run()`` returns them.
Works on earlier versions of the package too (it calls only pairwise_tests and
calibration_tests there), so before/after figures come from the same script.
"""

from __future__ import annotations

import time

import numpy as np
import pandas as pd

MODELS = ("rw", "ar", "bvar", "bvar_sv", "pool")
N_ORIGINS, HORIZONS, VARIABLES = 84, range(0, 9), ("gdp", "cpi")
RECESSION = {f"{y}Q{q}" for y in (2009, 2010) for q in (1, 2, 3, 4)} | {f"2020Q{q}" for q in (1, 2, 3)}


def _best(fn, repeat: int = 3) -> tuple[float, object]:
    fn()
    best, out = np.inf, None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def simulated_frame(seed: int = 3) -> pd.DataFrame:
    """Per-forecast losses, PITs and hits of the benchmark case (invented)."""
    rng = np.random.default_rng(seed)
    origins = pd.period_range("2005Q1", periods=N_ORIGINS, freq="Q")
    parts = []
    for v in VARIABLES:
        for h in HORIZONS:
            tp = np.array([str(o + h) for o in origins])
            subs = [["full"] + (["recession"] if t in RECESSION else [])
                    + (["since_2015"] if t >= "2015Q1" else []) for t in tp]
            common = rng.standard_normal(N_ORIGINS)
            for k, m in enumerate(MODELS):
                base = np.exp(0.5 * common + 0.4 * rng.standard_normal(N_ORIGINS)) * (1 + 0.05 * k)
                pit = rng.random(N_ORIGINS)
                parts.append(pd.DataFrame({
                    "model": m, "variable": v, "horizon": h,
                    "origin": origins.start_time + pd.Timedelta(days=45), "target_period": tp,
                    "subperiods": subs, "crps": base, "se_mean": base**2, "log_score": np.log(base) + 1,
                    "qs_05": 0.3 * base, "pit": pit, "cover_70": ((pit >= 0.15) & (pit <= 0.85)) * 1.0}))
    return pd.concat(parts, ignore_index=True)


def run() -> dict[str, float]:
    from harness.compare import diebold_mariano
    from harness.evaluation import cells

    fc = simulated_frame()
    out: dict[str, float] = {}
    t_m, _ = _best(lambda: cells.pairwise_tests(fc, "rw", seed=1))
    out["pairwise_fixed_m_s"] = t_m
    try:
        t_h, _ = _best(lambda: cells.pairwise_tests(fc, "rw", seed=1, settings={"dm": {"method": "hln"}}))
        out["pairwise_hln_s"] = t_h
        out["fixed_m_over_hln_ratio"] = t_m / t_h
    except ValueError:  # an earlier version without the setting
        pass
    if hasattr(cells, "pairwise_matrix"):
        t_x, _ = _best(lambda: cells.pairwise_matrix(fc, seed=1), repeat=1)
        out["pairwise_matrix_s"] = t_x
        out["matrix_over_benchmark_ratio"] = t_x / t_m
    out["calibration_s"], _ = _best(lambda: cells.calibration_tests(fc, seed=1), repeat=1)
    d = np.random.default_rng(0).standard_normal(84)
    z = np.zeros(84)
    t_d, _ = _best(lambda: [diebold_mariano(d, z, 3) for _ in range(1000)])
    out["dm_call_us"] = t_d / 1000 * 1e6
    return out


if __name__ == "__main__":
    for k, v in run().items():
        print(f"{k}: {v:.4g}")
