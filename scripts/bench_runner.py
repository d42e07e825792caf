"""Benchmark of the run side on the demo spec: cold runs, reruns, sizes, dask against loky, scoring's start-up.

Every ratio is measured side by side in this one process (the machine is shared and noisy:
read the ratios). Figures (targets in ``*_target`` lines):

* ``runner_cold_*``: the demo spec (4 models x 84 origins, 2,000 draws) with an empty task cache,
  in-process ``run()``; 1 and 2 loky workers (with the inline pilot, and with the pool from the
  start), and a 2-worker dask ``LocalCluster`` (``runner_dask_over_loky``).
* ``rerun_*``: after the cold run, a rerun with nothing new (in process, and as a fresh
  ``vintage-harness run`` subprocess, start-up included), a rerun into a new run directory (``--out``),
  and a rerun after one new release dated before the last origin; each as a share of the cold
  2-worker run, with the number of tasks refit.
* ``size_*``: bytes of the run directory's files, of the ledger, and of the same draws written
  the previous way (plain float32 in draw order, run-manifest/2), and of the task cache.
* ``score_*``: ``vintage-harness score RUN`` on the demo run as a subprocess, cold (first, no evaluation
  cache) and warm (best of 3), and where its
  time goes (measured in one child: imports by package, reading the ledger, scoring, tests,
  printing).

Run: ``python scripts/bench_runner.py [--quick]`` (``--quick``: the reduced demo).
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
sys.path.insert(0, str(ROOT))

SCORE_PHASES = r'''
import json, sys, time
T = {}
t0 = time.perf_counter()
from harness.backtest.process import defer_dask_probe_on_import
defer_dask_probe_on_import()
import typer
from harness.cli import app
T["import_cli"] = time.perf_counter() - t0
t = time.perf_counter(); import numpy, pandas; T["import_numpy_pandas"] = time.perf_counter() - t
t = time.perf_counter(); import xarray, pyarrow.parquet; T["import_xarray_pyarrow"] = time.perf_counter() - t
t = time.perf_counter(); import scipy.special, scipy.optimize; T["import_scipy_special_optimize"] = time.perf_counter() - t
t = time.perf_counter(); import harness.backtest.ledger; T["import_ledger_reader"] = time.perf_counter() - t
t = time.perf_counter(); import harness.evaluation; T["import_harness_evaluation_rest"] = time.perf_counter() - t
t = time.perf_counter(); from harness.report.terminal import relative_text; T["import_report_terminal"] = time.perf_counter() - t
t = time.perf_counter(); led = harness.backtest.ledger.read_ledger(sys.argv[1]); T["read_ledger"] = time.perf_counter() - t
from harness.evaluation.evaluator import evaluate
t = time.perf_counter(); ev = evaluate(led, None, tests=False); T["evaluate_scores_only"] = time.perf_counter() - t
t = time.perf_counter(); ev = evaluate(led, None); T["evaluate_with_tests"] = time.perf_counter() - t
t = time.perf_counter(); relative_text(ev, "crps"); T["print_tables"] = time.perf_counter() - t
print(json.dumps(T))
'''


def _env(**extra) -> dict:
    return dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""), **extra)


def _wall(cmd, env, repeat: int = 1) -> float:
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        subprocess.run(cmd, env=env, cwd=ROOT, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                       timeout=1800)
        best = min(best, time.perf_counter() - t0)
    return best


def _bytes(path: Path) -> int:
    return sum(f.stat().st_size for f in Path(path).rglob("*") if f.is_file())


def _old_way_bytes(run_dir: Path) -> int:
    """Bytes of the run's ledger written the previous way (float32 in draw order, lz4)."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.parquet as pq

    from harness.backtest import read_ledger

    led = read_ledger(run_dir)
    joint = led.joint_draws().values  # (model, origin, variable, horizon, draw)
    t = pq.read_table(run_dir / led.manifest.ledger)
    df = t.select(["model", "origin", "variable", "horizon"]).to_pandas()
    import pandas as pd

    idx = (pd.Index(led.models).get_indexer(df["model"]),
           np.searchsorted(led.draws["origin"].values.astype("datetime64[D]"),
                           df["origin"].to_numpy().astype("datetime64[D]")),
           pd.Index(list(led.draws["variable"].values)).get_indexer(df["variable"]),
           np.searchsorted(led.draws["horizon"].values, df["horizon"].to_numpy()))
    vals = joint[idx]
    old = t.set_column(t.column_names.index("draws"), "draws",
                       pa.FixedSizeListArray.from_arrays(pa.array(vals.reshape(-1), pa.float32()), vals.shape[1]))
    sink = pa.BufferOutputStream()
    pq.write_table(old, sink, compression="lz4")
    return len(sink.getvalue())


