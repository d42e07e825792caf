"""The end-to-end demo on the invented Veldmark economy (all data simulated by code here)."""

from __future__ import annotations

import shutil
import time
from pathlib import Path

DEMO_SPEC = """\
# Backtest spec for the invented Veldmark economy (simulated data, for demonstration only).
# Copy this file as a template for your own backtest.

[run]
name = "veldmark-demo"
store = "store"                 # relative paths are relative to this file
out = "run"
seed = 20261201
draws = {draws}
freq = "Q"                      # panel frequency: monthly series are converted to quarters
policy = "keep"                 # ragged edge: keep | balance | realign

[origins]                       # one forecast origin per quarter, mid-quarter
rule = "quarterly"
day = 15
month_of_quarter = 2
start = "{start}"
end = "2026-11-30"

[variables.gdp]
transform = "dlog_ann"          # annualised quarterly growth, computed inside each vintage
[variables.cpi]
transform = "dlog_ann"
convert = "mean"
[variables.unemp]
transform = "level"
convert = "mean"
[variables.survey]
transform = "level"
convert = "mean"

[targets]
variables = ["gdp", "cpi"]
horizons = {{ min = 0, max = {hmax} }}    # h<0 backcast, 0 nowcast, >0 forecast

[models.rw]
type = "nochange"
[models.ar]
type = "ar"
max_lags = 4
[models.bvar]
type = "bvar"
lags = 4
tightness = 0.2
[models.bvar_sv]
type = "bvar_sv"
lags = 2
{sv_extra}
[scoring]
benchmark = "rw"
truths = ["first", "release:2", "lag:365D", "latest"]
chronology = "chronology.csv"
[scoring.subperiods]
deep_recession = ["2009Q1", "2010Q2"]
since_2015 = ["2015Q1", "2026Q4"]
"""


def demo_spec_text(*, small: bool = False) -> str:
    """The demo spec; ``small`` gives a reduced run (fewer origins and draws)."""
    if small:
        return DEMO_SPEC.format(draws=400, start="2016-01-01", hmax=4, sv_extra="n_iter = 600\nburn = 200\n")
    return DEMO_SPEC.format(draws=2000, start="2006-01-01", hmax=8, sv_extra="n_iter = 1000\nburn = 300\n")


def write_demo_data(out: Path, *, small: bool = False) -> Path:
    """Write ``out/store``, ``out/chronology.csv`` and ``out/spec.toml``; return the spec path."""
    from vintages import build_demo_store, simulate_demo, write_demo_chronology

    out = Path(out)
    if (out / "store").exists():
        shutil.rmtree(out / "store")
    out.mkdir(parents=True, exist_ok=True)
    data = simulate_demo()
    build_demo_store(out / "store", data=data)
    write_demo_chronology(out / "chronology.csv")
    (out / "spec.toml").write_text(demo_spec_text(small=small))
    return out / "spec.toml"


def run_demo(out: Path, *, data_only: bool = False, small: bool = False, jobs: int | None = None, echo=print) -> dict:
    """Run the whole demo; return the paths it wrote."""
    t0 = time.perf_counter()
    out = Path(out)
    spec_path = write_demo_data(out, small=small)
    echo(f"demo data: store {out / 'store'}, chronology {out / 'chronology.csv'}, spec {spec_path} "
         f"({time.perf_counter() - t0:.1f}s)")
    paths = {"store": out / "store", "spec": spec_path, "chronology": out / "chronology.csv"}
    if data_only:
        echo("stopped after the data (--data-only); run the backtest with: harness run " + str(spec_path))
        return paths
    paths.update(run_pipeline(spec_path, out, jobs=jobs, echo=echo))
    echo(f"demo finished in {time.perf_counter() - t0:.1f}s")
    echo(f"report: {Path(paths['report']).resolve()}")
    return paths


def run_pipeline(spec_path: Path, out: Path, *, jobs: int | None = None, echo=print) -> dict:
    """spec → run (with progress) → scores → sensitivity → report; return the paths written."""
    from harness.backtest import run
    from harness.evaluation import evaluate, save
    from harness.evaluation.sensitivity import sensitivity
    from harness.report.make import make_report
    from harness.report.terminal import relative_text
    from harness.spec import load_spec

    spec = load_spec(spec_path)
    echo(f"backtest: {len(spec.models)} models, {spec.draws} draws per forecast")
    res = run(spec, jobs=jobs)
    echo(res.summary())
    paths = {"run": res.run_dir}
    t1 = time.perf_counter()
    ev = evaluate(res.run_dir)
    save(ev, res.run_dir / "scores")
    echo(relative_text(ev, "crps", subperiods=["full", "recession"]))
    echo(f"scores ({time.perf_counter() - t1:.1f}s) in {res.run_dir / 'scores'}")
    t2 = time.perf_counter()
    echo("revision sensitivity: scoring under several truths and rerunning on revised (pseudo-real-time) data")
    sens = sensitivity(spec, run_dir=res.run_dir, jobs=jobs, progress=True)
    sens.save(res.run_dir / "sensitivity")
    echo(sens.summary())
    echo(f"sensitivity ({time.perf_counter() - t2:.1f}s) in {res.run_dir / 'sensitivity'}")
    rep = make_report(res.run_dir, out=Path(out) / "report", sensitivity=sens, evaluation=ev, echo=echo)
    paths["report"] = rep["html"]
    return paths
