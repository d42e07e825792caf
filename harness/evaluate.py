"""Scoring a run against a truth, without refitting: the bridge from the ledger to the tables.

``evaluate(run_dir, truth)`` reads the ledger, computes the truth of every target with the same
transformation inside the truth's vintage (:func:`vintages.infoset.truth_values`), scores every
forecast (:func:`harness.scoring.score_all`), assigns sub-periods by target period (full sample,
custom ranges, recession/expansion), aggregates, forms ratios to the benchmark, and runs the
comparison and calibration tests (:mod:`harness.compare`).
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from harness.ledger import Ledger, read_ledger

HEADLINE = ("crps", "se_mean", "log_score")


@dataclass
class Evaluation:
    """Everything a review needs from one run under one truth.

    Attributes
    ----------
    forecasts : DataFrame
        One row per forecast: model, origin, variable, horizon, target_period, truth,
        truth_release, missing_reason, subperiods (list), and every score column.
    table : DataFrame
        Mean scores per model × variable × horizon × subperiod with ``n`` forecasts behind each.
    relative : DataFrame
        ``table``'s loss scores divided by the benchmark's (below 1 = better than the benchmark).
    tests : DataFrame
        Diebold–Mariano with the Harvey–Leybourne–Newbold correction, each model vs the benchmark,
        per variable × horizon × subperiod × score.
    mcs : DataFrame
        Model confidence set membership per variable × horizon (CRPS loss, full sample).
    calibration : DataFrame
        Coverage (Kupiec, Christoffersen) and PIT (Berkowitz, Rossi–Sekhposyan) tests.
    fluctuation : DataFrame
        Rolling relative CRPS of each model vs the benchmark with the fluctuation test's band.
    """

    run_dir: Path
    truth: str
    benchmark: str
    forecasts: pd.DataFrame
    table: pd.DataFrame
    relative: pd.DataFrame
    tests: pd.DataFrame
    mcs: pd.DataFrame
    calibration: pd.DataFrame
    fluctuation: pd.DataFrame
    regimes: pd.Series
    chronology_source: str
    turning_points: pd.DataFrame
    subperiod_names: list[str] = field(default_factory=list)
    manifest: dict = field(default_factory=dict)

    @property
    def missing(self) -> pd.DataFrame:
        """Targets whose truth is not (yet) published, with the reason."""
        f = self.forecasts
        m = f[f["missing_reason"].notna()][["variable", "target_period", "missing_reason"]]
        return m.drop_duplicates().sort_values(["variable", "target_period"]).reset_index(drop=True)


def _truths(cube, rule: str, variables: dict, targets: list[str], periods_by_var: dict, freq: str) -> pd.DataFrame:
    from vintages import truth_values

    rows = []
    for v in targets:
        periods = periods_by_var[v]
        vals, rel, reasons = truth_values(cube, rule, v, variables[v], pd.PeriodIndex(periods, freq=freq), freq=freq)
        rows.append(pd.DataFrame({"variable": v, "target_period": [str(p) for p in periods],
                                  "truth": np.asarray(vals, dtype=np.float64),
                                  "truth_release": pd.to_datetime(np.asarray(rel)),
                                  "missing_reason": [r if r else None for r in reasons]}))
    return pd.concat(rows, ignore_index=True)


def regimes_for(manifest: dict, cube, periods: pd.PeriodIndex) -> tuple[pd.Series, str, pd.DataFrame]:
    """Recession/expansion label per period: from the chronology file, else Harding–Pagan dating."""
    from vintages import harding_pagan, read_chronology, regimes

    scoring = manifest.get("scoring", {})
    if scoring.get("chronology"):
        chron = read_chronology(scoring["chronology"])
        return regimes(chron, periods), f"chronology file {scoring['chronology']}", chron
    var = scoring.get("cycle_variable") or manifest["targets"][0]
    freq = manifest.get("freq", "Q")
    lat = cube.latest(cube.freq_of(var)).sel(variable=var).to_series().dropna()
    if cube.freq_of(var) == "M":
        lat = lat.groupby(lat.index.asfreq("Q")).mean()
    tp = harding_pagan(lat)
    src = f"Harding–Pagan (2002) dating of {var} in the latest vintage"
    return regimes(tp, periods if freq == "Q" else periods.asfreq("Q")), src, tp


def evaluate(run: str | Path | Ledger, truth: str | None = None, *, store=None, cube=None, dm_scores=HEADLINE,
             fluctuation_window: float = 0.3, tests: bool = True) -> Evaluation:
    """Score a run against one truth rule.

    Parameters
    ----------
    run : path or Ledger
        A run directory (or its ledger, already read).
    truth : str, optional
        ``first``, ``release:K``, ``lag:NNND``, ``latest`` or ``asof:YYYY-MM-DD``; default: the
        spec's ``[scoring] truth``.
    store : VintageStore, optional
        Default: the store the run names.
    cube : Cube, optional
        The store's cube, when the caller already built it (scoring one run under several
        truths needs it once).
    tests : bool
        Run the comparison and calibration tests (False: scores and tables only).

    Returns
    -------
    Evaluation
    """
    from harness import compare
    from harness.scoring import aggregate, assign_subperiods, common_sample, relative_to, score_all
    from vintages import VintageStore, parse_truth

    ledger = run if isinstance(run, Ledger) else read_ledger(run)
    man = ledger.manifest
    scoring = man.get("scoring", {})
    truth = truth or scoring.get("truth", "first")
    parse_truth(truth)
    benchmark = scoring.get("benchmark", man["models"][0])
    freq = man.get("freq", "Q")
    if cube is None:
        store = store or VintageStore(man["store"])
        cube = store.cube(variables=list(man["variables"]))

    frame = ledger.frame()
    periods_by_var = {v: sorted(set(frame.loc[frame["variable"] == v, "target_period"]),
                                key=lambda s: pd.Period(s, freq=freq)) for v in man["targets"]}
    truths = _truths(cube, truth, man["variables"], man["targets"], periods_by_var, freq)
    frame = frame.merge(truths, on=["variable", "target_period"], how="left")
    ok = frame["ok"].to_numpy()
    draws = ledger.draws.transpose("model", "origin", "variable", "horizon", "draw").values
    draws = draws.reshape(-1, draws.shape[-1])[ok]
    fc = frame[ok].reset_index(drop=True)
    kw = {}
    if "quantile_levels" in scoring:
        kw["quantile_levels"] = tuple(scoring["quantile_levels"])
    if "coverage_levels" in scoring:
        kw["coverage_levels"] = tuple(scoring["coverage_levels"])
    # draws are stored as float32: compare them with the truth at the same resolution, so that a
    # forecast equal to an already published value scores exactly zero error
    obs = fc["truth"].to_numpy(dtype=np.float64).astype(np.float32).astype(np.float64)
    scores = score_all(obs, draws, **kw)
    for k, v in scores.items():
        fc[k] = v
    all_periods = pd.PeriodIndex(sorted({pd.Period(p, freq=freq) for p in fc["target_period"]}), freq=freq)
    reg, chron_src, tps = regimes_for(man, cube, all_periods)
    sub = {k: tuple(v) for k, v in scoring.get("subperiods", {}).items()}
    fc["_row"] = np.arange(len(fc))
    long = assign_subperiods(fc, sub, reg)
    rows_ = long["_row"].to_numpy()
    order = np.argsort(rows_, kind="stable")
    names_ = long["subperiod"].astype(str).to_numpy()[order]
    cuts = np.searchsorted(rows_[order], np.arange(1, len(fc)))
    fc["subperiods"] = [list(x) for x in np.split(names_, cuts)]
    fc = fc.drop(columns="_row")
    long = long.drop(columns="_row")
    score_cols = [c for c in scores if c != "pit"]
    # compare like with like: a target scored for one model only is left out of every cell
    common = common_sample(long, keys=("variable", "horizon", "origin", "target_period", "subperiod"),
                           score_columns=score_cols)
    table = aggregate(common, ("model", "variable", "horizon"), score_columns=score_cols)
    relative = relative_to(table, benchmark)
    if tests:
        dm = _dm_tests(fc, benchmark, dm_scores, compare)
        mcs = _mcs(fc, compare)
        calib = _calibration(fc, scores, compare)
        fluct = _fluctuation(fc, benchmark, compare, fluctuation_window)
    else:
        dm = mcs = calib = fluct = pd.DataFrame()
    names = ["full"] + list(sub) + ["recession", "expansion"]
    return Evaluation(Path(ledger.run_dir), truth, benchmark, fc, table, relative, dm, mcs, calib, fluct, reg,
                      chron_src, tps, names, man)


def steps_ahead(h) -> int:
    """Steps ahead for the tests' HAC lags: h + 1 periods separate origin and target at horizon h ≥ 0
    (the origin's own period is not yet observed); backcasts count as one step."""
    return max(int(h) + 1, 1)


def _panels(g: pd.DataFrame, scores, benchmark: str):
    """Per (variable, horizon) group: origins, target periods, sub-period sets and loss arrays (origin × model)."""
    g = g.sort_values("origin")
    origins = np.sort(pd.unique(g["origin"]))
    oi = np.searchsorted(origins, g["origin"].to_numpy())
    models = list(pd.unique(g["model"]))
    mi = pd.Index(models).get_indexer(g["model"])
    arrays = {}
    for sc in scores:
        if sc in g:
            arr = np.full((len(origins), len(models)), np.nan)
            arr[oi, mi] = g[sc].to_numpy(dtype=np.float64)
            arrays[sc] = arr
    first = g.drop_duplicates("origin")
    tps = first.set_index("origin").reindex(origins)
    return origins, tps["target_period"].to_numpy(), tps["subperiods"].to_list(), models, arrays


def _dm_tests(fc, benchmark, dm_scores, compare) -> pd.DataFrame:
    rows = []
    subs = [s for s in dict.fromkeys(x for ss in fc["subperiods"] for x in ss)]
    for (var, h), g in fc.groupby(["variable", "horizon"], sort=True):
        origins, _, sublists, models, arrays = _panels(g, dm_scores, benchmark)
        if benchmark not in models:
            continue
        masks = {sname: np.array([sname in (sl if isinstance(sl, list) else []) for sl in sublists]) for sname in subs}
        jb = models.index(benchmark)
        for score, arr in arrays.items():
            for j, model in enumerate(models):
                if model == benchmark:
                    continue
                pair_ok = np.isfinite(arr[:, j]) & np.isfinite(arr[:, jb])
                for sname, mask in masks.items():
                    sel = pair_ok & mask
                    n = int(sel.sum())
                    row = dict(model=model, variable=var, horizon=h, subperiod=sname, score=score, n=n,
                               stat=np.nan, pvalue=np.nan, mean_diff=np.nan)
                    if n >= 4:
                        r = compare.diebold_mariano(arr[sel, j], arr[sel, jb], h=steps_ahead(h))
                        row.update(n=r.n, stat=r.stat, pvalue=r.pvalue, mean_diff=r.mean_diff)
                    rows.append(row)
    return pd.DataFrame(rows)


def _mcs(fc, compare, score="crps", alpha=0.10) -> pd.DataFrame:
    rows = []
    for (var, h), g in fc.groupby(["variable", "horizon"], sort=True):
        wide = g.pivot_table(index="origin", columns="model", values=score).dropna()
        if wide.shape[0] < 10 or wide.shape[1] < 2:
            continue
        res = compare.model_confidence_set(wide, alpha=alpha, block_len=max(steps_ahead(h), 2), n_boot=1000,
                                           seed=20261201)
        pvals = np.asarray(res.pvalues)
        for j, m in enumerate(wide.columns):
            rows.append(dict(variable=var, horizon=h, model=m, in_mcs=m in res.included, pvalue=float(pvals[j]),
                             n=res.n, alpha=alpha))
    return pd.DataFrame(rows)


def _calibration(fc, scores, compare) -> pd.DataFrame:
    rows = []
    cover_cols = [c for c in scores if c.startswith("cover_")]
    for (model, var, h), g in fc.groupby(["model", "variable", "horizon"], sort=True):
        g = g.sort_values("origin")
        pit = g["pit"].to_numpy()
        pit = pit[np.isfinite(pit)]
        row = dict(model=model, variable=var, horizon=h, n=len(pit))
        for c in cover_cols:
            hits = g[c].to_numpy()
            hits = hits[np.isfinite(hits)].astype(int)
            lvl = int(c.split("_")[1]) / 100
            row[f"{c}_rate"] = hits.mean() if len(hits) else np.nan
            if len(hits) >= 8:
                k = compare.kupiec(hits, lvl)
                ch = compare.christoffersen(hits, lvl)
                row[f"{c}_kupiec_p"] = k.p_uc
                row[f"{c}_christoffersen_p"] = ch.p_cc
        if len(pit) >= 8:
            row["berkowitz_p"] = compare.berkowitz(pit).pvalue
            rs = compare.rossi_sekhposyan(pit, h=steps_ahead(h), n_boot=499, seed=20261201)
            row["rs_p"] = rs.ks_pvalue
            row["rs_cvm_p"] = rs.cvm_pvalue
        row["pit_hist"] = ";".join(str(int(x)) for x in compare.pit_histogram(pit, bins=10))
        rows.append(row)
    return pd.DataFrame(rows)


def _fluctuation(fc, benchmark, compare, mu) -> pd.DataFrame:
    rows = []
    for (var, h), g in fc.groupby(["variable", "horizon"], sort=True):
        origins, tps, _, models, arrays = _panels(g, ["crps"], benchmark)
        if benchmark not in models or "crps" not in arrays:
            continue
        arr, jb = arrays["crps"], models.index(benchmark)
        for j, model in enumerate(models):
            if model == benchmark:
                continue
            ok = np.isfinite(arr[:, j]) & np.isfinite(arr[:, jb])
            if ok.sum() < 20:
                continue
            r = compare.fluctuation_test(arr[ok, j], arr[ok, jb], mu=mu, alpha=0.05, h=steps_ahead(h))
            ends = tps[ok][np.asarray(r.window_end, dtype=int)]
            for t, val in zip(ends, r.path, strict=True):
                rows.append(dict(model=model, variable=var, horizon=h, target_period=t, stat=float(val),
                                 critical=float(r.critical_value), reject=bool(r.reject)))
    return pd.DataFrame(rows)


def write_forecasts(ev: Evaluation, path: str | Path) -> Path:
    """Write the per-forecast scores as CSV (sub-periods joined by ';'), atomically."""
    path = Path(path)
    f = ev.forecasts.assign(subperiods=ev.forecasts["subperiods"].map(";".join))
    tmp = path.with_name(path.name + ".tmp")
    f.to_csv(tmp, index=False)
    tmp.replace(path)
    return path


def save(ev: Evaluation, path: str | Path) -> Path:
    """Write the evaluation's tables as CSV files under ``path`` (a directory)."""
    path = Path(path)
    path.mkdir(parents=True, exist_ok=True)
    write_forecasts(ev, path / "forecast_scores.csv")
    for name in ("table", "relative", "tests", "mcs", "calibration", "fluctuation"):
        getattr(ev, name).to_csv(path / f"{name}.csv", index=False)
    (path / "evaluation.json").write_text(json.dumps({"truth": ev.truth, "benchmark": ev.benchmark,
                                                      "chronology": ev.chronology_source,
                                                      "subperiods": ev.subperiod_names}, indent=1) + "\n")
    return path
