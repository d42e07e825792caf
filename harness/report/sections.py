"""The report's sections: one ordered list (id, title, builder) from which the table of contents,
the HTML and the Markdown follow. Each builder returns the section's HTML body and registers
its tables and figures with the :class:`harness.report.html.ReportWriter` it is given.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from harness.report import plots
from harness.report.builders import (
    coverage_tables,
    model_order,
    ratio_tables,
    sensitivity_ratio_tables,
)
from harness.report.changes import DEFAULT_THRESHOLD, changes
from harness.report.colours import MARK_BETTER, MARK_WORSE, PALETTE, RATIO_STEPS, STAR_LEVELS
from harness.report.escape import escape_html
from harness.report.grid import FrameTable
from harness.report.headline import format_horizons
from harness.scores import resolve

CAUTION = ("These results describe how the models would have performed in the past, on the sample, "
           "truth and settings chosen for this backtest; they do not promise the same performance in "
           "the future. Whether to adopt, keep or drop a model is for the user's own review and "
           "governance to decide.")


def manifest_value(evaluation, key: str, default=None):
    """A field of the evaluation's run manifest (``default`` when there is no manifest)."""
    man = getattr(evaluation, "manifest", None)
    return getattr(man, key, default) if man is not None else default


def _p(text: str, cls: str | None = None) -> str:
    c = f' class="{cls}"' if cls else ""
    return f"<p{c}>{escape_html(text)}</p>"


def _variables(evaluation) -> list[str]:
    targets = manifest_value(evaluation, "targets")
    seen = [str(v) for v in pd.unique(evaluation.forecasts["variable"])]
    if targets:
        return [str(v) for v in targets if str(v) in seen] + [v for v in seen if v not in map(str, targets)]
    return seen


def _ordered(df: pd.DataFrame, ev, variables) -> pd.DataFrame:
    """Rows in report order: variables as the spec lists them, horizons up, benchmark first."""
    if not len(df):
        return df
    keys, tmp = [], {}
    if "variable" in df:
        order = {v: i for i, v in enumerate(variables)}
        tmp["_v"] = df["variable"].map(lambda v: order.get(str(v), len(order)))
        keys.append("_v")
    if "horizon" in df:
        keys.append("horizon")
    if "model" in df:
        models = model_order(df["model"], ev.benchmark)
        mo = {m: i for i, m in enumerate(models)}
        tmp["_m"] = df["model"].map(lambda m: mo.get(str(m), len(mo)))
        keys.append("_m")
    if not keys:
        return df
    out = df.assign(**tmp).sort_values(keys, kind="stable")
    return out.drop(columns=list(tmp)).reset_index(drop=True)


def _run_frame(evaluation) -> pd.DataFrame:
    def man_get(key, default=""):
        return manifest_value(evaluation, key, default)

    origins = man_get("origins") or [str(pd.Timestamp(o).date()) for o in sorted(pd.unique(
        evaluation.forecasts["origin"]))]
    specs = man_get("model_specs", {})
    models = man_get("models") or list(pd.unique(evaluation.forecasts["model"]))
    counts = man_get("counts", {})
    rows = [
        ("run", man_get("name", "")),
        ("spec", man_get("spec", "")),
        ("spec hash", man_get("spec_hash", "")),
        ("store", man_get("store", "")),
        ("store checksum", man_get("store_checksum", "")),
        ("store batches", man_get("store_batches", "")),
        ("mode", man_get("mode", "")),
        ("truth", evaluation.truth),
        ("benchmark", evaluation.benchmark),
        ("origins", f"{len(origins)} ({origins[0]} to {origins[-1]})" if origins else "0"),
        ("models", ", ".join(f"{m} ({specs[m]['type']})" if m in specs and isinstance(specs[m], dict)
                             and "type" in specs[m] else str(m) for m in models)),
        ("targets", ", ".join(map(str, man_get("targets", _variables(evaluation))))),
        ("horizons", format_horizons(man_get("horizons") or pd.unique(evaluation.forecasts["horizon"]))),
        ("draws per forecast", man_get("draws", "")),
        ("seed", man_get("seed", "")),
        ("sub-periods", ", ".join(map(str, evaluation.subperiod_names))),
        ("recession dating", evaluation.chronology_source),
        ("tasks", ", ".join(f"{k} {v}" for k, v in counts.items()) if counts else ""),
        ("run created", man_get("created", "")),
    ]
    return pd.DataFrame(rows, columns=["item", "value"]).astype({"value": str})


