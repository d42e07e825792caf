"""Run the registered comparison and calibration tests over the cells of an evaluation.

A *cell* is a (variable, horizon[, sub-period, score, model]) combination of the per-forecast
scores. Which tests run on which score columns is read from the registries (a score lists its
tests, a test declares its kind, applicability, minimum sample, settings and whether it is
seeded); nothing here names a particular test or score.

Every test result becomes one row with the columns :data:`TEST_COLUMNS`
(``test, model, variable, horizon, subperiod, score, n, statistic, pvalue, note, mean_diff,
method``); the pairwise matrix adds ``versus``. A cell where a test does not apply or has too
few observations keeps its row, with NaN and the reason in ``note``.

Serially dependent tests get the *time positions* of their observations: the ordinals of the
target periods (one per origin at a given horizon). A sub-sample with gaps (the quarters of two
recessions) then never pairs the last quarter of one with the first of the next as if they were
neighbours. When several origins share a target period (e.g. monthly origins for quarterly
targets) the positions are the origins' ranks among all origins of the variable and horizon.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from harness.compare.registry import ComparisonTest, cell_seed, comparison_tests, get_test, screen
from harness.scores import resolve

TEST_COLUMNS: tuple[str, ...] = ("test", "model", "variable", "horizon", "subperiod", "score", "n",
                                 "statistic", "pvalue", "note", "mean_diff", "method")
MATRIX_COLUMNS: tuple[str, ...] = ("test", "model", "versus", "variable", "horizon", "subperiod",
                                   "score", "n", "statistic", "pvalue", "note", "mean_diff", "method")

__all__ = ["MATRIX_COLUMNS", "TEST_COLUMNS", "against", "calibration_results", "calibration_tests",
           "dependence_steps", "origins_per_target", "pairwise_matrix", "pairwise_tests", "set_tests",
           "stability_tests", "steps_ahead", "target_positions"]


def steps_ahead(h) -> int:
    """Steps ahead for the tests' HAC lags: h + 1 periods separate origin and target at horizon h ≥ 0
    (the origin's own period is not yet observed); backcasts count as one step."""
    return max(int(h) + 1, 1)


def origins_per_target(target_periods) -> int:
    """How many consecutive origins share a target period (3 for monthly origins of quarterly targets).

    Forecasts of one target period from successive origins overlap, so a test's horizon counted
    in target periods must be multiplied by this to count the overlap in origin steps.
    """
    tp = np.asarray(target_periods, dtype=object)
    if tp.size == 0:
        return 1
    _, counts = np.unique(tp.astype(str), return_counts=True)
    return max(int(np.ceil(np.median(counts))), 1)


def dependence_steps(h, target_periods) -> int:
    """Steps of serial dependence between consecutive forecasts at horizon ``h``, in origin steps.

    ``steps_ahead(h)`` target periods times :func:`origins_per_target` (common practice: an
    h-step forecast error is MA(h−1) in the target's periods; with k origins per period it spans
    k(h+1) origins).
    """
    return steps_ahead(h) * origins_per_target(target_periods)


def target_positions(target_periods) -> np.ndarray:
    """Time positions of forecasts in origin order: target-period ordinals when they strictly
    increase, else ranks ``0..n-1`` (several origins per target period, or unparsable labels)."""
    from vintages import parse_periods

    tp = np.asarray(target_periods, dtype=object)
    n = tp.size
    if n == 0:
        return np.zeros(0, dtype=np.int64)
    ords, freq = parse_periods(tp.astype(str))
    if (freq != "").all() and len(set(freq.tolist())) == 1 and (n == 1 or (np.diff(ords) > 0).all()):
        return ords.astype(np.int64)
    return np.arange(n, dtype=np.int64)


def _columns_for(test: ComparisonTest, frame: pd.DataFrame, only: Sequence[str] | None) -> list[str]:
    out = []
    for c in frame.columns:
        col = resolve(c)
        if col is not None and test.name in col.score.tests and (only is None or c in only):
            out.append(c)
    return out


def _panels(g: pd.DataFrame, scores: Sequence[str]):
    """Per (variable, horizon) group: origins, target periods, positions, sub-period sets, models, loss arrays."""
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
    tp = tps["target_period"].to_numpy()
    subl = tps["subperiods"].to_list() if "subperiods" in tps else [["full"]] * len(origins)
    return origins, tp, target_positions(tp), subl, models, arrays


def _masks(sublists, names) -> dict[str, np.ndarray]:
    return {s: np.array([s in (sl if isinstance(sl, (list, tuple, np.ndarray)) else []) for sl in sublists],
                        dtype=bool) for s in names}


def _subperiod_names(fc: pd.DataFrame) -> list[str]:
    if "subperiods" not in fc:
        return ["full"]
    return list(dict.fromkeys(x for ss in fc["subperiods"] for x in ss))


def _run_pair(test, params, a, b, positions, steps, seed_key, seed):
    n = int(a.size)
    res = screen(test, n, steps, params)
    if res is None:
        s = cell_seed(seed, test.name, seed_key) if test.seeded else 0
        kw = {"positions": positions} if test.positional else {}
        res = test.run(a, b, h=steps, seed=s, params=params, **kw)
    return res


def _row(res, **keys) -> dict:
    return dict(keys, n=int(res.n), statistic=float(res.statistic), pvalue=float(res.pvalue),
                note=res.note, mean_diff=float(res.extra.get("mean_diff", np.nan)),
                method=str(res.extra.get("method", "")))


def _pairwise(fc, pairs_of, *, seed, settings, scores, tests, matrix: bool) -> pd.DataFrame:
    rows = []
    subs = _subperiod_names(fc)
    for test in tests:
        params = test.settings((settings or {}).get(test.name))
        cols = _columns_for(test, fc, scores)
        if not cols:
            continue
        for (var, h), g in fc.groupby(["variable", "horizon"], sort=True):
            _, tps, pos, sublists, models, arrays = _panels(g, cols)
            masks = _masks(sublists, subs)
            steps = dependence_steps(h, tps)
            for score, arr in arrays.items():
                for j, jb in pairs_of(models):
                    pair_ok = np.isfinite(arr[:, j]) & np.isfinite(arr[:, jb])
                    for sname, mask in masks.items():
                        sel = pair_ok & mask
                        key = (var, h, sname, score, models[j]) + ((models[jb],) if matrix else ())
                        res = _run_pair(test, params, arr[sel, j], arr[sel, jb], pos[sel], steps,
                                        key, seed)
                        extra = {"versus": models[jb]} if matrix else {}
                        rows.append(_row(res, test=test.name, model=models[j], variable=var, horizon=h,
                                         subperiod=sname, score=score, **extra))
    return pd.DataFrame(rows, columns=list(MATRIX_COLUMNS if matrix else TEST_COLUMNS))


def pairwise_tests(fc: pd.DataFrame, benchmark: str, *, seed: int,
                   settings: Mapping[str, Mapping[str, Any]] | None = None,
                   scores: Sequence[str] | None = None) -> pd.DataFrame:
    """Every pairwise test, each model against ``benchmark``, per variable × horizon × sub-period × score.

    Parameters
    ----------
    fc : DataFrame
        Per-forecast scores with ``model, variable, horizon, origin, target_period,
        subperiods`` and score columns.
    benchmark : str
        The model every other is compared with (any model of the frame: no refit needed).
    seed : int
        The spec's seed (seeded tests spawn one per cell).
    settings : mapping, optional
        Per-test settings (the spec's ``[scoring.tests]``).
    scores : sequence of str, optional
        Restrict to these score columns.

    Returns
    -------
    DataFrame
        Columns :data:`TEST_COLUMNS`; ``mean_diff`` is the model's mean loss minus the
        benchmark's, ``statistic`` > 0 means the model has the higher loss.
    """
    if "model" in fc and benchmark not in set(fc["model"]):
        return pd.DataFrame(columns=list(TEST_COLUMNS))

    def pairs_of(models):
        if benchmark not in models:
            return []
        jb = models.index(benchmark)
        return [(j, jb) for j in range(len(models)) if j != jb]

    return _pairwise(fc, pairs_of, seed=seed, settings=settings, scores=scores,
                     tests=comparison_tests("pairwise"), matrix=False)


def pairwise_matrix(fc: pd.DataFrame, *, seed: int,
                    settings: Mapping[str, Mapping[str, Any]] | None = None,
                    scores: Sequence[str] | None = None, test: str | None = None) -> pd.DataFrame:
    """Every ordered pair of models, per variable × horizon × sub-period × score (one pairwise test).

    Row ``(model=a, versus=b)`` tests a against b on ``loss_a - loss_b`` (``mean_diff`` = a's
    mean loss minus b's; with the two-sided default the row ``(b, a)`` has the opposite
    statistic and the same p-value). :func:`against` turns it into the benchmark view of
    :func:`pairwise_tests` for any benchmark, without refitting or retesting.

    Parameters
    ----------
    fc : DataFrame
        As for :func:`pairwise_tests`.
    seed : int
    settings : mapping, optional
    scores : sequence of str, optional
    test : str, optional
        Registered pairwise test; default the first one declared (``dm``).

    Returns
    -------
    DataFrame
        Columns :data:`MATRIX_COLUMNS`.
    """
    tests = [get_test(test)] if test is not None else comparison_tests("pairwise")[:1]
    bad = [t.name for t in tests if t.kind != "pairwise"]
    if bad:
        names = sorted(t.name for t in comparison_tests("pairwise"))
        raise ValueError(f"pairwise_matrix: test {bad[0]!r} is not a pairwise test; expected one of {names}")

    def pairs_of(models):
        return [(i, j) for i in range(len(models)) for j in range(len(models)) if i != j]

    return _pairwise(fc, pairs_of, seed=seed, settings=settings, scores=scores, tests=tests,
                     matrix=True)


def against(matrix: pd.DataFrame, benchmark: str) -> pd.DataFrame:
    """The rows of a :func:`pairwise_matrix` against ``benchmark``, as :func:`pairwise_tests` returns them.

    Raises
    ------
    ValueError
        ``benchmark`` is not a model of the matrix (the models are listed).
    """
    models = sorted(set(matrix["model"]) | set(matrix["versus"])) if len(matrix) else []
    if len(matrix) and benchmark not in models:
        raise ValueError(f"against: unknown benchmark {benchmark!r}; models are {models}")
    out = matrix[matrix["versus"] == benchmark].drop(columns="versus")
    return out.reset_index(drop=True)[list(TEST_COLUMNS)]


def set_tests(fc: pd.DataFrame, *, seed: int,
              settings: Mapping[str, Mapping[str, Any]] | None = None,
              include_too_small: bool = False) -> pd.DataFrame:
    """Every set test (the model confidence set) per variable × horizon, full sample.

    Cells below the test's minimum sample are left out unless ``include_too_small``: their rows
    then carry ``in_mcs = False``, NaN p-values and the "n too small" note (so do not read
    ``in_mcs`` without ``note``).

    Returns
    -------
    DataFrame
        Columns ``test, score, variable, horizon, model, in_mcs, pvalue, n, alpha, note``.
    """
    rows = []
    for test in comparison_tests("set"):
        params = test.settings((settings or {}).get(test.name))
        for score in _columns_for(test, fc, None):
            for (var, h), g in fc.groupby(["variable", "horizon"], sort=True):
                wide = g.pivot_table(index="origin", columns="model", values=score).dropna()
                if wide.shape[1] < 2:
                    continue
                steps = dependence_steps(h, g.drop_duplicates("origin")["target_period"].to_numpy())
                labels = list(wide.columns)
                small = screen(test, wide.shape[0], steps, params)
                if small is not None:
                    if include_too_small:
                        rows += [dict(test=test.name, score=score, variable=var, horizon=h, model=m,
                                      in_mcs=False, pvalue=np.nan, n=small.n, alpha=params.get("alpha", np.nan),
                                      note=small.note) for m in labels]
                    continue
                s = cell_seed(seed, test.name, (var, h, score)) if test.seeded else 0
                for m, r in zip(labels, test.run(wide, labels, h=steps, seed=s, params=params), strict=True):
                    rows.append(dict(test=test.name, score=score, variable=var, horizon=h, model=m,
                                     in_mcs=bool(r.extra.get("in_set")), pvalue=r.pvalue, n=r.n,
                                     alpha=r.extra.get("alpha", np.nan), note=r.note))
    return pd.DataFrame(rows, columns=["test", "score", "variable", "horizon", "model", "in_mcs",
                                       "pvalue", "n", "alpha", "note"])


def calibration_results(fc: pd.DataFrame, *, seed: int,
                        settings: Mapping[str, Mapping[str, Any]] | None = None) -> pd.DataFrame:
    """Every calibration test (coverage, PIT) per model × variable × horizon × column, full sample.

    Returns
    -------
    DataFrame
        Columns :data:`TEST_COLUMNS` plus ``level`` (nominal coverage, NaN for PIT tests);
        ``score`` is the column tested (``cover_70``, ``pit``), ``subperiod`` is ``"full"``,
        ``mean_diff`` the hit rate minus the nominal coverage (NaN for PIT tests).
    """
    cal = comparison_tests("calibration")
    rows = []
    for (model, var, h), g in fc.groupby(["model", "variable", "horizon"], sort=True):
        g = g.sort_values("origin")
        steps = dependence_steps(h, g["target_period"].to_numpy()) if "target_period" in g else steps_ahead(h)
        pos_all = target_positions(g["target_period"].to_numpy()) if "target_period" in g \
            else np.arange(len(g), dtype=np.int64)
        for c in g.columns:
            col = resolve(c)
            if col is None or col.score.orientation != "calibration":
                continue
            series = g[c].to_numpy(dtype=np.float64)
            ok = np.isfinite(series)
            finite, pos = series[ok], pos_all[ok]
            for test in cal:
                if test.name not in col.score.tests:
                    continue
                params = test.settings((settings or {}).get(test.name))
                screen_params = {**params, "level": col.nominal}
                res = screen(test, len(finite), steps, screen_params)
                if res is None:
                    s = cell_seed(seed, test.name, (model, var, h, c)) if test.seeded else 0
                    kw = {"positions": pos} if test.positional else {}
                    res = test.run(finite, h=steps, level=col.nominal, seed=s, params=params, **kw)
                level = np.nan if col.nominal is None else float(col.nominal)
                diff = float(finite.mean() - level) if (col.nominal is not None and len(finite)) else np.nan
                rows.append(dict(test=test.name, model=model, variable=var, horizon=h, subperiod="full",
                                 score=c, n=int(res.n), statistic=float(res.statistic),
                                 pvalue=float(res.pvalue), note=res.note, mean_diff=diff,
                                 method=str(res.extra.get("method", "")), level=level,
                                 cvm_pvalue=float(res.extra.get("cvm_pvalue", np.nan))))
    return pd.DataFrame(rows, columns=list(TEST_COLUMNS) + ["level", "cvm_pvalue"])


def calibration_tests(fc: pd.DataFrame, *, seed: int,
                      settings: Mapping[str, Mapping[str, Any]] | None = None) -> pd.DataFrame:
    """Coverage and PIT tests per model × variable × horizon (wide: one row per cell).

    Columns: ``n`` (PIT values), per coverage column ``<col>_rate`` and ``<col>_<test>_p``, per
    PIT test ``<short>_p`` (``berkowitz_p``, ``rs_p``, ``rs_cvm_p``, ``knuppel_p``), and
    ``pit_bin_1`` … ``pit_bin_10`` (integer counts of the PIT values in ten equal bins). The p-values are those of
    :func:`calibration_results` (NaN where a test does not apply, e.g. Berkowitz at h > 1, or
    has too few observations; the long frame says why).
    """
    from harness.compare import pit_histogram

    long = calibration_results(fc, seed=seed, settings=settings)
    rows = []
    for (model, var, h), g in fc.groupby(["model", "variable", "horizon"], sort=True):
        pit = g["pit"].to_numpy(dtype=np.float64) if "pit" in g else np.zeros(0)
        pit = pit[np.isfinite(pit)]
        row: dict[str, Any] = dict(model=model, variable=var, horizon=h, n=len(pit))
        for c in g.columns:
            col = resolve(c)
            if col is not None and col.score.orientation == "calibration" and col.nominal is not None:
                s = g[c].to_numpy(dtype=np.float64)
                s = s[np.isfinite(s)]
                row[f"{c}_rate"] = s.mean() if len(s) else np.nan
        cell = long[(long["model"] == model) & (long["variable"] == var) & (long["horizon"] == h)]
        for r in cell.itertuples(index=False):
            key = f"{r.score}_{r.test}_p" if np.isfinite(r.level) else _pit_key(r.test)
            row[key] = r.pvalue
            if r.test == "rossi_sekhposyan":
                row["rs_cvm_p"] = r.cvm_pvalue
        for k, count in enumerate(pit_histogram(pit, bins=10), start=1):
            row[f"pit_bin_{k}"] = int(count)
        rows.append(row)
    return pd.DataFrame(rows)


def _pit_key(test: str) -> str:
    return {"rossi_sekhposyan": "rs_p"}.get(test, f"{test}_p")


def stability_tests(fc: pd.DataFrame, benchmark: str, *, seed: int,
                    settings: Mapping[str, Mapping[str, Any]] | None = None) -> pd.DataFrame:
    """Rolling comparisons (the fluctuation test) of each model against the benchmark, full sample.

    One row per window (its last target period): ``test, score, model, variable, horizon,
    target_period, stat, critical, reject`` (a path, not a test result: ``stat`` is the rolling
    statistic). Cells below the test's minimum sample have no rows.
    """
    rows = []
    for test in comparison_tests("stability"):
        params = test.settings((settings or {}).get(test.name))
        for score in _columns_for(test, fc, None):
            for (var, h), g in fc.groupby(["variable", "horizon"], sort=True):
                _, tps, pos, _, models, arrays = _panels(g, [score])
                if benchmark not in models or score not in arrays:
                    continue
                arr, jb = arrays[score], models.index(benchmark)
                steps = dependence_steps(h, tps)
                for j, model in enumerate(models):
                    if model == benchmark:
                        continue
                    ok = np.isfinite(arr[:, j]) & np.isfinite(arr[:, jb])
                    if screen(test, int(ok.sum()), steps, params) is not None:
                        continue
                    kw = {"positions": pos[ok]} if test.positional else {}
                    r = test.run(arr[ok, j], arr[ok, jb], h=steps, seed=0, params=params, **kw)
                    ends = tps[ok][np.asarray(r.extra["window_end"], dtype=int)]
                    for t, val in zip(ends, r.extra["path"], strict=True):
                        rows.append(dict(test=test.name, score=score, model=model, variable=var,
                                         horizon=h, target_period=t, stat=float(val),
                                         critical=float(r.extra["critical"]),
                                         reject=bool(r.extra["reject"])))
    return pd.DataFrame(rows)
