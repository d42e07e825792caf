"""The harness side by side with the straightforward loop it replaces (one variable, AR(2)).

Case: the demo store (invented Veldmark economy), real output ``gdp`` as annualised quarterly
growth, an AR(2) with intercept, 78 quarterly origins (mid-quarter, 2007Q3-2026Q4), horizons
0-8, CRPS against the latest vintage, at 2,000 and 10,000 draws.

* harness: ``vintage-harness run SPEC -q`` then ``vintage-harness score RUN``, each a fresh subprocess (cold:
  interpreter start, imports, an empty task cache), timed end to end. ``score`` computes every
  registered score and runs the comparison and calibration tests, more than the loop does.
* loop: a fresh subprocess running the loop below: per origin, a pandas filter of the release
  log (``release <= origin``, last release per period), growth inside that vintage, OLS AR(2)
  by ``numpy.linalg.lstsq``, simulated paths with normal shocks, CRPS per forecast against the
  latest vintage's growth. The CRPS in three ways a user would write it:
  ``pairwise`` (the textbook form ``E|X-y| - E|X-X'|/2`` by broadcasting; Gneiting & Raftery
  2007, eq. 21), ``properscoring`` (``properscoring.crps_ensemble``, including its import, which
  compiles numba kernels in a fresh process) and ``sorted`` (the same estimator from sorted
  draws, O(m log m); the fastest of the three).

Prints ``name: value`` lines; ``harness_over_loop_*`` are time ratios (below 1: the harness is
faster). Target: the harness at least 3x faster than the loop at 2,000 draws, end to end, cold.

References
----------
Gneiting, T. and Raftery, A. E. (2007). Strictly proper scoring rules, prediction, and
estimation. *Journal of the American Statistical Association* 102(477), 359-378.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

SPEC = """\
[run]
name = "loop-ar2"
store = "store"
out = "run-{draws}"
seed = 7
draws = {draws}
freq = "Q"
policy = "keep"

[origins]
rule = "quarterly"
day = 15
month_of_quarter = 2
start = "2007-07-01"
end = "2026-11-30"

[variables.gdp]
transform = "dlog_ann"

[targets]
variables = ["gdp"]
horizons = {{ min = 0, max = 8 }}

[models.ar2]
type = "ar"
max_lags = 2
ic = "none"

