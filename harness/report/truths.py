"""Truths side by side: the headline score per model under each truth and with real-time vs revised data.

One row per target variable × horizon band × model, the columns the CRPS ratio to the incumbent
under each truth of the sensitivity check (first, release:k, lag, latest …), then on real-time
data and on revised (pseudo-real-time) data. Band ratios are forecast-weighted band means
(model ÷ incumbent), the rule of the decision table (:mod:`harness.verdicts.decide`), so a row
here can be set beside the decision page.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.report.builders import _var_order, model_order
from harness.report.grid import Cell, GridTable, RowGroup

REAL_TIME, REVISED = "real-time data", "revised data"


def band_ratios(frame: pd.DataFrame, benchmark: str, bands, value: str, by=()) -> pd.DataFrame:
    """Forecast-weighted band means of ``value``, model ÷ incumbent, on the horizons both have.

    ``frame`` has ``model, variable, horizon, n, <value>`` and the ``by`` columns; the result
    has ``variable, band, model, *by, ratio, n`` (n: the model's forecasts in the band).
    """
    band_of = {h: b.label for b in bands for h in b.horizons}
    keys = ["variable", "horizon", *by]
    f = frame[frame["horizon"].isin(list(band_of))]
    f = f.assign(band=f["horizon"].map(band_of), _n=f["n"].astype(float),
                 _v=f[value].astype(float))
    bench = f[f["model"] == benchmark][keys + ["_v"]].rename(columns={"_v": "_b"})
    m = f.merge(bench, on=keys, how="inner")
    m = m.assign(num=(m["_n"] * m["_v"]).fillna(0.0), den=(m["_n"] * m["_b"]).fillna(0.0))
    g = m.groupby(["variable", "band", "model", *by], sort=False)[["num", "den", "_n"]].sum().reset_index()
    g["ratio"] = np.where(g["den"] > 0, g["num"] / g["den"].where(g["den"] > 0, 1.0), np.nan)
    return g.rename(columns={"_n": "n"})[["variable", "band", "model", *by, "ratio", "n"]]


def truths_frame(sensitivity, benchmark: str, bands=None, variables=None) -> pd.DataFrame:
    """The side-by-side table, typed: ``variable, band, model, n, <truth>…, real-time data, revised data``.

    Parameters
    ----------
    sensitivity : harness.evaluation.sensitivity.Sensitivity
        Its ``truth_table`` (mean score and n per model × variable × horizon × truth) and
        ``data_table`` (real-time and pseudo-real-time mean scores).
    benchmark : str
        The incumbent.
    bands : sequence of harness.verdicts.Band, optional
        Default: the bands of the horizons present.
    """
    from harness.verdicts import horizon_bands

    tt = getattr(sensitivity, "truth_table", None)
    if tt is None or not len(tt):
        return pd.DataFrame()
    tt = tt.assign(truth=tt["truth"].astype(str), variable=tt["variable"].astype(str),
                   model=tt["model"].astype(str), horizon=tt["horizon"].astype(int))
    truths = list(pd.unique(tt["truth"]))
    bands = list(bands or horizon_bands(pd.unique(tt["horizon"])))
    r = band_ratios(tt, benchmark, bands, "score", by=("truth",))
    wide = r.pivot_table(index=["variable", "band", "model"], columns="truth", values="ratio", aggfunc="first",
                         sort=False)
    n = r[r["truth"] == truths[0]].set_index(["variable", "band", "model"])["n"]
    out = wide.reindex(columns=truths)
    out.insert(0, "n", n.reindex(out.index).fillna(0).astype(int))
    dt = getattr(sensitivity, "data_table", None)
    has_data = dt is not None and len(dt) and {"real_time", "pseudo"} <= set(dt.columns)
    if has_data:
        dt = dt.assign(variable=dt["variable"].astype(str), model=dt["model"].astype(str),
                       horizon=dt["horizon"].astype(int))
        for col, lab in (("real_time", REAL_TIME), ("pseudo", REVISED)):
            d = band_ratios(dt, benchmark, bands, col).set_index(["variable", "band", "model"])["ratio"]
            out[lab] = d.reindex(out.index).to_numpy(dtype=float)
    out = out.reset_index()
    out.columns.name = None
    # rows in report order: variables as given, bands in horizon order, the incumbent first
    vo = {v: i for i, v in enumerate(_var_order(tt["variable"], variables))}
    bo = {b.label: i for i, b in enumerate(bands)}
    mo = {m: i for i, m in enumerate(model_order(tt["model"], benchmark))}
    out = out.assign(_k=[(vo.get(v, 99), bo.get(b, 99), mo.get(m, 99)) for v, b, m in
                         zip(out["variable"], out["band"], out["model"], strict=True)])
    out = out.sort_values("_k", kind="stable").drop(columns="_k").reset_index(drop=True)
    cols = ["variable", "band", "model", "n"] + truths + ([REAL_TIME, REVISED] if has_data else [])
    return out[cols].astype({c: float for c in cols[4:]} | {"n": int})


def truths_table(sensitivity, benchmark: str, bands=None, frame: pd.DataFrame | None = None,
                 variables=None) -> GridTable | None:
    """:func:`truths_frame` as a table: groups variable × band, one column per truth then per data vintage."""
    f = truths_frame(sensitivity, benchmark, bands, variables) if frame is None else frame
    if f is None or not len(f):
        return None
    value_cols = [c for c in f.columns if c not in ("variable", "band", "model", "n")]
    groups = []
    for (var, band), g in f.groupby(["variable", "band"], sort=False):
        rows = [(str(r["model"]), [Cell(float(r[c]), int(r["n"]) if c == value_cols[0] else None)
                                   for c in value_cols]) for _, r in g.iterrows()]
        groups.append(RowGroup(f"{var}, {band}", {"variable": str(var), "band": str(band)}, rows))
    kinds = [("truth", c) if c not in (REAL_TIME, REVISED) else ("data", c) for c in value_cols]
    return GridTable(name="truths_side_by_side", title=f"CRPS ratio to {benchmark} under each truth, and on "
                     "real-time against revised data (band means, full sample)", columns=kinds,
                     column_levels=("check", "column"), row_name="model", groups=groups, digits=2,
                     column_labels={"truth": "scored against the truth", "data": "truth "
                                    f"'{value_cols[0]}', information sets from",
                                    REAL_TIME: "real-time", REVISED: "revised"},
                     data=f.reset_index(drop=True), short_header=True,
                     notes=["Below 1 = lower CRPS than the incumbent. Truth columns: the same real-time "
                            "forecasts scored against each truth. Data columns: the run on real-time "
                            "vintages against a rerun on revised (pseudo-real-time) data, both scored against "
                            "the first truth of the check. n: forecasts in the band."])
