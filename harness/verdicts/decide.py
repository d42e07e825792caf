"""The verdict stage: scores, tests, the model confidence set, calibration and sensitivity → one decision table.

One row per candidate × target variable × horizon band, set against the incumbent (the
evaluation's benchmark, which ``--benchmark`` chooses without refitting):

* **ratio** — the candidate's mean score over the band's forecasts divided by the incumbent's
  (forecast-weighted means of the evaluation's cell table, so it can be read off that table);
* **test** — the registered pairwise test (:mod:`harness.compare.registry`) on the per-origin
  band-average loss differential, with the band's longest horizon as its horizon; below the
  test's minimum sample the cell says "n too small" and gets no verdict of significance;
* **best set** — membership of the model confidence set run on the band-average losses;
* **calibration** — the PIT tests valid at each horizon of the band (Bonferroni over the band's
  horizons and tests at 5 %);
* **truths** — whether it beats the incumbent under every truth of the sensitivity check, and
  whether the band's leader stays the same across truths;
* **change** — the ratio's move since the last review (with an earlier evaluation).

The verdict is one of three words (:data:`WORDS`): ``better`` (significantly lower loss, in the
best set, calibration not rejected), ``worse`` (significantly higher loss) or ``no evidence``
(anything else, including samples too small to test). Each reason printed beside it is a
:class:`Claim` holding the number, the table it comes from and the cell's keys, so every sentence
can be checked against the tables (the tests do).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from harness.verdicts.bands import Band, horizon_bands

BETTER, UNPROVEN, WORSE = "better", "no evidence", "worse"
#: the three verdict words, in the order of the decision page
WORDS: tuple[str, ...] = (BETTER, UNPROVEN, WORSE)
#: level of the PIT tests behind the calibration flag (Bonferroni over a band's tests)
CALIBRATION_LEVEL = 0.05

__all__ = ["BETTER", "UNPROVEN", "WORDS", "WORSE", "Claim", "Verdicts", "decide"]


@dataclass(frozen=True)
class Claim:
    """One checkable fact behind a verdict: what, its value, the table it is read from, and where."""

    kind: str
    value: Any
    source: str
    key: dict = field(default_factory=dict)


@dataclass
class Verdicts:
    """The decision table and the tables its claims come from.

    Attributes
    ----------
    table : DataFrame
        One row per candidate × variable × band: ``model, variable, band, horizons, ratio,
        statistic, pvalue, n, test_note, in_best_set, mcs_pvalue, calibration, calibration_p,
        beats_every_truth, leader_stable, change, verdict, reasons`` (typed: floats, booleans,
        None where a check did not run).
    claims : dict
        ``{(model, variable, band): tuple of Claim}``.
    band_tests, band_sets : DataFrame
        The band-level pairwise tests and model-confidence-set memberships (every model).
    leaders : DataFrame
        Per variable × band × truth, the model with the lowest band ratio.
    benchmark, truth, score, alpha : str, str, str, float
    notes : list of str
        The rules, in words, for the page's footnote.
    """

    table: pd.DataFrame
    claims: dict
    band_tests: pd.DataFrame
    band_sets: pd.DataFrame
    leaders: pd.DataFrame
    benchmark: str
    truth: str
    score: str
    alpha: float
    notes: list[str]

    def row(self, model: str, variable: str, band: str) -> pd.Series:
        t = self.table
        return t[(t["model"] == model) & (t["variable"] == variable) & (t["band"] == band)].iloc[0]


def _cell_lookup(table: pd.DataFrame, score: str, subperiod: str) -> dict:
    """``{(variable, model, horizon): (mean score, n)}`` of the cell table's ``subperiod`` rows."""
    t = table[table["subperiod"] == subperiod]
    return {(str(v), str(m), int(h)): (float(s), float(n)) for v, m, h, s, n in
            zip(t["variable"], t["model"], t["horizon"], t[score], t["n"], strict=True)}


