"""The report's sections: ONE ordered list (id, title, page, builder) from which both pages follow.

``page="pack"`` sections make ``report.html``, the meeting pack (decision page, the key score
table per target, the fan chart, the calibration panel: four printed A4 pages at most);
``page="appendix"`` sections make ``appendix.html`` (every other table and figure). The
Markdown file holds both, in this order. Each builder returns the section's HTML body and
registers its tables and figures with the :class:`harness.report.html.ReportWriter` it is given.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import pandas as pd

from harness.report import plots
from harness.report.builders import (
    coverage_panel_table,
    coverage_tables,
    floor_counts,
    key_tables,
    mcs_table,
    model_order,
    ratio_tables,
    sensitivity_ratio_tables,
)
from harness.report.changes import DEFAULT_THRESHOLD, changes
from harness.report.colours import MARK_BETTER, MARK_WORSE, PALETTE, RATIO_STEPS, STAR_LEVELS
from harness.report.decision import DecisionTable
from harness.report.escape import escape_html
from harness.report.grid import FrameTable
from harness.report.inputs import Extras
from harness.report.labels import CAUTION, format_horizons, h_label
from harness.scores import resolve

__all__ = ["CAUTION", "SECTIONS", "SECTION_IDS", "ReportContext", "Section", "page_ids"]


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


def _horizons(ev) -> list[int]:
    return sorted(int(h) for h in pd.unique(ev.forecasts["horizon"]))


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
        ("run directory", str(evaluation.run_dir)),
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
        ("horizons", format_horizons(man_get("horizons") or _horizons(evaluation))),
        ("draws per forecast", man_get("draws", "")),
        ("seed", man_get("seed", "")),
        ("sub-periods", ", ".join(map(str, evaluation.subperiod_names))),
        ("recession dating", evaluation.chronology_source),
        ("tasks", ", ".join(f"{k} {v}" for k, v in counts.items()) if counts else ""),
        ("run created", man_get("created", "")),
    ]
    return pd.DataFrame(rows, columns=["item", "value"]).astype({"value": str})


def pairwise_test_label(evaluation) -> str:
    """The pairwise test the evaluation's spec selects, in words (e.g. "Diebold–Mariano, fixed-m …")."""
    from harness.compare import DM_LABELS
    from harness.compare.registry import comparison_tests

    pair = comparison_tests("pairwise")[0]
    scoring = manifest_value(evaluation, "scoring", None)
    try:
        params = pair.settings((getattr(scoring, "tests", None) or {}).get(pair.name))
    except ValueError:
        params = dict(pair.params)
    return DM_LABELS.get(str(params.get("method")), pair.label)


def _legend(test: str = "the pairwise test") -> str:
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
            f"<p>Cells: ratio of the model's mean loss to the incumbent's (below 1 = better); under it the "
            f"p-value of {escape_html(test)} against the incumbent and n, the forecasts behind the cell. Colour: "
            f"blue {MARK_BETTER} = lower loss, orange {MARK_WORSE} = higher; the darker, the larger the "
            "difference (equal lightness for equal ratios on both sides, so the scale reads in grey print; the "
            "markers carry the direction). <strong>Bold</strong> with a frame: lowest in its column. Marks: "
            f"\u2193 significantly lower loss, \u2191 significantly higher, {stars}; none where n is too "
            "small to test.</p></div>")


# ----------------------------------------------------------------------------- the pack
def _decision(c) -> str:
    from harness.verdicts import statements

    v = c.verdicts
    if v is None:
        return _p("No decision table: the verdict stage was not run.")
    t = DecisionTable.from_verdicts(v, since=c.since is not None, variables=c.variables)
    # the statements first (what the meeting reads aloud), then the table they rest on
    order = {str(x): i for i, x in enumerate(c.variables)}
    said = sorted(statements(v), key=lambda s: order.get(str(s.variable), len(order)))
    items = "".join(f"<li>{escape_html(s.text)}</li>" for s in said)
    body = [f'<ul class="headline">{items}</ul>'] if items else []
    body.append(c.writer.table(t))
    body.extend(_p("Warning: " + w, "note") for w in manifest_value(c.evaluation, "diagnostic_warnings", ()) or ())
    return "\n".join(body)


def _key_scores(c) -> str:
    tabs = key_tables(c.evaluation, variables=c.variables)
    if not tabs:
        return _p("No scored forecasts yet (no published truth for any target).")
    return "\n".join([_legend(pairwise_test_label(c.evaluation))] + [c.writer.table(t) for t in tabs]
                     + [_p("Every sub-period, the RMSE ratio, tails and intervals are in the appendix.", "note")])


