"""Shared fixtures for the harness tests: a small simulated store and a spec writer."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from vintages.store import VintageStore


def simulate_small_releases(n_quarters: int = 64, seed: int = 7, revise: bool = True) -> pd.DataFrame:
    """A small invented two-variable release log: quarterly ``gdp`` (level) and monthly ``cpi``.

    gdp is published 30, 60 and 90 days after each quarter (each release a full vintage, later
    estimates closer to the truth when ``revise``); cpi 14 days after each month, never revised.
    """
    rng = np.random.default_rng(seed)
    q = pd.period_range("2000Q1", periods=n_quarters, freq="Q")
    growth = 0.5 + 0.3 * np.sin(np.arange(n_quarters) / 5) + rng.normal(0, 0.6, n_quarters)
    gdp = 100 * np.exp(np.cumsum(growth) / 100)
    months = pd.period_range("2000-01", periods=3 * n_quarters, freq="M")
    cpi = 100 * np.exp(np.cumsum(0.2 + rng.normal(0, 0.15, len(months))) / 100)
    noise = rng.normal(0, 0.004, (3, n_quarters)) if revise else np.zeros((3, n_quarters))
    rows = []
    for i, p in enumerate(q):
        end = p.end_time.normalize()
        for k, lag in enumerate((30, 60, 90)):
            rel = end + pd.Timedelta(days=lag)
            # a full vintage: every quarter published so far, its estimate depending on its age
            for j in range(i + 1):
                age = min(k + 3 * (i - j), 2)
                val = gdp[j] * (1 + noise[age, j] * (2 - age) / 2)
                rows.append(("gdp", str(q[j]), rel, round(float(val), 6)))
    for i, m in enumerate(months):
        rel = m.end_time.normalize() + pd.Timedelta(days=14)
        rows.append(("cpi", str(m), rel, round(float(cpi[i]), 6)))
    df = pd.DataFrame(rows, columns=["variable", "period", "release", "value"])
    return df.drop_duplicates(["variable", "period", "release"], keep="last")


def make_small_store(path: Path, **kw) -> VintageStore:
    store = VintageStore.init(path)
    store.append(simulate_small_releases(**kw), {"gdp": {"freq": "Q"}, "cpi": {"freq": "M"}}, source="simulated")
    return store


SMALL_SPEC = """\
[run]
store = "{store}"
out = "{out}"
seed = 123
draws = 50
freq = "Q"
policy = "keep"

[origins]
rule = "quarterly"
day = 15
month_of_quarter = 2
start = "2010-01-01"
end = "2015-06-30"

[variables.gdp]
transform = "dlog_ann"
[variables.cpi]
transform = "dlog_ann"
convert = "mean"

[targets]
variables = ["gdp", "cpi"]
horizons = {{ min = -1, max = 2 }}

[models.rw]
type = "nochange"
[models.ar]
type = "ar"
max_lags = 2
{extra}
[scoring]
benchmark = "rw"
truths = ["first", "latest"]
"""


def write_spec(dirpath: Path, store: Path, out: Path, extra: str = "") -> Path:
    p = Path(dirpath) / "spec.toml"
    p.write_text(SMALL_SPEC.format(store=store, out=out, extra=extra))
    return p


@pytest.fixture(scope="session")
def small_store(tmp_path_factory) -> Path:
    """A read-only small store shared by the harness tests (copy it before appending)."""
    d = tmp_path_factory.mktemp("small") / "store"
    make_small_store(d)
    return d
