"""Benchmarks of the whole harness: prints ``name: value`` lines (ratios measured side by side).

Run: ``python scripts/bench.py [--only store,infoset,models,scoring,runner,cli] [--quick]``.
Targets are printed next to the measurements; this script never fails on a missed target (the
machines are noisy): read the ratios.
"""

from __future__ import annotations

import argparse
import importlib
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

PARTS = ("cli", "store", "infoset", "models", "scoring", "runner")


def bench_cli() -> dict[str, float]:
    """Start-up time of ``harness --help`` (target < 0.5 s), best of 5."""
    best = min(_time_cmd([sys.executable, "-m", "harness.cli._app", "--help"]) for _ in range(5))
    return {"cli_help_seconds": best, "cli_help_target_seconds": 0.5}


def _time_cmd(cmd) -> float:
    t0 = time.perf_counter()
    subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, cwd=ROOT)
    return time.perf_counter() - t0


def bench_runner(quick: bool = False) -> dict[str, float]:
    """The demo spec: cold wall time, 2-vs-1 worker speed-up, incremental rerun, naive-loop ratio."""
    import numpy as np
    import pandas as pd

    from harness.backtest import make_plan, run
    from harness.demo import write_demo_data
    from harness.spec import load_spec
    from vintages.store import VintageStore

    out: dict[str, float] = {}
    tmp = Path(tempfile.mkdtemp(prefix="bench-runner-"))
    try:
        spec_path = write_demo_data(tmp / "demo", small=quick)
        spec = load_spec(spec_path)
        quiet = {"progress": False, "log": lambda m: None}
        # first-ever run on this machine compiles the numba kernels into the on-disk cache
        t0 = time.perf_counter()
        first = run(spec.with_overrides(out=tmp / "first"), jobs=2, **quiet)
        out["runner_first_ever_2jobs_seconds_incl_compile"] = time.perf_counter() - t0
        out["runner_tasks"] = first.total
        times = {}
        for jobs in (1, 2):  # cold = empty cache, kernels already compiled
            t0 = time.perf_counter()
            run(spec.with_overrides(out=tmp / f"cold{jobs}"), jobs=jobs, **quiet)
            times[jobs] = time.perf_counter() - t0
        out["runner_cold_1job_seconds"] = times[1]
        out["runner_cold_2jobs_seconds"] = times[2]
        out["runner_cold_target_seconds"] = 60.0
        out["runner_speedup_2_vs_1"] = times[1] / times[2]
        out["runner_speedup_target"] = 1.7
        # rescoring the demo ledger under another truth, without refitting (target <= 5 s)
        from harness.backtest.ledger import read_ledger
        from harness.evaluation import evaluate

        t0 = time.perf_counter()
        led = read_ledger(tmp / "cold2")
        out["rescore_read_ledger_seconds"] = time.perf_counter() - t0
        t0 = time.perf_counter()
        evaluate(led, "latest", tests=False)
        out["rescore_scores_only_seconds"] = time.perf_counter() - t0
        t0 = time.perf_counter()
        evaluate(led, "release:2")
        out["rescore_with_all_tests_seconds"] = time.perf_counter() - t0
        out["rescore_target_seconds"] = 5.0
        # incremental: one new release dated before the last origin changes that origin's
        # information set (a revised survey value), so only its tasks are refit
        store = VintageStore(spec.store)
        plan = make_plan(spec)
        last_origin = pd.Timestamp(plan.origins[-1])
        sur = store.read_log(with_superseded=False)
        sur = sur[(sur["variable"] == "survey") & (sur["release"] <= last_origin)]
        row = sur.iloc[-1]
        new = pd.DataFrame({"variable": ["survey"], "period": [row["period"]],
                            "release": [last_origin - pd.Timedelta(days=1)], "value": [float(row["value"]) + 1.0]})
        store.append(new, source="bench-new-release")
        t0 = time.perf_counter()
        inc = run(spec.with_overrides(out=tmp / "cold2"), jobs=2, **quiet)
        out["runner_incremental_seconds"] = time.perf_counter() - t0
        out["runner_incremental_share_of_cold"] = out["runner_incremental_seconds"] / times[2]
        out["runner_incremental_share_target"] = 0.05
        out["runner_incremental_cache_hit_share"] = inc.cached / inc.total
        out["runner_incremental_recomputed_tasks"] = inc.computed
        # naive: a sequential loop that rebuilds each origin's data with pandas and refits
        plan = make_plan(spec)
        log = store.read_log(with_superseded=False)
        n_naive = min(8, len(plan.origins))
        t0 = time.perf_counter()
        for o in plan.origins[:n_naive]:
            sub = log[log["release"] <= pd.Timestamp(o)]
            sub.sort_values("release").groupby(["variable", "period"]).last().unstack("variable")
            for t in [t for t in plan.tasks if t.origin == o]:
                plan.models[t.model].forecast(plan.infos[t.index], plan.targets[t.index], spec.draws,
                                              np.random.default_rng(0))
        naive = (time.perf_counter() - t0) / n_naive * len(plan.origins)
        out["runner_naive_sequential_seconds_est"] = naive
        out["runner_ratio_naive_vs_ours"] = naive / times[2]
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--only", default=",".join(PARTS))
    ap.add_argument("--quick", action="store_true", help="smaller runner benchmark")
    args = ap.parse_args()
    for part in args.only.split(","):
        t0 = time.perf_counter()
        if part == "cli":
            res = bench_cli()
        elif part == "runner":
            res = bench_runner(args.quick)
        else:
            mod = importlib.import_module(f"bench_{part}")
            res = mod.run()
        for k, v in res.items():
            print(f"{k}: {v:.6g}" if isinstance(v, float) else f"{k}: {v}", flush=True)
        print(f"# {part} took {time.perf_counter() - t0:.1f}s", flush=True)


if __name__ == "__main__":
    main()
