"""The review report: one self-contained HTML file plus every table as Markdown, LaTeX and CSV.

The HTML needs nothing but a browser: CSS inline, figures embedded as base64 PNG, no script, no
network. It prints: each section starts a new page, colours are kept, every colour has a text
twin (numbers, ▼/▲ direction markers, stars), and the number of forecasts behind each cell is
printed under it.

Layout of ``out_dir``::

    report.html
    tables/<name>.md|.tex|.csv     every table of the report
    figures/<name>.png             every figure of the report (also embedded in the HTML)
"""

from __future__ import annotations

import base64
import datetime as _dt
import re
from pathlib import Path
from string import Template

import numpy as np
import pandas as pd

from harness.report import plots
from harness.report.changes import DEFAULT_THRESHOLD, changes
from harness.report.tables import (
    MARK_BETTER,
    MARK_WORSE,
    PALETTE,
    RATIO_STEPS,
    SCORE_LABELS,
    STAR_LEVELS,
    FrameTable,
    GridTable,
    coverage_tables,
    escape_html,
    model_order,
    ratio_tables,
    sensitivity_ratio_tables,
    slug,
)

SECTION_IDS = ("summary", "relative-scores", "tails", "over-time", "calibration", "fan-charts",
               "revision-sensitivity", "changes", "failures", "caution")
TAIL_SCORES = ("crps_left", "crps_right", "qs_05", "qs_10", "qs_90", "qs_95")
CAUTION = ("These results describe how the models would have performed in the past, on the sample, "
           "truth and settings chosen for this backtest; they do not promise the same performance in "
           "the future. Whether to adopt, keep or drop a model is for the user's own review and "
           "governance to decide.")

_TEMPLATE_DIR = Path(__file__).with_name("templates")


def _template(name: str) -> Template:
    return Template((_TEMPLATE_DIR / name).read_text(encoding="utf-8"))


# --------------------------------------------------------------------------- plain-words verdicts
def format_horizons(hs) -> str:
    """Horizons as compact runs: ``[-1, 0, 1, 3]`` → ``"-1 to 1, 3"``."""
    hs = sorted({int(h) for h in hs})
    if not hs:
        return "none"
    runs, start, prev = [], hs[0], hs[0]
    for h in hs[1:] + [None]:
        if h is not None and h == prev + 1:
            prev = h
            continue
        runs.append(str(start) if start == prev else f"{start}, {prev}" if prev == start + 1 else f"{start} to {prev}")
        if h is not None:
            start = prev = h
    return ", ".join(runs)


def _best_by_horizon(table: pd.DataFrame, variable, subperiod: str, score: str) -> dict[int, str | None]:
    """The model with the lowest mean score per horizon; ``None`` where several share the minimum."""
    t = table[(table["variable"] == variable) & (table["subperiod"] == subperiod)]
    t = t[np.isfinite(t[score].to_numpy(dtype=float))] if score in t else t.iloc[0:0]
    if not len(t):
        return {}
    out: dict[int, str | None] = {}
    for h, g in t.groupby("horizon", sort=True):
        v = g[score].to_numpy(dtype=float)
        lo = v.min()
        # Equal to within rounding (e.g. every model reproduces an already published value).
        tied = np.isclose(v, lo, rtol=1e-9, atol=1e-12)
        out[int(h)] = str(g["model"].to_numpy()[np.argmin(v)]) if tied.sum() == 1 else None
    return out


