"""Scoring a run against a truth, without refitting: the bridge from the ledger to the tables.

``evaluate(run_dir, truth)`` reads the ledger, computes the truth of every target with the same
transformation inside the truth's vintage (:func:`vintages.truth_values`), scores every
forecast (:func:`harness.scores.score_all`), assigns sub-periods by target period (full sample,
custom ranges, recession/expansion), aggregates, forms ratios to the benchmark, and runs the
comparison and calibration tests (:mod:`harness.compare`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from harness.backtest.ledger import Ledger, read_ledger
from harness.errors import UnknownNameError


@dataclass
class Evaluation:
    """Everything a review needs from one run under one truth.

    Attributes
    ----------
    forecasts : DataFrame
        One row per forecast: model, origin, variable, horizon, target_period, ``ok`` (the
        forecast exists), truth, truth_release, missing_reason, ``scored`` (a truth is published,
        so the forecast is scored), subperiods (list), and every score column.
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
    manifest: object = None  # RunManifest
    #: the evaluation cache's key of this evaluation ("" when not cached); later stages (the
    #: verdicts' band tests) keep their own results under it
    cache_key: str = ""

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


def regimes_for(manifest, cube, periods: pd.PeriodIndex) -> tuple[pd.Series, str, pd.DataFrame]:
    """Recession/expansion label per period: from the chronology file, else Harding–Pagan dating.

    Harding–Pagan uses the spec's ``[scoring] min_phase`` / ``min_cycle`` when given.
    """
    from vintages import harding_pagan, read_chronology, regimes

    scoring = manifest.scoring
    if scoring.chronology is not None:
        chron = read_chronology(scoring.chronology)
        return regimes(chron, periods), f"chronology file {scoring.chronology}", chron
    var = scoring.cycle_variable or manifest.targets[0]
    lat = cube.latest(cube.freq_of(var)).sel(variable=var).to_series().dropna()
    if cube.freq_of(var) == "M":
        lat = lat.groupby(lat.index.asfreq("Q")).mean()
    rules = {k: getattr(scoring, k) for k in ("min_phase", "min_cycle") if getattr(scoring, k) is not None}
    tp = harding_pagan(lat, **rules)
    said = ", ".join(f"{k} {v}" for k, v in rules.items())
    src = f"Harding–Pagan (2002) dating of {var} in the latest vintage" + (f" ({said})" if said else "")
    return regimes(tp, periods if manifest.freq == "Q" else periods.asfreq("Q")), src, tp