def _legend() -> str:
    """The colour scale, markers and stars explained (text twins of every colour)."""
    steps = list(RATIO_STEPS)
    cells = []
    for lv in range(-4, 5):
        k = abs(lv)
        if lv == 0:
            rng = f"{1 / steps[0]:.2f}–{steps[0]:.2f}"
        elif lv < 0:
            lo = f"{1 / steps[k]:.2f}" if k < len(steps) else None
            hi = f"{1 / steps[k - 1]:.2f}"
            rng = f"{lo}–{hi}" if lo else f"≤ {hi}"
        else:
            lo = f"{steps[k - 1]:.2f}"
            hi = f"{steps[k]:.2f}" if k < len(steps) else None
            rng = f"{lo}–{hi}" if hi else f"≥ {lo}"
        mark = MARK_BETTER if lv < 0 else MARK_WORSE if lv > 0 else ""
        cells.append(f'<td style="background:{PALETTE[lv]}">{mark} {escape_html(rng)}</td>')
    stars = ", ".join(f"{m} p &lt; {lvl:g}" for lvl, m in reversed(STAR_LEVELS))
    return ('<div class="legend"><table class="scale" aria-label="colour scale"><tr>'
            + "".join(cells) + "</tr></table>"
            f"<p>Cells: ratio of the model's mean loss to the benchmark's (below 1 = better). Colour: blue "
            f"{MARK_BETTER} = lower loss than the benchmark, orange {MARK_WORSE} = higher loss; the darker the "
            "cell, the larger the difference (equal lightness for equal ratios on both sides, so the scale "
            "reads in grey print; the markers carry the direction). <strong>Bold</strong>: best (lowest) in "
            "its column for that horizon. Marks: the registered pairwise test of equal accuracy against the "
            f"benchmark, \u2193 significantly lower loss, \u2191 significantly higher, {stars}; no mark where "
            "n is too small to test. n: number of forecasts behind the cell.</p></div>")


def decision_frame(verdicts) -> pd.DataFrame:
    """The decision table as shown: one row per candidate × variable × band, typed columns."""
    t = verdicts.table
    if t is None or not len(t):
        return pd.DataFrame()
    cols = ["variable", "band", "model", "verdict", "ratio", "pvalue", "n", "in_best_set", "calibration",
            "beats_every_truth", "leader_stable", "change", "reasons"]
    return t[[c for c in cols if c in t.columns]].reset_index(drop=True)


def _summary(rep, ev, variables, verdicts=None) -> str:
    from harness.verdicts import statements

    body = []
    if verdicts is not None:
        items = "".join(f"<li>{escape_html(s.text)}</li>" for s in statements(verdicts))
        body += [f'<ul class="headline">{items}</ul>',
                 rep.table(FrameTable("decision", f"Decision table against {verdicts.benchmark} "
                                      f"({verdicts.score.upper()}, truth '{verdicts.truth}')",
                                      decision_frame(verdicts), notes=list(verdicts.notes),
                                      pvalue_columns=()))]
    body += [_p("Caution: " + CAUTION, "note"),
            "<h3>What was run</h3>", rep.table(FrameTable("run_summary", "What was run", _run_frame(ev)))]
    versions = manifest_value(ev, "versions", None) or {}
    if versions:
        vf = pd.DataFrame(sorted(versions.items()), columns=["package", "version"]).astype(str)
        body += ["<h3>Package versions</h3>", rep.table(FrameTable("versions", "Package versions", vf))]
    return "\n".join(body)