def run(quick: bool = False) -> dict[str, float]:
    """Run the benchmark and return its figures (names as printed)."""
    import pandas as pd

    from harness.backtest import make_plan
    from harness.backtest import run as run_backtest
    from harness.demo import write_demo_data
    from harness.spec import load_spec
    from vintages.store import VintageStore

    out: dict[str, float] = {"load_average_1min_at_start": os.getloadavg()[0]}
    tmp = Path(tempfile.mkdtemp(prefix="bench-runner-"))
    quiet = {"progress": False, "log": lambda m: None}
    try:
        spec_path = write_demo_data(tmp / "demo", small=quick)
        base = load_spec(spec_path)

        def spec(name):
            return base.with_run(out=tmp / name, cache=tmp / f"cache-{name}")

        # numba kernels compile into their on-disk cache on the first run ever: not timed as cold
        run_backtest(spec("warm"), jobs=2, **quiet)
        cold = {}
        for label, kw in (("1job", {"jobs": 1}), ("2jobs", {"jobs": 2}),
                          ("2jobs_pool_only", {"jobs": 2, "inline_seconds": 0}),
                          ("dask_2workers", {"jobs": 2, "backend": "dask"})):
            t0 = time.perf_counter()
            res = run_backtest(spec(f"cold-{label}"), **kw, **quiet)
            cold[label] = time.perf_counter() - t0
            out[f"runner_cold_{label}_seconds"] = cold[label]
        out["runner_tasks"] = res.total
        out["runner_speedup_2_vs_1"] = cold["1job"] / cold["2jobs"]
        out["runner_speedup_target"] = 1.7
        out["runner_dask_over_loky_time_ratio"] = cold["dask_2workers"] / cold["2jobs"]
        # what the inline pilot costs (or saves) on a run too large for it
        out["runner_pilot_over_pool_only_time_ratio"] = cold["2jobs"] / cold["2jobs_pool_only"]
        ref = cold["2jobs"]
        main = spec("cold-2jobs")

        # a rerun with nothing new: in process, and as a fresh 'vintage-harness run' (start-up included)
        t0 = time.perf_counter()
        res = run_backtest(main, jobs=2, **quiet)
        out["rerun_nothing_new_seconds"] = time.perf_counter() - t0
        out["rerun_nothing_new_computed"] = res.computed
        out["rerun_nothing_new_share_of_cold"] = out["rerun_nothing_new_seconds"] / ref
        env = _env(HARNESS_CACHE=str(main.cache_dir))
        cli = [sys.executable, "-c", "from harness.cli import main; main()"]
        out["rerun_nothing_new_cli_seconds"] = _wall(cli + ["run", str(spec_path), "--out", str(main.out), "-q"], env,
                                                     repeat=2)
        out["rerun_nothing_new_cli_share_of_cold"] = out["rerun_nothing_new_cli_seconds"] / ref
        out["rerun_nothing_new_share_target"] = 0.05

        # a new run directory: every finished task comes from the shared cache
        t0 = time.perf_counter()
        res = run_backtest(main.with_run(out=tmp / "new-out"), jobs=2, **quiet)
        out["rerun_new_out_seconds"] = time.perf_counter() - t0
        out["rerun_new_out_computed"] = res.computed
        out["rerun_new_out_share_of_cold"] = out["rerun_new_out_seconds"] / ref

        # one new release dated before the last origin: only the origins from its day on refit
        store = VintageStore(main.store)
        last = pd.Timestamp(make_plan(main).origins[-1])
        sur = store.read_log(with_superseded=False)
        sur = sur[(sur["variable"] == "survey") & (sur["release"] <= last)]
        row = sur.iloc[-1]
        store.append(pd.DataFrame({"variable": ["survey"], "period": [row["period"]],
                                   "release": [last - pd.Timedelta(days=1)], "value": [float(row["value"]) + 1.0]}),
                     source="bench-new-release")
        t0 = time.perf_counter()
        res = run_backtest(main, jobs=2, **quiet)
        out["rerun_one_release_seconds"] = time.perf_counter() - t0
        out["rerun_one_release_computed"] = res.computed
        out["rerun_one_release_share_of_cold"] = out["rerun_one_release_seconds"] / ref
        out["rerun_one_release_share_target"] = 0.10

        # sizes: the run directory as run, its ledger, the same draws the previous way, the cache
        out["size_run_dir_mb"] = _bytes(main.out) / 1e6
        led_file = main.out / res.manifest.ledger
        out["size_ledger_mb"] = led_file.stat().st_size / 1e6
        out["size_ledger_old_way_mb"] = _old_way_bytes(main.out) / 1e6
        out["size_ledger_over_old_way"] = out["size_ledger_mb"] / out["size_ledger_old_way_mb"]
        out["size_ledger_bytes_per_draw"] = led_file.stat().st_size / (res.manifest.ledger_rows * base.draws)
        out["size_task_cache_mb"] = _bytes(main.cache_dir) / 1e6

        # vintage-harness score on this run: the whole command, and where its time goes
        env = _env(HARNESS_CACHE=str(main.cache_dir))
        shutil.rmtree(main.out / ".evaluations", ignore_errors=True)
        # the first score of a run computes every score and test (cold); later ones read the
        # evaluation cache beside the run (warm); both are reported
        out["score_cli_cold_seconds"] = _wall(cli + ["score", str(main.out)], env, repeat=1)
        out["score_cli_seconds"] = _wall(cli + ["score", str(main.out)], env, repeat=3)
        out["score_cli_target_seconds"] = 1.5
        res = subprocess.run([sys.executable, "-c", SCORE_PHASES, str(main.out)], env=env, cwd=ROOT,
                             capture_output=True, text=True, check=True, timeout=600)
        for k, v in json.loads(res.stdout.strip().splitlines()[-1]).items():
            out[f"score_phase_{k}_seconds"] = v
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    out["load_average_1min_at_end"] = os.getloadavg()[0]
    return out


def demo_sizes() -> dict[str, float]:
    """``vintage-harness demo`` end to end in a subprocess: its run directories' and cache's sizes (target <= 60 MB)."""
    tmp = Path(tempfile.mkdtemp(prefix="bench-demo-"))
    try:
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-c", "from harness.cli import main; main()", "demo", "--out", str(tmp)],
                       env=_env(), cwd=ROOT, check=True, capture_output=True, timeout=3600)
        return {"demo_seconds": time.perf_counter() - t0, "demo_run_dir_mb": _bytes(tmp / "run") / 1e6,
                "demo_run_dir_target_mb": 60.0, "demo_pseudo_run_dir_mb": _bytes(tmp / "run-pseudo") / 1e6,
                "demo_task_cache_mb": _bytes(tmp / ".harness-cache") / 1e6}
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    results = run(quick="--quick" in sys.argv)
    if "--quick" not in sys.argv:
        results.update(demo_sizes())
    for k, v in results.items():
        print(f"{k}: {v:.6g}" if isinstance(v, float) else f"{k}: {v}", flush=True)