#: axis labels of the transformations (the name itself for any other)
_TRANSFORM_LABELS = {"dlog_ann": "annualised growth, %", "dlog": "log growth", "yoy": "growth on a year ago, %",
                     "diff": "change", "level": "level"}


def _units(ev) -> dict:
    specs = manifest_value(ev, "variables", {}) or {}
    return {v: _TRANSFORM_LABELS.get(str(s.get("transform")), str(s.get("transform")))
            for v, s in specs.items() if isinstance(s, dict) and s.get("transform")}


def _fan_chart(c) -> str:
    ev, ledger = c.evaluation, c.ledger
    if ledger is None:
        return _p("The fan chart needs the run's ledger (the stored draws); it was not given.")
    latest = (c.fan_truths or {}).get("latest") or ev
    outcomes = {v: plots.truth_series(latest, v) for v in c.variables}
    ex = c.extras
    png = plots.fan_chart_figure(ledger, c.variables, ex.history, outcomes, benchmark=ev.benchmark,
                                 regimes=ev.regimes, units=_units(ev))
    origin = pd.Timestamp(ledger.draws["origin"].values[-1]).date()
    hist_note = ("black line: each target as published at that origin (its information set)" if ex.history else
                 "history at the origin not shown: " + ex.notes.get("store", "the store was not read"))
    return "\n".join([
        c.writer.figure(png, "fan_chart", f"Fan chart from the latest origin ({origin}): predictive 5–95% and 25–75% "
                        f"bands and median at every horizon, one panel per model, each row on a shared y axis; "
                        f"{hist_note}; markers: outcomes published since (truth '{latest.truth}').",
                        f"Fan chart from the latest origin {origin}"),
        _p("Past predictive bands against outcomes (every origin, shared axes) are in the appendix.", "note")])


def _calibration_panel(c) -> str:
    ev = c.evaluation
    hs = plots.fan_horizons(_horizons(ev))
    body = [c.writer.figure(plots.pit_grid_figure(ev, c.variables, hs), "pit_panel",
                            f"PIT histograms at {', '.join(h_label(h) for h in hs)} (every horizon in the appendix).",
                            "PIT histograms by model, variable and horizon")]
    t = coverage_panel_table(ev, hs, variables=c.variables)
    body.append(c.writer.table(t) if t is not None else _p("No coverage tests in this evaluation."))
    body.append('<p class="to-appendix">Everything else — every sub-period and horizon, tails, intervals, '
                "performance over time, revision sensitivity, nowcasts, pools, diagnostics, failures and "
                'provenance — is in the <a href="appendix.html">appendix</a>.</p>')
    return "\n".join(body)


# ----------------------------------------------------------------------------- the appendix
def _relative(c) -> str:
    body = [_legend()]
    body += [c.writer.table(t) for t in ratio_tables(c.evaluation, scores=("crps", "se_mean"), variables=c.variables)]
    return "\n".join(body)


def _pairwise(c) -> str:
    from harness.report.matrix import pairwise_tables

    tabs = pairwise_tables(c.evaluation, variables=c.variables)
    if not tabs:
        return _p("No pairwise tests: fewer than two models with scored forecasts.")
    return "\n".join(c.writer.table(t) for t in tabs)


def _best_set(c) -> str:
    t = mcs_table(c.evaluation, c.variables)
    return c.writer.table(t) if t is not None else _p("No model confidence set in this evaluation (too few "
                                                      "forecasts or one model).")


def _tails(c) -> str:
    tabs = ratio_tables(c.evaluation, scores=_role_columns(c.evaluation, "tail"), subperiods=("full", "recession"),
                        prefix="tails", title="Tail scores, ratio to the benchmark", variables=c.variables)
    if not tabs:
        return _p("No tail scores in this evaluation.")
    body = [_p("Left- and right-tail weighted CRPS (quantile-weighted, Gneiting and Ranjan 2011) and the "
               "quantile (pinball) scores at 5%, 10%, 90% and 95%, each as a ratio to the benchmark; the "
               "colour scale and markers are those of the relative scores. Marks appear only where a "
               "test of that score was run.")]
    body += [c.writer.table(t) for t in tabs]
    return "\n".join(body)


