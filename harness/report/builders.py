"""Builders of the report's score tables from an evaluation: ratios, coverage, truths side by side.

Labels and how each score is set against the benchmark come from the score registry
(:mod:`harness.scores.registry`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.report.escape import slug
from harness.report.grid import Cell, GridTable, RowGroup
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
    """``h = -1…0`` style label of a horizon block."""
    hs = list(hs)
    return f"h = {hs[0]}" if len(hs) == 1 else f"h = {hs[0]}\u2026{hs[-1]}"


def model_order(models, benchmark: str) -> list[str]:
    """The benchmark first, then the others in their given order."""
    ms = [str(m) for m in pd.unique(pd.Series(list(models), dtype=object))]
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
    present = [str(v) for v in pd.unique(pd.Series(list(present), dtype=object))]
    wanted = [str(v) for v in (variables or [])]
    return [v for v in wanted if v in present] + [v for v in present if v not in wanted]


def _group_label(h: int, rows) -> str:
    """``horizon h``, flagged when every ratio is 1 (all models score the same, e.g. a published target)."""
    vals = np.array([c.value for _, cs in rows for c in cs], dtype=np.float64)
    same = len(rows) > 1 and bool(len(vals)) and bool(np.all(np.isfinite(vals))) and bool(
        np.allclose(vals, 1.0, rtol=0, atol=1e-9))
    return f"horizon {h}" + (" (every model scores the same here)" if same else "")


def _pvalues(evaluation) -> dict:
    t = evaluation.tests
    if t is None or not len(t):
        return {}
    keys = zip(t["model"], t["variable"], t["horizon"].astype(int), t["subperiod"], t["score"], strict=True)
    return dict(zip(keys, t["pvalue"].to_numpy(dtype=float), strict=True))


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
        Cells carry the ratio, the number of forecasts ``n`` and the p-value of the HLN-corrected
        Diebold–Mariano test against the benchmark of the same score (``se_mean`` for RMSE).

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
    pv = _pvalues(evaluation)
    bench = evaluation.benchmark
    lookup = {(m, v, int(h), sp, s): (r, n) for m, v, h, sp, s, r, n in
              zip(rf["model"], rf["variable"], rf["horizon"], rf["subperiod"], rf["score"], rf["ratio"], rf["n"],
                  strict=True)}
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
                        cells.append(Cell(float(r), None if n is None or pd.isna(n) else int(n), p))
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
        for h in sorted(int(x) for x in pd.unique(sub["horizon"])):
            rows = []
            for m in models:
                r = sub[(sub["model"] == m) & (sub["horizon"] == h)]
                cells = []
                for _, kind, c in cols:
                    v = float(r[c].iloc[0]) if len(r) and c in r and pd.notna(r[c].iloc[0]) else np.nan
                    n = int(r["n"].iloc[0]) if len(r) and kind == "rate" else None
                    cells.append(Cell(v, n, v if kind != "rate" else None))
                rows.append((m, cells))
            groups.append(RowGroup(f"horizon {h}", {"variable": str(var), "horizon": h}, rows))
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
