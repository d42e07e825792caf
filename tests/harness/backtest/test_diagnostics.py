"""Per-task model diagnostics: stored by the worker, exposed by the ledger and manifest, checked for the summary."""

from __future__ import annotations

import numpy as np

from harness.backtest import read_ledger, run
from harness.backtest.diagnostics import (
    diagnostic_warnings,
    flatten,
    register_diagnostic_check,
    unregister_diagnostic_check,
)
from harness.spec import load_spec
from tests.harness.conftest import write_spec

EXTRA = '[models.diag]\ntype = "tests.harness.backtest.models:DiagModel"\n'


def _spec(tmp_path, store, extra=EXTRA):
    return load_spec(write_spec(tmp_path, store, tmp_path / "out", extra))


def test_flatten_keeps_numbers_of_nested_mappings():
    """Nested names join with '.', booleans and integers become floats, NaN stays, text is left out."""
    got = flatten({"ess": {"a": 3, "b": float("nan")}, "ok": True, "note": "x", "log_ml": -1.5})
    assert set(got) == {"ess.a", "ess.b", "ok", "log_ml"}
    assert got["ess.a"] == 3.0 and np.isnan(got["ess.b"]) and got["ok"] == 1.0 and got["log_ml"] == -1.5


def test_diagnostics_table_holds_each_tasks_values(tmp_path, small_store):
    """Every task that set diagnostics_ has its rows (model, origin, name, value); the others have none."""
    s = _spec(tmp_path, small_store)
    res = run(s, jobs=1, progress=False)
    led = read_ledger(res.run_dir)
    assert res.manifest.diagnostics_file and (res.run_dir / res.manifest.diagnostics_file).is_file()
    d = led.diagnostics
    assert list(d.columns) == ["model", "origin", "name", "value", "key"]
    assert set(d["model"]) == {"diag"}  # rw and ar record none
    assert len(d) == res.manifest.diagnostics_rows
    plan_origins = [str(o) for o in led.draws["origin"].values.astype("datetime64[D]")]
    import pandas as pd

    even = [o for o in plan_origins if pd.Period(o, "Q").ordinal % 2 == 0]
    # diagnostics of an odd quarter would be the previous task's left over: they must be absent
    assert sorted(set(d["origin"])) == even
    for o, g in d.groupby("origin"):
        vals = dict(zip(g["name"], g["value"], strict=True))
        assert set(vals) == {"ess.a", "ess.b", "n_kept", "at_bound"}
        assert vals["ess.a"] == 100.0 + pd.Period(o, "Q").ordinal and np.isnan(vals["ess.b"])


def test_registered_check_sees_the_table_and_warns(tmp_path, small_store):
    """A registered check gets the diagnostics table; its messages reach the manifest and the summary."""
    seen = {}

    def low_ess(table):
        seen["rows"] = len(table)
        bad = table[(table["name"] == "ess.a") & (table["value"] < 100 + 170)]
        return [f"{r.model} at {r.origin}: ess.a {r.value:.0f} below 270" for r in bad.itertuples()]

    def broken(table):
        raise ValueError("no threshold configured")

    register_diagnostic_check(low_ess)
    register_diagnostic_check(broken)
    try:
        res = run(_spec(tmp_path, small_store), jobs=1, progress=False)
    finally:
        unregister_diagnostic_check(low_ess)
        unregister_diagnostic_check(broken)
    assert seen["rows"] == res.manifest.diagnostics_rows > 0
    warnings = res.manifest.diagnostic_warnings
    assert any("below 270" in w for w in warnings)
    assert any("broken failed: ValueError: no threshold configured" in w for w in warnings)
    assert "warning: diag at" in res.summary()
    assert diagnostic_warnings(read_ledger(res.run_dir).diagnostics) == []  # nothing registered now


def test_bvar_records_its_hyperparameters_and_log_ml(tmp_path, small_store):
    """The built-in BVAR's diagnostics_ (tightness, log marginal likelihood) land in the table for every task."""
    extra = '[models.bvar]\ntype = "bvar"\nlags = 2\ntightness = 0.3\n'
    res = run(_spec(tmp_path, small_store, extra), jobs=1, progress=False)
    d = read_ledger(res.run_dir).diagnostics
    bv = d[d["model"] == "bvar"]
    n_origins = len(res.manifest.origins)
    assert bv["origin"].nunique() == n_origins
    tight = bv[bv["name"] == "tightness"]["value"]
    assert len(tight) == n_origins and np.allclose(tight.to_numpy(), 0.3)
    assert np.isfinite(bv[bv["name"] == "log_ml"]["value"]).all()


def test_the_mcmc_check_warns_for_a_sticky_chain_only(tmp_path, small_store):
    """The built-in check reads mcmc_diagnostics' verdict: an AR(1) chain with rho = 0.99 has an
    ESS near N(1 - rho)/(1 + rho) ≈ 10 per 1,000 draws (Geyer 1992, the AR(1) integrated
    autocorrelation time), far below the threshold of 100 (harness.models.mcmc.ESS_MIN), so every origin is flagged; an
    independent chain (rho = 0) is not."""
    extra = ('[models.sticky]\ntype = "tests.harness.backtest.models:StickyChainModel"\nrho = 0.99\n'
             '[models.iid]\ntype = "tests.harness.backtest.models:StickyChainModel"\nrho = 0.0\n')
    res = run(_spec(tmp_path, small_store, extra), jobs=1, progress=False)
    warnings = [w for w in res.manifest.diagnostic_warnings if "MCMC" in w]
    assert len(warnings) == 1 and warnings[0].startswith("sticky:"), warnings
    n = len(set(read_ledger(res.run_dir).diagnostics.query("model == 'sticky'")["origin"]))
    assert f"at {n} of {n} origins" in warnings[0] and "threshold 100" in warnings[0]
    assert "warning: sticky" in res.summary()