def _mcs_frame(ev, variables) -> pd.DataFrame | None:
    m = ev.mcs
    if m is None or not len(m):
        return None
    models = model_order(m["model"], ev.benchmark)
    m = m.assign(cell=np.where(m["in_mcs"].astype(bool), "in", "out")
                 + " (p=" + m["pvalue"].map(lambda p: f"{p:.2f}") + ")")
    w = m.pivot_table(index=["variable", "horizon"], columns="model", values="cell", aggfunc="first")
    w = w[[c for c in models if c in w.columns]].reset_index()
    w.columns.name = None
    return _ordered(w, ev, variables)


def _relative(rep, ev, variables) -> str:
    body = [_legend()]
    for t in ratio_tables(ev, scores=("crps", "se_mean"), variables=variables):
        body.append(rep.table(t))
    mf = _mcs_frame(ev, variables)
    if mf is not None:
        a = float(ev.mcs["alpha"].iloc[0]) if "alpha" in ev.mcs else 0.10
        body.append(f"<h3>Model confidence set ({a * 100:g}%, CRPS, full sample)</h3>")
        body.append(rep.table(FrameTable("model_confidence_set", "Model confidence set membership", mf,
                                         notes=["in: the model is in the set of best models at that level; "
                                                "p: its MCS p-value (Hansen, Lunde and Nason 2011)."])))
    return "\n".join(body)


def _tails(rep, ev, variables) -> str:
    tabs = ratio_tables(ev, scores=_role_columns(ev, "tail"), subperiods=("full", "recession"), prefix="tails",
                        title="Tail scores, ratio to the benchmark", variables=variables)
    if not tabs:
        return _p("No tail scores in this evaluation.")
    body = [_p("Left- and right-tail weighted CRPS (quantile-weighted, Gneiting and Ranjan 2011) and the "
               "quantile (pinball) scores at 5%, 10%, 90% and 95%, each as a ratio to the benchmark; the "
               "colour scale and markers are those of the relative scores. Stars appear only where a "
               "test of that score was run.")]
    body += [rep.table(t) for t in tabs]
    return "\n".join(body)


def _over_time(rep, ev, variables) -> str:
    fl = ev.fluctuation
    if fl is None or not len(fl):
        return _p("No fluctuation test in this evaluation (too few paired forecasts).")
    body = [_p("The Giacomini–Rossi fluctuation statistic: the CRPS difference between each model and the "
               "benchmark over a rolling window, standardised; outside the dashed band the two differ "
               "significantly (5%) over that window. Recession quarters are shaded.")]
    for v in variables:
        body.append(rep.figure(plots.fluctuation_figure(ev, v), f"over_time_{v}",
                               f"{v}: rolling relative CRPS with the fluctuation test's critical band",
                               f"Rolling relative CRPS of each model against the benchmark for {v}"))
    g = fl.groupby(["variable", "horizon", "model"], sort=True)
    summ = g.agg(windows=("stat", "size"), min_stat=("stat", "min"), max_stat=("stat", "max"),
                 critical=("critical", "max"), reject=("reject", "max")).reset_index()
    summ["reject"] = summ["reject"].astype(bool)
    body.append(rep.table(FrameTable("fluctuation_summary", "Fluctuation test per model, variable and horizon",
                                     _ordered(summ, ev, variables),
                                     notes=["min_stat, max_stat: range of the rolling statistic; reject: it leaves "
                                            "the band (±critical) in at least one window."])))
    return "\n".join(body)