def headline(evaluation, variable, *, alpha: float = 0.10, score: str = "crps") -> str:
    """A plain-words verdict for one target variable, derived from the evaluation's tables.

    The leader is the model with the lowest mean ``score`` (full sample) at the most horizons
    (ties: lower mean ratio to the benchmark). The sentence then says at how many of those
    horizons it beats the benchmark significantly (HLN-corrected Diebold–Mariano test at level
    ``alpha``, better = negative mean loss difference), whether it stays best in recessions, and
    where the model confidence set holds it alone.

    Parameters
    ----------
    evaluation : harness.evaluation.Evaluation
    variable : str
    alpha : float
        Significance level of the test.
    score : str
        A loss score column of ``evaluation.table``.

    Returns
    -------
    str
        Plain text (not escaped).

    References
    ----------
    Harvey, D., Leybourne, S. and Newbold, P. (1997). Testing the equality of prediction mean
    squared errors. International Journal of Forecasting 13, 281–291. Hansen, P. R., Lunde, A.
    and Nason, J. M. (2011). The model confidence set. Econometrica 79, 453–497.
    """
    label = _score_label(score)
    best = _best_by_horizon(evaluation.table, variable, "full", score)
    if not best:
        return f"{variable}: no scored forecasts yet (no published truth for any target)."
    bench = evaluation.benchmark
    ties = sorted(h for h, m in best.items() if m is None)
    best = {h: m for h, m in best.items() if m is not None}
    if not best:
        return f"{variable}: all models have the same {label} at every horizon (h = {format_horizons(ties)})."
    counts = pd.Series(list(best.values())).value_counts()
    top = counts[counts == counts.max()].index.tolist()
    if len(top) > 1:
        rel = evaluation.relative
        rel = rel[(rel["variable"] == variable) & (rel["subperiod"] == "full")] if score in rel else rel.iloc[0:0]
        means = rel.groupby("model")[score].mean() if len(rel) else pd.Series(dtype=float)
        top = sorted(top, key=lambda m: (means.get(m, np.inf), m))
    leader = top[0]
    wins = sorted(h for h, m in best.items() if m == leader)
    n_h = len(best)
    parts = [f"{variable}: {leader} has the lowest {label} at {len(wins)} of {n_h} horizons "
             f"(h = {format_horizons(wins)}"
             + (f"; all models tie at h = {format_horizons(ties)})" if ties else ")")]
    tests = evaluation.tests
    pct = f"{alpha * 100:g}%"
    if tests is not None and len(tests):
        t = tests[(tests["variable"] == variable) & (tests["score"] == score) & (tests["subperiod"] == "full")]
        sig = t[(t["pvalue"] < alpha) & (t["mean_diff"] < 0)]
        if leader != bench:
            hs = sorted(sig.loc[sig["model"] == leader, "horizon"].astype(int))
            parts.append(f"significantly better than {bench} (HLN-DM, {pct}) at "
                         + (f"{len(hs)} horizon{'s' if len(hs) > 1 else ''} (h = {format_horizons(hs)})" if hs
                            else "no horizon"))
        else:
            if not len(sig):
                parts.append(f"no model beats {bench} significantly (HLN-DM, {pct}) at any horizon")
            else:
                by = sig.groupby("model")["horizon"].apply(lambda s: sorted(s.astype(int)))
                parts.append("; ".join(f"{m} beats it significantly (HLN-DM, {pct}) at h = {format_horizons(hs)}"
                                       for m, hs in by.items()))
    rec = _best_by_horizon(evaluation.table, variable, "recession", score)
    if rec:
        t = evaluation.table
        nr = t.loc[(t["variable"] == variable) & (t["subperiod"] == "recession") & (t["model"] == leader)
                   & t["horizon"].isin(wins), "n"]
        size = (f" (recession sample: {int(nr.min())}–{int(nr.max())} forecasts per horizon)"
                if len(nr) and nr.min() != nr.max() else
                f" (recession sample: {int(nr.min())} forecasts per horizon)" if len(nr) else "")
        stays = sorted(h for h in wins if rec.get(h) == leader)
        if stays:
            parts.append(f"it stays best in recessions at h = {format_horizons(stays)}{size}")
        else:
            parts.append(f"it is not the best in recessions at any of those horizons{size}")
    mcs = evaluation.mcs
    if mcs is not None and len(mcs):
        mv = mcs[mcs["variable"] == variable]
        inside = mv[mv["in_mcs"].astype(bool)]
        sizes = inside.groupby("horizon")["model"].agg(list)
        alone = sorted(int(h) for h, ms in sizes.items() if ms == [leader])
        if alone:
            a = float(mv["alpha"].iloc[0]) if "alpha" in mv else alpha
            parts.append(f"the {a * 100:g}% model confidence set holds {leader} alone at h = {format_horizons(alone)}")
    return "; ".join(parts) + "."


def _score_label(score: str) -> str:
    return SCORE_LABELS.get(score, score)


# --------------------------------------------------------------------------- the builder
class _Names:
    """Unique file stems / HTML ids (two variables may slug to the same text)."""

    def __init__(self):
        self.used: set[str] = set()

    def __call__(self, stem: str) -> str:
        s, k = stem, 2
        while s in self.used:
            s, k = f"{stem}-{k}", k + 1
        self.used.add(s)
        return s


class _Report:
    def __init__(self, out_dir: Path):
        self.out = Path(out_dir)
        self.tables_dir = self.out / "tables"
        self.fig_dir = self.out / "figures"
        self.paths: dict[str, Path] = {}
        self.names = _Names()

    def table(self, t: GridTable | FrameTable) -> str:
        t.name = self.names(t.name)
        for k, p in t.write(self.tables_dir).items():
            self.paths[f"tables/{k}"] = p
        return t.to_html()

    def figure(self, png: bytes | None, stem: str, caption: str, alt: str) -> str:
        if png is None:
            return ""
        name = self.names(slug(stem))
        self.fig_dir.mkdir(parents=True, exist_ok=True)
        p = self.fig_dir / f"{name}.png"
        p.write_bytes(png)
        self.paths[f"figures/{name}.png"] = p
        b64 = base64.b64encode(png).decode("ascii")
        return (f'<figure id="fig-{escape_html(name)}"><img src="data:image/png;base64,{b64}" '
                f'alt="{escape_html(alt)}"><figcaption>{escape_html(caption)}</figcaption></figure>')


