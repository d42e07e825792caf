"""Real-time data sets commonly start in the 1960s: origins before 1970 work end to end."""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.backtest import read_ledger, run, seed_key
from harness.spec import load_spec
from vintages import VintageStore

SPEC = """\
[run]
store = "{store}"
out = "{out}"
seed = 5
draws = 40

[origins]
rule = "quarterly"
day = 15
month_of_quarter = 2
start = "1965-01-01"
end = "1967-12-31"

[variables.gdp]
transform = "dlog_ann"

[targets]
variables = ["gdp"]
horizons = {{ min = 0, max = 2 }}

[models.rw]
type = "nochange"
level = false
[models.ar]
type = "ar"
max_lags = 2
"""


def test_a_store_from_1959_runs_origins_from_1965(tmp_path):
    """Every task of a 1965-1967 backtest on a store starting in 1959 succeeds (seed keys stay non-negative)."""
    rng = np.random.default_rng(1)
    q = pd.period_range("1959Q1", "1968Q4", freq="Q")
    level = 100 * np.exp(np.cumsum(0.007 + 0.01 * rng.standard_normal(len(q))))
    rows = [("gdp", str(p), (p.end_time.normalize() + pd.Timedelta(days=30)).date().isoformat(), float(v))
            for p, v in zip(q, level, strict=True)]
    store = VintageStore.init(tmp_path / "store")
    store.append(pd.DataFrame(rows, columns=["variable", "period", "release", "value"]), {"gdp": {"freq": "Q"}})
    p = tmp_path / "spec.toml"
    p.write_text(SPEC.format(store=tmp_path / "store", out=tmp_path / "run"))
    res = run(load_spec(p), jobs=1, progress=False)
    assert res.ok and res.total == 2 * 12, res.summary()
    assert np.isfinite(read_ledger(res.run_dir).draws.values).all()
    assert seed_key("ar", np.datetime64("1900-01-15"))[1] > 0
