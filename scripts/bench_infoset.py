"""Benchmark: information sets for many origins, against a straightforward per-origin pandas build.

Scenario (simulated, fixed seed): 10 quarterly variables over 200 quarters and 10 monthly
variables over 600 months, each with 600 releases (quarterly: about 30, 60 and 90 days after the
quarter, each republishing the last 12 quarters, plus a full-history benchmark every August;
monthly: one release a month republishing the last 24 months, plus a full-history benchmark
every February). 100 quarterly origins; transforms inside each vintage and monthly→quarterly
conversion (mean, sum, last, mean3).

Printed as ``name: value`` lines; targets: ``infoset_ms_per_origin`` ≤ 5 and
``infoset_speedup_vs_pandas`` ≥ 20 (both measured in the same run, side by side). The baseline
is checked to give the same panels before it is timed. The native layout (each variable in its
own frequency on one monthly axis) is timed beside it on the same origins.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from vintages.calendar import quarterly  # noqa: E402
from vintages.cube import Cube  # noqa: E402
from vintages.infosets import build_infosets  # noqa: E402
from vintages.periods import format_periods, period_end  # noqa: E402

SEED = 20261201
NQ, NM = 10, 10
Q0 = pd.Period("1976Q1", "Q").ordinal
M0 = pd.Period("1976-01", "M").ordinal
TQ, TM = 200, 600


def _levels(rng, n) -> np.ndarray:
    return 100.0 * np.exp(np.cumsum(rng.normal(0.005, 0.01, n)))


def _release_rows(name: str, freq: str, truth: np.ndarray, rng, first: int) -> pd.DataFrame:
    """Releases of one variable: each republishes a window of recent periods (noisy, converging)."""
    T = len(truth)
    ords = first + np.arange(T)
    ends = period_end(ords, freq)
    if freq == "Q":
        lags = (30, 60, 90)
        window = 12
        bench_month = 8
    else:
        lags = (15,)
        window = 24
        bench_month = 2
    off = int(name[1:]) % 3  # a few distinct release days, shared by several variables
    p_rows, r_rows, x_rows = [], [], []
    for k, lag in enumerate(lags):
        rel = ends + np.timedelta64(lag + off, "D")
        for t in range(T):  # one release per (period, stage): the loop builds test data only
            lo = max(0, t - window + 1)
            if k == len(lags) - 1 and pd.Timestamp(rel[t]).month == bench_month:
                lo = 0  # benchmark: the whole history again
            span = np.arange(lo, t + 1)
            noise = rng.normal(0, 0.003, len(span)) * np.exp(-(t - span) / 6.0)
            x_rows.append(truth[span] * (1 + noise))
            p_rows.append(ords[span])
            r_rows.append(np.full(len(span), rel[t]))
    p = np.concatenate(p_rows)
    return pd.DataFrame(
        {
            "variable": name,
            "period": format_periods(p, freq),
            "release": np.concatenate(r_rows).astype("datetime64[s]"),
            "value": np.concatenate(x_rows),
            "_ord": p,
        }
    )


def make_log(seed: int = SEED) -> tuple[pd.DataFrame, dict, dict]:
    """The simulated release log, its metadata and the series specs of the benchmark."""
    rng = np.random.default_rng(seed)
    frames, meta, specs = [], {}, {}
    q_transforms = ("dlog_ann", "level", "yoy", "diff", "dlog")
    m_specs = (
        {"transform": "dlog_ann", "convert": "mean"},
        {"transform": "level", "convert": "sum"},
        {"transform": "yoy", "convert": "last"},
        {"transform": "dlog", "convert": "mean3"},
        {"transform": "diff", "convert": "mean"},
    )
    for i in range(NQ):
        name = f"q{i:02d}"
        frames.append(_release_rows(name, "Q", _levels(rng, TQ), rng, Q0))
        meta[name] = {"freq": "Q"}
        specs[name] = {"transform": q_transforms[i % len(q_transforms)]}
    for i in range(NM):
        name = f"m{i:02d}"
        frames.append(_release_rows(name, "M", _levels(rng, TM), rng, M0))
        meta[name] = {"freq": "M"}
        specs[name] = dict(m_specs[i % len(m_specs)])
    log = pd.concat(frames, ignore_index=True)
    return log, meta, specs


# ---------------------------------------------------------------------------- the baseline
def baseline_infoset(log: pd.DataFrame, meta: dict, specs: dict, origin) -> pd.DataFrame:
    """A straightforward pandas build of one information set (policy keep).

    Filter the long table by release ≤ origin, keep the last release of each cell, pivot,
    convert months to quarters by groupby, transform column by column.
    """
    sub = log[log["release"] <= pd.Timestamp(origin)]
    sub = sub.sort_values("release", kind="stable")
    cur = sub.groupby(["variable", "_ord"], sort=False).last().reset_index()
    wide = cur.pivot(index="_ord", columns="variable", values="value")
    qv = [v for v in specs if meta[v]["freq"] == "Q"]
    mv = [v for v in specs if meta[v]["freq"] == "M"]
    cols = {}
    if qv:
        wq = wide[[v for v in qv if v in wide]].dropna(how="all")
        wq.index = pd.PeriodIndex.from_ordinals(wq.index.to_numpy(np.int64), freq="Q")
        for v in qv:
            cols[v] = wq[v]
    if mv:
        wm = wide[[v for v in mv if v in wide]].dropna(how="all")
        wm.index = pd.PeriodIndex.from_ordinals(wm.index.to_numpy(np.int64), freq="M")
        g = wm.groupby(wm.index.asfreq("Q"))
        count = g.count()
        for v in mv:
            how = specs[v]["convert"]
            if how == "mean":
                cols[v] = g[v].mean()
            elif how == "sum":
                cols[v] = g[v].sum(min_count=3).where(count[v] == 3)
            elif how == "last":
                third = wm[v][wm.index.month % 3 == 0]
                third.index = third.index.asfreq("Q")
                cols[v] = third.where(count[v].reindex(third.index) == 3)
            else:  # mean3: geometric mean of the months
                cols[v] = np.exp(np.log(wm[v]).groupby(wm.index.asfreq("Q")).mean())
    panel = pd.DataFrame(cols)
    panel = panel.reindex(pd.period_range(panel.index.min(), panel.index.max(), freq="Q"))
    for v in panel:
        x = panel[v]
        t = specs[v]["transform"]
        if t == "dlog":
            panel[v] = 100 * np.log(x).diff()
        elif t == "dlog_ann":
            panel[v] = 400 * np.log(x).diff()
        elif t == "diff":
            panel[v] = x.diff()
        elif t == "yoy":
            panel[v] = 100 * (x / x.shift(4) - 1)
    return panel.dropna(how="all")[list(specs)]


# ---------------------------------------------------------------------------- the run
def run() -> dict[str, float]:
    """Time the vectorised build and the pandas baseline side by side; return ``name: value``."""
    out: dict[str, float] = {}
    t0 = time.perf_counter()
    log, meta, specs = make_log()
    out["infoset_log_rows"] = float(len(log))
    t1 = time.perf_counter()
    cube = Cube.from_log(log, meta)
    out["infoset_cube_build_seconds"] = time.perf_counter() - t1
    out["infoset_data_seconds"] = t1 - t0
    out["infoset_releases_q_part"] = float(len(cube.indexes["Q"].releases))
    out["infoset_releases_m_part"] = float(len(cube.indexes["M"].releases))
    origins = quarterly(day=15, month_of_quarter=2, start="2001-01-01", end="2025-12-31")
    out["infoset_origins"] = float(len(origins))
    out["infoset_variables"] = float(len(specs))

    build_infosets(cube, origins[:3], specs)  # warm-up (imports, first xarray objects)
    best = np.inf
    for _ in range(3):
        t = time.perf_counter()
        infos = build_infosets(cube, origins, specs)
        best = min(best, time.perf_counter() - t)
    ours = best / len(origins) * 1e3

    # The baseline must agree before it is timed: same panels (values and periods).
    check = origins[:: max(1, len(origins) // 5)]
    worst = 0.0
    for o in check:
        ref = baseline_infoset(log, meta, specs, o)
        mine = next(i for i in infos if i.origin == o).panel.to_pandas()[list(specs)]
        ref = ref.reindex(mine.index)
        both = np.isfinite(mine.to_numpy()) | np.isfinite(ref.to_numpy())
        diff = np.abs(
            np.nan_to_num(mine.to_numpy(), nan=1e300) - np.nan_to_num(ref.to_numpy(), nan=1e300)
        )
        worst = max(worst, float(np.max(np.where(both, diff, 0.0))))
    out["infoset_baseline_max_abs_diff"] = worst

    sample = origins[:: max(1, len(origins) // 20)]
    t = time.perf_counter()
    for o in sample:
        baseline_infoset(log, meta, specs, o)
    base = (time.perf_counter() - t) / len(sample) * 1e3

    native_specs = {v: {"transform": s["transform"]} for v, s in specs.items()}
    build_infosets(cube, origins[:3], native_specs, freq="M", layout="native")
    best_native = np.inf
    for _ in range(3):
        t = time.perf_counter()
        build_infosets(cube, origins, native_specs, freq="M", layout="native")
        best_native = min(best_native, time.perf_counter() - t)
    out["infoset_native_ms_per_origin"] = best_native / len(origins) * 1e3

    out["infoset_ms_per_origin"] = ours
    out["infoset_ms_per_origin_target"] = 5.0
    out["infoset_pandas_ms_per_origin"] = base
    out["infoset_speedup_vs_pandas"] = base / ours
    out["infoset_speedup_target"] = 20.0
    return out


if __name__ == "__main__":
    for k, v in run().items():
        print(f"{k}: {v:.6g}")
