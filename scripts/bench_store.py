"""Benchmarks of the vintage store and the release index; prints ``name: value`` lines.

Run: ``python scripts/bench_store.py`` (or through ``scripts/bench.py --only store``).

* as-of for 100 origins on a cube of 20 variables x 200 periods x 400 releases, against a
  straightforward pandas baseline measured in the same run (filter release <= origin, groupby
  (variable, period) last, unstack) and against the dense release x variable x period layout
  the index replaced. Targets: ours >= 50x faster than pandas, <= 0.1 ms per origin for the
  array path (all origins at once) once the cube is built. The views path (one
  :meth:`Cube.asof` per origin) is printed beside it. The large nowcasting panels are in
  ``scripts/bench_index.py``.
* append of ~300k rows into a store holding ~300k rows of the same variables (target: a few
  seconds), a no-op re-ingest of the same rows, and the cube build on the ~600k-row store
  (target <= ~2 s).

All data are simulated with fixed seeds. Timings are best-of-N wall clock; the targets are
printed beside them and never asserted (machines are noisy: read the ratios).
"""

from __future__ import annotations

import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from vintages.periods import format_periods  # noqa: E402
from vintages.store import VintageStore  # noqa: E402


def _triangle_log(n_var: int, n_period: int, n_release: int, *, revise: int, seed: int,
                  first_month: int = (2000 - 1970) * 12, day_offset: int = 0) -> pd.DataFrame:
    """Simulated monthly releases: each release date publishes every period that ended at least
    10 days earlier and is among the latest ``revise`` such periods (first estimate + revisions)."""
    rng = np.random.default_rng(seed)
    periods = first_month + np.arange(n_period)
    ends = ((periods + 1).astype("datetime64[M]").astype("datetime64[D]") - np.timedelta64(1, "D"))
    span = int((ends[-1] - ends[0]).astype(int)) + 120
    rel = ends[0] + 11 + day_offset + np.linspace(0, span, n_release).astype(int).astype("timedelta64[D]")
    # for each release, the number of periods published by then (those ended >= 10 days before)
    n_pub = np.searchsorted(ends + 10, rel, side="right")
    lo = np.maximum(n_pub - revise, 0)
    counts = n_pub - lo
    r_idx = np.repeat(np.arange(n_release), counts)
    p_idx = np.concatenate([np.arange(a, b) for a, b in zip(lo, n_pub, strict=True)]) if counts.sum() else \
        np.zeros(0, np.int64)
    n_cell = len(r_idx)
    var = np.repeat(np.array([f"v{k:02d}" for k in range(n_var)], dtype=object), n_cell)
    return pd.DataFrame({
        "variable": var,
        "period": np.tile(format_periods(periods[p_idx], "M"), n_var),
        "release": np.tile(rel[r_idx], n_var).astype("datetime64[s]"),
        "value": rng.normal(size=n_cell * n_var).round(4),
    })


def _best(fn, repeat: int) -> float:
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def _baseline_asof(log: pd.DataFrame, d: np.datetime64) -> pd.DataFrame:
    """The straightforward way: filter, last release per (variable, period), unstack."""
    seen = log[log["release"] <= d]
    last = seen.sort_values("release").groupby(["variable", "period"])["value"].last()
    return last.unstack("period")


def bench_asof(tmp: Path) -> dict[str, float]:
    """100 origins on 20 variables x 200 periods x 400 releases: ours against the pandas baseline."""
    log = _triangle_log(20, 200, 400, revise=24, seed=1)
    st = VintageStore.init(tmp / "asof")
    st.append(log, source="bench")
    t0 = time.perf_counter()
    cube = st.cube()
    build = time.perf_counter() - t0
    fc = cube.indexes["M"]
    assert (len(fc.releases), len(fc.variables), len(fc.periods)) == (400, 20, 200)
    rng = np.random.default_rng(2)
    origins = np.sort(rng.choice(fc.releases[0] + np.arange(int((fc.releases[-1] - fc.releases[0]).astype(int))),
                                 size=100, replace=False)).astype("datetime64[D]")
    in_force = st.read_log(with_superseded=False)[["variable", "period", "release", "value"]]

    from bench_index import DenseReference

    ours_arrays = _best(lambda: fc.asof_values(origins), 20) / len(origins)
    ours_views = _best(lambda: [cube.asof(d) for d in origins], 3) / len(origins)
    base = _best(lambda: [_baseline_asof(in_force, np.datetime64(d, "s")) for d in origins], 1) / len(origins)
    t0 = time.perf_counter()
    dense = DenseReference(in_force)
    dense_build = time.perf_counter() - t0
    dense_arrays = _best(lambda: dense.asof(origins), 20) / len(origins)
    np.testing.assert_array_equal(dense.asof(origins), fc.asof_values(origins)[0])

    # the two agree (a bench that measured a wrong answer would be worthless)
    vals, _ = fc.asof_values(origins[[0, 50, 99]])
    for k, d in enumerate(origins[[0, 50, 99]]):
        ref = _baseline_asof(in_force, np.datetime64(d, "s"))
        got = pd.DataFrame(vals[k], index=fc.variables, columns=format_periods(fc.periods, "M"))
        got = got.loc[ref.index, ref.columns]
        np.testing.assert_array_equal(got.to_numpy(), ref.to_numpy())
    return {
        "asof_log_rows": float(len(log)),
        "asof_cube_build_seconds": build,
        "asof_per_origin_ms_ours_arrays": ours_arrays * 1e3,
        "asof_per_origin_ms_ours_views": ours_views * 1e3,
        "asof_per_origin_ms_baseline": base * 1e3,
        "asof_ratio_baseline_vs_ours_arrays": base / ours_arrays,
        "asof_ratio_baseline_vs_ours_views": base / ours_views,
        "asof_per_origin_ms_dense_arrays": dense_arrays * 1e3,
        "asof_dense_build_seconds": dense_build,
        "asof_index_mb": fc.nbytes / 2**20,
        "asof_dense_mb": dense.known.nbytes * 2.5 / 2**20,
        "asof_target_ratio": 50.0,
        "asof_target_per_origin_ms": 0.1,
    }


def bench_append(tmp: Path) -> dict[str, float]:
    """~300k rows appended into a store of ~300k rows of the same variables; no-op; cube build."""
    first = _triangle_log(20, 250, 300, revise=50, seed=3)
    second = _triangle_log(20, 250, 300, revise=50, seed=4, day_offset=3)  # other release days
    st = VintageStore.init(tmp / "append")
    st.append(first, source="first")
    t0 = time.perf_counter()
    st.append(second, source="second")
    append = time.perf_counter() - t0
    t0 = time.perf_counter()
    res = st.append(second, source="second-again")
    noop = time.perf_counter() - t0
    assert res.batch_file is None
    build = _best(st.cube, 2)
    return {
        "append_existing_rows": float(len(first)),
        "append_batch_rows": float(len(second)),
        "append_seconds": append,
        "append_noop_reingest_seconds": noop,
        "append_target_seconds": 3.0,
        "cube_build_rows": float(len(first) + len(second)),
        "cube_build_seconds": build,
        "cube_build_target_seconds": 2.0,
    }


def run() -> dict[str, float]:
    """All store benchmarks; returns ``{name: value}``."""
    tmp = Path(tempfile.mkdtemp(prefix="bench-store-"))
    try:
        out = bench_asof(tmp)
        out.update(bench_append(tmp))
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return out


if __name__ == "__main__":
    for name, value in run().items():
        print(f"{name}: {value:.6g}", flush=True)