def _calibration(rep, ev, variables) -> str:
    body = [_p("PIT histograms: a calibrated density gives a flat histogram (dashed line at 1). The table gives "
               "the share of outcomes inside the central 50/70/90% intervals with the Kupiec "
               "(unconditional coverage) and Christoffersen (conditional coverage) p-values, and the "
               "Berkowitz and Rossi–Sekhposyan tests of the PIT; stars mark rejections.")]
    for v in variables:
        body.append(rep.figure(plots.pit_figure(ev, v), f"pit_{v}", f"{v}: PIT histograms by model and horizon",
                               f"PIT histograms for {v}"))
    tabs = coverage_tables(ev, variables=variables)
    body += [rep.table(t) for t in tabs] if tabs else [_p("No calibration tests in this evaluation.")]
    interval = _role_columns(ev, "interval")
    if interval:
        body.append(_p("Interval scores (Gneiting and Raftery 2007, eq. 43) of the central prediction "
                       "intervals: width plus the penalty for outcomes outside, as a ratio to the "
                       "benchmark (below 1 = better); colours and markers as in the relative scores."))
        body += [rep.table(t) for t in ratio_tables(ev, scores=interval, subperiods=("full",),
                                                    prefix="interval", title="Interval score, ratio to the "
                                                    "benchmark", variables=variables)]
    return "\n".join(body)


def _role_columns(ev, role: str) -> list[str]:
    """Loss columns of the evaluation whose declaration has ``role`` (registry order)."""
    return [c for c in ev.table.columns if (col := resolve(c)) is not None and role in col.roles
            and col.is_loss]


def _fans(rep, ev, ledger, fan_truths, variables) -> str:
    if ledger is None:
        return _p("Fan charts need the run's ledger (the stored draws); it was not given.")
    truths = fan_truths or {ev.truth: ev}
    body = [_p("Predictive 5–95% and 25–75% bands and the median of the forecasts made at the most recent "
               "origins, each placed at its target period, against the outcomes under "
               + ", ".join(f"the '{k}' truth" for k in truths) + ". Shaded: recessions.")]
    for v in variables:
        series = {k: plots.truth_series(e, v) for k, e in truths.items()}
        body.append(rep.figure(plots.fan_figure(ledger, v, series, benchmark=ev.benchmark, regimes=ev.regimes),
                               f"fan_{v}", f"{v}: predictive bands at recent origins against the outcomes",
                               f"Fan charts for {v}"))
    return "\n".join(body)


def _sensitivity(rep, ev, sens, variables) -> str:
    if sens is None:
        return _p("Revision sensitivity was not run for this report (run the sensitivity step to see whether "
                  "the verdict depends on the truth chosen or on revised data).")
    body = []
    v = sens.verdicts
    if v is not None and len(v):
        vf = v.copy()
        for flag in ("beats_every_truth", "ranking_stable"):
            if flag in vf:
                # read back from CSV a flag may be text; "False" must not count as true
                vf[flag] = vf[flag].map(lambda x: str(x).strip().lower() in ("true", "1", "yes"))
        body.append(_p("Two separate questions: does each model beat the benchmark under every truth "
                       "(cells counted), and does the leading model stay the same across truths (cells "
                       "where it changes are named)? Then the same against revised data."))
        body.append(rep.table(FrameTable("sensitivity_verdicts", "Revision-sensitivity verdicts", vf)))
    body += [rep.table(t) for t in sensitivity_ratio_tables(sens, ev.benchmark, variables)]
    for attr, name, title, pcols in (
            ("rankings", "sensitivity_rankings", "Model rankings under each truth against the reference truth", ()),
            ("data_table", "sensitivity_data", "Real-time against pseudo-real-time data (CRPS)", ("pvalue",)),
            ("exposure", "revision_exposure", "Revisions between truths next to the forecast errors", ())):
        df = getattr(sens, attr, None)
        if df is not None and len(df):
            body.append(rep.table(FrameTable(name, title, _ordered(df, ev, variables), pvalue_columns=pcols)))
    return "\n".join(body) or _p("The sensitivity run produced no tables.")