def _band_ratio(cells: dict, model: str, bench: str, variable: str, band: Band) -> tuple[float, int]:
    """Forecast-weighted band means of the score (model ÷ benchmark) from :func:`_cell_lookup`, and n."""
    hs = [h for h in band.horizons if (variable, model, h) in cells and (variable, bench, h) in cells]
    if not hs:
        return math.nan, 0
    n = np.array([cells[(variable, model, h)][1] for h in hs])
    num = float(np.nansum(n * np.array([cells[(variable, model, h)][0] for h in hs])))
    den = float(np.nansum(n * np.array([cells[(variable, bench, h)][0] for h in hs])))
    return (num / den if den > 0 else math.nan), int(n.sum())


def _in_subperiod(fc: pd.DataFrame, subperiod: str) -> pd.DataFrame:
    """The forecasts whose target period lies in ``subperiod``."""
    return fc[fc["subperiods"].map(lambda s: subperiod in s).to_numpy(dtype=bool)]


def _band_losses(fc: pd.DataFrame, variable: str, band: Band, score: str) -> pd.DataFrame:
    """Per origin × model, the mean loss over the band's horizons (origins where every model has them all).

    ``fc``: the forecasts of one sub-period (:func:`_in_subperiod`)."""
    g = fc[(fc["variable"] == variable) & fc["horizon"].isin(band.horizons)]
    if not len(g):
        return pd.DataFrame()
    g = g.drop_duplicates(["origin", "model", "horizon"])
    wide = g.set_index(["origin", "model", "horizon"])[score].unstack(["model", "horizon"]).sort_index()
    models = list(pd.unique(g["model"]))
    cols = pd.MultiIndex.from_product([models, list(band.horizons)], names=["model", "horizon"])
    wide = wide.reindex(columns=cols).dropna()
    return wide.T.groupby(level="model", sort=False).mean().T.reindex(columns=models)


def _band_tests(ev, bands: Sequence[Band], score: str, subperiod: str, seed: int,
                settings: Mapping[str, Any]) -> tuple[pd.DataFrame, pd.DataFrame]:
    from harness.compare.registry import cell_seed, comparison_tests, screen
    from harness.evaluation.cells import dependence_steps

    pair = comparison_tests("pairwise")[0]
    pset = comparison_tests("set")
    pparams = pair.settings(settings.get(pair.name))
    rows, sets = [], []
    fc_sub = _in_subperiod(ev.forecasts, subperiod)
    for var in pd.unique(ev.forecasts["variable"]):
        for band in bands:
            wide = _band_losses(fc_sub, var, band, score)
            if wide.empty or ev.benchmark not in wide.columns:
                continue
            tp = ev.forecasts[(ev.forecasts["variable"] == var) & (ev.forecasts["horizon"] == band.max_h)]
            steps = dependence_steps(band.max_h, tp.drop_duplicates("origin")["target_period"].to_numpy())
            for m in wide.columns:
                if m == ev.benchmark:
                    continue
                a, b = wide[m].to_numpy(), wide[ev.benchmark].to_numpy()
                res = screen(pair, len(a), steps, pparams)
                if res is None:
                    s = cell_seed(seed, pair.name, (var, band.label, m, score)) if pair.seeded else 0
                    res = pair.run(a, b, h=steps, seed=s, params=pparams)
                rows.append(dict(model=m, variable=var, band=band.label, test=pair.name, n=res.n,
                                 statistic=res.statistic, pvalue=res.pvalue, note=res.note,
                                 mean_diff=float(np.mean(a - b)) if len(a) else math.nan,
                                 usable=res.usable))
            for st in pset:
                params = st.settings(settings.get(st.name))
                if wide.shape[1] < 2 or screen(st, wide.shape[0], steps, params) is not None:
                    continue
                s = cell_seed(seed, st.name, (var, band.label, score))
                labels = list(wide.columns)
                for m, r in zip(labels, st.run(wide, labels, h=steps, seed=s, params=params), strict=True):
                    sets.append(dict(model=m, variable=var, band=band.label, in_set=bool(r.extra.get("in_set")),
                                     pvalue=r.pvalue, n=r.n, alpha=r.extra.get("alpha", math.nan)))
    cols = ["model", "variable", "band", "test", "n", "statistic", "pvalue", "note", "mean_diff", "usable"]
    return (pd.DataFrame(rows, columns=cols),
            pd.DataFrame(sets, columns=["model", "variable", "band", "in_set", "pvalue", "n", "alpha"]))