def _section(sid: str, title: str, body: str) -> str:
    return f'<section id="{sid}">\n<h2>{escape_html(title)}</h2>\n{body}\n</section>'


def _p(text: str, cls: str | None = None) -> str:
    c = f' class="{cls}"' if cls else ""
    return f"<p{c}>{escape_html(text)}</p>"


def _variables(evaluation) -> list[str]:
    targets = (evaluation.manifest or {}).get("targets")
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
    man = evaluation.manifest or {}
    origins = man.get("origins") or [str(pd.Timestamp(o).date()) for o in sorted(pd.unique(
        evaluation.forecasts["origin"]))]
    specs = man.get("model_specs", {})
    models = man.get("models") or list(pd.unique(evaluation.forecasts["model"]))
    counts = man.get("counts", {})
    rows = [
        ("run", man.get("name", "")),
        ("spec", man.get("spec", "")),
        ("spec hash", man.get("spec_hash", "")),
        ("store", man.get("store", "")),
        ("store checksum", man.get("store_checksum", "")),
        ("store batches", man.get("store_batches", "")),
        ("mode", man.get("mode", "")),
        ("truth", evaluation.truth),
        ("benchmark", evaluation.benchmark),
        ("origins", f"{len(origins)} ({origins[0]} to {origins[-1]})" if origins else "0"),
        ("models", ", ".join(f"{m} ({specs[m]['type']})" if m in specs and isinstance(specs[m], dict)
                             and "type" in specs[m] else str(m) for m in models)),
        ("targets", ", ".join(map(str, man.get("targets", _variables(evaluation))))),
        ("horizons", format_horizons(man.get("horizons") or pd.unique(evaluation.forecasts["horizon"]))),
        ("draws per forecast", man.get("draws", "")),
        ("seed", man.get("seed", "")),
        ("sub-periods", ", ".join(map(str, evaluation.subperiod_names))),
        ("recession dating", evaluation.chronology_source),
        ("tasks", ", ".join(f"{k} {v}" for k, v in counts.items()) if counts else ""),
        ("run created", man.get("created", "")),
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
            "its column for that horizon. Stars: HLN-corrected Diebold–Mariano test of equal accuracy "
            f"against the benchmark, {stars}. n: number of forecasts behind the cell.</p></div>")


def _summary(rep: _Report, ev, variables) -> str:
    items = "".join(f"<li>{escape_html(headline(ev, v))}</li>" for v in variables)
    body = [f'<ul class="headline">{items}</ul>',
            _p("Each verdict is derived from the tables below: lowest mean CRPS over the full sample per "
               "horizon, HLN-DM tests against the benchmark, recession sub-sample, model confidence set.",
               "note"),
            _p("Caution: " + CAUTION, "note"),
            "<h3>What was run</h3>", rep.table(FrameTable("run_summary", "What was run", _run_frame(ev)))]
    versions = (ev.manifest or {}).get("versions") or {}
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


def _relative(rep: _Report, ev, variables) -> str:
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


def _tails(rep: _Report, ev, variables) -> str:
    tabs = ratio_tables(ev, scores=TAIL_SCORES, subperiods=("full", "recession"), prefix="tails",
                        title="Tail scores, ratio to the benchmark", variables=variables)
    if not tabs:
        return _p("No tail scores in this evaluation.")
    body = [_p("Left- and right-tail weighted CRPS (quantile-weighted, Gneiting and Ranjan 2011) and the "
               "quantile (pinball) scores at 5%, 10%, 90% and 95%, each as a ratio to the benchmark; the "
               "colour scale and markers are those of the relative scores. Stars appear only where a "
               "test of that score was run.")]
    body += [rep.table(t) for t in tabs]
    return "\n".join(body)


def _over_time(rep: _Report, ev, variables) -> str:
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