def _changes(rep, ev, since) -> str:
    ch = changes(ev, since)
    n = {k: len(v) for k, v in ch.items()}
    body = [_p(f"Since the earlier review ({since.truth} truth, {len(pd.unique(since.forecasts['origin']))} "
               f"origins): {n['new_origins']} new origins, {n['new_releases']} new release batches in the store, "
               f"{n['moved_scores']} CRPS ratios moved by more than {DEFAULT_THRESHOLD:g}, "
               f"{n['ranking_changes']} rankings changed.")]
    titles = {"new_origins": "New forecast origins", "new_releases": "New release batches in the store",
              "moved_scores": f"CRPS ratios to the benchmark that moved by more than {DEFAULT_THRESHOLD:g} (full sample)",
              "ranking_changes": "Rankings by CRPS that changed (full sample)"}
    for k, df in ch.items():
        if len(df):
            body.append(rep.table(FrameTable(f"changes_{k}", titles[k], df)))
        else:
            body.append(f'<p class="empty"><strong>{escape_html(titles[k])}</strong>: none.</p>')
    return "\n".join(body)


def _failures(rep, ev) -> str:
    fails = list(manifest_value(ev, "failures", None) or [])
    body = ["<h3>Failed tasks</h3>"]
    if fails:
        ff = pd.DataFrame(fails)
        for c in ("model", "origin", "error"):
            if c not in ff:
                ff[c] = ""
        body.append(_p(f"{len(ff)} task(s) failed; their forecasts are missing and the cells they touch are "
                       "based on fewer forecasts (see n)."))
        body.append(rep.table(FrameTable("failures", "Failed tasks", ff[["model", "origin", "error"]].astype(str))))
        for f in fails:
            body.append(f"<details><summary>{escape_html(f.get('model', ''))} @ {escape_html(f.get('origin', ''))}: "
                        f"{escape_html(f.get('error', ''))}</summary><pre>{escape_html(f.get('traceback', '') or '')}"
                        "</pre></details>")
    else:
        body.append(_p("None: every task finished."))
    body.append("<h3>Missing truths</h3>")
    miss = ev.missing
    if len(miss):
        g = miss.groupby(["variable", "missing_reason"], sort=True)["target_period"]
        mf = g.agg(count="size", periods=lambda s: ", ".join(map(str, s))).reset_index()
        body.append(_p("Targets whose truth was not available are not scored (never imputed)."))
        body.append(rep.table(FrameTable("missing_truths", "Targets without a truth", mf)))
    else:
        body.append(_p("None: every target has a truth."))
    return "\n".join(body)


@dataclass(frozen=True)
class ReportContext:
    """What a section builder may read: the writer, the evaluation and the optional extras."""

    writer: object
    evaluation: object
    variables: list
    ledger: object = None
    fan_truths: dict | None = None
    sensitivity: object = None
    since: object = None
    verdicts: object = None


@dataclass(frozen=True)
class Section:
    """One section of the report: HTML id, title, builder, and when it is included."""

    id: str
    title: str
    build: Callable[[ReportContext], str]
    include: Callable[[ReportContext], bool] = lambda ctx: True


#: the report's sections, in order: the table of contents, the HTML and the Markdown follow it
SECTIONS: tuple[Section, ...] = (
    Section("summary", "Summary", lambda c: _summary(c.writer, c.evaluation, c.variables, c.verdicts)),
    Section("relative-scores", "Relative scores", lambda c: _relative(c.writer, c.evaluation, c.variables)),
    Section("tails", "Tails", lambda c: _tails(c.writer, c.evaluation, c.variables)),
    Section("over-time", "Performance over time", lambda c: _over_time(c.writer, c.evaluation, c.variables)),
    Section("calibration", "Calibration", lambda c: _calibration(c.writer, c.evaluation, c.variables)),
    Section("fan-charts", "Fan charts",
            lambda c: _fans(c.writer, c.evaluation, c.ledger, c.fan_truths, c.variables)),
    Section("revision-sensitivity", "Revision sensitivity",
            lambda c: _sensitivity(c.writer, c.evaluation, c.sensitivity, c.variables)),
    Section("changes", "What changed since the last review",
            lambda c: _changes(c.writer, c.evaluation, c.since), include=lambda c: c.since is not None),
    Section("failures", "Failures and missing truths", lambda c: _failures(c.writer, c.evaluation)),
    Section("caution", "Caution", lambda c: _p(CAUTION, "caution")),
)
SECTION_IDS: tuple[str, ...] = tuple(s.id for s in SECTIONS)