def _cached_band_tests(ev, bands: Sequence[Band], score: str, subperiod: str, seed: int,
                       settings: Mapping[str, Any]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """:func:`_band_tests`, kept in the evaluation cache beside a cached evaluation (the tests and
    bootstraps cost more than everything else a rerun of ``score`` does)."""
    from harness.evaluation import cache as ecache

    key = getattr(ev, "cache_key", "") or ""
    name = "bands-" + ecache.stage_key(bands=[(b.label, list(b.horizons)) for b in bands], score=score,
                                       subperiod=subperiod, seed=seed, settings=dict(settings)) if key else ""
    if key:
        hit = ecache.load_extra(ev.run_dir, key, name, ("tests", "sets"))
        if hit is not None:
            return hit["tests"], hit["sets"]
    tests, sets = _band_tests(ev, bands, score, subperiod, seed, settings)
    if key:
        try:
            ecache.store_extra(ev.run_dir, key, name, {"tests": tests, "sets": sets})
        except OSError:  # a read-only run directory: the verdicts are still returned
            pass
    return tests, sets


def _pit_columns(cal: pd.DataFrame) -> list[str]:
    return [c for c in cal.columns if c.endswith("_p") and not c.startswith("cover_") and c != "rs_cvm_p"]


def _calibration(ev, model: str, variable: str, band: Band, groups: dict | None = None
                 ) -> tuple[str, float, list[int]]:
    """``("fails"|"passes"|"untested", smallest p, horizons where a test rejects)`` for the band.

    ``groups``: the calibration table grouped by (model, variable), to look up instead of filter."""
    cal = ev.calibration
    if cal is None or not len(cal):
        return "untested", math.nan, []
    c = (groups.get((model, variable), cal.iloc[:0]) if groups is not None
         else cal[(cal["model"] == model) & (cal["variable"] == variable)])
    c = c[c["horizon"].isin(band.horizons)]
    cols = _pit_columns(cal)
    ps = [(int(h), float(p)) for h, r in zip(c["horizon"], c[cols].itertuples(index=False), strict=True)
          for p in r if p is not None and np.isfinite(p)]
    if not ps:
        return "untested", math.nan, []
    level = CALIBRATION_LEVEL / len(ps)
    bad = sorted({h for h, p in ps if p < level})
    return ("fails" if bad else "passes"), min(p for _, p in ps), bad


def _leaders(sensitivity, bands: Sequence[Band], bench: str) -> pd.DataFrame:
    """Per variable × band × truth: band ratios of every model from the truths table, and the leader."""
    tt = getattr(sensitivity, "truth_table", None)
    if tt is None or not len(tt):
        return pd.DataFrame(columns=["variable", "band", "truth", "model", "ratio", "leader"])
    rows = []
    for (truth, var), g in tt.groupby(["truth", "variable"], sort=False):
        for band in bands:
            sub = g[g["horizon"].isin(band.horizons)]
            b = sub[sub["model"] == bench].set_index("horizon")
            for m, a in sub.groupby("model", sort=False):
                a = a.set_index("horizon")
                hs = [h for h in a.index if h in b.index]
                if not hs:
                    continue
                n = a.loc[hs, "n"].to_numpy(dtype=float)
                den = float(np.nansum(n * b.loc[hs, "score"].to_numpy(dtype=float)))
                num = float(np.nansum(n * a.loc[hs, "score"].to_numpy(dtype=float)))
                rows.append(dict(variable=var, band=band.label, truth=truth, model=m,
                                 ratio=num / den if den > 0 else math.nan))
    df = pd.DataFrame(rows)
    if not len(df):
        return pd.DataFrame(columns=["variable", "band", "truth", "model", "ratio", "leader"])
    df = df[np.isfinite(df["ratio"].to_numpy(dtype=float))]
    if not len(df):
        return pd.DataFrame(columns=["variable", "band", "truth", "model", "ratio", "leader"])
    lead = df.loc[df.groupby(["variable", "band", "truth"], sort=False)["ratio"].idxmin()]
    df = df.merge(lead[["variable", "band", "truth", "model"]].rename(columns={"model": "leader"}),
                  on=["variable", "band", "truth"], how="left")
    return df


def _fmt_p(p: float) -> str:
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


def decide(evaluation, *, sensitivity=None, since=None, alpha: float = 0.10, score: str = "crps",
           subperiod: str = "full", bands: Sequence[Band] | None = None, seed: int | None = None,
           settings: Mapping[str, Any] | None = None) -> Verdicts:
    """The decision table of an evaluation (see the module docstring for the rules).

    Parameters
    ----------
    evaluation : harness.evaluation.Evaluation
        Scored under the headline truth, against the incumbent (its ``benchmark``).
    sensitivity : harness.evaluation.sensitivity.Sensitivity, optional
        Its truths table gives the "every truth" and "leader stable" checks (must have been
        computed against the same incumbent).
    since : Evaluation, optional
        The evaluation of the last review: gives the change of each ratio.
    alpha : float
        Level of the pairwise test behind ``better``/``worse``.
    score : str
        A loss score (default CRPS).
    subperiod : str
        The sample (default the full one).
    bands : sequence of Band, optional
        Default :func:`harness.verdicts.bands.horizon_bands` of the evaluation's horizons.
    seed : int, optional
        Seed of the bootstrap tests (default the run's); spawned per test and cell.
    settings : mapping, optional
        Test settings (default the spec's ``[scoring.tests]``).

    Returns
    -------
    Verdicts

    References
    ----------
    Diebold, F. X. and Mariano, R. S. (1995). JBES 13(3), 253-263; Coroneo, L. and Iacone, F.
    (2020). JAE 35(4), 391-409; Hansen, P. R., Lunde, A. and Nason, J. M. (2011). Econometrica
    79(2), 453-497; Rossi, B. and Sekhposyan, T. (2019). Journal of Econometrics 208(2), 638-657.
    """
    ev = evaluation
    man = ev.manifest
    seed = int(getattr(man, "seed", 0) or 0) if seed is None else int(seed)
    settings = dict(settings if settings is not None else (getattr(getattr(man, "scoring", None), "tests", None) or {}))
    bands = list(bands or horizon_bands(pd.unique(ev.forecasts["horizon"])))
    bench = ev.benchmark
    tests, sets = _cached_band_tests(ev, bands, score, subperiod, seed, settings)
    leaders = _leaders(sensitivity, bands, bench)
    test_label = _test_label(settings)
    rows, claims = [], {}
    models = [m for m in pd.unique(ev.table["model"]) if m != bench]
    # look-ups instead of one boolean filter of each table per row
    cells = _cell_lookup(ev.table, score, subperiod)
    earlier = _cell_lookup(since.table, score, subperiod) if since is not None else {}
    test_rows = {(r["model"], r["variable"], r["band"]): r for r in tests.to_dict("records")}
    set_rows = {(r["model"], r["variable"], r["band"]): r for r in sets.to_dict("records")}
    cal = ev.calibration
    cal_groups = ({(str(m), str(v)): g for (m, v), g in cal.groupby(["model", "variable"], sort=False)}
                  if cal is not None and len(cal) else None)
    for var in pd.unique(ev.table["variable"]):
        for band in bands:
            for m in models:
                ratio, n_fc = _band_ratio(cells, m, bench, var, band)
                if not np.isfinite(ratio):
                    # nothing to decide: no forecasts, or every model returns the published value
                    # (the incumbent's loss is zero, as for targets already published)
                    continue
                key = {"model": m, "variable": var, "band": band.label}
                cl = [Claim("ratio", ratio, "table", dict(key, horizons=list(band.horizons), score=score,
                                                         subperiod=subperiod))]
                t = test_rows.get((m, var, band.label))
                st = set_rows.get((m, var, band.label))
                in_set = bool(st["in_set"]) if st is not None else None
                cal, cal_p, cal_bad = _calibration(ev, m, var, band, cal_groups)
                parts = [f"{score.upper() if score == 'crps' else score} ratio {ratio:.2f}"]
                usable = t is not None and bool(t["usable"])
                if t is not None:
                    cl.append(Claim("test", {"pvalue": float(t["pvalue"]), "n": int(t["n"]),
                                             "mean_diff": float(t["mean_diff"]), "usable": usable,
                                             "note": t["note"]}, "band_tests", key))
                    parts.append(f"{_fmt_p(float(t['pvalue']))} ({test_label}, n = {int(t['n'])})" if usable
                                 else f"n too small for a test (n = {int(t['n'])})")
                if in_set is not None:
                    cl.append(Claim("best_set", in_set, "band_sets", key))
                    a = float(st["alpha"])
                    parts.append(f"{'in' if in_set else 'not in'} the {100 * (1 - a):g}% best set")
                cl.append(Claim("calibration", cal, "calibration", dict(key, horizons_rejected=cal_bad)))
                parts.append({"fails": f"PIT test rejects calibration at h {', '.join(map(str, cal_bad))}",
                              "passes": "calibration not rejected",
                              "untested": "calibration not tested (n too small)"}[cal])
                beats, stable = None, None
                lv = leaders[(leaders["variable"] == var) & (leaders["band"] == band.label)] if len(leaders) else leaders
                if len(lv):
                    mine = lv[lv["model"] == m]
                    if len(mine):
                        beats = bool((mine["ratio"] < 1).all())
                        k = int((mine["ratio"] < 1).sum())
                        cl.append(Claim("truths_beaten", {"beaten": k, "of": len(mine)}, "sensitivity", key))
                        parts.append(f"beats {bench} under {k} of {len(mine)} truths")
                    lead = lv.drop_duplicates("truth")[["truth", "leader"]]
                    stable = lead["leader"].nunique() == 1
                    cl.append(Claim("leader", dict(zip(lead["truth"], lead["leader"], strict=True)),
                                    "sensitivity", {"variable": var, "band": band.label}))
                    if not stable:
                        parts.append("leader changes with the truth (" + ", ".join(
                            f"{a}: {b}" for a, b in zip(lead["truth"], lead["leader"], strict=True)) + ")")
                change = None
                if since is not None:
                    old, _ = _band_ratio(earlier, m, bench, var, band)
                    if np.isfinite(old):
                        change = ratio - old
                        cl.append(Claim("change", {"earlier": old, "now": ratio}, "since", key))
                        parts.append(f"{change:+.2f} since the last review")
                word = _word(usable, t, in_set, cal, alpha)
                rows.append(dict(model=m, variable=var, band=band.label, horizons=",".join(map(str, band.horizons)),
                                 ratio=ratio, n_forecasts=n_fc,
                                 statistic=float(t["statistic"]) if t is not None else math.nan,
                                 pvalue=float(t["pvalue"]) if t is not None else math.nan,
                                 n=int(t["n"]) if t is not None else 0,
                                 test_note=(t["note"] if t is not None else "no test"),
                                 in_best_set=in_set,
                                 mcs_pvalue=float(st["pvalue"]) if st is not None else math.nan,
                                 calibration=cal, calibration_p=cal_p, beats_every_truth=beats,
                                 leader_stable=stable, change=change, verdict=word,
                                 reasons="; ".join(parts)))
                claims[(m, var, band.label)] = tuple(cl)
    table = pd.DataFrame(rows)
    notes = [f"Verdict words: '{BETTER}' = significantly lower {score} than {bench} ({test_label}, level "
             f"{alpha:g}), in the model confidence set and calibration not rejected; '{WORSE}' = "
             f"significantly higher; '{UNPROVEN}' otherwise, including samples too small to test.",
             f"Ratio: forecast-weighted mean {score} over the band's horizons, candidate ÷ {bench}; the test "
             "compares the per-origin band-average losses (horizon = the band's longest).",
             f"Calibration: PIT tests valid at each horizon, Bonferroni over the band at {CALIBRATION_LEVEL:g}."]
    return Verdicts(table, claims, tests, sets, leaders, bench, ev.truth, score, alpha, notes)


def _test_label(settings: Mapping[str, Any]) -> str:
    from harness.compare.registry import comparison_tests

    pair = comparison_tests("pairwise")[0]
    method = pair.settings(settings.get(pair.name)).get("method")
    return f"{pair.label}" + (f", {method}" if method else "")


def _word(usable: bool, t, in_set, cal: str, alpha: float) -> str:
    if not usable or t is None:
        return UNPROVEN
    p, d = float(t["pvalue"]), float(t["mean_diff"])
    if p < alpha and d > 0:
        return WORSE
    if p < alpha and d < 0 and in_set is not False and cal != "fails":
        return BETTER
    return UNPROVEN
