"""Benchmarks of the nowcasting models, each beside statsmodels run in the same process.

Panel: the invented Veldmark economy, 20 monthly indicators + 1 quarterly target, 30 years
(360 months), with a ragged edge (:func:`harness.models.dfm_native.simulated_native_panel`).

Targets (seconds, one core): (a) factor model (1 factor, 2 lags, AR(1) idiosyncratic terms),
fit + 2,000 draws at one origin <= 1; our engine faster than statsmodels' DynamicFactorMQ
(same model) both per E-step (filter + smoother at the same parameters) and per fit;
(b) bridge equations, fit + 2,000 draws (reported); (c) news decomposition of one pair of
consecutive origins (both fits included) <= 0.5.

Every timing is wall-clock with BLAS on one thread, best of a few repeats after a warm-up
(imports, numba cache). statsmodels' fit uses its defaults (EM, tolerance 1e-6, em
initialisation); its simulation draws 200 paths of 12 months from the end of the sample.

Run ``python scripts/bench_nowcast.py``; it prints ``name: value`` lines. ``run()`` returns them.
"""

from __future__ import annotations

import time
import warnings

import numpy as np

TARGETS = {"dfm_fit_2000_draws": 1.0, "news_pair": 0.5}


def _best(fn, repeat: int = 3) -> float:
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def _case():
    from harness.models.dfm_native import (
        make_native_infoset,
        native_targets,
        simulated_native_panel,
    )

    mon, q = simulated_native_panel(360, 20, 0)
    names = [f"ind{i:02d}" for i in range(20)]
    info = make_native_infoset(mon, q, names, ["gdp"], start="1995-01")
    return info, native_targets(info, ["gdp"], (-1, 0, 1, 2)), mon, q, names


def bench_dfm() -> dict[str, float]:
    """Fit + 2,000 draws, E-step and fit against statsmodels' DynamicFactorMQ."""
    import pandas as pd
    import statsmodels.api as sm

    from harness.models import DynamicFactorModel
    from harness.models.dfm_em import estep
    from harness.models.dfm_ssm import to_statsmodels_vector

    info, tg, mon, q, names = _case()
    model = DynamicFactorModel()
    model.forecast(info, tg, 10, np.random.default_rng(0))  # warm-up: numba cache
    ours_total = _best(lambda: model.forecast(info, tg, 2000, np.random.default_rng(1)))
    fit = model.fit(info, tg)
    ours_fit = _best(lambda: model.fit(info, tg))
    ours_estep = _best(lambda: estep(fit.x, fit.params, fit.layout), repeat=10)
    endog = pd.DataFrame(np.c_[mon, q], index=info.periods, columns=names + ["gdp"])
    mod = sm.tsa.DynamicFactorMQ(endog, k_endog_monthly=20, factors=1, factor_orders=2,
                                 idiosyncratic_ar1=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = mod.fit(disp=False)
        sm_fit = _best(lambda: mod.fit(disp=False), repeat=2)
    sm_sim = _best(lambda: res.simulate(nsimulations=12, repetitions=200, anchor="end"))
    mod_std = sm.tsa.DynamicFactorMQ(pd.DataFrame(fit.x, index=info.periods), k_endog_monthly=20,
                                     factors=1, factor_orders=2, idiosyncratic_ar1=True,
                                     standardize=False)
    mod_std.update(to_statsmodels_vector(fit.params))
    sm_estep = _best(lambda: mod_std.ssm.smooth(), repeat=10)
    return {
        "dfm_fit_2000_draws_seconds": ours_total,
        "dfm_fit_2000_draws_target_seconds": TARGETS["dfm_fit_2000_draws"],
        "dfm_fit_seconds": ours_fit,
        "dfm_em_esteps": float(fit.em.n_iter),
        "dfm_llf_ours": fit.em.llf,
        "statsmodels_dfmq_fit_seconds": sm_fit,
        "statsmodels_dfmq_em_iterations": float(res.mle_retvals.iter),
        "statsmodels_dfmq_llf_stationary_init": float(mod.loglike(res.params)),
        "statsmodels_dfmq_simulate_200_seconds": sm_sim,
        "fit_ratio_statsmodels_over_ours": sm_fit / ours_fit,
        "estep_ours_seconds": ours_estep,
        "estep_statsmodels_seconds": sm_estep,
        "estep_ratio_statsmodels_over_ours": sm_estep / ours_estep,
    }


def bench_bridge() -> dict[str, float]:
    """Bridge equations on the same panel: fit + 2,000 draws."""
    from harness.models import BridgeEquations

    info, tg, *_ = _case()
    model = BridgeEquations()
    model.forecast(info, tg, 10, np.random.default_rng(0))
    return {"bridge_fit_2000_draws_seconds":
            _best(lambda: model.forecast(info, tg, 2000, np.random.default_rng(1)))}


def _ragged(mon, q, end):
    """The panel as published at the end of month ``end``: indicator i lags i mod 3 months."""
    m = mon[: end + 1].copy()
    for i in range(m.shape[1]):
        if i % 3:
            m[end + 1 - (i % 3):, i] = np.nan
    qq = q[: end + 1].copy()
    last_q = (end + 1) // 3 * 3 - 1  # the last complete quarter ...
    qq[last_q - 2:] = np.nan  # ... is not yet published
    return m, qq


def bench_news() -> dict[str, float]:
    """One pair of consecutive monthly origins on the 20-indicator panel (both fits included)."""
    from harness.models import DynamicFactorModel
    from harness.models.dfm_native import make_native_infoset, simulated_native_panel
    from harness.models.news import news_decomposition

    mon, q = simulated_native_panel(362, 20, 0, ragged=False)
    names = [f"ind{i:02d}" for i in range(20)]
    mo, qo = _ragged(mon, q, 359)
    mn, qn = _ragged(mon, q, 360)
    mn[355, 4] += 0.5  # a revision
    io = make_native_infoset(mo, qo, names, ["gdp"], start="1995-01", origin="2025-01-10")
    inn = make_native_infoset(mn, qn, names, ["gdp"], start="1995-01", origin="2025-02-10")
    model = DynamicFactorModel()
    frame = news_decomposition(model, io, inn, "gdp", 0)
    t = _best(lambda: news_decomposition(model, io, inn, "gdp", 0))
    return {"news_pair_seconds": t, "news_pair_target_seconds": TARGETS["news_pair"],
            "news_rows": float(len(frame)),
            "news_abs_remainder": float(abs(frame["contribution"].iloc[-2]))}


def run() -> dict[str, float]:
    """Run every benchmark; returns ``{name: value}`` (seconds, ratios)."""
    from threadpoolctl import threadpool_limits

    out: dict[str, float] = {}
    with threadpool_limits(1):
        out.update(bench_dfm())
        out.update(bench_bridge())
        out.update(bench_news())
    return out


if __name__ == "__main__":
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    for k, v in run().items():
        print(f"{k}: {v:.4g}")
