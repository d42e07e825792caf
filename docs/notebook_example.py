# %% [markdown]
# # A real-time backtest from Python, step by step
#
# Every command of `harness` is a function you can call from a notebook. This example runs the
# whole job on the invented Veldmark economy (simulated data, no real statistics office): keep
# every release, see what was known on a past day, build information sets with their ragged
# edge, run a small backtest, read the forecasts as `xarray`, score them under two truths, draw
# one chart and write the review report.
#
# Open it in Jupyter or VS Code (cells are separated by `# %%`), or run it as a script:
# `python docs/notebook_example.py`. Set `VELDMARK_EXAMPLE_DIR` to choose the output folder
# (default: a new temporary folder). It takes well under a minute on two cores.

# %%
import os
import tempfile
from pathlib import Path

import matplotlib

matplotlib.use("Agg")  # write PNG files; no window needed
import matplotlib.pyplot as plt
import pandas as pd

import harness
import vintages
from harness.demo import write_demo_data

out = Path(os.environ.get("VELDMARK_EXAMPLE_DIR") or tempfile.mkdtemp(prefix="veldmark-example-"))
out.mkdir(parents=True, exist_ok=True)
print("imports from", Path(harness.__file__).parent.parent, "; output in", out)

# %% [markdown]
# ## 1. The vintage store
# `write_demo_data` simulates the Veldmark economy and writes `out/store` (every release of
# every series, as published), `out/chronology.csv` (invented recession dates) and a spec
# template. `VintageStore.info()` lists the series.

# %%
write_demo_data(out, small=True)
store = vintages.VintageStore(out / "store")
print(store.info()[["variable", "freq", "periods", "releases", "last_period", "last_release"]].to_string())

# %% [markdown]
# ## 2. What was known on one day
# `cube.asof(day)` is the vintage in force that day: for every series and period, the latest
# release dated on or before it. Its last rows show the ragged edge: each series ends at a
# different period.

# %%
ASOF_DAY = "2024-11-15"
cube = store.cube()
known = cube.asof(ASOF_DAY).to_frame()
edge = known.groupby("variable", sort=True).tail(1).reset_index(drop=True)
print(f"last value of each series known on {ASOF_DAY}:")
print(edge.to_string(index=False))
gdp_asof = edge.set_index("variable").loc["gdp"]
print(f"gdp {gdp_asof['period']}: {gdp_asof['value']} (released {gdp_asof['release']:%Y-%m-%d})")

# %% [markdown]
# ## 3. Information sets at two origins
# An information set is the quarterly panel a model sees at an origin: each series transformed
# inside its own vintage (annualised growth for gdp and cpi), monthly series averaged to
# quarters. A quarter with only one or two months published is *partial*.

# %%
ORIGINS = ["2024-08-15", "2024-11-15"]
series = {
    "gdp": "dlog_ann",
    "cpi": {"transform": "dlog_ann", "convert": "mean"},
    "unemp": {"transform": "level", "convert": "mean"},
    "survey": {"transform": "level", "convert": "mean"},
}
infosets = vintages.build_infosets(cube, ORIGINS, series)
ragged = pd.DataFrame([
    {"origin": pd.Timestamp(info.origin), "variable": v, "last_period": str(info.last_observed[v]),
     "last_month_or_quarter": str(info.native_last[v]), "released": pd.Timestamp(info.source_release[v]),
     "partial": bool(info.partial.sel(period=info.last_observed[v], variable=v))
     if info.partial is not None else False}
    for info in infosets for v in info.variables
])
print(ragged.to_string(index=False))
print(infosets[-1].panel.to_pandas().tail(3).round(2))

# %% [markdown]
# ## 4. A small backtest
# A spec names the store, the series, the targets and horizons, the origins and the models.
# This one is a reduced version of the demo's small spec (`out/spec.toml`): three models,
# quarterly origins since 2019, 200 draws per forecast. `harness.run` refits every model at
# every origin in parallel; finished tasks are cached, so running the cell again is instant.

# %%
SPEC = """\
[run]
name = "veldmark-notebook"
store = "store"
out = "run"
seed = 20261201
draws = 200
freq = "Q"

[origins]
rule = "quarterly"
day = 15
month_of_quarter = 2
start = "2019-01-01"
end = "2026-11-30"

[variables.gdp]
transform = "dlog_ann"
[variables.cpi]
transform = "dlog_ann"
convert = "mean"
[variables.unemp]
transform = "level"
convert = "mean"

[targets]
variables = ["gdp", "cpi"]
horizons = { min = 0, max = 2 }

[models.rw]
type = "nochange"
[models.ar]
type = "ar"
max_lags = 4
[models.bvar]
type = "bvar"
lags = 2
tightness = 0.2

[scoring]
benchmark = "rw"
truths = ["first", "latest"]
chronology = "chronology.csv"
"""
spec_path = out / "notebook_spec.toml"
spec_path.write_text(SPEC)
spec = harness.load_spec(spec_path)
result = harness.run(spec, jobs=2, progress=False)
print(result.summary())

