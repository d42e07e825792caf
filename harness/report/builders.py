"""Builders of the report's score tables from an evaluation: ratios, coverage, truths side by side.

Labels and how each score is set against the benchmark come from the score registry
(:mod:`harness.scores.registry`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.report.escape import slug
from harness.report.grid import Cell, GridTable, RowGroup
from harness.report.labels import h_label, h_range
from harness.scores import resolve


def horizon_groups(horizons) -> list[list[int]]:
    """Backcasts and the nowcast together, then forecast horizons in blocks of four."""
    hs = sorted(int(h) for h in horizons)
    early = [h for h in hs if h <= 0]
    later = [h for h in hs if h > 0]
    groups = [early] if early else []
    groups += [later[i:i + 4] for i in range(0, len(later), 4)]
    return groups


def horizon_label(hs) -> str:
    """``h = -1…0`` style label of a horizon block (see :func:`harness.report.labels.h_range`)."""
    return h_range(hs)


def model_order(models, benchmark: str) -> list[str]:
    """The benchmark first, then the others in their given order."""
    seq = models.tolist() if hasattr(models, "tolist") else list(models)
    ms = [str(m) for m in dict.fromkeys(seq)]
    return ([benchmark] if benchmark in ms else []) + [m for m in ms if m != benchmark]


def ratio_frame(evaluation, scores, subperiods=None) -> pd.DataFrame:
    """Relative scores in long form: model, variable, horizon, subperiod, score, ratio, n.

    The number is ``evaluation.relative``'s, as the registry sets each score against the
    benchmark (e.g. ``se_mean`` as the RMSE ratio, ``log_score`` as a difference): the report
    shows exactly the numbers of the tables and the terminal.
    """
    rel = evaluation.relative
    key = ["model", "variable", "horizon", "subperiod"]
    out = []
    for s in scores:
        col = resolve(s)
        if col is None or col.relative_name not in rel.columns:
            continue
        r = rel[key + ["n", col.relative_name]].rename(columns={col.relative_name: "ratio"})
        out.append(r.assign(score=s))
    if not out:
        return pd.DataFrame(columns=key + ["n", "ratio", "score"])
    df = pd.concat(out, ignore_index=True)
    if subperiods is not None:
        df = df[df["subperiod"].isin(list(subperiods))]
    return df


def score_labels(scores) -> dict[str, str]:
    """Registry label of the relative number of each score (``{"se_mean": "RMSE ratio"}``)."""
    out = {}
    for s in scores:
        col = resolve(s)
        out[s] = col.relative_label if col is not None else str(s)
    return out


def _var_order(present, variables=None) -> list[str]:
    """``variables`` first (those present), then any other present variable in order of appearance."""
    seq = present.tolist() if hasattr(present, "tolist") else list(present)
    present = [str(v) for v in dict.fromkeys(seq)]
    wanted = [str(v) for v in (variables or [])]
    return [v for v in wanted if v in present] + [v for v in present if v not in wanted]


def _group_label(h: int, rows) -> str:
    """``horizon h``, flagged when every ratio is 1 (all models score the same, e.g. a published target)."""
    vals = np.array([c.value for _, cs in rows for c in cs], dtype=np.float64)
    same = len(rows) > 1 and bool(len(vals)) and bool(np.all(np.isfinite(vals))) and bool(
        np.allclose(vals, 1.0, rtol=0, atol=1e-9))
    return h_label(h) + (" (every model scores the same here)" if same else "")


_PV_CACHE: dict = {}


def _pvalues(evaluation) -> tuple[dict, set]:
    """``{(model, variable, horizon, subperiod, score): p}`` of the tests against the benchmark, and
    the keys whose test was not run for too few forecasts (its "n too small" note); memoised."""
    t = evaluation.tests
    if t is None or not len(t):
        return {}, set()
    if _PV_CACHE.get("tests") is t:
        return _PV_CACHE["pv"], _PV_CACHE["small"]
    # lists, not pandas columns: iterating Arrow-backed text columns element by element is slow
    keys = list(zip(t["model"].tolist(), t["variable"].tolist(), t["horizon"].astype(int).tolist(),
                    t["subperiod"].tolist(), t["score"].tolist(), strict=True))
    pv = dict(zip(keys, t["pvalue"].to_numpy(dtype=float).tolist(), strict=True))
    notes = t["note"].astype(str).tolist() if "note" in t else [""] * len(keys)
    small = {k for k, note in zip(keys, notes, strict=True) if note.startswith("n too small")}
    _PV_CACHE.clear()
    _PV_CACHE.update(tests=t, pv=pv, small=small)
    return pv, small


def _note(small: set, key) -> str:
    return "n too small" if key in small else ""


def ratio_tables(evaluation, *, scores=("crps", "se_mean"), subperiods=None, prefix: str = "relative",
                 title: str = "Ratio to the benchmark", by_horizon_group: bool = True,
                 variables=None) -> list[GridTable]:
    """Ratio tables (benchmark first), one per variable × horizon block.

    Parameters
    ----------
    evaluation : harness.evaluation.Evaluation
    scores : sequence of str
        Loss scores, shown as the registry sets them against the benchmark (``se_mean`` as the
        RMSE ratio).
    subperiods : sequence of str, optional
        Default ``evaluation.subperiod_names`` (those present).
    prefix, title : str
        File stem prefix and caption start.
    by_horizon_group : bool
        One table per block of horizons (see :func:`horizon_groups`) instead of one per variable.
    variables : sequence of str, optional
        Order of the variables (default: order of appearance).

    Returns
    -------
    list of GridTable
        Cells carry the ratio, the number of forecasts ``n`` and the p-value of the registered
        pairwise test (by default the fixed-m Diebold–Mariano test of Coroneo and Iacone 2020) against the benchmark of the same score (``se_mean`` for RMSE).

    References
    ----------
    Diebold, F. X. and Mariano, R. S. (1995). Comparing predictive accuracy. Journal of Business &
    Economic Statistics 13, 253–263. Harvey, D., Leybourne, S. and Newbold, P. (1997). Testing the
    equality of prediction mean squared errors. International Journal of Forecasting 13, 281–291.
    """
    rf = ratio_frame(evaluation, scores)
    if not len(rf):
        return []
    present = list(pd.unique(rf["subperiod"]))
    names = [s for s in (subperiods or evaluation.subperiod_names or present) if s in present]
    names += [s for s in present if s not in names and subperiods is None]
    scores = [s for s in scores if s in set(rf["score"])]
    pv, small = _pvalues(evaluation)
    bench = evaluation.benchmark
    lookup = {(m, v, int(h), sp, s): (r, n) for m, v, h, sp, s, r, n in
              zip(rf["model"].tolist(), rf["variable"].tolist(), rf["horizon"].tolist(), rf["subperiod"].tolist(),
                  rf["score"].tolist(), rf["ratio"].tolist(), rf["n"].tolist(), strict=True)}
    columns = [(s, sp) for s in scores for sp in names]
    tables = []
    order = _var_order(rf["variable"], variables)
    note = (f"Ratio of each model's mean score to the benchmark {bench}'s on the same cell; below 1 = better."
            + (" RMSE ratio = square root of the MSE ratio." if any(
                (resolve(x) is not None and resolve(x).score.versus == "sqrt_ratio") for x in scores) else ""))
    for var in order:
        sub = rf[rf["variable"].astype(str) == var]
        models = model_order(sub["model"], bench)
        blocks = horizon_groups(pd.unique(sub["horizon"])) if by_horizon_group else [
            sorted(int(h) for h in pd.unique(sub["horizon"]))]
        for block in blocks:
            groups = []
            for h in block:
                rows = []
                for m in models:
                    cells = []
                    for s, sp in columns:
                        r, n = lookup.get((m, var, h, sp, s), (np.nan, None))
                        p = None if m == bench else pv.get((m, var, h, sp, s))
                        cells.append(Cell(float(r), None if n is None or pd.isna(n) else int(n), p,
                                          note=_note(small, (m, var, h, sp, s))))
                    rows.append((m, cells))
                groups.append(RowGroup(_group_label(h, rows), {"variable": str(var), "horizon": h}, rows))
            name = slug(prefix, var, f"h{block[0]}" if len(block) == 1 else f"h{block[0]}to{block[-1]}")
            tables.append(GridTable(
                name=name, title=f"{title}: {var}, {horizon_label(block)}", columns=columns,
                column_levels=("score", "subperiod"), row_name="model", groups=groups,
                column_labels=score_labels(scores), group_name="horizon", notes=[note]))
    return tables


def coverage_tables(evaluation, levels=(50, 70, 90), variables=None) -> list[GridTable]:
    """Empirical coverage of central intervals with Kupiec and Christoffersen p-values, and PIT tests.

    Returns
    -------
    list of GridTable
        One per variable; rows models, groups horizons; columns per level (rate, Kupiec p,
        Christoffersen p), then Berkowitz p and Rossi–Sekhposyan p. Stars on a p-value mean the
        test rejects correct calibration at that level.

    References
    ----------
    Kupiec, P. (1995). Techniques for verifying the accuracy of risk measurement models. Journal of
    Derivatives 3, 73–84. Christoffersen, P. (1998). Evaluating interval forecasts. International
    Economic Review 39, 841–862. Berkowitz, J. (2001). Testing density forecasts, with applications
    to risk management. Journal of Business & Economic Statistics 19, 465–474. Rossi, B. and
    Sekhposyan, T. (2019). Alternative tests for correct specification of conditional predictive
    densities. Journal of Econometrics 208, 638–657.
    """
    cal = evaluation.calibration
    if cal is None or not len(cal):
        return []
    cols: list[tuple[str, str, str]] = []
    for lv in levels:
        if f"cover_{lv}_rate" in cal:
            cols += [(f"{lv}% interval", "rate", f"cover_{lv}_rate"),
                     (f"{lv}% interval", "Kupiec p", f"cover_{lv}_kupiec_p"),
                     (f"{lv}% interval", "Christoffersen p", f"cover_{lv}_christoffersen_p")]
    for c, lab in (("berkowitz_p", "Berkowitz p"), ("rs_p", "Rossi–Sekhposyan p")):
        if c in cal:
            cols.append(("PIT", lab, c))
    tables = []
    for var in _var_order(cal["variable"], variables):
        sub = cal[cal["variable"].astype(str) == var]
        models = model_order(sub["model"], evaluation.benchmark)
        groups = []
        look = {(str(m), int(h)): r for m, h, r in zip(sub["model"], sub["horizon"], sub.to_dict("records"),
                                                          strict=True)}
        for h in sorted(int(x) for x in pd.unique(sub["horizon"])):
            rows = []
            for m in models:
                r = look.get((m, h))
                cells = []
                for _, kind, c in cols:
                    x = r.get(c) if r is not None else None
                    v = float(x) if x is not None and pd.notna(x) else np.nan
                    n = int(r["n"]) if r is not None and kind == "rate" else None
                    cells.append(Cell(v, n, v if kind != "rate" else None))
                rows.append((m, cells))
            groups.append(RowGroup(h_label(h), {"variable": str(var), "horizon": h}, rows))
        tables.append(GridTable(
            name=slug("calibration", var), title=f"Interval coverage and PIT tests: {var}",
            columns=[(a, b) for a, b, _ in cols], column_levels=("test", "statistic"), row_name="model",
            groups=groups, best=None, kind="pvalue", group_name="horizon",
            notes=["rate: share of outcomes inside the central interval (nominal level in the header); "
                   "p: p-value of the test of correct coverage / calibration; stars: rejected at "
                   "10% (*), 5% (**), 1% (***)."]))
    return tables


def sensitivity_ratio_tables(sensitivity, benchmark: str, variables=None) -> list[GridTable]:
    """CRPS ratio to the benchmark under each truth (columns), per variable; groups horizons."""
    tt = sensitivity.truth_table
    if tt is None or not len(tt):
        return []
    truths = list(pd.unique(tt["truth"]))
    tables = []
    for var in _var_order(tt["variable"], variables):
        sub = tt[tt["variable"].astype(str) == var]
        models = model_order(sub["model"], benchmark)
        lookup = {(m, int(h), t): (r, n) for m, h, t, r, n in
                  zip(sub["model"], sub["horizon"], sub["truth"], sub["ratio"], sub["n"], strict=True)}
        groups = []
        for h in sorted(int(x) for x in pd.unique(sub["horizon"])):
            rows = []
            for m in models:
                cells = []
                for t in truths:
                    r, n = lookup.get((m, h, t), (np.nan, None))
                    cells.append(Cell(float(r), None if n is None or pd.isna(n) else int(n)))
                rows.append((m, cells))
            groups.append(RowGroup(_group_label(h, rows), {"variable": str(var), "horizon": h}, rows))
        tables.append(GridTable(
            name=slug("sensitivity_truths", var), title=f"CRPS ratio to the benchmark under each truth: {var}",
            columns=[("CRPS ratio", t) for t in truths], column_levels=("score", "truth"), row_name="model",
            groups=groups, group_name="horizon",
            notes=["The same forecasts scored against different truths (full sample); below 1 = better "
                   "than the benchmark."]))
    return tables


def key_tables(evaluation, *, score: str = "crps", subperiod: str = "full", variables=None) -> list[GridTable]:
    """The pack's score table per target: rows models (incumbent first), columns every horizon.

    Cells: the registry's relative number of ``score`` (CRPS ratio) on ``subperiod``, with the
    p-value of the registered pairwise test against the incumbent and n printed in the cell.
    """
    col = resolve(score)
    rf = ratio_frame(evaluation, [score], [subperiod])
    if not len(rf) or col is None:
        return []
    pv, small = _pvalues(evaluation)
    bench = evaluation.benchmark
    tables = []
    for var in _var_order(rf["variable"], variables):
        sub = rf[rf["variable"].astype(str) == var]
        models = model_order(sub["model"], bench)
        hs = sorted(int(h) for h in pd.unique(sub["horizon"]))
        look = {(m, int(h)): (r, n) for m, h, r, n in zip(sub["model"], sub["horizon"], sub["ratio"], sub["n"],
                                                        strict=True)}
        rows = []
        for m in models:
            cells = []
            for h in hs:
                r, n = look.get((m, h), (np.nan, None))
                p = None if m == bench else pv.get((m, var, h, subperiod, score))
                cells.append(Cell(float(r), None if n is None or pd.isna(n) else int(n), p,
                                  note=_note(small, (m, var, h, subperiod, score))))
            rows.append((m, cells))
        key = {"variable": str(var), "subperiod": subperiod, "score": score}
        tables.append(GridTable(
            name=slug("key", var) if subperiod == "full" else slug("key", var, subperiod),
            title=f"{var}: {col.relative_label} to {bench}, every horizon "
            f"({'full sample' if subperiod == 'full' else 'sub-period ' + subperiod})", columns=[(h,) for h in hs],
            column_levels=("horizon",), row_name="model", groups=[RowGroup("", key, rows)],
            column_labels={h: h_label(h) for h in hs}, digits=2,
            notes=[f"Below 1 = lower {col.label} than {bench}. Marks: the pairwise test against {bench}, "
                   "\u2193 significantly lower loss, \u2191 higher (* 10%, ** 5%, *** 1%); p and n in each "
                   "cell; the lowest at each horizon is bold in the report, marked < in text."]))
    return tables


def mcs_table(evaluation, variables=None) -> GridTable | None:
    """Model-confidence-set membership per variable and horizon, typed (``in_set`` bool, ``pvalue`` float).

    References
    ----------
    Hansen, P. R., Lunde, A. and Nason, J. M. (2011). The model confidence set. Econometrica 79,
    453–497.
    """
    m = evaluation.mcs
    if m is None or not len(m):
        return None
    models = model_order(m["model"], evaluation.benchmark)
    groups = []
    for var in _var_order(m["variable"], variables):
        sub = m[m["variable"].astype(str) == var]
        hs = sorted(int(h) for h in pd.unique(m["horizon"]))
        look = {(str(a), int(h)): (bool(i), float(p), int(n)) for a, h, i, p, n in
                zip(sub["model"], sub["horizon"], sub["in_mcs"], sub["pvalue"], sub["n"], strict=True)}
        rows = []
        for mod in models:
            cells = []
            for h in hs:
                f = look.get((mod, h))
                cells.append(Cell(f[1], f[2], None, flag=f[0]) if f else Cell(np.nan, None, None, flag=None))
            rows.append((mod, cells))
        groups.append(RowGroup(str(var), {"variable": str(var)}, rows))
    hs = sorted(int(h) for h in pd.unique(m["horizon"]))
    a = float(m["alpha"].iloc[0]) if "alpha" in m and len(m) else 0.10
    return GridTable(name="model_confidence_set", title=f"Model confidence set ({100 * (1 - a):g}%, CRPS, full "
                     "sample): membership per horizon", columns=[(h,) for h in hs], column_levels=("horizon",),
                     row_name="model", groups=groups, column_labels={h: h_label(h) for h in hs}, best=None,
                     kind="set", group_name="variable",
                     notes=["in: the model is in the set of best models at that level; p: its MCS p-value; "
                            "n: forecasts behind the test (Hansen, Lunde and Nason 2011)."])


def coverage_panel_table(evaluation, horizons, *, level: int = 90, variables=None) -> GridTable | None:
    """The pack's coverage summary: the central ``level``% interval's hit rate per model, variable and horizon.

    Cells: the share of outcomes inside the interval, the Kupiec test's p-value (stars: correct
    coverage rejected) and n.

    References
    ----------
    Kupiec, P. (1995). Techniques for verifying the accuracy of risk measurement models. Journal of
    Derivatives 3, 73–84.
    """
    cal = evaluation.calibration
    rate, pcol = f"cover_{level}_rate", f"cover_{level}_kupiec_p"
    if cal is None or not len(cal) or rate not in cal:
        return None
    hs = [int(h) for h in horizons]
    vs = _var_order(cal["variable"], variables)
    models = model_order(cal["model"], evaluation.benchmark)
    look = {(str(m), str(v), int(h)): r for m, v, h, r in
            zip(cal["model"], cal["variable"], cal["horizon"], cal.to_dict("records"), strict=True)}
    cols = [(v, h) for v in vs for h in hs if any((m, v, h) in look for m in models)]
    rows = []
    for m in models:
        cells = []
        for v, h in cols:
            r = look.get((m, v, h))
            if r is None:
                cells.append(Cell())
                continue
            p = r.get(pcol)
            cells.append(Cell(float(r[rate]), int(r["n"]), None if p is None or pd.isna(p) else float(p)))
        rows.append((m, cells))
    return GridTable(name="coverage_panel", title=f"Central {level}% interval: share of outcomes inside "
                     f"(nominal {level / 100:.2f})", columns=cols, column_levels=("variable", "horizon"),
                     row_name="model", groups=[RowGroup("", {}, rows)], best=None, kind="coverage", digits=2,
                     column_labels={h: h_label(h) for h in hs},
                     notes=["p: Kupiec (1995) test of correct unconditional coverage; stars mark a rejection "
                            "(* 10%, ** 5%, *** 1%); n: forecasts."])


def floor_counts(evaluation, floor: float | None = None) -> pd.DataFrame:
    """How many log scores hit the density floor, per model × variable × horizon (typed).

    A log score at ``-log(floor)`` means the outcome fell where the kernel density of the draws
    is below the floor: the score is capped there (:mod:`harness.scores.density`), so a mean log
    score resting on many floored forecasts understates how badly the model missed.
    """
    from harness.scores.registry import DEFAULT_DENSITY_FLOOR

    f = evaluation.forecasts
    if "log_score" not in f:
        return pd.DataFrame(columns=["model", "variable", "horizon", "n", "at_floor", "share"])
    cap = -np.log(floor if floor is not None else DEFAULT_DENSITY_FLOOR)
    x = f["log_score"].to_numpy(dtype=float)
    ok = np.isfinite(x)
    g = pd.DataFrame({"model": f["model"].astype(str), "variable": f["variable"].astype(str),
                      "horizon": f["horizon"].astype(int), "scored": ok,
                      "at_floor": ok & (x >= cap * (1 - 1e-9))})
    out = g.groupby(["model", "variable", "horizon"], sort=False).agg(n=("scored", "sum"),
                                                                      at_floor=("at_floor", "sum")).reset_index()
    out["n"] = out["n"].astype(int)
    out["at_floor"] = out["at_floor"].astype(int)
    out["share"] = np.where(out["n"] > 0, out["at_floor"] / out["n"].clip(lower=1), np.nan)
    return out
