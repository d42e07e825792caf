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
[models.bvar_ml]                # the same BVAR, its overall tightness chosen per origin by
type = "bvar"                   # maximising the marginal likelihood (Giannone, Lenza & Primiceri 2015)
lags = 4
tightness = "ml"
[models.bvar_sv]
type = "bvar_sv"
lags = 2
{sv_extra}
# Real-time combinations of the candidates: weights at each origin use only the first
# releases published by then (equal weights until {min_scored} such forecasts exist).
[pools.pool_equal]
scheme = "equal"
members = ["ar", "bvar", "bvar_sv"]
[pools.pool_optimal]
scheme = "optimal"              # maximises the average log score (Hall & Mitchell 2007)
members = ["ar", "bvar", "bvar_sv"]
min_scored = {min_scored}
truth = "first"

[scoring]
benchmark = "rw"
truths = ["first", "release:2", "lag:365D", "latest"]
chronology = "chronology.csv"
[scoring.subperiods]
deep_recession = ["2009Q1", "2010Q2"]
since_2015 = ["2015Q1", "2026Q4"]
"""


NOWCAST_SPEC = """\
# Nowcasting spec for the invented Veldmark economy: a forecast the day after each release of
# industrial production (monthly origins), gdp this quarter and next, from monthly indicators at
# their ragged edge. The factor model and the bridge equations read each series in its own
# frequency; the other models read the quarterly panel.

[run]
name = "veldmark-nowcast"
store = "store"
out = "nowcast/run"
seed = 20261202
draws = {draws}
freq = "Q"

[origins]
rule = "after_release"          # the day after each release of ip
variable = "ip"
days = 1
start = "{start}"
end = "2026-11-30"

[variables.gdp]
transform = "dlog_ann"
[variables.ip]
transform = "dlog_ann"
convert = "mean"
[variables.survey]
transform = "level"
convert = "mean"
[variables.unemp]
transform = "diff"
convert = "mean"

[targets]
variables = ["gdp"]
horizons = {{ min = 0, max = 1 }}

[models.rw]
type = "nochange"
level = false                   # gdp is a growth rate: no-change = its sample mean
mean = "sample"
[models.ar]
type = "ar"
max_lags = 4
[models.bvar]
type = "bvar"
lags = 2
[models.bridge]
type = "bridge"
[models.dfm]
type = "dfm"
n_factors = 1
factor_lags = 2
tol = 1e-4                      # EM stops when the log-likelihood gains less than this (relative)

[scoring]
benchmark = "ar"
truths = ["first", "latest"]
chronology = "chronology.csv"
"""


def demo_spec_text(*, small: bool = False) -> str:
    """The demo spec; ``small`` gives a reduced run (fewer origins and draws)."""
    if small:
        return DEMO_SPEC.format(draws=400, start="2016-01-01", hmax=4, min_scored=6,
                                sv_extra="n_iter = 1500\nburn = 300\nchains = 4\n")
    return DEMO_SPEC.format(draws=2000, start="2006-01-01", hmax=8, min_scored=12,
                            sv_extra="n_iter = 1500\nburn = 300\nchains = 4\n")


def nowcast_spec_text(*, small: bool = False) -> str:
    """The demo's monthly-origin nowcasting spec; ``small`` gives fewer origins and draws."""
    return NOWCAST_SPEC.format(draws=200 if small else 1000, start="2022-01-01" if small else "2016-01-01")


def write_demo_data(out: Path, *, small: bool = False) -> Path:
    """Write ``out/store``, ``out/chronology.csv`` and ``out/spec.toml``; return the spec path."""
    from vintages import atomic_write_bytes, build_demo_store, simulate_demo, write_demo_chronology

    out = Path(out)
    if (out / "store").exists():
        shutil.rmtree(out / "store")
    out.mkdir(parents=True, exist_ok=True)
    data = simulate_demo()
    build_demo_store(out / "store", data=data)
    write_demo_chronology(out / "chronology.csv")
    atomic_write_bytes(out / "spec.toml", demo_spec_text(small=small).encode())
    atomic_write_bytes(out / "nowcast.toml", nowcast_spec_text(small=small).encode())
    return out / "spec.toml"


