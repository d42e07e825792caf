"""Benchmark of the release index on large nowcasting panels; prints ``name: value`` lines.

Run: ``python scripts/bench_index.py [--quick]`` (or ``scripts/bench.py --only index``).

Panels from :func:`make_panel.make_panel` (invented Veldmark indicators, each on its own
release days, three releases per month). Each step (generating and ingesting a panel
included) runs in a fresh subprocess that reports its own wall time and peak resident memory,
so one step's memory never hides another's. The peak is the process's own high-water mark
(``VmHWM`` of ``/proc/self/status``, reset by ``exec``): on Linux ``ru_maxrss`` of a spawned
child, hence ``getrusage(RUSAGE_CHILDREN)``, starts from the *parent's* high-water mark at
spawn time, which would credit the parent's memory to the step (``ru_maxrss`` is the fallback
where ``/proc`` is missing).

Targets (printed beside the measurements, never asserted):

* 100 indicators × 30 years: one as-of including building the cube from the store ≤ 5 s and
  ≤ 1 GB; every information set of a 120-origin monthly backtest of all 100 indicators
  ≤ 10 s and ≤ 1 GB (both layouts: the quarterly panel and the native monthly one);
* 200 indicators × 40 years: the same work ≤ 2 GB.

Side by side in the same run: a pandas per-origin filter (the as-of and the 120 information
sets), and the dense release × variable × period array this index replaced, on a reduced panel
(10 indicators; at full size it needs the memory printed as ``dense_full_size_gb_estimate``).
The pandas baselines are checked to give the same numbers before their time is reported.
"""

from __future__ import annotations

import argparse
import json
import pickle
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
for p in (ROOT, ROOT / "scripts"):
    if str(p) not in sys.path:
        sys.path.insert(0, str(p))

from make_panel import make_panel  # noqa: E402

ASOF_DAY = "2015-06-20"
ORIGINS = {"rule": "monthly", "day": 15, "start": "2010-01-01", "end": "2019-12-31"}  # 120
SPEC_COMMON = {"transform": "dlog", "convert": "mean"}
SPEC_NATIVE = "dlog"


# ---------------------------------------------------------------------------- references
class DenseReference:
    """The layout the index replaced: a dense (release, variable, period) array, forward-filled.

    Kept only to measure against; memory is release days × variables × periods × 20 bytes.
    """

    def __init__(self, log: pd.DataFrame):
        from vintages.periods import parse_periods

        self.variables = np.unique(log["variable"].to_numpy(dtype=str))
        ords = parse_periods(log["period"].to_numpy())[0]
        rel = log["release"].to_numpy().astype("datetime64[D]")
        self.periods = np.arange(ords.min(), ords.max() + 1)
        self.releases = np.unique(rel)
        raw = np.full((len(self.releases), len(self.variables), len(self.periods)), np.nan)
        vi = np.searchsorted(self.variables, log["variable"].to_numpy(dtype=str))
        raw[np.searchsorted(self.releases, rel), vi, ords - self.periods[0]] = log["value"]
        idx = np.where(~np.isnan(raw), np.arange(len(raw), dtype=np.int32)[:, None, None], -1)
        np.maximum.accumulate(idx, axis=0, out=idx)
        self.known = np.take_along_axis(raw, np.maximum(idx, 0), axis=0)
        self.known[idx < 0] = np.nan

    def asof(self, dates) -> np.ndarray:
        j = np.searchsorted(self.releases, np.asarray(dates, "datetime64[D]"), side="right") - 1
        return np.where((j >= 0)[:, None, None], self.known[np.maximum(j, 0)], np.nan)


def pandas_asof(log: pd.DataFrame, day) -> pd.DataFrame:
    """The straightforward way: filter release ≤ day, last release per (variable, period)."""
    seen = log[log["release"] <= pd.Timestamp(day)]
    return seen.sort_values("release", kind="stable").groupby(["variable", "period"]).last()


