"""Native-frequency models run beside quarterly ones: the plan builds both forms of information set."""

from __future__ import annotations

import numpy as np
import pytest

from harness.backtest import make_plan, read_ledger, run
from harness.errors import SpecError
from harness.spec import load_spec
from tests.harness.conftest import write_spec

EXTRA = '[models.dfm]\ntype = "dfm"\n[models.bridge]\ntype = "bridge"\n'


def _spec(tmp_path, small_store, targets='["gdp"]'):
    p = write_spec(tmp_path, small_store, tmp_path / "run", EXTRA)
    p.write_text(p.read_text().replace('variables = ["gdp", "cpi"]', f"variables = {targets}"))
    return load_spec(p)


def test_native_models_get_monthly_information_sets(tmp_path, small_store):
    """dfm/bridge tasks read a monthly-axis set (cpi monthly, gdp at quarter ends) with no look-ahead."""
    spec = _spec(tmp_path, small_store)
    plan = make_plan(spec)
    native = [t for t in plan.tasks if t.layout == "native"]
    assert {t.model for t in native} == {"dfm", "bridge"}
    info = plan.info_for(native[-1])
    assert info.freq == "M" and info.native_freq == {"gdp": "Q", "cpi": "M"}
    assert max(info.source_release.values()) <= info.origin
    assert plan.targets_for(native[-1]).periods().equals(plan.targets[native[-1].index].periods())
    res = run(spec, jobs=1, progress=False, plan=plan)
    assert res.ok, res.summary()
    led = read_ledger(res.run_dir)
    assert np.isfinite(led.draws.sel(model=["dfm", "bridge"]).values).all()


def test_native_model_with_a_converted_target_is_refused_at_plan_time(tmp_path, small_store):
    """A native model cannot target a monthly variable converted to quarters: a one-line spec error."""
    spec = _spec(tmp_path, small_store, targets='["gdp", "cpi"]')
    with pytest.raises(SpecError, match=r"\['cpi'\].*native-frequency model\(s\) \['bridge', 'dfm'\]"):
        make_plan(spec)