def run_demo(out: Path, *, data_only: bool = False, small: bool = False, jobs: int | None = None, echo=print,
             display=None) -> dict:
    """Run the whole demo; return the paths it wrote.

    ``echo`` prints the demo's results (tables, statements, paths); ``display``
    (:class:`harness.ui.Display`) shows the stages on standard error (default: a display; quiet
    silences both).
    """
    from harness.ui import Display

    ui = display or Display()
    say = echo if not ui.quiet else (lambda *_: None)
    t0 = time.perf_counter()
    out = Path(out)
    with ui.stage("simulating the invented Veldmark economy and writing its vintage store"):
        spec_path = write_demo_data(out, small=small)
    say(f"demo data: store {out / 'store'}, chronology {out / 'chronology.csv'}, spec {spec_path} "
        f"({time.perf_counter() - t0:.1f}s)")
    paths = {"store": out / "store", "spec": spec_path, "chronology": out / "chronology.csv"}
    if data_only:
        say("stopped after the data (--data-only); run the backtest with: vintage-harness run " + str(spec_path))
        return paths
    paths.update(run_pipeline(spec_path, out, jobs=jobs, echo=say, display=ui))
    paths.update(run_nowcast(out / "nowcast.toml", out, jobs=jobs, echo=say, display=ui))
    say(f"demo finished in {time.perf_counter() - t0:.1f}s")
    say(f"report: {Path(paths['report']).resolve()}")
    say(f"appendix: {Path(paths['appendix']).resolve()}")
    say(f"nowcasting report: {Path(paths['nowcast_report']).resolve()}")
    return paths


def run_nowcast(spec_path: Path, out: Path, *, jobs: int | None = None, echo=print, display=None) -> dict:
    """The monthly-origin nowcasting backtest → its decision table → its report (``RUN/report``)."""
    from harness.backtest import run
    from harness.backtest.ledger import read_ledger
    from harness.evaluation import evaluate
    from harness.report.make import make_report
    from harness.report.terminal import decision_text
    from harness.spec import load_spec
    from harness.ui import Display
    from harness.verdicts import decide

    ui = display or Display()
    spec = load_spec(spec_path)
    with ui.stage(f"nowcasting backtest: {len(spec.models)} models at the day after each ip release, "
                  f"{spec.draws} draws per forecast", live=False):
        res = run(spec, jobs=jobs, progress=not ui.quiet, log=ui.labelled("nowcasting run"))
    echo(res.summary())
    with ui.stage("scoring the nowcasts"):
        ledger = read_ledger(res.run_dir)
        ev = evaluate(ledger)
        verdicts = decide(ev)
    echo(decision_text(verdicts, variables=list(spec.targets.variables)))
    rep = make_report(res.run_dir, evaluation=ev, display=ui, verdicts=verdicts, ledger=ledger)
    return {"nowcast_run": res.run_dir, "nowcast_report": rep["html"]}


def run_pipeline(spec_path: Path, out: Path, *, jobs: int | None = None, echo=print, display=None) -> dict:
    """spec → run (with progress) → scores → sensitivity → report; return the paths written.

    The terminal shows what ``vintage-harness score`` and ``vintage-harness sensitivity`` show (the decision view,
    one score table per target, the truths side by side); the report goes where ``harness
    report`` writes it, ``RUN/report``.
    """
    from harness.backtest import run
    from harness.backtest.ledger import read_ledger
    from harness.evaluation import evaluate, save
    from harness.evaluation.sensitivity import sensitivity
    from harness.report.make import make_report
    from harness.report.terminal import decision_text, relative_text, sensitivity_lines
    from harness.report.textout import render
    from harness.report.truths import truths_table
    from harness.spec import load_spec
    from harness.ui import Display
    from harness.verdicts import decide

    ui = display or Display()
    spec = load_spec(spec_path)
    with ui.stage(f"backtest: {len(spec.models)} models, {spec.draws} draws per forecast", live=False):
        res = run(spec, jobs=jobs, progress=not ui.quiet, log=ui.labelled("real-time run"))

    echo(res.summary())
    paths = {"run": res.run_dir}
    with ui.stage("scoring under the spec's truth (scores and tests)"):
        ledger = read_ledger(res.run_dir)  # read once: scoring and the report's charts share it
        ev = evaluate(ledger)
        save(ev, res.run_dir / "scores")
    with ui.stage("revision sensitivity: scoring under every truth, then the revised-data rerun", live=False):
        sens = sensitivity(spec, run_dir=res.run_dir, jobs=jobs, progress=not ui.quiet,
                           log=ui.labelled("revised-data rerun"))
        sens.save(res.run_dir / "sensitivity")
    with ui.stage("deciding: band tests, best set, calibration, truths"):
        verdicts = decide(ev, sensitivity=sens)
    echo(decision_text(verdicts, variables=list(spec.targets.variables)))
    echo(relative_text(ev, "crps"))
    echo(f"scores in {res.run_dir / 'scores'}")
    echo(render([truths_table(sens, ev.benchmark, variables=list(spec.targets.variables))], "text",
                caution=False).rstrip())
    for line in sensitivity_lines(sens):
        echo(line)
    echo(f"sensitivity tables in {res.run_dir / 'sensitivity'}")
    rep = make_report(res.run_dir, sensitivity=sens, evaluation=ev, display=ui, verdicts=verdicts, ledger=ledger)
    paths["report"] = rep["html"]
    paths["appendix"] = rep["appendix"]
    return paths