def _calibration(c) -> str:
    ev, rep = c.evaluation, c.writer
    body = [_p("PIT histograms: a calibrated density gives a flat histogram (dashed line at 1). The tables give "
               "the share of outcomes inside the central 50/70/90% intervals with the Kupiec "
               "(unconditional coverage) and Christoffersen (conditional coverage) p-values, and the "
               "Berkowitz and Rossi–Sekhposyan tests of the PIT; stars mark rejections.")]
    body.append(rep.figure(plots.pit_grid_figure(ev, c.variables, _horizons(ev), rows="variables",
                                                 title="PIT histograms at every horizon (flat = calibrated; "
                                                 "dashed at 1; grey: 95% band under uniformity)"),
                           "pit_all", "PIT histograms by variable, model and horizon", "PIT histograms"))
    tabs = coverage_tables(ev, variables=c.variables)
    body += [rep.table(t) for t in tabs] if tabs else [_p("No calibration tests in this evaluation.")]
    interval = _role_columns(ev, "interval")
    if interval:
        body.append(_p("Interval scores (Gneiting and Raftery 2007, eq. 43) of the central prediction "
                       "intervals: width plus the penalty for outcomes outside, as a ratio to the "
                       "benchmark (below 1 = better); colours and markers as in the relative scores."))
        body += [rep.table(t) for t in ratio_tables(ev, scores=interval, subperiods=("full",),
                                                    prefix="interval", title="Interval score, ratio to the "
                                                    "benchmark", variables=c.variables)]
    fc = floor_counts(ev)
    if len(fc):
        body.append(rep.table(FrameTable(
            "log_score_floor", "Log scores at the density floor", _ordered(fc, ev, c.variables),
            notes=["at_floor: forecasts whose log score is capped because the outcome fell where the draws' "
                   "kernel density is below the floor (1e-10); share = at_floor / n. A mean log score resting "
                   "on many floored forecasts understates the misses."])))
    return "\n".join(body)


def _role_columns(ev, role: str) -> list[str]:
    """Loss columns of the evaluation whose declaration has ``role`` (registry order)."""
    return [col for col in ev.table.columns if (r := resolve(col)) is not None and role in r.roles and r.is_loss]


def _fluctuation_mu(ev) -> float:
    from harness.compare.registry import comparison_tests

    st = [t for t in comparison_tests("stability") if t.name == "fluctuation"]
    if not st:
        return float("nan")
    settings = getattr(getattr(getattr(ev, "manifest", None), "scoring", None), "tests", None) or {}
    return float(st[0].settings(settings.get("fluctuation")).get("mu", float("nan")))


def _over_time(c) -> str:
    ev, rep = c.evaluation, c.writer
    fl = ev.fluctuation
    if fl is None or not len(fl):
        return _p("No fluctuation test in this evaluation (too few paired forecasts).")
    mu = _fluctuation_mu(ev)
    tested = sorted(int(h) for h in pd.unique(fl["horizon"]))
    untested = sorted(set(int(h) for h in pd.unique(ev.forecasts["horizon"])) - set(tested))
    gap = (f" Not drawn: {', '.join(h_label(h) for h in untested)} (too few paired forecasts for the test's "
           "windows)." if untested else "")
    body = [_p("The Giacomini–Rossi fluctuation statistic: the mean CRPS difference between each model and the "
               f"incumbent over a rolling window of a share μ = {mu:g} of the paired forecasts, standardised by "
               "the full-sample long-run standard deviation, plotted at the window's last target period. "
               "Outside the dashed band the two differ significantly (5%) over that window. The axis spans the "
               "whole scored sample (the path begins where the first full window ends); recessions shaded." + gap),
            rep.figure(plots.fluctuation_figure(ev, c.variables, mu=mu), "over_time",
                       f"Fluctuation test path per model (panels) and horizon (lines), window share μ = {mu:g}",
                       "Fluctuation test paths")]
    g = fl.groupby(["variable", "horizon", "model"], sort=True)
    summ = g.agg(windows=("stat", "size"), min_stat=("stat", "min"), max_stat=("stat", "max"),
                 critical=("critical", "max"), reject=("reject", "max")).reset_index()
    summ["reject"] = summ["reject"].astype(bool)
    body.append(rep.table(FrameTable("fluctuation_summary", "Fluctuation test per model, variable and horizon",
                                     _ordered(summ, ev, c.variables),
                                     notes=["min_stat, max_stat: range of the rolling statistic; reject: it leaves "
                                            "the band (±critical) in at least one window."])))
    return "\n".join(body)


def _past_bands(c) -> str:
    ev, ledger = c.evaluation, c.ledger
    if ledger is None:
        return _p("Past predictive bands need the run's ledger (the stored draws); it was not given.")
    hs = [h for h in plots.fan_horizons(_horizons(ev))]
    body = [_p(f"Each origin's predictive 5–95% and 25–75% band and median, placed at its target period, against "
               f"the outcomes under the '{ev.truth}' truth, at {', '.join(h_label(h) for h in hs)}. All panels of "
               "a variable share both axes, so widths compare across models and horizons.")]
    body.append(c.writer.figure(plots.past_bands_figure(ledger, c.variables, {v: plots.truth_series(ev, v) for v in
                                                                          c.variables}, horizons=hs,
                                                        benchmark=ev.benchmark, regimes=ev.regimes, truth=ev.truth),
                                "past_bands", "Past predictive bands against outcomes (every origin, shared axes)",
                                "Past predictive bands against outcomes"))
    return "\n".join(body)