def pandas_infoset(log: pd.DataFrame, origin, native: bool) -> pd.DataFrame:
    """One information set by pandas: as-of, pivot, (mean to quarters), 100·Δlog per column."""
    cur = pandas_asof(log, origin)["value"].unstack("variable")
    cur.index = pd.PeriodIndex(cur.index, freq="M")
    if not native:
        cur = cur.groupby(cur.index.asfreq("Q")).mean()
    cur = cur.reindex(pd.period_range(cur.index.min(), cur.index.max(), freq=cur.index.freq))
    return (100 * np.log(cur).diff()).dropna(how="all")


def _digest(frame: pd.DataFrame) -> list[float]:
    """Count, sum and sum of squares of a vintage's values: equal vintages give equal digests."""
    x = np.sort(frame["value"].to_numpy(dtype=float))
    return [float(len(x)), float(x.sum()), float((x * x).sum())]


# ---------------------------------------------------------------------------- workers
def _peak_mb() -> float:
    """This process's peak resident memory in MB (see the module docstring)."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024.0  # kB
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # Linux: kB


def _work(task: str, store: str, extra: dict) -> dict:
    """One measurement inside a fresh process (imports happen before the clock starts)."""
    from vintages import VintageStore, build_infosets, parse_schedule
    from vintages.cube import Cube

    out: dict = {}
    t0 = time.perf_counter()
    if task == "ingest":
        log, meta = make_panel(extra["n"], extra["years"], extra["start"])
        t1 = time.perf_counter()
        VintageStore.init(store).append(log, meta, source=f"panel-{extra['n']}x{extra['years']}")
        out.update(values=float(len(log)), release_days=float(log["release"].nunique()),
                   make_s=t1 - t0, ingest_s=time.perf_counter() - t1)
    elif task == "asof":
        cube = VintageStore(store).cube()
        t1 = time.perf_counter()
        frame = cube.asof(ASOF_DAY).to_frame()
        out.update(build_s=t1 - t0, asof_s=time.perf_counter() - t1, cells=len(frame),
                   digest=_digest(frame), index_mb=cube.nbytes / 2**20)
    elif task in ("infosets_common", "infosets_native"):
        cube = VintageStore(store).cube()
        origins = parse_schedule(ORIGINS, cube)
        native = task.endswith("native")
        specs = {v: SPEC_NATIVE if native else SPEC_COMMON for v in cube.variables}
        kw = {"freq": "M", "layout": "native"} if native else {"freq": "Q"}
        t1 = time.perf_counter()
        infos = build_infosets(cube, origins, specs, **kw)
        out.update(build_s=t1 - t0, infosets_s=time.perf_counter() - t1, origins=len(infos),
                   panel_cells=int(sum(i.panel.size for i in infos)))
    elif task == "pandas_asof":
        log = VintageStore(store).read_log(with_superseded=False)
        t1 = time.perf_counter()
        frame = pandas_asof(log, ASOF_DAY).reset_index()
        out.update(read_s=t1 - t0, asof_s=time.perf_counter() - t1, digest=_digest(frame))
    elif task == "pandas_infosets":
        store_ = VintageStore(store)
        log = store_.read_log(with_superseded=False)
        cube = store_.cube()
        origins = parse_schedule(ORIGINS, cube)
        for native in (False, True):
            t1 = time.perf_counter()
            ref = [pandas_infoset(log, o, native) for o in origins]
            out[f"{'native' if native else 'common'}_s"] = time.perf_counter() - t1
            # same numbers as ours (checked on a few origins, outside the timing)
            names = cube.variables
            specs = {v: SPEC_NATIVE if native else SPEC_COMMON for v in names}
            kw = {"freq": "M", "layout": "native"} if native else {"freq": "Q"}
            pick = [0, len(origins) // 2, len(origins) - 1]
            ours = build_infosets(cube, origins[pick], specs, **kw)
            worst = 0.0
            for k, info in zip(pick, ours, strict=True):
                mine = info.panel.to_pandas()[names]
                theirs = ref[k].reindex(index=mine.index, columns=names)
                worst = max(worst, float(np.nanmax(np.abs(mine.to_numpy() - theirs.to_numpy()))))
                if not (np.isnan(mine.to_numpy()) == np.isnan(theirs.to_numpy())).all():
                    worst = float("inf")
            out[f"{'native' if native else 'common'}_max_abs_diff"] = worst
    elif task in ("dense_asof", "sparse_asof"):
        log = VintageStore(store).read_log(with_superseded=False)
        t1 = time.perf_counter()
        if task == "dense_asof":
            ref = DenseReference(log)
            t2 = time.perf_counter()
            x = ref.asof([ASOF_DAY])
            out["dense_nbytes_mb"] = (ref.known.nbytes * 2.5) / 2**20  # raw + known + int32 src
        else:
            cube = Cube.from_log(log, {v: {"freq": "M"} for v in log["variable"].unique()})
            t2 = time.perf_counter()
            x = cube.indexes["M"].asof_values([ASOF_DAY])[0]
        out.update(read_s=t1 - t0, build_s=t2 - t1, asof_s=time.perf_counter() - t2,
                   digest=[float(np.isfinite(x).sum()), float(np.nansum(x))])
    elif task == "persist":
        st = VintageStore(store)
        cube = st.cube()
        t1 = time.perf_counter()
        blob = pickle.dumps(cube, protocol=pickle.HIGHEST_PROTOCOL)
        back = pickle.loads(blob)
        t2 = time.perf_counter()
        path = Path(extra["tmp"]) / "cube.npz"
        cube.save(path)
        t3 = time.perf_counter()
        loaded = Cube.load(path)
        t4 = time.perf_counter()
        a = cube.asof(ASOF_DAY).to_frame()
        same = all(_digest(c.asof(ASOF_DAY).to_frame()) == _digest(a) for c in (back, loaded))
        out.update(build_s=t1 - t0, pickle_roundtrip_s=t2 - t1, pickle_mb=len(blob) / 2**20,
                   save_s=t3 - t2, load_s=t4 - t3, npz_mb=path.stat().st_size / 2**20,
                   same=float(same))
    else:
        raise ValueError(f"unknown bench task {task!r}")
    out["wall_s"] = time.perf_counter() - t0
    out["peak_rss_mb"] = _peak_mb()
    return out


def _run_worker(task: str, store: Path, **extra) -> dict:
    cmd = [sys.executable, str(Path(__file__).resolve()), "--worker", task, str(store),
           json.dumps(extra)]
    t0 = time.perf_counter()
    res = subprocess.run(cmd, capture_output=True, text=True, check=False, cwd=ROOT)
    if res.returncode:
        raise RuntimeError(f"bench worker {task} failed:\n{res.stderr[-3000:]}")
    out = json.loads(res.stdout.strip().splitlines()[-1])
    out["process_s"] = time.perf_counter() - t0  # with interpreter start-up and imports
    return out


def _ingest(tmp: Path, name: str, n: int, years: int, start: str) -> tuple[Path, dict]:
    """Generate a panel and ingest it into a new store, in a subprocess (the parent stays lean)."""
    r = _run_worker("ingest", tmp / name, n=n, years=years, start=start)
    return tmp / name, {"values": r["values"], "release_days": r["release_days"],
                        "ingest_s": r["ingest_s"], "ingest_peak_rss_mb": r["peak_rss_mb"]}


# ---------------------------------------------------------------------------- the run
def run(quick: bool = False) -> dict[str, float]:
    """Every measurement; returns ``{name: value}``."""
    out: dict[str, float] = {}
    tmp = Path(tempfile.mkdtemp(prefix="bench-index-"))
    try:
        panels = [("p100x30", 100, 30, "1990-01", 1024.0)]
        if not quick:
            panels.append(("p200x40", 200, 40, "1980-01", 2048.0))
        for name, n, years, start, mem_target in panels:
            store, facts = _ingest(tmp, name, n, years, start)
            for k, v in facts.items():
                out[f"{name}_{k}"] = v
            a = _run_worker("asof", store)
            out[f"{name}_asof_with_cube_build_s"] = a["wall_s"]
            out[f"{name}_asof_cube_build_s"] = a["build_s"]
            out[f"{name}_asof_only_s"] = a["asof_s"]
            out[f"{name}_asof_peak_rss_mb"] = a["peak_rss_mb"]
            out[f"{name}_asof_process_s_incl_imports"] = a["process_s"]
            out[f"{name}_index_mb"] = a["index_mb"]
            for layout in ("common", "native"):
                b = _run_worker(f"infosets_{layout}", store)
                out[f"{name}_infosets_{layout}_{b['origins']}_origins_s"] = b["infosets_s"]
                out[f"{name}_infosets_{layout}_with_cube_build_s"] = b["wall_s"]
                out[f"{name}_infosets_{layout}_peak_rss_mb"] = b["peak_rss_mb"]
            out[f"{name}_target_asof_s"] = 5.0 if n == 100 else float("nan")
            out[f"{name}_target_infosets_s"] = 10.0 if n == 100 else float("nan")
            out[f"{name}_target_peak_rss_mb"] = mem_target
            if n == 100:
                p = _run_worker("pandas_asof", store)
                if p["digest"] != a["digest"]:
                    raise AssertionError(f"pandas as-of {p['digest']} != ours {a['digest']}")
                out[f"{name}_pandas_asof_s"] = p["asof_s"]
                out[f"{name}_pandas_asof_peak_rss_mb"] = p["peak_rss_mb"]
                out[f"{name}_ratio_pandas_vs_ours_asof"] = p["asof_s"] / a["asof_s"]
                q = _run_worker("pandas_infosets", store)
                for layout in ("common", "native"):
                    mine = out[f"{name}_infosets_{layout}_120_origins_s"]
                    out[f"{name}_pandas_infosets_{layout}_s"] = q[f"{layout}_s"]
                    out[f"{name}_pandas_infosets_{layout}_max_abs_diff"] = q[f"{layout}_max_abs_diff"]
                    out[f"{name}_ratio_pandas_vs_ours_infosets_{layout}"] = q[f"{layout}_s"] / mine
                s = _run_worker("persist", store, tmp=str(tmp))
                out.update({f"{name}_persist_{k}": v for k, v in s.items()
                            if k in ("build_s", "pickle_roundtrip_s", "pickle_mb", "save_s",
                                     "load_s", "npz_mb", "same")})
                out[f"{name}_dense_full_size_gb_estimate"] = (
                    facts["release_days"] * n * 12 * years * 20 / 2**30
                )
        # the dense layout the index replaced, side by side on a reduced panel
        store, facts = _ingest(tmp, "p10x30", 10, 30, "1990-01")
        out["p10x30_values"], out["p10x30_release_days"] = facts["values"], facts["release_days"]
        out["parent_peak_rss_mb"] = _peak_mb()
        dense = _run_worker("dense_asof", store)
        sparse = _run_worker("sparse_asof", store)
        if dense["digest"] != sparse["digest"]:
            raise AssertionError(f"dense as-of {dense['digest']} != sparse {sparse['digest']}")
        for k, r in (("dense", dense), ("index", sparse)):
            out[f"p10x30_{k}_build_s"] = r["build_s"]
            out[f"p10x30_{k}_asof_s"] = r["asof_s"]
            out[f"p10x30_{k}_peak_rss_mb"] = r["peak_rss_mb"]
        out["p10x30_ratio_dense_vs_index_build"] = dense["build_s"] / sparse["build_s"]
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return out


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--worker":
        print(json.dumps(_work(sys.argv[2], sys.argv[3], json.loads(sys.argv[4]))))
    else:
        ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
        ap.add_argument("--quick", action="store_true", help="only the 100 x 30 panel")
        args = ap.parse_args()
        for key, value in run(quick=args.quick).items():
            print(f"{key}: {value:.6g}", flush=True)
