"""A large invented nowcasting panel: many monthly Veldmark indicators, each on its own release days.

Every indicator of the (invented) Veldmark statistics office is published three times per
month: a first estimate some days after the month ends, then two revisions. Each indicator has
its own publication lags (drawn once), and each publication lands on a day jittered by a few
days around them, so nearly every calendar day is some indicator's release day: the layout
where a dense release × variable × period array explodes and a sparse release index does not.

Values: a level ``100 exp(cumsum(g))`` with monthly growth ``g ~ N(0.2%, 1%)`` per indicator;
the k-th estimate is the level times ``1 + e_k`` with revision noise ``e_1 ~ N(0, 0.4%)``,
``e_2 ~ N(0, 0.2%)``, ``e_3 = 0`` (the third estimate is final). Everything is vectorised and
deterministic for a given seed.

Run ``python scripts/make_panel.py [N_INDICATORS YEARS]`` to print the panel's size.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from vintages.periods import format_periods, period_end  # noqa: E402

SEED = 20260611
#: invented Veldmark topics; indicator names cycle through them
TOPICS = ("orders", "freight", "retail", "energy", "permits", "payroll", "exports", "harbour",
          "textile", "dairy")
RELEASES = 3


def indicator_names(n: int) -> list[str]:
    """``n`` invented indicator names, e.g. ``orders_001``, ``freight_002``."""
    return [f"{TOPICS[k % len(TOPICS)]}_{k + 1:03d}" for k in range(n)]


def make_panel(n_indicators: int = 100, years: int = 30, start: str = "1990-01",
               seed: int = SEED) -> tuple[pd.DataFrame, dict[str, dict]]:
    """The release log of the panel and its metadata.

    Parameters
    ----------
    n_indicators : int
        Monthly indicators.
    years : int
        Years of monthly reference periods from ``start``.
    start : str
        First month (``YYYY-MM``); before 1970 is fine.
    seed : int

    Returns
    -------
    log : DataFrame
        Columns ``variable``, ``period`` (label), ``release`` (datetime64[s]), ``value``;
        ``n_indicators * 12 * years * 3`` rows.
    meta : dict
        ``{name: {"freq": "M", "units": "index", "description": ...}}``.
    """
    rng = np.random.default_rng(seed)
    names = indicator_names(n_indicators)
    n_m = 12 * years
    months = pd.Period(start, "M").ordinal + np.arange(n_m)
    ends = period_end(months, "M")
    # per indicator: its first lag (3-45 days) and the gaps to its two revisions
    lag1 = rng.integers(3, 46, n_indicators)
    lag2 = lag1 + rng.integers(20, 41, n_indicators)
    lag3 = lag2 + rng.integers(25, 61, n_indicators)
    lags = np.stack([lag1, lag2, lag3], axis=1)  # (n_ind, 3)
    jitter = rng.integers(0, 4, (n_indicators, n_m, RELEASES))  # weekday-like drift
    days = (ends[None, :, None] + (lags[:, None, :] + jitter).astype("timedelta64[D]"))
    growth = rng.normal(0.002, 0.01, (n_indicators, n_m))
    level = 100.0 * np.exp(np.cumsum(growth, axis=1))
    noise_sd = np.array([0.004, 0.002, 0.0])
    est = level[:, :, None] * (1.0 + rng.normal(size=(n_indicators, n_m, RELEASES)) * noise_sd)
    labels = format_periods(months, "M")
    log = pd.DataFrame({
        "variable": np.repeat(np.array(names, dtype=object), n_m * RELEASES),
        "period": np.tile(np.repeat(labels, RELEASES), n_indicators),
        "release": days.ravel().astype("datetime64[s]"),
        "value": est.ravel().round(6),
    })
    meta = {n: {"freq": "M", "units": "index",
                "description": f"Veldmark {n.split('_')[0]} indicator (invented)"} for n in names}
    return log, meta


if __name__ == "__main__":
    n, y = (int(a) for a in sys.argv[1:3]) if len(sys.argv) > 2 else (100, 30)
    log, meta = make_panel(n, y)
    print(f"values: {len(log)}")
    print(f"indicators: {len(meta)}")
    print(f"distinct release days: {log['release'].nunique()}")