def evaluate(run: str | Path | Ledger, truth: str | None = None, *, store=None, cube=None,
             benchmark: str | None = None, dm_scores=None, tests: bool = True,
             seed: int | None = None, test_settings: dict | None = None, cache: bool = True) -> Evaluation:
    """Score a run against one truth rule.

    Parameters
    ----------
    run : path or Ledger
        A run directory (or its ledger, already read).
    truth : str, optional
        ``first``, ``release:K``, ``lag:NNND``, ``latest`` or ``asof:YYYY-MM-DD``; default: the
        spec's ``[scoring] truth``.
    benchmark : str, optional
        The incumbent every model is set against (default the spec's ``[scoring] benchmark``);
        choosing another needs no refit.
    store : VintageStore, optional
        Default: the store the run names.
    cube : Cube, optional
        The store's cube, when the caller already built it (scoring one run under several
        truths needs it once).
    dm_scores : sequence of str, optional
        Restrict the pairwise tests to these score columns (default: every score whose
        declaration lists the test).
    tests : bool
        Run the comparison and calibration tests (False: scores and tables only).
    seed : int, optional
        Seed of the random tests (bootstraps), spawned per test and cell; default the run's
        spec seed.
    test_settings : dict, optional
        ``{test name: {setting: value}}`` overriding the registered defaults (e.g. the number
        of bootstrap replications); default the spec's ``[scoring.tests]``.
    cache : bool
        Read the evaluation from, and write it to, the run directory's evaluation cache
        (:mod:`harness.evaluation.cache`): scoring a run again under the same truth, store and
        settings reads the tables back instead of recomputing them.

    Returns
    -------
    Evaluation
    """
    from harness.backtest.manifest import RunManifest
    from harness.evaluation import cache as ecache
    from harness.evaluation import cells
    from harness.scores import aggregate, assign_subperiods, common_sample, relative_to, score_all
    from vintages import VintageStore, parse_truth

    man = run.manifest if isinstance(run, Ledger) else RunManifest.read(run)
    run_dir = Path(run.run_dir if isinstance(run, Ledger) else run)
    scoring = man.scoring
    truth = str(parse_truth(truth or scoring.truth or "first"))
    benchmark = benchmark or man.benchmark
    if benchmark not in man.models:
        raise UnknownNameError(f"unknown benchmark {benchmark!r}; models of this run: {list(man.models)}")
    key = None
    if cache:
        checksum = cube.checksum if cube is not None and getattr(cube, "checksum", None) else \
            (store or VintageStore(man.store)).checksum()
        key = ecache.evaluation_key(man, checksum, truth=truth, benchmark=benchmark,
                                    dm_scores=None if dm_scores is None else list(dm_scores), tests=tests,
                                    seed=seed, test_settings=test_settings)
        hit = ecache.load(run_dir, key, man)
        if hit is not None:
            hit.cache_key = key
            return hit
    ledger = run if isinstance(run, Ledger) else read_ledger(run)
    freq = man.freq
    if cube is None:
        store = store or VintageStore(man.store)
        cube = store.cube(variables=list(man.variables))

    frame = ledger.frame()
    periods_by_var = {v: sorted(set(frame.loc[frame["variable"] == v, "target_period"]),
                                key=lambda s: pd.Period(s, freq=freq)) for v in man.targets}
    truths = _truths(cube, truth, man.variables, man.targets, periods_by_var, freq)
    frame = frame.merge(truths, on=["variable", "target_period"], how="left")
    ok = frame["ok"].to_numpy()
    draws = ledger.draws.transpose("model", "origin", "variable", "horizon", "draw").values
    draws = draws.reshape(-1, draws.shape[-1])[ok]
    # every row kept is a forecast that exists: the ledger's "ok" flag says nothing more here, and a
    # column of True beside forecasts without a truth would invite a wrong count ("scored" is the one)
    fc = frame[ok].drop(columns="ok").reset_index(drop=True)
    kw = {k: tuple(getattr(scoring, k)) for k in ("quantile_levels", "coverage_levels", "interval_levels")
          if getattr(scoring, k) is not None}
    # draws are stored as float32: compare them with the truth at the same resolution, so that a
    # forecast equal to an already published value scores exactly zero error
    obs = fc["truth"].to_numpy(dtype=np.float64).astype(np.float32).astype(np.float64)
    if len(fc) and not np.isfinite(obs).any():
        why = fc["missing_reason"].dropna()
        raise ValueError(f"no forecast has a truth under {truth!r} (e.g. {why.iloc[0]})" if len(why) else
                         f"no forecast has a truth under {truth!r}")
    scores = score_all(obs, draws, **kw)
    for k, v in scores.items():
        fc[k] = v
    # "scored": the forecast has a published truth under this rule (what every count uses)
    fc["scored"] = np.isfinite(fc["truth"].to_numpy(dtype=np.float64))
    all_periods = pd.PeriodIndex(sorted({pd.Period(p, freq=freq) for p in fc["target_period"]}), freq=freq)
    reg, chron_src, tps = regimes_for(man, cube, all_periods)
    sub = scoring.subperiod_map
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
        seed = int(man.seed) if seed is None else int(seed)
        settings = test_settings if test_settings is not None else (scoring.tests or {})
        dm = cells.pairwise_tests(fc, benchmark, seed=seed, settings=settings, scores=dm_scores)
        mcs = cells.set_tests(fc, seed=seed, settings=settings)
        calib = cells.calibration_tests(fc, seed=seed, settings=settings)
        fluct = cells.stability_tests(fc, benchmark, seed=seed, settings=settings)
    else:
        dm = mcs = calib = fluct = pd.DataFrame()
    names = ["full"] + list(sub) + ["recession", "expansion"]
    ev = Evaluation(Path(ledger.run_dir), truth, benchmark, fc, table, relative, dm, mcs, calib, fluct, reg,
                    chron_src, tps, names, man)
    if key is not None:
        try:
            ecache.store(run_dir, key, ev)
            ev.cache_key = key
        except OSError:  # a read-only run directory: the evaluation is still returned
            pass
    return ev