# %% [markdown]
# ## 5. The forecasts as xarray
# The ledger holds every predictive draw with named dimensions. In the default layout each
# cell's draws are sorted, which is all quantiles and scores need.

# %%
ledger = harness.read_ledger(result.run_dir)
draws = ledger.draws
print(draws.dims, dict(draws.sizes))
bands = draws.sel(model="bvar", variable="gdp", horizon=0).quantile([0.1, 0.5, 0.9], dim="draw")
print(bands.to_pandas().T.tail(4).round(2))

# %% [markdown]
# ## 6. Scores under two truths
# The truth is the rule that says which release counts as the outcome: `first` (the first
# estimate) or `latest` (today's vintage). Scoring needs no refit. Ratios are to the benchmark
# (`rw`, no change): below 1 is better. The tests are Diebold–Mariano with the
# Harvey–Leybourne–Newbold correction; `in_mcs` is membership of the model confidence set
# (Hansen, Lunde & Nason 2011), computed only where enough forecasts exist.

# %%
evals = {truth: harness.evaluate(result.run_dir, truth) for truth in ("first", "latest")}
relative = pd.concat([ev.relative.assign(truth=t) for t, ev in evals.items()], ignore_index=True)
relative = relative[relative["subperiod"] == "full"]
print("CRPS relative to rw (below 1 = better), full sample:")
print(relative.pivot_table(index=["variable", "horizon"], columns=["truth", "model"], values="crps").round(3))

ev = evals["first"]
dm = ev.tests[(ev.tests["test"] == "dm") & (ev.tests["score"] == "crps") & (ev.tests["subperiod"] == "full")]
print("\nDiebold-Mariano p-values against rw (CRPS, first release):")
print(dm.pivot_table(index=["variable", "horizon"], columns="model", values="pvalue").round(3))

mcs = ev.mcs[["variable", "horizon", "model", "in_mcs", "pvalue", "n"]]
print("\nmodel confidence set (CRPS, first release):")
print(mcs.pivot_table(index=["variable", "horizon"], columns="model", values="in_mcs", aggfunc="first"))
# a cell with too few forecasts for the test is left out of ev.mcs: say so rather than guess
cells = ev.relative[["variable", "horizon"]].drop_duplicates()
untested = cells.merge(mcs[["variable", "horizon"]].drop_duplicates(), how="left", indicator=True)
untested = untested[untested["_merge"] == "left_only"]
if len(untested):
    print("not tested (too few forecasts for the set test's minimum sample):",
          ", ".join(f"{v} h={h}" for v, h in zip(untested["variable"], untested["horizon"], strict=True)))

# %% [markdown]
# ## 7. One chart
# The BVAR's gdp nowcast at each origin (median and 10–90 % band) against the first and the
# latest estimate of the quarter: the gap between the two kinds of dots is data revision.

# %%
outcomes = {
    t: e.forecasts.query("model == 'bvar' and variable == 'gdp' and horizon == 0").set_index("origin")["truth"]
    for t, e in evals.items()
}
origins = pd.DatetimeIndex(bands["origin"].values)
fig, ax = plt.subplots(figsize=(8, 3.5))
ax.fill_between(origins, bands.sel(quantile=0.1), bands.sel(quantile=0.9), alpha=0.3, label="bvar 10–90 %")
ax.plot(origins, bands.sel(quantile=0.5), label="bvar median")
ax.plot(outcomes["first"].index, outcomes["first"], "o", ms=4, label="first estimate")
ax.plot(outcomes["latest"].index, outcomes["latest"], "x", ms=4, label="latest estimate")
ax.set(title="Veldmark gdp nowcast (invented data)", ylabel="annualised growth, %", xlabel="origin")
ax.legend(fontsize=8, ncol=2)
chart = out / "gdp_nowcast.png"
fig.savefig(chart, dpi=100, bbox_inches="tight")
plt.close(fig)
print("chart:", chart)

# %% [markdown]
# ## 8. The review report
# `make_report` writes the meeting pack (`report.html`) and its appendix into `RUN/report`,
# reusing the evaluation and ledger already in memory. As every report says: backtest results
# describe how the models would have done on this sample; they are no guarantee of future
# performance, and the decision rests with your own review and governance.

# %%
paths = harness.make_report(result.run_dir, evaluation=evals["first"], ledger=ledger)
report = Path(paths["html"])
print("report:", report.resolve())

# %% [markdown]
# ## 9. Checks a reader can trust
# The forecasts have the documented dimensions, the tables hold numbers and booleans (not
# text), and the report was written.

# %%
assert draws.dims == ("model", "origin", "variable", "horizon", "draw"), draws.dims
assert set(draws["model"].values) == {"rw", "ar", "bvar"}
assert ev.mcs["in_mcs"].dtype == bool, ev.mcs["in_mcs"].dtype
assert ev.tests["pvalue"].dtype == "float64", ev.tests["pvalue"].dtype
assert relative["crps"].dtype == "float64", relative["crps"].dtype
assert ev.forecasts["scored"].dtype == bool, ev.forecasts["scored"].dtype
assert report.is_file() and chart.is_file()
print("all checks passed")