[scoring]
truths = ["latest"]
"""

LOOP = r'''
import json, sys, time
t0 = time.perf_counter()
import glob
import numpy as np
import pandas as pd
store, n_draws, how = sys.argv[1], int(sys.argv[2]), sys.argv[3]
if how == "properscoring":
    import properscoring

def crps(draws, y):
    if how == "pairwise":
        return np.abs(draws - y).mean() - 0.5 * np.abs(draws[:, None] - draws[None, :]).mean()
    if how == "properscoring":
        return float(properscoring.crps_ensemble(y, draws))
    x = np.sort(draws)
    m = len(x)
    i = np.arange(1, m + 1)
    return np.abs(x - y).mean() - (np.sum((2 * i - m - 1) * x) / m**2)

log = pd.concat([pd.read_parquet(f) for f in sorted(glob.glob(store + "/log/*.parquet"))])
log = log[log["variable"] == "gdp"]
log["release"] = pd.to_datetime(log["release"])
log = log.sort_values("release").drop_duplicates(["period", "release"], keep="last")

def growth(vintage):
    s = vintage.groupby("period")["value"].last()
    s.index = pd.PeriodIndex(s.index, freq="Q")
    s = s.sort_index()
    return 400 * np.log(s).diff().dropna()

latest = growth(log)
origins = pd.date_range("2007-07-01", "2026-11-30", freq="QS-JAN") + pd.DateOffset(months=1, days=14)
rng = np.random.default_rng(7)
scores = []
for o in origins:
    y = growth(log[log["release"] <= o])
    v = y.to_numpy()
    x = np.column_stack([np.ones(len(v) - 2), v[1:-1], v[:-2]])
    beta, *_ = np.linalg.lstsq(x, v[2:], rcond=None)
    resid = v[2:] - x @ beta
    sigma = np.sqrt(resid @ resid / (len(resid) - 3))
    last = y.index[-1]
    current = pd.Period(o, "Q")
    steps = (current + 8 - last).n
    paths = np.empty((n_draws, steps + 2))
    paths[:, 0], paths[:, 1] = v[-2], v[-1]
    shocks = rng.standard_normal((n_draws, steps)) * sigma
    for s in range(steps):
        paths[:, s + 2] = beta[0] + beta[1] * paths[:, s + 1] + beta[2] * paths[:, s] + shocks[:, s]
    for h in range(9):
        target = current + h
        k = (target - last).n
        if target in latest.index and k >= 1:
            scores.append(crps(paths[:, k + 1], latest[target]))
print(json.dumps({"seconds_inside": time.perf_counter() - t0, "n": len(scores),
                  "mean_crps": float(np.mean(scores))}))
'''


def _env(cache: Path) -> dict:
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""),
               HARNESS_CACHE=str(cache), OMP_NUM_THREADS="1")
    return env


def _timed(cmd, env, cwd) -> tuple[float, str]:
    t0 = time.perf_counter()
    res = subprocess.run(cmd, env=env, cwd=cwd, capture_output=True, text=True, timeout=1800)
    sec = time.perf_counter() - t0
    if res.returncode != 0:
        raise RuntimeError(f"{cmd} failed: {res.stderr[-2000:]}")
    return sec, res.stdout


def _harness(tmp: Path, draws: int) -> dict[str, float]:
    spec = tmp / f"spec-{draws}.toml"
    spec.write_text(SPEC.format(draws=draws))
    cache = tmp / f"cache-{draws}-{time.time_ns()}"
    shutil.rmtree(tmp / f"run-{draws}", ignore_errors=True)  # cold: no previous ledger to reuse either
    env = _env(cache)
    cli = [sys.executable, "-c", "from harness.cli import main; main()"]
    t_run, _ = _timed(cli + ["run", str(spec), "-q"], env, tmp)
    t_score, _ = _timed(cli + ["score", str(tmp / f"run-{draws}")], env, tmp)
    shutil.rmtree(cache, ignore_errors=True)
    return {"run": t_run, "score": t_score, "total": t_run + t_score}


def _loop(tmp: Path, draws: int, how: str, env) -> dict[str, float]:
    sec, out = _timed([sys.executable, "-c", LOOP, str(tmp / "store"), str(draws), how], env, tmp)
    return dict(json.loads(out.strip().splitlines()[-1]), seconds=sec)


def run(draws_list=(2000, 10000), repeat: int = 2) -> dict[str, float]:
    """Measure the harness and the three loops side by side (best of ``repeat``) and return the figures."""
    from harness.demo import write_demo_data

    out: dict[str, float] = {}
    tmp = Path(tempfile.mkdtemp(prefix="bench-loop-"))
    try:
        write_demo_data(tmp)
        env = _env(tmp / "unused-cache")
        for draws in draws_list:
            h = [_harness(tmp, draws) for _ in range(repeat)]
            best = min(h, key=lambda r: r["total"])
            out[f"harness_run_seconds_{draws}"] = best["run"]
            out[f"harness_score_seconds_{draws}"] = best["score"]
            out[f"harness_run_plus_score_seconds_{draws}"] = best["total"]
            for how in ("sorted", "properscoring", "pairwise"):
                if how == "pairwise" and draws > 2000:
                    continue  # 10,000 x 10,000 doubles per cell: 800 MB, minutes; not run
                loops = [_loop(tmp, draws, how, env) for _ in range(repeat)]
                lp = min(loops, key=lambda r: r["seconds"])
                out[f"loop_{how}_seconds_{draws}"] = lp["seconds"]
                out[f"loop_{how}_forecasts_{draws}"] = lp["n"]
                out[f"harness_over_loop_{how}_{draws}"] = best["total"] / lp["seconds"]
        out["harness_over_loop_target"] = 1 / 3
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return out


if __name__ == "__main__":
    for k, v in run().items():
        print(f"{k}: {v:.6g}" if isinstance(v, float) else f"{k}: {v}", flush=True)
