"""Benchmarks of the VAR models, each beside a straightforward loop implementation run in the same process.

Targets (seconds on the project machine): (a) BVAR, 3 variables, 4 lags, 160 quarters, 10,000
posterior draws with 8-step paths <= 0.1; (b) 20 variables, 4 lags, 2,000 draws <= 0.5;
(c) BVAR-SV, 3 variables, 5,000 Gibbs iterations <= 15; (d) the compiled BVAR-SV Gibbs kernel at
least 2x faster than the block-by-block NumPy/SciPy reference (``sv_gibbs(reference=True)``) on a
default-size fit (4 variables, 2 lags, 126 quarters, 1,500 iterations), timed alternately in one
run.

Every timing is wall-clock with BLAS on one thread, best of a few repeats after a warm-up
(imports, numba cache). The
loop references are the obvious per-draw (BVAR) or per-time-step (SV volatility block)
implementations; the SV loop reference is timed on fewer iterations and scaled linearly, which
the printed name says. Data are simulated (the invented Veldmark toy economy), seeded.

Run ``python scripts/bench_models.py``; it prints ``name: value`` lines. ``run()`` returns them.
"""

from __future__ import annotations

import time

import numpy as np
from scipy import stats

from harness.models.base import ar1_scales, lag_design
from harness.models.bvar import BayesianVAR
from harness.models.sv_blocks import draw_coefficients, draw_impacts
from harness.models.sv_sampler import _minnesota_independent, sv_gibbs
from harness.models.sv_tables import KSC_MEANS, KSC_OFFSET, KSC_PROBS, KSC_VARIANCES
from harness.testing import make_infoset, make_targets, simulated_panel

TARGETS = {"bvar_3v": 0.1, "bvar_20v": 0.5, "bvar_sv_3v": 15.0, "bvar_sv_kernel_speedup": 2.0}


def _best(fn, repeat: int = 3) -> float:
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


# ---------------------------------------------------------------------------- BVAR references
def _bvar_loop(model: BayesianVAR, y: np.ndarray, variables, n_draws: int, steps: int,
               rng: np.random.Generator) -> np.ndarray:
    """Per-draw loop: scipy inverse-Wishart draw, B | Sigma, then an 8-step path, draw by draw."""
    post = model.fit_sample(y, variables)
    k, n = post.coef_mean.shape
    p = post.lags
    omega_chol = np.linalg.cholesky(post.omega)
    iw = stats.invwishart(df=post.dof, scale=post.scale)
    out = np.empty((n_draws, steps, n))
    for d in range(n_draws):
        sigma = iw.rvs(random_state=rng)
        s_chol = np.linalg.cholesky(sigma)
        b = post.coef_mean + omega_chol @ rng.standard_normal((k, n)) @ s_chol.T
        hist = list(y[-p:][::-1])
        for h in range(steps):
            x = np.concatenate(hist[:p] + [np.ones(1)])
            yn = x @ b + s_chol @ rng.standard_normal(n)
            out[d, h] = yn
            hist.insert(0, yn)
    return out


def _bench_bvar(n_vars: int, n_draws: int, label: str, results: dict[str, float]) -> None:
    y = simulated_panel(160, n_vars, seed=1, ragged=False)
    variables = [f"v{i}" for i in range(n_vars)]
    info = make_infoset(y, variables)
    tg = make_targets(info, horizons=tuple(range(8)))
    model = BayesianVAR(lags=4)
    model.forecast(info, tg, 100, np.random.default_rng(0))  # warm-up
    fast = _best(lambda: model.forecast(info, tg, n_draws, np.random.default_rng(1)))
    loop = _best(lambda: _bvar_loop(model, y, variables, n_draws, 8, np.random.default_rng(1)), 1)
    results[f"{label}_{n_draws}_draws_s"] = fast
    results[f"{label}_{n_draws}_draws_loop_s"] = loop
    results[f"{label}_speedup_vs_loop"] = loop / fast
    results[f"{label}_time_over_target"] = fast / TARGETS[label]


# ---------------------------------------------------------------------------- SV reference
def _volatility_block_loop(ystar: np.ndarray, h: np.ndarray, phi: np.ndarray, h1_mean: np.ndarray,
                           h1_var: float, rng: np.random.Generator) -> np.ndarray:
    """Indicators and log-volatility by per-time-step loops: Carter-Kohn forward filter, backward sampling."""
    t, n = ystar.shape
    means = KSC_MEANS + KSC_OFFSET
    out = np.empty_like(h)
    for i in range(n):
        comp = np.empty(t, dtype=int)
        for s in range(t):
            w = KSC_PROBS * stats.norm.pdf(ystar[s, i] - h[s, i], means, np.sqrt(KSC_VARIANCES))
            comp[s] = rng.choice(7, p=w / w.sum())
        m, v = np.empty(t), np.empty(t)
        a, p = h1_mean[i], h1_var
        for s in range(t):
            if s:
                p = p + phi[i]
            gain = p / (p + KSC_VARIANCES[comp[s]])
            a = a + gain * (ystar[s, i] - means[comp[s]] - a)
            p = (1 - gain) * p
            m[s], v[s] = a, p
        out[t - 1, i] = m[-1] + np.sqrt(v[-1]) * rng.standard_normal()
        for s in range(t - 2, -1, -1):
            g = v[s] / (v[s] + phi[i])
            out[s, i] = m[s] + g * (out[s + 1, i] - m[s]) + np.sqrt(v[s] * (1 - g)) * rng.standard_normal()
    return out


