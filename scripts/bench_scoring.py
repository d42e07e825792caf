"""Benchmark of harness.scores: score_all at scale, and CRPS paths side by side.

Prints ``name: value`` lines. Figures:

* ``score_all_seconds`` / ``score_all_peak_rss_gb``: :func:`harness.scores.score_all` on
  100,000 forecasts x 2,000 float32 draws (targets: <= 30 s, <= 4 GB), one thread, measured in
  a fresh subprocess (peak RSS from ``resource.getrusage``; it includes the 0.8 GB input and the
  interpreter). ``score_all_2threads_seconds`` repeats it with two threads.
* ``crps_pairs_over_sorted_time_ratio``: properscoring's all-pairs path against our sort-based
  path on the same small case, in one run; ``crps_pairs_est_*`` scale the all-pairs cost to the
  full case (time ~ n m^2, memory n m^2 x 8 bytes), estimated rather than run.
* ``crps_sorted_over_properscoring_numba_time_ratio``: ours against properscoring's compiled
  path on 20,000 x 2,000 (below 1 means ours is faster).

Run: ``python scripts/bench_scoring.py`` (about a minute on 2 cores).
"""

from __future__ import annotations

import json
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
N, M = 100_000, 2_000

_CHILD = """
import json, resource, sys, time
import numpy as np
sys.path.insert(0, {root!r})
from harness.scores import score_all
rng = np.random.default_rng(20240601)
draws = rng.standard_normal(({n}, {m}), dtype=np.float32)
obs = rng.normal(0.0, 1.2, {n})
t0 = time.perf_counter()
out = score_all(obs, draws, n_threads={threads})
sec = time.perf_counter() - t0
assert np.isfinite(out["crps"]).all()
print(json.dumps({{"seconds": sec,
                   "peak_rss_gb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024 / 1e9,
                   "input_gb": draws.nbytes / 1e9,
                   "mean_crps": float(out["crps"].mean())}}))
"""


def _score_all_in_subprocess(threads: int) -> dict[str, float]:
    code = _CHILD.format(root=str(ROOT), n=N, m=M, threads=threads)
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                         timeout=600)
    return json.loads(res.stdout.strip().splitlines()[-1])


def _best_of(fn, repeat: int = 3) -> float:
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def run() -> dict[str, float]:
    """Run the scoring benchmark and return its figures (names as printed)."""
    from properscoring import _crps

    from harness.scores import crps_ensemble, crps_sorted

    out: dict[str, float] = {}
    one = _score_all_in_subprocess(1)
    out["score_all_seconds"] = one["seconds"]
    out["score_all_peak_rss_gb"] = one["peak_rss_gb"]
    out["score_all_input_gb"] = one["input_gb"]
    two = _score_all_in_subprocess(2)
    out["score_all_2threads_seconds"] = two["seconds"]
    out["score_all_2threads_speedup"] = one["seconds"] / two["seconds"]
    out["score_all_target_seconds"] = 30.0
    out["score_all_target_peak_gb"] = 4.0

    rng = np.random.default_rng(7)
    n_small, m_small = 100, 400
    y = rng.normal(size=n_small)
    x = rng.normal(size=(n_small, m_small))
    t_pairs = _best_of(lambda: _crps._crps_ensemble_vectorized(y, np.sort(x, axis=1), np.ones_like(x)))
    t_sorted = _best_of(lambda: crps_sorted(y, x))
    out["crps_small_case_n"] = float(n_small)
    out["crps_small_case_m"] = float(m_small)
    out["crps_pairs_over_sorted_time_ratio"] = t_pairs / t_sorted
    scale = (N / n_small) * (M / m_small) ** 2
    out["crps_pairs_est_seconds_full_case"] = t_pairs * scale
    out["crps_pairs_est_memory_gb_full_case"] = N * M * M * 8 / 1e9

    y2 = rng.normal(size=20_000)
    x2 = rng.normal(size=(20_000, M))
    crps_ensemble(y2[:10], x2[:10])  # import and compile properscoring outside the timing
    t_numba = _best_of(lambda: crps_ensemble(y2, x2), repeat=2)
    t_ours = _best_of(lambda: crps_sorted(y2, x2), repeat=2)
    out["crps_properscoring_numba_seconds_20000x2000"] = t_numba
    out["crps_sorted_seconds_20000x2000"] = t_ours
    out["crps_sorted_over_properscoring_numba_time_ratio"] = t_ours / t_numba
    return out


if __name__ == "__main__":
    for name, value in run().items():
        print(f"{name}: {value:.6g}")
