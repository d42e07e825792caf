"""Benchmarks of the whole harness: prints ``name: value`` lines (ratios measured side by side).

Run: ``python scripts/bench.py [--only PART,PART] [--quick]``; the parts are :data:`PARTS` (each a
``scripts/bench_<part>.py`` with ``run() -> dict``, besides ``cli``).
Targets are printed next to the measurements; this script never fails on a missed target (the
machines are noisy): read the ratios.
"""

from __future__ import annotations

import argparse
import importlib
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

PARTS = ("cli", "store", "checksums", "index", "infoset", "models", "bvar_ml", "nowcast", "scoring", "compare",
         "pools", "report", "runner", "loop")


def bench_cli() -> dict[str, float]:
    """Start-up of ``vintage-harness --help`` (target <= 0.3 s) and of two commands' help, best of 5 each."""
    cmd = [sys.executable, "-c", "from harness.cli import main; main()"]
    out = {"cli_help_seconds": min(_time_cmd(cmd + ["--help"]) for _ in range(5)),
           "cli_help_target_seconds": 0.3}
    for sub in ("run", "score", "vintages"):
        out[f"cli_{sub}_help_seconds"] = min(_time_cmd(cmd + [sub, "--help"]) for _ in range(5))
    # the interpreter alone, for scale
    out["python_startup_seconds"] = min(_time_cmd([sys.executable, "-c", "pass"]) for _ in range(5))
    return out


def _time_cmd(cmd) -> float:
    t0 = time.perf_counter()
    subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, cwd=ROOT)
    return time.perf_counter() - t0


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
            import bench_runner

            res = bench_runner.run(args.quick)
            if not args.quick:
                res.update(bench_runner.demo_sizes())
        else:
            import inspect

            mod = importlib.import_module(f"bench_{part}")
            res = mod.run(quick=args.quick) if "quick" in inspect.signature(mod.run).parameters else mod.run()
        for k, v in res.items():
            print(f"{k}: {v:.6g}" if isinstance(v, float) else f"{k}: {v}", flush=True)
        print(f"# {part} took {time.perf_counter() - t0:.1f}s", flush=True)


if __name__ == "__main__":
    main()
