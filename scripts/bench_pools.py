"""Benchmark of harness.pools: the three schemes at run scale, and the solver beside a per-cell loop.

Case (the brief's target): 4 member models x 84 quarterly origins x 2 target variables x 9
horizons (-1..7), 2,000 float32 draws per forecast, invented Veldmark-like members (normal
draws with member-specific bias and spread), first-release truths published about 30 days
after each target quarter (NaT after the last origin). Figures (seconds, wall clock, best of 3
after a warm-up; ``threadpoolctl`` caps BLAS at the 2 cores of the project machine):

* ``pool_equal_s``, ``pool_inverse_crps_s``, ``pool_optimal_s``: one :func:`harness.pools.combine`
  call each (window 20, min_scored 8 for the learnt schemes; optimal with the full history);
  ``pools_total_s`` is their sum (target <= 5 s).
* ``optimal_solver_s``: :func:`harness.pools.optimal_weights` alone on every cell of that case,
  and ``optimal_loop_reference_s`` the obvious alternative, scipy's SLSQP cell by cell on the
  same windows, on a sample of cells scaled to all of them (the printed name says so);
  ``optimal_loop_over_vectorised_ratio`` their ratio, measured in this run.
* ``optimal_max_gap``: the largest certified gap left by the solver (its tolerance is 1e-10).

Run ``python scripts/bench_pools.py``; it prints ``name: value`` lines. ``run()`` returns them.
"""

from __future__ import annotations

import time

import numpy as np

N_MODELS, N_ORIGINS, N_VARS, N_HORIZONS, N_DRAWS = 4, 84, 2, 9, 2_000
HORIZONS = np.arange(-1, 8)
TARGET_S = 5.0


def _best(fn, repeat: int = 3) -> tuple[float, object]:
    best, out = np.inf, None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def simulated_case(seed: int = 11) -> dict:
    """Members' draws, origins, truths and their release dates of the benchmark case (invented)."""
    rng = np.random.default_rng(seed)
    m, o, v, h, d = N_MODELS, N_ORIGINS, N_VARS, N_HORIZONS, N_DRAWS
    origins = np.datetime64("2004-02-15") + 91 * np.arange(o)
    truth = rng.standard_normal((o, v, h)) * (1.0 + 0.1 * HORIZONS)[None, None, :]
    bias = np.array([0.0, 0.4, -0.3, 0.1])[:, None, None, None, None]
    scale = np.array([1.0, 0.8, 1.5, 1.2])[:, None, None, None, None]
    draws = (bias + scale * rng.standard_normal((m, o, v, h, d))).astype(np.float32)
    # the target quarter ends about 91 (h + 1) days after the origin; first release 30 days later
    release = origins[:, None, None] + (91 * (HORIZONS + 1) + 30)[None, None, :]
    release = np.broadcast_to(release, (o, v, h)).copy()
    release[release > origins[-1]] = np.datetime64("NaT")
    return {"draws": draws, "origins": origins, "truth": truth, "release": release}


def _slsqp_cell(f: np.ndarray) -> np.ndarray:
    """Reference: maximise mean log(f' w) on the simplex with scipy's SLSQP (one cell)."""
    from scipy.optimize import minimize

    m = f.shape[1]

    def neg(w):
        p = f @ w
        return -np.mean(np.log(p)), -(f / p[:, None]).mean(axis=0)

    res = minimize(neg, np.full(m, 1.0 / m), jac=True, method="SLSQP", bounds=[(0, 1)] * m,
                   constraints=[{"type": "eq", "fun": lambda w: w.sum() - 1.0}],
                   options={"ftol": 1e-12, "maxiter": 500})
    return res.x


def run() -> dict[str, float]:
    """Run the pools benchmark and return its figures (names as printed)."""
    from threadpoolctl import threadpool_limits

    from harness.pools import combine, member_density, optimal_weights, scored_window

    case = simulated_case()
    args = (case["draws"], case["origins"], case["truth"], case["release"])
    out: dict[str, float] = {}
    with threadpool_limits(limits=2):
        combine(*args, scheme="equal", warn=False)  # warm-up (imports, page faults)
        runs = {"pool_equal_s": {"scheme": "equal"},
                "pool_inverse_crps_s": {"scheme": "inverse_score", "window": 20, "min_scored": 8},
                "pool_optimal_s": {"scheme": "optimal", "min_scored": 8}}
        for name, kw in runs.items():
            out[name], res = _best(lambda kw=kw: combine(*args, warn=False, seed=1, **kw))
            if kw["scheme"] == "optimal":
                out["optimal_max_gap"] = float(np.nanmax(res.gap))
        out["pools_total_s"] = out["pool_equal_s"] + out["pool_inverse_crps_s"] + out["pool_optimal_s"]
        out["pools_total_target_s"] = TARGET_S

        # the solver alone, against SLSQP cell by cell on the same windows
        dens = member_density(case["draws"], case["truth"])
        scorable = np.isfinite(dens).all(axis=0)
        index, count = scored_window(case["origins"], case["release"], scorable)
        cells = np.nonzero(count >= 8)
        slots = index[cells]
        mask = slots >= 0
        win = np.moveaxis(dens, 0, -1)[np.where(mask, slots, 0), cells[1][:, None], cells[2][:, None]]
        win = np.ascontiguousarray(np.moveaxis(win, -1, 1))
        out["optimal_solver_s"], fit = _best(lambda: optimal_weights(win, mask))
        n_cells = win.shape[0]
        sample = np.linspace(0, n_cells - 1, min(60, n_cells)).astype(int)
        t0 = time.perf_counter()
        ref = [_slsqp_cell(win[c][:, mask[c]].T) for c in sample]
        loop = (time.perf_counter() - t0) * n_cells / len(sample)
        out[f"optimal_loop_reference_s (SLSQP on {len(sample)} of {n_cells} cells, scaled)"] = loop
        out["optimal_loop_over_vectorised_ratio"] = loop / out["optimal_solver_s"]
        out["optimal_max_weight_diff_vs_slsqp"] = float(np.max(np.abs(np.array(ref) - fit.weights[sample])))
        out["optimal_cells"] = float(n_cells)
    return out


if __name__ == "__main__":
    for name, value in run().items():
        print(f"{name}: {value:.6g}")
