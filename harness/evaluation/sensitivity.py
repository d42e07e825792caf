"""Revision sensitivity: does the verdict depend on the truth chosen or on using revised data?

Three checks, each a tidy table:

* **truth sensitivity** — the same ledger scored under several truths (default ``first``,
  ``release:2``, ``lag:365D``, ``latest``): ratios to the benchmark under each, the ranking of the
  models under each, Spearman's rank correlation with the first truth's ranking and the pairs of
  models that swap places;
* **data sensitivity** — the same spec rerun in pseudo-real-time mode (each origin sees the latest
  vintage cut at the ragged edge it had in real time): real-time minus pseudo-real-time score per
  model, variable and horizon, with a Diebold–Mariano-type test of the paired difference. The
  pseudo run is an ordinary run of the runner with ``mode = "pseudo"``: its tasks share the cache
  of the real-time run and differ only by their information sets;
* **revision exposure** — per target and horizon, the size of the revisions between truth choices
  next to the forecast errors (noise-to-signal: std of revisions over the benchmark's RMSE).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

DEFAULT_TRUTHS = ("first", "release:2", "lag:365D", "latest")


def ranking_swaps(scores: pd.DataFrame, *, by: str = "truth", model: str = "model", value: str = "value",
                  reference=None) -> pd.DataFrame:
    """Compare model rankings across the levels of ``by`` (lower value = better).

    Parameters
    ----------
    scores : DataFrame
        Columns ``by``, ``model``, ``value`` (one row per pair).
    reference : optional
        The level of ``by`` the others are compared with (default: the first in order of appearance).

    Returns
    -------
    DataFrame
        One row per other level: Spearman rank correlation with the reference ranking, the
        ranking itself, and the swapped pairs ``"a>b"`` (a ahead of b under the reference, behind here).

    References
    ----------
    Spearman, C. (1904). The proof and measurement of association between two things.
    American Journal of Psychology 15, 72–101.
    """
    from scipy.stats import spearmanr

    levels = list(pd.unique(scores[by]))
    reference = levels[0] if reference is None else reference
    wide = scores.pivot_table(index=model, columns=by, values=value, aggfunc="mean")
    wide = wide.dropna()
    ref = wide[reference]
    rows = []
    for lv in levels:
        if lv == reference or lv not in wide:
            continue
        cur = wide[lv]
        swaps = []
        for a, b in itertools.combinations(wide.index, 2):
            if np.sign(ref[a] - ref[b]) * np.sign(cur[a] - cur[b]) < 0:
                first, second = (a, b) if ref[a] < ref[b] else (b, a)
                swaps.append(f"{first}>{second}")
        if len(wide) > 2 and ref.nunique() > 1 and cur.nunique() > 1:
            rho = spearmanr(ref.to_numpy(), cur.to_numpy()).statistic
        else:  # two models, or all tied: the correlation is undefined; say whether the order held
            rho = 1.0 if not swaps else -1.0
        rows.append({by: lv, "reference": reference, "spearman": float(rho),
                     "ranking": " < ".join(cur.sort_values().index.astype(str)),
                     "reference_ranking": " < ".join(ref.sort_values().index.astype(str)),
                     "swaps": ";".join(swaps), "n_swaps": len(swaps)})
    return pd.DataFrame(rows)


@dataclass
class Sensitivity:
    """The three sensitivity tables and a plain-words summary per model."""

    truth_table: pd.DataFrame
    rankings: pd.DataFrame
    data_table: pd.DataFrame
    exposure: pd.DataFrame
    verdicts: pd.DataFrame
    truths: tuple[str, ...]
    pseudo_run: Path | None
    #: the real-time run scored under each truth (scores only, no tests); empty when read from CSV
    evaluations: dict = field(default_factory=dict, repr=False)

    def summary(self) -> str:
        lines = ["Revision sensitivity (score: CRPS, full sample; ratio < 1 = better than the benchmark)", ""]
        for _, r in self.verdicts.iterrows():
            lines.append(f"- {r['model']}: {r['verdict']}")
        if len(self.rankings):
            sw = self.rankings[self.rankings["n_swaps"] > 0]
            lines.append("")
            lines.append(f"Model rankings changed in {len(sw)} of {len(self.rankings)} comparisons "
                         f"(variable × horizon × truth against '{self.truths[0]}').")
        if len(self.exposure):
            e = self.exposure
            big = e[e["noise_to_signal"] > 0.5]
            lines.append(f"Revisions are large relative to forecast errors (noise-to-signal > 0.5) for "
                         f"{len(big)} of {len(e)} target × horizon cells.")
        return "\n".join(lines)

    @classmethod
    def load(cls, path: str | Path) -> Sensitivity | None:
        """Read what :meth:`save` wrote: the typed Parquet files, else (folders of earlier versions,
        which wrote CSV only) the CSVs; None when absent."""
        path = Path(path)
        suffix = next((s for s in (".parquet", ".csv") if (path / f"sensitivity_truths{s}").is_file()), None)
        if suffix is None:
            return None

        def rd(stem):
            p = path / f"{stem}{suffix}"
            if not p.is_file():
                return pd.DataFrame()
            try:
                return pd.read_parquet(p) if suffix == ".parquet" else pd.read_csv(p)
            except pd.errors.EmptyDataError:  # an empty CSV table
                return pd.DataFrame()

        tt = rd("sensitivity_truths")
        truths = tuple(pd.unique(tt["truth"])) if len(tt) else ()
        return cls(tt, rd("sensitivity_rankings"), rd("sensitivity_data"), rd("revision_exposure"),
                   rd("sensitivity_verdicts"), truths, None)

    def save(self, path: str | Path) -> Path:
        path = Path(path)
        path.mkdir(parents=True, exist_ok=True)
        from harness.csvsafe import write_csv
        from vintages import atomic_write_bytes

        for frame, stem in ((self.truth_table, "sensitivity_truths"), (self.rankings, "sensitivity_rankings"),
                            (self.data_table, "sensitivity_data"), (self.exposure, "revision_exposure"),
                            (self.verdicts, "sensitivity_verdicts")):
            write_csv(frame, path / f"{stem}.csv")  # for people (spreadsheet-safe)
            atomic_write_bytes(path / f"{stem}.parquet", frame.to_parquet(index=False))  # read back typed
        atomic_write_bytes(path / "sensitivity.txt", (self.summary() + "\n").encode("utf-8"))
        return path


def truth_sensitivity(run, truths=DEFAULT_TRUTHS, *, score: str = "crps", subperiod: str = "full",
                      benchmark: str | None = None):
    """Score one ledger under several truths; return (ratio table, rankings, evaluations by truth)."""
    from harness.backtest.ledger import Ledger, read_ledger
    from harness.evaluation import evaluate
    from vintages import VintageStore

    ledger = run if isinstance(run, Ledger) else read_ledger(run)
    cube = VintageStore(ledger.manifest.store).cube(variables=list(ledger.manifest.variables))
    evs = {t: evaluate(ledger, t, cube=cube, tests=False, benchmark=benchmark) for t in truths}
    rows = []
    for t, ev in evs.items():
        tab = ev.table[ev.table["subperiod"] == subperiod]
        rel = ev.relative[ev.relative["subperiod"] == subperiod]
        m = tab[["model", "variable", "horizon", "n", score]].merge(
            rel[["model", "variable", "horizon", score]].rename(columns={score: "ratio"}),
            on=["model", "variable", "horizon"], how="left")
        m.insert(0, "truth", t)
        rows.append(m.rename(columns={score: "score"}))
    table = pd.concat(rows, ignore_index=True)
    ranks = []
    for (var, h), g in table.groupby(["variable", "horizon"], sort=True):
        r = ranking_swaps(g.rename(columns={"score": "value"}), by="truth", reference=truths[0])
        if len(r):
            r.insert(0, "horizon", h)
            r.insert(0, "variable", var)
            ranks.append(r)
    rankings = pd.concat(ranks, ignore_index=True) if ranks else pd.DataFrame()
    return table, rankings, evs


def data_sensitivity(spec, real_eval, *, truth: str, jobs=None, backend="loky", progress=False, log=None,
                     score: str = "crps"):
    """Rerun the spec in pseudo-real-time mode and compare scores with the real-time run."""

    from harness.backtest import run
    from harness.evaluation import evaluate, steps_ahead

    pseudo_spec = spec.with_run(mode="pseudo", out=spec.out.parent / (spec.out.name + "-pseudo"),
                                cache=spec.cache_dir)
    res = run(pseudo_spec, jobs=jobs, backend=backend, progress=progress, log=log)
    pseudo = evaluate(res.run_dir, truth, tests=False, benchmark=real_eval.benchmark)  # its own ledger
    key = ["model", "origin", "variable", "horizon"]
    a = real_eval.forecasts[key + [score]]
    b = pseudo.forecasts[key + [score]]
    m = a.merge(b, on=key, suffixes=("_rt", "_pseudo"))
    m = m[np.isfinite(m[f"{score}_rt"]) & np.isfinite(m[f"{score}_pseudo"])]
    bench = real_eval.benchmark

    def ratios(ev):
        r = ev.relative[ev.relative["subperiod"] == "full"]
        return r.set_index(["model", "variable", "horizon"])[score]

    r_rt, r_ps = ratios(real_eval), ratios(pseudo)
    from harness.compare.registry import comparison_tests, screen

    pair = comparison_tests("pairwise")[0]  # the registered pairwise test, its own minimum sample
    params = pair.settings({})
    rows = []
    for (model, var, h), g in m.groupby(["model", "variable", "horizon"], sort=True):
        g = g.sort_values("origin")
        rt, ps = g[f"{score}_rt"].to_numpy(), g[f"{score}_pseudo"].to_numpy()
        row = dict(model=model, variable=var, horizon=h, n=len(g), real_time=rt.mean(), pseudo=ps.mean(),
                   difference=rt.mean() - ps.mean(), stat=np.nan, pvalue=np.nan,
                   ratio_real_time=r_rt.get((model, var, h), np.nan), ratio_pseudo=r_ps.get((model, var, h), np.nan))
        blocked = screen(pair, len(g), steps_ahead(h), params)
        if blocked is None and np.any(rt != ps):
            r = pair.run(rt, ps, h=steps_ahead(h), seed=0, params=params)
            row.update(stat=r.statistic, pvalue=r.pvalue)
        rows.append(row)
    out = pd.DataFrame(rows)
    if len(out):
        out["verdict_flips"] = (out["model"] != bench) & (
            (out["ratio_real_time"] < 1) != (out["ratio_pseudo"] < 1))
    return out, pseudo, res


def revision_exposure(evs: dict, benchmark: str, truths) -> pd.DataFrame:
    """Per target and horizon: revisions between the first and other truths vs forecast errors."""
    base = truths[0]
    f0 = evs[base].forecasts
    rows = []
    for t in truths[1:]:
        f1 = evs[t].forecasts
        key = ["model", "origin", "variable", "horizon"]
        m = f0[key + ["truth", "se_mean"]].merge(f1[key + ["truth"]], on=key, suffixes=("", "_other"))
        m = m[m["model"] == benchmark]
        for (var, h), g in m.groupby(["variable", "horizon"], sort=True):
            rev = (g["truth_other"] - g["truth"]).dropna()
            rmse = float(np.sqrt(np.nanmean(g["se_mean"]))) if g["se_mean"].notna().any() else np.nan
            sd = float(rev.std(ddof=1)) if len(rev) > 1 else np.nan
            rows.append(dict(variable=var, horizon=h, from_truth=base, to_truth=t, n=len(rev),
                             mean_revision=float(rev.mean()) if len(rev) else np.nan,
                             mean_abs_revision=float(rev.abs().mean()) if len(rev) else np.nan,
                             sd_revision=sd, benchmark_rmse=rmse,
                             noise_to_signal=sd / rmse if rmse and np.isfinite(rmse) else np.nan))
    return pd.DataFrame(rows)


def _verdicts(truth_table, data_table, benchmark, alpha=0.10) -> pd.DataFrame:
    """Two separate statements per model, plus the revised-data check.

    * **beats the benchmark under every truth**: in how many variable × horizon cells its CRPS
      ratio to the benchmark is below 1 under every truth (and which cells flip);
    * **ranking stable across truths**: in which cells the leading model (lowest mean CRPS of
      all models) changes with the truth, naming the leaders.
    """
    from harness.report.labels import h_label

    rows = []
    scored = truth_table[np.isfinite(truth_table["score"].to_numpy(dtype=float))] if len(truth_table) else truth_table
    lead = (scored.loc[scored.groupby(["variable", "horizon", "truth"], sort=False)["score"].idxmin()]
            if len(scored) else scored)
    leaders = lead.pivot_table(index=["variable", "horizon"], columns="truth", values="model",
                               aggfunc="first") if len(lead) else pd.DataFrame()
    changing = leaders[leaders.nunique(axis=1) > 1] if len(leaders) else leaders
    leader_text = ("the leading model is the same under every truth in every cell" if not len(changing)
                   else f"the leading model changes with the truth in {len(changing)} of {len(leaders)} cells ("
                   + "; ".join(f"{v} {h_label(h)}: " + ", ".join(f"{t} {m}" for t, m in r.items() if isinstance(m, str))
                               for (v, h), r in list(changing.iterrows())[:4])
                   + ("…" if len(changing) > 4 else "") + ")")
    for model, g in truth_table.groupby("model", sort=False):
        if model == benchmark:
            continue
        wins = g.assign(win=g["ratio"] < 1).pivot_table(index=["variable", "horizon"], columns="truth",
                                                         values="win", aggfunc="first")
        always = wins.all(axis=1)
        flips = [f"{v} {h_label(h)}" for (v, h), s in wins.nunique(axis=1).eq(1).items() if not s]
        d = data_table[data_table["model"] == model] if len(data_table) else pd.DataFrame()
        beats = f"beats {benchmark} under every truth in {int(always.sum())} of {len(always)} cells"
        if flips:
            beats += f"; win/lose flips with the truth in {', '.join(flips[:4])}{'…' if len(flips) > 4 else ''}"
        data_flips = int(d["verdict_flips"].sum()) if len(d) else 0
        parts = [beats]
        if len(d):
            if data_flips == 0:
                parts.append("same win/lose with real-time and with revised (pseudo-real-time) data")
            else:
                cells = ", ".join(f"{r.variable} h={r.horizon}" for r in d[d["verdict_flips"]].itertuples())
                parts.append(f"win/lose changes with revised data in {data_flips} of {len(d)} cells ({cells})")
            sig = d[d["pvalue"] < alpha]
            if len(sig):
                direction = "worse" if sig["difference"].mean() > 0 else "better"
                parts.append(f"its real-time CRPS is significantly {direction} than with revised data in "
                             f"{len(sig)} of {len(d)} cells (DM, {int(alpha * 100)}%)")
        rows.append(dict(model=model, beats_every_truth=bool(always.all()) if len(always) else False,
                         cells_beaten_every_truth=int(always.sum()), cells=int(len(always)),
                         ranking_stable=not len(changing), leader_changes=int(len(changing)),
                         verdict="; ".join(parts) + f"; {leader_text}"))
    return pd.DataFrame(rows)


def sensitivity(spec, *, truths=None, run_dir=None, jobs=None, backend="loky", progress=False, log=None,
                data: bool = True, benchmark: str | None = None) -> Sensitivity:
    """Run all three checks for a spec whose real-time run exists (or is run now).

    ``benchmark`` sets the incumbent every model is compared with (default the spec's); it needs
    no refit.
    """
    from harness.backtest import run

    truths = tuple(truths or spec.scoring.truths or DEFAULT_TRUTHS)
    if run_dir is None:
        res = run(spec, jobs=jobs, backend=backend, progress=progress, log=log)
        run_dir = res.run_dir
    table, rankings, evs = truth_sensitivity(run_dir, truths, benchmark=benchmark)
    benchmark = evs[truths[0]].benchmark
    if data and spec.mode == "real-time":
        dtable, _, pres = data_sensitivity(spec, evs[truths[0]], truth=truths[0], jobs=jobs, backend=backend,
                                           progress=progress, log=log)
        pseudo_dir = pres.run_dir
    else:
        dtable, pseudo_dir = pd.DataFrame(), None
    exposure = revision_exposure(evs, benchmark, truths)
    verdicts = _verdicts(table, dtable, benchmark)
    return Sensitivity(table, rankings, dtable, exposure, verdicts, truths, pseudo_dir, evs)