def _nowcasts(c) -> str:
    ev, ledger, ex = c.evaluation, c.ledger, c.extras
    body = []
    if ledger is not None:
        body.append(c.writer.figure(plots.nowcast_path_figure(ledger, ev, c.variables), "nowcast_path",
                                    "Nowcast path: each recent quarter's median forecast at the origins that "
                                    "targeted it, against the outcome", "Nowcast path by quarter"))
    if ex.news:
        body.append(c.writer.figure(plots.news_figure(ex.news), "news", "What moved the nowcast between origins "
                                    "(news decomposition)", "News decomposition bar charts"))
        from harness.models.news import news_by_variable

        for k, f in enumerate(ex.news):
            a = f.attrs
            nb = news_by_variable(f).astype({"kind": str})
            body.append(c.writer.table(FrameTable(
                f"news_{k + 1}", f"News decomposition: {a.get('model', '')}, {a.get('target', '')} "
                f"{a.get('period', '')}, {a.get('origin_old', '')} → {a.get('origin_new', '')}", nb)))
    else:
        body.append(_p("No news decomposition: " + ex.notes.get("news", "not computed for this report") + "."))
    return "\n".join(b for b in body if b)


def _sensitivity(c) -> str:
    from harness.report.readings import revision_reading
    from harness.report.truths import truths_table

    sens, ev, rep = c.sensitivity, c.evaluation, c.writer
    body = []
    if sens is None:
        body.append(_p("Revision sensitivity was not run for this report (run the sensitivity step to see whether "
                       "the verdict depends on the truth chosen or on revised data)."))
    else:
        t = truths_table(sens, ev.benchmark, variables=c.variables)
        if t is not None:
            body.append(rep.table(t))
        v = sens.verdicts
        if v is not None and len(v):
            vf = v.copy()
            for flag in ("beats_every_truth", "ranking_stable"):
                if flag in vf:
                    # read back from CSV a flag may be text; "False" must not count as true
                    vf[flag] = vf[flag].map(lambda x: str(x).strip().lower() in ("true", "1", "yes"))
            items = "".join(f"<li>{escape_html(f'{r.model}: {r.verdict}')}</li>" for r in vf.itertuples()
                            if hasattr(r, "verdict"))
            if items:
                body.append(f'<ul class="headline">{items}</ul>')
            body.append(rep.table(FrameTable("sensitivity_verdicts", "Revision-sensitivity verdicts", vf)))
        body += [rep.table(t) for t in sensitivity_ratio_tables(sens, ev.benchmark, c.variables)]
        for attr, name, title, pcols in (
                ("rankings", "sensitivity_rankings", "Model rankings under each truth against the reference truth",
                 ()),
                ("data_table", "sensitivity_data", "Real-time against pseudo-real-time data (CRPS)", ("pvalue",)),
                ("exposure", "revision_exposure", "Revisions between truths next to the forecast errors", ())):
            df = getattr(sens, attr, None)
            if df is not None and len(df):
                body.append(rep.table(FrameTable(name, title, _ordered(df, ev, c.variables), pvalue_columns=pcols)))
    rv = c.extras.revisions
    if rv is not None and len(rv):
        body.append("<h3>Revision statistics of the targets</h3>")
        body.append("<ul>" + "".join(f"<li>{escape_html(revision_reading(r))}</li>"
                                     for r in rv.to_dict("records")) + "</ul>")
        body.append(rep.table(FrameTable("revision_statistics", "Revision statistics (Mankiw–Shapiro news and noise "
                                         "regressions, Newey–West standard errors)", rv,
                                         pvalue_columns=("mean_p", "noise_p", "news_p"))))
    elif "store" in c.extras.notes:
        body.append(_p("Revision statistics not shown: " + c.extras.notes["store"] + "."))
    return "\n".join(body)


def _pools(c) -> str:
    w = c.extras.pool_weights
    if w is None or not len(w):
        return _p("No pools in this run.")
    body = [c.writer.figure(plots.pool_weights_figure(w), "pool_weights", "Pool weights over the origins "
                            "(stacked; hatched: equal-weight fallback)", "Pool weights over time")]
    last = w[w["origin"] == w["origin"].max()]
    cols = [x for x in ("pool", "origin", "variable", "horizon", "model", "weight", "fallback") if x in last]
    body.append(c.writer.table(FrameTable("pool_weights_latest", "Pool weights at the latest origin",
                                          last[cols].reset_index(drop=True))))
    return "\n".join(body)