def _calibration(rep: _Report, ev, variables) -> str:
    body = [_p("PIT histograms: a calibrated density gives a flat histogram (dashed line at 1). The table gives "
               "the share of outcomes inside the central 50/70/90% intervals with the Kupiec "
               "(unconditional coverage) and Christoffersen (conditional coverage) p-values, and the "
               "Berkowitz and Rossi–Sekhposyan tests of the PIT; stars mark rejections.")]
    for v in variables:
        body.append(rep.figure(plots.pit_figure(ev, v), f"pit_{v}", f"{v}: PIT histograms by model and horizon",
                               f"PIT histograms for {v}"))
    tabs = coverage_tables(ev, variables=variables)
    body += [rep.table(t) for t in tabs] if tabs else [_p("No calibration tests in this evaluation.")]
    return "\n".join(body)


def _fans(rep: _Report, ev, ledger, fan_truths, variables) -> str:
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


def _sensitivity(rep: _Report, ev, sens, variables) -> str:
    if sens is None:
        return _p("Revision sensitivity was not run for this report (run the sensitivity step to see whether "
                  "the verdict depends on the truth chosen or on revised data).")
    body = []
    v = sens.verdicts
    if v is not None and len(v):
        vf = v.copy()
        if "robust" in vf:
            # Read back from CSV the flag may be text; "False" must not count as true.
            vf["robust"] = vf["robust"].map(lambda x: str(x).strip().lower() in ("true", "1", "yes"))
        body.append(_p("Does the verdict against the benchmark survive the choice of truth and the use of "
                       "real-time rather than revised data? ROBUST: the same under every check."))
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


def _changes(rep: _Report, ev, since) -> str:
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


def _failures(rep: _Report, ev) -> str:
    fails = (ev.manifest or {}).get("failures") or []
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


def build_report(evaluation, out_dir, *, sensitivity=None, ledger=None, fan_truths: dict | None = None,
                 since=None, title: str | None = None) -> dict[str, Path]:
    """Write the review report for one evaluated run.

    Parameters
    ----------
    evaluation : harness.evaluation.Evaluation
        The run scored under one truth.
    out_dir : path-like
        Created if needed; receives ``report.html``, ``tables/`` and ``figures/``.
    sensitivity : harness.evaluation.sensitivity.Sensitivity, optional
        Truth and data sensitivity tables; without it the section says it was not run.
    ledger : harness.backtest.Ledger, optional
        The run's draws, for the fan charts.
    fan_truths : dict of str to Evaluation, optional
        Outcomes drawn on the fan charts (e.g. ``{"first": ev_first, "latest": ev_latest}``);
        default the evaluation's own truth.
    since : harness.evaluation.Evaluation, optional
        The evaluation shown at the last review; adds the "What changed" section.
    title : str, optional
        Page title (default from the run's name).

    Returns
    -------
    dict of str to Path
        ``"report.html"`` and every ``"tables/<file>"`` and ``"figures/<file>"`` written.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    rep = _Report(out)
    ev = evaluation
    variables = _variables(ev)
    man = ev.manifest or {}
    title = title or f"Model review: {man.get('name') or ev.run_dir}"
    sections = [
        ("summary", "Summary", _summary(rep, ev, variables)),
        ("relative-scores", "Relative scores", _relative(rep, ev, variables)),
        ("tails", "Tails", _tails(rep, ev, variables)),
        ("over-time", "Performance over time", _over_time(rep, ev, variables)),
        ("calibration", "Calibration", _calibration(rep, ev, variables)),
        ("fan-charts", "Fan charts", _fans(rep, ev, ledger, fan_truths, variables)),
        ("revision-sensitivity", "Revision sensitivity", _sensitivity(rep, ev, sensitivity, variables)),
    ]
    if since is not None:
        sections.append(("changes", "What changed since the last review", _changes(rep, ev, since)))
    sections.append(("failures", "Failures and missing truths", _failures(rep, ev)))
    sections.append(("caution", "Caution", _p(CAUTION, "caution")))
    nav = "".join(f'<li><a href="#{sid}">{escape_html(t)}</a></li>' for sid, t, _ in sections)
    now = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    page = _template("report.html").substitute(
        title=escape_html(title),
        css=(_TEMPLATE_DIR / "report.css").read_text(encoding="utf-8"),
        subtitle=escape_html(f"Truth: {ev.truth}; benchmark: {ev.benchmark}; generated {now}."),
        nav=nav,
        sections="\n".join(_section(sid, t, body) for sid, t, body in sections),
    )
    # Defence in depth: the page must not reach out to the network.
    # Data text is escaped (no "<" survives), so only the page's own tags can match.
    if re.search(r"""<[^>]*\s(?:src|href)\s*=\s*["']?\s*(?:https?:)?//""", page, flags=re.I):
        raise RuntimeError("build_report: the page references an external resource; expected a "
                           "self-contained file (images as data: URIs)")
    p = out / "report.html"
    p.write_text(page, encoding="utf-8")
    return {"report.html": p, **rep.paths}
