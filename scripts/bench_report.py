"""Benchmark of the demo's report step: pack and appendix written after scoring.

Case: the full demo (invented Veldmark economy, 4 models × 84 quarterly origins × 2 targets ×
9 horizons, 2,000 draws), scored under its spec's truth and the sensitivity check's truths. The
timed step is what the demo does after scoring (:func:`harness.report.make_report` given the
evaluation and the sensitivity check): read the ledger, read the store (history at the latest
origin, revision statistics, news decomposition), decide (band tests, best set), then write
every table and figure of both pages. Target: at most 5 s.

Figures (seconds):

* ``report_step_cold_s``: the step in a fresh interpreter after scoring, as the demo runs it
  (decide, then :func:`~harness.report.make_report` with the ledger and verdicts it already
  has; the first figure pays matplotlib's import), wall clock; ``report_step_cold_cpu_s`` its
  CPU time (less sensitive to other processes on a shared machine);
* ``report_step_warm_s``: best of 3 more runs in the same interpreter;
* ``report_cmd_step_cold_s``: the same after scoring as ``vintage-harness report`` runs it (reading the
  ledger again inside), in another fresh interpreter;
* ``stage_<name>_s``: the cold run's stages (as the progress display shows them);
* ``pack_pages``: pages of ``report.html`` printed by headless Chromium (when installed).

The demo run is built once under ``$HARNESS_BENCH_DIR`` (default a temporary directory; about
two minutes on two cores) or read from ``$HARNESS_BENCH_RUN`` (a demo run directory with its
``sensitivity/`` tables). Run ``python scripts/bench_report.py``; it prints ``name: value`` lines;
``run()`` returns them.
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
import tempfile
from pathlib import Path

TARGET_S = 5.0

_CHILD = r"""
import json, sys, time
from harness.backtest.ledger import read_ledger
from harness.evaluation import evaluate
from harness.evaluation.sensitivity import truth_sensitivity
from harness.report.make import load_sensitivity, make_report
from harness.ui import Display
from harness.verdicts import decide
run, out, demo = sys.argv[1], sys.argv[2], sys.argv[3] == "demo"
# scoring, as the demo does it before its report: the ledger read once, the truths of the check
ledger = read_ledger(run)
ev = evaluate(ledger)
sens = load_sensitivity(run + "/sensitivity")
if sens is not None:
    _, _, sens.evaluations = truth_sensitivity(run, sens.truths)
res = {}
for k in range(4):
    t, c = time.perf_counter(), time.process_time()
    if demo:  # the demo decides for its printed decision table, then writes the report with it
        v = decide(ev, sensitivity=sens)
        p = make_report(run, out=out, evaluation=ev, sensitivity=sens, display=Display(quiet=True), verdicts=v,
                        ledger=ledger)
    else:  # 'vintage-harness report' after scoring: reads the ledger and decides inside
        p = make_report(run, out=out, evaluation=ev, sensitivity=sens, display=Display(quiet=True))
    wall, cpu = time.perf_counter() - t, time.process_time() - c
    if k == 0:
        res["cold"], res["cold_cpu"], res["stages"] = wall, cpu, p["timings"]
    else:
        res["warm"] = min(res.get("warm", 1e9), wall)
print(json.dumps(res))
"""


def _demo_run() -> Path:
    given = os.environ.get("HARNESS_BENCH_RUN")
    if given:
        return Path(given)
    base = Path(os.environ.get("HARNESS_BENCH_DIR") or tempfile.mkdtemp(prefix="bench-report-"))
    run = base / "run"
    if (run / "run.json").is_file() and (run / "sensitivity" / "sensitivity_truths.csv").is_file():
        return run
    from harness.backtest import run as run_backtest
    from harness.demo import write_demo_data
    from harness.evaluation.sensitivity import sensitivity
    from harness.spec import load_spec

    spec = load_spec(write_demo_data(base))
    res = run_backtest(spec, progress=False)
    sensitivity(spec, run_dir=res.run_dir, progress=False).save(res.run_dir / "sensitivity")
    return res.run_dir


def _pages(html: Path) -> int | None:
    chromium = Path("/usr/bin/chromium")
    if not chromium.is_file():
        return None
    with tempfile.TemporaryDirectory() as d:
        pdf = Path(d) / "p.pdf"
        subprocess.run([str(chromium), "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
                        "--disable-background-networking", "--disable-component-update", "--disable-sync",
                        f"--user-data-dir={d}/profile", f"--print-to-pdf={pdf}", "--no-pdf-header-footer",
                        html.resolve().as_uri()], capture_output=True, timeout=180, check=False)
        return len(re.findall(rb"/Type\s*/Page(?!s)", pdf.read_bytes())) if pdf.is_file() else None


def run() -> dict:
    """Time the demo's report step; return ``name: value`` figures."""
    run_dir = _demo_run()
    with tempfile.TemporaryDirectory() as d:
        out = Path(d) / "report"
        env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(Path(__file__).resolve().parents[1]),
                                                            os.environ.get("PYTHONPATH", "")]))
        def child(mode: str) -> dict:
            r = subprocess.run([sys.executable, "-c", _CHILD, str(run_dir), str(out), mode], capture_output=True,
                               text=True, env=env, check=True)
            return json.loads(r.stdout.strip().splitlines()[-1])

        other = child("report")
        res = child("demo")
        figures = {"report_step_cold_s": round(res["cold"], 2), "report_step_cold_cpu_s": round(res["cold_cpu"], 2),
                   "report_step_warm_s": round(res["warm"], 2),
                   "report_cmd_step_cold_s": round(other["cold"], 2), "target_s": TARGET_S}
        for k, v in res["stages"].items():
            # "reading the run /path", "writing the pack and the appendix to /path": the words only
            words = re.split(r"[:/]| to |\(", k)[0]
            name = re.sub(r"[^a-z]+", "_", words.lower()).strip("_")
            figures[f"stage_{name}_s"] = round(v, 2)
        pages = _pages(out / "report.html")
        if pages is not None:
            figures["pack_pages"] = pages
    return figures


if __name__ == "__main__":
    for k, v in run().items():
        print(f"{k}: {v}")