def _diagnostics(c) -> str:
    d = c.extras.diagnostics
    if d is None or not len(d):
        return _p("No model diagnostics recorded for this run (BVAR hyperparameters chosen at each origin and "
                  "MCMC diagnostics appear here when the run stores them).")
    warned = [_p("Warning: " + w) for w in manifest_value(c.evaluation, "diagnostic_warnings", ()) or ()]
    g = d.groupby(["model", "name"], sort=False)["value"]
    summ = g.agg(origins="size", first="first", last="last", min="min", max="max").reset_index()
    return "\n".join(warned + [c.writer.figure(plots.diagnostics_figure(d), "diagnostics", "Model diagnostics over the "
                                      "origins", "Model diagnostics over time"),
                      c.writer.table(FrameTable("diagnostics", "Model diagnostics over the origins", summ))])


def _changes(c) -> str:
    ev, since, rep = c.evaluation, c.since, c.writer
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


def _failures(c) -> str:
    ev, rep = c.evaluation, c.writer
    fails = list(manifest_value(ev, "failures", None) or [])
    body = ["<h3>Failed tasks</h3>"]
    if fails:
        ff = pd.DataFrame(fails)
        for col in ("model", "origin", "error"):
            if col not in ff:
                ff[col] = ""
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


def _provenance(c) -> str:
    ev, rep = c.evaluation, c.writer
    body = [rep.table(FrameTable("run_summary", "What was run", _run_frame(ev)))]
    versions = manifest_value(ev, "versions", None) or {}
    if versions:
        vf = pd.DataFrame(sorted(versions.items()), columns=["package", "version"]).astype(str)
        body.append(rep.table(FrameTable("versions", "Package versions", vf)))
    notes = {k: v for k, v in c.extras.notes.items()}
    if notes:
        body.append(rep.table(FrameTable("report_notes", "Parts of the report that could not be read",
                                         pd.DataFrame(sorted(notes.items()), columns=["part", "reason"]))))
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
    extras: Extras = field(default_factory=Extras)


@dataclass(frozen=True)
class Section:
    """One section of the report: HTML id, title, page (``pack`` or ``appendix``), builder, when included."""

    id: str
    title: str
    page: str
    build: Callable[[ReportContext], str]
    include: Callable[[ReportContext], bool] = lambda ctx: True


#: the report's sections, in order: both pages, their tables of contents and the Markdown follow it
SECTIONS: tuple[Section, ...] = (
    Section("decision", "Decision page", "pack", _decision),
    Section("key-scores", "Scores by horizon", "pack", _key_scores),
    Section("fan-chart", "Fan chart from the latest origin", "pack", _fan_chart),
    Section("calibration-panel", "Calibration", "pack", _calibration_panel),
    Section("relative-scores", "Relative scores: every horizon and sub-period", "appendix", _relative),
    Section("pairwise", "Every model against every other", "appendix", _pairwise),
    Section("best-set", "Model confidence set by horizon", "appendix", _best_set),
    Section("tails", "Tails", "appendix", _tails),
    Section("calibration", "Calibration and intervals", "appendix", _calibration),
    Section("over-time", "Performance over time", "appendix", _over_time),
    Section("past-bands", "Past predictive bands against outcomes", "appendix", _past_bands),
    Section("nowcasts", "Nowcasts: the path through each quarter and what moved it", "appendix", _nowcasts),
    Section("revision-sensitivity", "Revision sensitivity", "appendix", _sensitivity),
    Section("pools", "Pools: weights over time", "appendix", _pools),
    Section("diagnostics", "Model diagnostics", "appendix", _diagnostics),
    Section("changes", "What changed since the last review", "appendix", _changes,
            include=lambda c: c.since is not None),
    Section("failures", "Failures and missing truths", "appendix", _failures),
    Section("provenance", "Provenance", "appendix", _provenance),
    # last in the list, on the pack's last page (printed without a page break)
    Section("caution", "Caution", "pack", lambda c: _p(CAUTION, "caution")),
)
SECTION_IDS: tuple[str, ...] = tuple(s.id for s in SECTIONS)


def page_ids(page: str) -> tuple[str, ...]:
    """The section ids of one page (``"pack"`` or ``"appendix"``), in order."""
    return tuple(s.id for s in SECTIONS if s.page == page)