def _sv_loop(y: np.ndarray, lags: int, b0, v0, n_iter: int, rng: np.random.Generator) -> None:
    """The same Gibbs sampler with the volatility block done by per-time-step Python loops."""
    yt, x = lag_design(y, lags)
    t, n = yt.shape
    k = x.shape[1]
    coefs = np.linalg.lstsq(x, yt, rcond=None)[0]
    u = yt - x @ coefs
    a = np.eye(n)
    h = np.tile(np.log(u.var(axis=0)), (t, 1))
    h1_mean = h[0].copy()
    phi = np.full(n, 0.01)
    for _ in range(n_iter):
        inv_lam = np.exp(-h)
        draw_coefficients(yt, x, coefs, u, a, inv_lam, b0, 1 / v0, rng.standard_normal((n, k)))
        draw_impacts(u, a, inv_lam, 10.0, rng)
        e = u @ a.T
        ystar = np.log(e * e + 1e-6)
        h = _volatility_block_loop(ystar, h, phi, h1_mean, 4.0, rng)
        dh = np.diff(h, axis=0)
        phi = (5 * 0.01 + (dh * dh).sum(axis=0)) / rng.chisquare(5 + t - 1, size=n)


def _bench_sv(results: dict[str, float], n_iter: int = 5000, loop_iter: int = 100) -> None:
    y = simulated_panel(124, 3, seed=2, ragged=False)
    b0, v0 = _minnesota_independent(3, 4, 0.2, 0.5, 1.0, np.zeros(3), ar1_scales(y))
    sv_gibbs(y, 4, b0, v0, 10.0, 5.0, 0.01, 20, 10, 1, np.random.default_rng(0))  # warm-up
    fast = _best(lambda: sv_gibbs(y, 4, b0, v0, 10.0, 5.0, 0.01, n_iter, 1000, 1,
                                  np.random.default_rng(1)), 1)
    loop = _best(lambda: _sv_loop(y, 4, b0, v0, loop_iter, np.random.default_rng(1)), 1)
    loop_scaled = loop * n_iter / loop_iter
    results[f"bvar_sv_3v_{n_iter}_iter_s"] = fast
    results[f"bvar_sv_3v_{n_iter}_iter_loop_s_scaled_from_{loop_iter}"] = loop_scaled
    results["bvar_sv_3v_speedup_vs_loop"] = loop_scaled / fast
    results["bvar_sv_3v_time_over_target"] = fast / TARGETS["bvar_sv_3v"]
    info = make_infoset(y[:120], ["a", "b", "c"])
    from harness.models.bvar_sv import BayesianVARSV

    model = BayesianVARSV()
    results["bvar_sv_default_fit_120q_s"] = _best(
        lambda: model.forecast(info, make_targets(info, horizons=tuple(range(8))), 1000,
                               np.random.default_rng(3)), 1)
    _bench_sv_kernel(results)


def _bench_sv_kernel(results: dict[str, float], repeat: int = 3) -> None:
    """Compiled Gibbs kernel against the NumPy/SciPy reference, same seed, alternating runs."""
    y = simulated_panel(126, 4, seed=2, ragged=False)
    b0, v0 = _minnesota_independent(4, 2, 0.2, 0.5, 1.0, np.zeros(4), ar1_scales(y))
    args = (y, 2, b0, v0, 10.0, 5.0, 0.01, 1500, 500, 1)
    sv_gibbs(*args[:7], 20, 10, 1, np.random.default_rng(0))  # warm-up (numba cache)
    fast, ref = np.inf, np.inf
    for _ in range(repeat):  # alternate so that a load change on a shared machine hits both
        t0 = time.perf_counter()
        post_ref = sv_gibbs(*args, np.random.default_rng(4), reference=True)
        ref = min(ref, time.perf_counter() - t0)
        t0 = time.perf_counter()
        post = sv_gibbs(*args, np.random.default_rng(4))
        fast = min(fast, time.perf_counter() - t0)
    results["bvar_sv_4v_1500_iter_compiled_s"] = fast
    results["bvar_sv_4v_1500_iter_reference_s"] = ref
    results["bvar_sv_kernel_speedup_vs_reference"] = ref / fast
    results["bvar_sv_kernel_speedup_over_target"] = (ref / fast) / TARGETS["bvar_sv_kernel_speedup"]
    # same seed, same random stream: equal draws up to rounding on this well-conditioned chain
    results["bvar_sv_kernel_max_abs_diff_vs_reference"] = float(max(
        np.abs(getattr(post, f) - getattr(post_ref, f)).max() for f in ("coefs", "a", "log_vol", "phi")))


def run() -> dict[str, float]:
    """Run every benchmark; returns ``{name: value}`` (seconds, ratios).

    BLAS is limited to one thread for every timing, fast and loop alike: that is what each loky
    worker gets when the runner uses all cores (joblib caps worker BLAS threads), and it keeps
    the timings stable on a shared machine.
    """
    from threadpoolctl import threadpool_limits

    results: dict[str, float] = {}
    with threadpool_limits(limits=1, user_api="blas"):
        _bench_bvar(3, 10_000, "bvar_3v", results)
        _bench_bvar(20, 2_000, "bvar_20v", results)
        _bench_sv(results)
    return results


if __name__ == "__main__":
    for name, value in run().items():
        print(f"{name}: {value:.4g}")
