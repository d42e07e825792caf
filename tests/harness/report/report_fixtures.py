"""Synthetic inputs for the report: a realistic fake Evaluation, Sensitivity and Ledger.

Everything is simulated here with fixed seeds (the invented Veldmark economy): an outcome process
with two invented recessions, three models whose predictive draws differ in bias and spread, a
"first" and a "latest" truth (the latest adds revision noise), one failed task, and targets whose
truth is not yet published. Scores are computed from the draws with the usual formulas, so the
tables the report shows are consistent with the forecasts (e.g. RMSE from squared errors).

The comparison tests in the fixture are simple stand-ins with the right columns (the real ones
live in :mod:`harness.compare`); the report only reads their p-values.

Columns follow :class:`harness.evaluation.Evaluation`'s documented contract.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import properscoring as ps
import xarray as xr
from scipy import stats

from harness.backtest.ledger import Ledger
from harness.evaluation import Evaluation
from harness.evaluation.sensitivity import Sensitivity, ranking_swaps, revision_exposure

SEED = 20260611
QUANTILE_LEVELS = (0.05, 0.10, 0.25, 0.50, 0.75, 0.90, 0.95)
COVERAGE_LEVELS = (50, 70, 90)
# Invented Veldmark recessions (quarters), for the fixture only.
RECESSIONS = (("2016Q2", "2016Q4"), ("2020Q1", "2020Q3"))
CUSTOM = {"sudden_stop": ("2020Q1", "2020Q4"), "since_2021": ("2021Q1", "2026Q4")}
# Model skill: (bias, error scale of the predictive mean, spread multiplier); benchmark first.
SKILL = ((0.0, 1.00, 1.00), (0.25, 0.90, 0.85), (-0.05, 0.82, 1.10))


@dataclass
class Bundle:
    """Everything ``build_report`` takes, made together so that they agree."""

    evaluation: Evaluation
    latest: Evaluation
    earlier: Evaluation
    sensitivity: Sensitivity
    ledger: Ledger

    @property
    def fan_truths(self) -> dict[str, Evaluation]:
        return {"first": self.evaluation, "latest": self.latest}


def _periods(n_origins: int, start: str = "2015Q1") -> pd.PeriodIndex:
    return pd.period_range(start, periods=n_origins, freq="Q")


def _regimes(periods: pd.PeriodIndex) -> pd.Series:
    lab = np.full(len(periods), "expansion", dtype=object)
    for a, b in RECESSIONS:
        m = (periods >= pd.Period(a, "Q")) & (periods <= pd.Period(b, "Q"))
        lab[m] = "recession"
    return pd.Series(lab, index=periods, name="regime")


def _outcomes(rng: np.random.Generator, periods: pd.PeriodIndex, variables) -> dict[str, np.ndarray]:
    """An AR(1) around 2 with deep dips in the invented recessions, one path per variable."""
    reg = _regimes(periods).to_numpy()
    out = {}
    for j, v in enumerate(variables):
        x = np.empty(len(periods))
        prev = 2.0
        shocks = rng.normal(0, 1.0 + 0.3 * j, len(periods))
        for t in range(len(periods)):  # a short AR(1) recursion (40-odd steps), not a hot path
            prev = 2.0 + 0.5 * (prev - 2.0) + shocks[t] - (4.0 if reg[t] == "recession" else 0.0)
            x[t] = prev
        out[str(v)] = x
    return out


def score_draws(y: np.ndarray, draws: np.ndarray) -> dict[str, np.ndarray]:
    """Scores of ensemble forecasts ``draws`` (n, m) against outcomes ``y`` (n,), NaN-aware.

    CRPS from the ensemble (Gneiting and Raftery 2007, eq. 21, via properscoring); tail- and
    centre-weighted CRPS as quantile-weighted integrals of the quantile score with weights
    (1-a)^2, a^2, a(1-a), (2a-1)^2 (Gneiting and Ranjan 2011, JBES 29, 411-422, sect. 2.2); log
    score of a Gaussian fitted to the draws; pinball losses; central interval hits; PIT.
    """
    y = np.asarray(y, dtype=np.float64)
    d = np.asarray(draws, dtype=np.float64)
    ok = np.isfinite(y)
    yy = np.where(ok, y, 0.0)
    out: dict[str, np.ndarray] = {}

    def mask(a):
        return np.where(ok, a, np.nan)

    out["crps"] = mask(ps.crps_ensemble(yy, d))
    grid = (np.arange(99) + 0.5) / 99
    q = np.quantile(d, grid, axis=1).T  # (n, 99)
    pin = ((yy[:, None] < q).astype(float) - grid[None, :]) * (q - yy[:, None])
    for name, w in (("crps_left", (1 - grid) ** 2), ("crps_right", grid**2), ("crps_centre", grid * (1 - grid)),
                    ("crps_tails", (2 * grid - 1) ** 2)):
        out[name] = mask(2 * np.mean(pin * w[None, :], axis=1))
    mu, sd = d.mean(axis=1), d.std(axis=1, ddof=1)
    out["log_score"] = mask(-stats.norm.logpdf(yy, mu, sd))
    med = np.median(d, axis=1)
    out["se_mean"] = mask((yy - mu) ** 2)
    out["ae_mean"] = mask(np.abs(yy - mu))
    out["se_median"] = mask((yy - med) ** 2)
    out["ae_median"] = mask(np.abs(yy - med))
    qq = np.quantile(d, QUANTILE_LEVELS, axis=1).T
    for j, a in enumerate(QUANTILE_LEVELS):
        out[f"qs_{int(round(a * 100)):02d}"] = mask(((yy < qq[:, j]).astype(float) - a) * (qq[:, j] - yy))
    for lv in COVERAGE_LEVELS:
        lo, hi = np.quantile(d, [(1 - lv / 100) / 2, 1 - (1 - lv / 100) / 2], axis=1)
        out[f"cover_{lv}"] = mask(((yy >= lo) & (yy <= hi)).astype(float))
    out["pit"] = mask(np.mean(d <= yy[:, None], axis=1))
    return out


def _dm(d: np.ndarray, h: int) -> tuple[float, float]:
    """DM statistic with the HLN small-sample correction, t(n-1) p-value (two-sided)."""
    n = len(d)
    dc = d - d.mean()
    lags = max(h - 1, 0)
    gam = [np.dot(dc[k:], dc[: n - k]) / n for k in range(lags + 1)]
    var = (gam[0] + 2 * sum(gam[1:])) / n
    if var <= 0:
        var = gam[0] / n
    stat = d.mean() / np.sqrt(var) * np.sqrt((n + 1 - 2 * h + h * (h - 1) / n) / n)
    return float(stat), float(2 * stats.t.sf(abs(stat), n - 1))


def _aggregate(fc: pd.DataFrame, score_cols) -> pd.DataFrame:
    ex = fc.explode("subperiods").rename(columns={"subperiods": "subperiod"})
    g = ex.groupby(["model", "variable", "horizon", "subperiod"], sort=False)
    table = g[list(score_cols)].mean().reset_index()
    table.insert(4, "n", g["crps"].count().to_numpy())
    return table


def _relative(table: pd.DataFrame, benchmark: str) -> pd.DataFrame:
    """The relative table exactly as the evaluation builds it (the score registry's rules)."""
    from harness.scores import relative_to

    return relative_to(table, benchmark)


def _dense(fc: pd.DataFrame, cols) -> tuple[dict[str, np.ndarray], list, list, list, list]:
    """Score columns as dense arrays (model, origin, variable, horizon), NaN where absent."""
    models = list(pd.unique(fc["model"]))
    origins = sorted(pd.unique(fc["origin"]))
    variables = list(pd.unique(fc["variable"]))
    horizons = sorted(int(h) for h in pd.unique(fc["horizon"]))
    ix = (pd.Index(models).get_indexer(fc["model"]), pd.Index(origins).get_indexer(fc["origin"]),
          pd.Index(variables).get_indexer(fc["variable"]), pd.Index(horizons).get_indexer(fc["horizon"]))
    out = {}
    for c in cols:
        a = np.full((len(models), len(origins), len(variables), len(horizons)), np.nan)
        a[ix] = fc[c].to_numpy(dtype=float)
        out[c] = a
    return out, models, origins, variables, horizons


def _membership(fc: pd.DataFrame, origins, horizons) -> dict[str, np.ndarray]:
    """Sub-period membership of each (origin, horizon) target, as boolean arrays."""
    o = pd.Index(origins).get_indexer(fc["origin"])
    h = pd.Index(horizons).get_indexer(fc["horizon"])
    out: dict[str, np.ndarray] = {}
    for oi, hi, subs in zip(o, h, fc["subperiods"], strict=True):
        for sp in subs:
            out.setdefault(sp, np.zeros((len(origins), len(horizons)), dtype=bool))[oi, hi] = True
    return out


def _tests(fc: pd.DataFrame, benchmark: str, scores=("crps", "se_mean", "log_score")) -> pd.DataFrame:
    dense, models, origins, variables, horizons = _dense(fc, scores)
    member = _membership(fc, origins, horizons)
    b = models.index(benchmark)
    rows = []
    for vi, v in enumerate(variables):
        for hi, h in enumerate(horizons):
            for mi, model in enumerate(models):
                if mi == b:
                    continue
                for s in scores:
                    d_all = dense[s][mi, :, vi, hi] - dense[s][b, :, vi, hi]
                    for sp in sorted(member):
                        d = d_all[member[sp][:, hi] & np.isfinite(d_all)]
                        if len(d) < 4:
                            rows.append(dict(model=model, variable=v, horizon=h, subperiod=sp, score=s, n=len(d),
                                             stat=np.nan, pvalue=np.nan, mean_diff=np.nan))
                            continue
                        st, pv = _dm(d, max(int(h) + 1, 1))
                        rows.append(dict(model=model, variable=v, horizon=h, subperiod=sp, score=s, n=len(d),
                                         stat=st, pvalue=pv, mean_diff=float(d.mean())))
    return pd.DataFrame(rows)


def _mcs(table: pd.DataFrame, alpha: float = 0.10) -> pd.DataFrame:
    """A stand-in for the model confidence set: models within 5% of the best CRPS are 'in'."""
    full = table[table["subperiod"] == "full"]
    rows = []
    for (v, h), g in full.groupby(["variable", "horizon"], sort=True):
        best = g["crps"].min()
        for _, r in g.iterrows():
            rel = r["crps"] / best
            rows.append(dict(variable=v, horizon=h, model=r["model"], in_mcs=bool(rel <= 1.05),
                             pvalue=float(np.exp(-10 * (rel - 1))), n=int(r["n"]), alpha=alpha))
    return pd.DataFrame(rows)


def _calibration(fc: pd.DataFrame) -> pd.DataFrame:
    rows = []
    for (m, v, h), g in fc.groupby(["model", "variable", "horizon"], sort=True):
        g = g.sort_values("origin")
        pit = g["pit"].dropna().to_numpy()
        row = dict(model=m, variable=v, horizon=h, n=len(pit))
        for lv in COVERAGE_LEVELS:
            hits = g[f"cover_{lv}"].dropna().to_numpy().astype(int)
            p = lv / 100
            x, n = hits.sum(), len(hits)
            rate = x / n
            # Kupiec (1995) unconditional coverage LR, chi2(1).
            ll0 = x * np.log(p) + (n - x) * np.log(1 - p)
            ll1 = (x * np.log(rate) if x else 0) + ((n - x) * np.log(1 - rate) if n - x else 0)
            lr_uc = -2 * (ll0 - ll1)
            row[f"cover_{lv}_rate"] = rate
            row[f"cover_{lv}_kupiec_p"] = float(stats.chi2.sf(lr_uc, 1))
            # Independence part (Christoffersen 1998), transition counts.
            a, b_ = hits[:-1], hits[1:]
            n00, n01 = np.sum((a == 0) & (b_ == 0)), np.sum((a == 0) & (b_ == 1))
            n10, n11 = np.sum((a == 1) & (b_ == 0)), np.sum((a == 1) & (b_ == 1))
            p01 = n01 / max(n00 + n01, 1)
            p11 = n11 / max(n10 + n11, 1)
            p1 = (n01 + n11) / max(n00 + n01 + n10 + n11, 1)

            def ll(k, q):
                return k * np.log(q) if k and q > 0 else 0.0

            lr_ind = -2 * ((ll(n00 + n10, 1 - p1) + ll(n01 + n11, p1))
                           - (ll(n00, 1 - p01) + ll(n01, p01) + ll(n10, 1 - p11) + ll(n11, p11)))
            row[f"cover_{lv}_christoffersen_p"] = float(stats.chi2.sf(lr_uc + max(lr_ind, 0), 2))
        z = stats.norm.ppf(np.clip(pit, 1e-3, 1 - 1e-3))
        lr = len(z) * (z.mean() ** 2 + z.var() - 1 - np.log(z.var()))
        row["berkowitz_p"] = float(stats.chi2.sf(lr, 2))
        row["rs_p"] = float(stats.kstest(pit, "uniform").pvalue)
        rows.append(row)
    return pd.DataFrame(rows)


def _fluctuation(fc: pd.DataFrame, benchmark: str, mu: float = 0.3) -> pd.DataFrame:
    """Rolling standardised CRPS difference (model - benchmark) over windows of mu * n."""
    dense, models, origins, variables, horizons = _dense(fc, ["crps"])
    crps = dense["crps"]
    tp = fc.drop_duplicates(["origin", "horizon"]).set_index(["origin", "horizon"])["target_period"]
    b = models.index(benchmark)
    crit = 2.770  # Giacomini and Rossi (2010, Table 1), mu = 0.3, two-sided 5% (from memory)
    rows = []
    for vi, v in enumerate(variables):
        for hi, h in enumerate(horizons):
            for mi, m in enumerate(models):
                if mi == b:
                    continue
                d = crps[mi, :, vi, hi] - crps[b, :, vi, hi]
                keep = np.isfinite(d)
                d = d[keep]
                n = len(d)
                if n < 20:
                    continue
                w = max(int(round(mu * n)), 2)
                roll = np.convolve(d, np.ones(w), "valid") / (np.sqrt(w) * d.std(ddof=1))
                reject = bool(np.max(np.abs(roll)) > crit)
                ends = [tp[(o, h)] for o in np.asarray(origins, dtype=object)[keep][w - 1:]]
                rows.extend(dict(model=m, variable=v, horizon=h, target_period=t, stat=float(x), critical=crit,
                                 reject=reject) for t, x in zip(ends, roll, strict=True))
    return pd.DataFrame(rows)


def _subperiods(periods: pd.PeriodIndex, regimes: pd.Series) -> list[list[str]]:
    out = []
    for p in periods:
        s = ["full"]
        for name, (a, b) in CUSTOM.items():
            if pd.Period(a, "Q") <= p <= pd.Period(b, "Q"):
                s.append(name)
        if p in regimes.index:
            s.append(regimes[p])
        out.append(s)
    return out


def _manifest(models, variables, horizons, origins, target_periods, draws, *, batches: int, failures):
    """The fixture run's manifest, in the same versioned type a real run writes."""
    from harness.backtest.manifest import FORMAT, RunManifest

    return RunManifest.from_dict({"format": FORMAT, "backend": "loky", "jobs": 2, "tasks": [],
                                  "ledger": "ledger-fixture.parquet",
                                  "provenance": "provenance-fixture.parquet",
                                  "ledger_digest": "0" * 64, "ledger_rows": 0, **{
        "name": "veldmark-fixture", "created": "2026-06-11T09:00:00+0000",
        "spec": "/tmp/veldmark/spec.toml", "spec_hash": "3f9a1c0e5b7d2468ace0",
        "store": "/tmp/veldmark/store", "store_checksum": "5e0c7a9b" * 8, "store_batches": batches,
        "mode": "real-time", "policy": "keep", "freq": "Q", "seed": SEED, "draws": draws,
        "models": list(models),
        "model_specs": {m: {"type": t, "params": {}} for m, t in zip(models, ("nochange", "ar", "bvar"), strict=False)},
        "origins": [str(o.date()) for o in origins], "targets": list(variables), "horizons": list(horizons),
        "target_periods": target_periods, "variables": {v: {"transform": "dlog_ann"} for v in variables},
        "scoring": {"benchmark": models[0], "subperiods": {k: list(v) for k, v in CUSTOM.items()}},
        "counts": {"total": len(models) * len(origins), "computed": len(models) * len(origins), "cached": 0,
                   "failed": len(failures)},
        "failures": failures, "timings": {"total": 12.5},
        "versions": {"python": "3.11", "numpy": np.__version__, "pandas": pd.__version__},
    }})


def _evaluation(draws: xr.DataArray, truth: dict, truth_name: str, periods_all: pd.PeriodIndex,
                manifest, published_until: pd.Period) -> Evaluation:
    """Score the ledger's draws against one truth and fill every Evaluation table."""
    models = [str(m) for m in draws["model"].values]
    variables = [str(v) for v in draws["variable"].values]
    horizons = [int(h) for h in draws["horizon"].values]
    origins = pd.DatetimeIndex(draws["origin"].values)
    o_per = origins.to_period("Q")
    benchmark = models[0]
    idx = pd.MultiIndex.from_product([models, origins, variables, horizons],
                                     names=["model", "origin", "variable", "horizon"])
    f = idx.to_frame(index=False)
    flat = draws.transpose("model", "origin", "variable", "horizon", "draw").values.reshape(len(f), -1)
    ok = ~np.isnan(flat[:, 0])
    f = f[ok].reset_index(drop=True)
    flat = flat[ok]
    oi = o_per.get_indexer(pd.DatetimeIndex(f["origin"]).to_period("Q"))
    tp_ord = o_per.asi8[oi] + f["horizon"].to_numpy()
    tps = pd.PeriodIndex.from_ordinals(tp_ord, freq="Q")
    f["target_period"] = tps.astype(str)
    pos = periods_all.get_indexer(tps)
    y = np.array([truth[v][p] for v, p in zip(f["variable"], pos, strict=True)])
    unpublished = tps > published_until
    y[unpublished] = np.nan
    f["truth"] = y
    f["truth_release"] = pd.NaT
    f.loc[~unpublished, "truth_release"] = (tps[~unpublished].end_time.normalize() + pd.Timedelta(days=30))
    f["truth_release"] = pd.to_datetime(f["truth_release"])
    f["missing_reason"] = np.where(unpublished, f"not yet published ({truth_name})", None)
    f["missing_reason"] = f["missing_reason"].astype(object).where(unpublished, None)
    reg = _regimes(periods_all)
    f["subperiods"] = _subperiods(tps, reg)
    sc = score_draws(y, flat)
    for k, v in sc.items():
        f[k] = v
    score_cols = [c for c in sc if c != "pit"]
    table = _aggregate(f, score_cols)
    relative = _relative(table, benchmark)
    tp = pd.DataFrame({"peak": [pd.Period(a, "Q") - 1 for a, _ in RECESSIONS],
                       "trough": [pd.Period(b, "Q") for _, b in RECESSIONS]})
    return Evaluation(run_dir=Path("/tmp/veldmark/run"), truth=truth_name, benchmark=benchmark, forecasts=f,
                      table=table, relative=relative, tests=_tests(f, benchmark), mcs=_mcs(table),
                      calibration=_calibration(f), fluctuation=_fluctuation(f, benchmark), regimes=reg,
                      chronology_source="invented Veldmark chronology (fixture)", turning_points=tp,
                      subperiod_names=["full", *CUSTOM, "recession", "expansion"], manifest=manifest)


def make_bundle(*, models=("rw", "ar", "bvar"), variables=("gdp", "cpi"), horizons=range(-1, 5),
                n_origins: int = 40, n_draws: int = 200, seed: int = SEED, fail: bool = True,
                skill=None) -> Bundle:
    """Build a consistent fake Evaluation (first and latest truth), an earlier one, Sensitivity, Ledger.

    Parameters
    ----------
    models : sequence of str
        Three names; the first is the benchmark (any text, markup included, is allowed).
    variables : sequence of str
        Target variables.
    horizons : iterable of int
    n_origins : int
        Quarterly origins from 2015-02-15.
    n_draws : int
    seed : int
    fail : bool
        Make one task fail (model 2, origin 11): its draws are NaN and it is listed in failures.
    skill : sequence of (bias, error scale, spread), optional
        One per model (default :data:`SKILL`, cycled).
    """
    models, variables, horizons = list(models), list(variables), list(horizons)
    rng = np.random.default_rng(seed)
    origins = pd.date_range("2015-02-15", periods=n_origins, freq="3MS") + pd.Timedelta(days=14)
    o_per = origins.to_period("Q")
    periods_all = pd.period_range(o_per[0] + min(horizons), o_per[-1] + max(horizons), freq="Q")
    first = _outcomes(rng, periods_all, variables)
    latest = {v: x + rng.normal(0, 0.35, len(x)) for v, x in first.items()}
    # Predictive draws: mean = first-release outcome + bias + error growing with the horizon.
    nm, no, nv, nh = len(models), len(origins), len(variables), len(horizons)
    pos = periods_all.get_indexer(pd.PeriodIndex.from_ordinals(
        (o_per.asi8[:, None] + np.asarray(horizons)[None, :]).ravel(), freq="Q")).reshape(no, nh)
    y = np.stack([first[v][pos] for v in variables], axis=1)  # (origin, variable, horizon)
    hscale = 0.6 + 0.25 * (np.asarray(horizons) - min(horizons))
    skill = np.array(list(skill) if skill is not None else [SKILL[i % len(SKILL)] for i in range(nm)])
    err = rng.normal(size=(nm, no, nv, nh)) * skill[:, 1, None, None, None] * hscale
    mean = y[None] + skill[:, 0, None, None, None] + err
    sd = skill[:, 2, None, None, None] * hscale * 1.1 * np.ones((1, 1, nv, 1))
    z = rng.standard_normal((nm, no, nv, nh, n_draws))
    draws = (mean[..., None] + sd[..., None] * z).astype(np.float32)
    failures = []
    if fail and nm > 1 and no > 11:
        draws[1, 11] = np.nan
        failures.append({"model": models[1], "origin": str(origins[11].date()), "key": "a1b2c3d4e5f6",
                         "error": "LinAlgError: Singular matrix <in lag selection> & \"quoted\"",
                         "traceback": "Traceback (most recent call last):\n  File \"ar.py\", line 42, in fit\n"
                                      "numpy.linalg.LinAlgError: Singular matrix\n"})
    tp = [[str(o + h) for h in horizons] for o in o_per]
    manifest = _manifest(models, variables, horizons, origins, tp, n_draws, batches=4, failures=failures)
    da = xr.DataArray(draws, dims=("model", "origin", "variable", "horizon", "draw"),
                      coords={"model": models, "origin": origins.values.astype("datetime64[ns]"),
                              "variable": variables, "horizon": horizons, "draw": np.arange(n_draws)})
    tpa = xr.DataArray(np.array(tp, dtype=object), dims=("origin", "horizon"),
                       coords={"origin": da["origin"].values, "horizon": horizons})
    ledger = Ledger(da, tpa, pd.DataFrame(), pd.DataFrame(failures, columns=["model", "origin", "key", "error",
                                                                             "traceback"]),
                    manifest, Path("/tmp/veldmark/run"))
    last_pub = o_per[-1] - 1
    ev_first = _evaluation(da, first, "first", periods_all, manifest, last_pub)
    ev_latest = _evaluation(da, latest, "latest", periods_all, manifest, last_pub)
    # The previous review: four fewer origins, two fewer store batches, truths published until then.
    early_man = _manifest(models, variables, horizons, origins[:-4], tp[:-4], n_draws, batches=2, failures=[])
    ev_early = _evaluation(da.isel(origin=slice(0, no - 4)), first, "first", periods_all, early_man,
                           o_per[-5] - 1)
    sens = _sensitivity({"first": ev_first, "release:2": _evaluation(
        da, {v: 0.5 * (first[v] + latest[v]) for v in variables}, "release:2", periods_all, manifest, last_pub),
        "latest": ev_latest}, benchmark=models[0], rng=rng)
    return Bundle(ev_first, ev_latest, ev_early, sens, ledger)


def _sensitivity(evs: dict[str, Evaluation], benchmark: str, rng: np.random.Generator) -> Sensitivity:
    rows = []
    for t, ev in evs.items():
        tab = ev.table[ev.table["subperiod"] == "full"]
        rel = ev.relative[ev.relative["subperiod"] == "full"]
        m = tab[["model", "variable", "horizon", "n", "crps"]].merge(
            rel[["model", "variable", "horizon", "crps"]].rename(columns={"crps": "ratio"}),
            on=["model", "variable", "horizon"])
        m.insert(0, "truth", t)
        rows.append(m.rename(columns={"crps": "score"}))
    truth_table = pd.concat(rows, ignore_index=True)
    truths = tuple(evs)
    ranks = []
    for (v, h), g in truth_table.groupby(["variable", "horizon"], sort=True):
        r = ranking_swaps(g.rename(columns={"score": "value"}), by="truth", reference=truths[0])
        r.insert(0, "horizon", h)
        r.insert(0, "variable", v)
        ranks.append(r)
    rankings = pd.concat(ranks, ignore_index=True)
    full = evs[truths[0]].table
    full = full[full["subperiod"] == "full"]
    dt = full[["model", "variable", "horizon", "n"]].copy()
    dt["real_time"] = full["crps"].to_numpy()
    dt["pseudo"] = dt["real_time"] * (1 - rng.uniform(0.0, 0.08, len(dt)))
    dt["difference"] = dt["real_time"] - dt["pseudo"]
    dt["stat"] = rng.normal(1.0, 1.0, len(dt))
    dt["pvalue"] = 2 * stats.norm.sf(np.abs(dt["stat"]))
    exposure = revision_exposure(evs, benchmark, truths)
    verdicts = []
    for m in [x for x in pd.unique(truth_table["model"]) if x != benchmark]:
        g = truth_table[truth_table["model"] == m]
        stable = g.assign(win=g["ratio"] < 1).groupby(["variable", "horizon"])["win"].nunique().eq(1)
        verdicts.append(dict(model=m, beats_every_truth=bool(stable.all()), ranking_stable=bool(stable.all()),
                             verdict=f"win/lose verdict stable in {int(stable.sum())} of {len(stable)} cells"))
    return Sensitivity(truth_table, rankings, dt, exposure, pd.DataFrame(verdicts), truths, None)


def make_store(path: Path, n_batches: int = 4):
    """A small vintage store of the invented Veldmark office with ``n_batches`` release batches."""
    from vintages.store import VintageStore

    store = VintageStore.init(path)
    periods = pd.period_range("2023Q1", periods=8, freq="Q")
    for b in range(n_batches):
        rel = (periods[3 + b].end_time.normalize() + pd.Timedelta(days=30)).date()
        known = periods[: 4 + b]
        df = pd.DataFrame({"variable": "gdp", "period": known.astype(str), "release": str(rel),
                           "value": 100.0 + np.arange(len(known)) + 0.1 * b})
        store.append(df, {"gdp": {"freq": "Q"}}, source=f"veldmark_gdp_batch{b + 1}.csv")
    return store


def make_extras(bundle: Bundle, *, pools: bool = True, diagnostics: bool = True):
    """The report's optional inputs for a bundle: history at the last origin, a news frame, pool weights, diagnostics.

    The history is the first-truth outcome of each target up to the quarter before the last
    origin's (what was published then); the news frame's contributions add up to its total; the
    pool weights of each origin sum to one; the diagnostics are a hyperparameter path.
    """
    from harness.report.inputs import Extras

    ev = bundle.evaluation
    last = pd.Timestamp(bundle.ledger.draws["origin"].values[-1]).to_period("Q")
    hist = {}
    for v in pd.unique(ev.forecasts["variable"]):
        f = ev.forecasts[ev.forecasts["variable"] == v][["target_period", "truth"]].dropna()
        f = f.drop_duplicates("target_period")
        f = f[[pd.Period(p, "Q") < last for p in f["target_period"]]].sort_values("target_period")
        hist[str(v)] = pd.Series(f["truth"].to_numpy(dtype=float), index=f["target_period"].to_numpy())
    rng = np.random.default_rng(SEED + 1)
    contrib = rng.normal(0, 0.2, 4)
    news = pd.DataFrame({"variable": ["gdp", "cpi", "gdp", "gdp"], "period": [str(last - 1)] * 2 + [str(last - 2)] * 2,
                         "kind": ["news", "news", "revision", "reestimation"], "actual": [2.0, 1.5, 1.0, np.nan],
                         "expected": [1.6, 1.7, 1.1, np.nan], "weight": [0.3, -0.2, 0.1, np.nan],
                         "contribution": contrib})
    total = float(contrib.sum())
    news = pd.concat([news, pd.DataFrame({"variable": ["gdp", "gdp"], "period": [str(last)] * 2,
                                          "kind": ["remainder", "total"], "actual": [np.nan, 2.0],
                                          "expected": [np.nan, 2.0 - total], "weight": [np.nan, np.nan],
                                          "contribution": [0.0, total]})], ignore_index=True)
    origins = pd.DatetimeIndex(bundle.ledger.draws["origin"].values)
    news.attrs.update(model="bvar", target="gdp", period=str(last), horizon=0, origin_old=str(origins[-2].date()),
                      origin_new=str(origins[-1].date()), forecast_old=2.0 - total, forecast_new=2.0)
    ex = Extras(history=hist, history_origin=str(origins[-1].date()), news=[news])
    if pools:
        models = [str(m) for m in bundle.ledger.draws["model"].values]
        rows = []
        for k, o in enumerate(origins):
            w = rng.dirichlet(np.ones(len(models))) if k >= 8 else np.full(len(models), 1 / len(models))
            for v in ("gdp", "cpi"):
                for h in (0, 1):
                    for m, x in zip(models, w, strict=True):
                        rows.append(dict(pool="pool_opt", origin=o, variable=v, horizon=h, model=m, weight=float(x),
                                         fallback=k < 8))
        ex.pool_weights = pd.DataFrame(rows)
    if diagnostics:
        ex.diagnostics = pd.DataFrame({"model": "bvar", "origin": origins, "name": "tightness",
                                       "value": 0.2 + 0.05 * np.sin(np.arange(len(origins)) / 4)})
    return ex
