"""The built-in test declarations (see :mod:`harness.compare.registry`), wrapping the test functions.

Each declaration carries its minimum-sample rule (``min_n`` in steps ahead h and the settings,
``min_rule`` in words, ``min_source`` its source) and, for tests that assume independent
forecasts, the rule that they do not apply at h > 1. The sizes quoted below are those of the
Monte Carlo checks in ``tests/harness/compare`` (5 % nominal), on correctly specified AR(1)
h-step forecasts or MA(h - 1) loss differentials; they describe the rule's boundary.
"""

from __future__ import annotations

import math

import numpy as np

from harness.compare.coverage import christoffersen, coverage_t, kupiec
from harness.compare.dm import DM_METHODS, diebold_mariano, dm_min_n
from harness.compare.fluctuation import fluctuation_test
from harness.compare.mcs import model_confidence_set
from harness.compare.pit import berkowitz, knuppel, rossi_sekhposyan
from harness.compare.registry import ComparisonTest, TestResult, register_test

_COCHRAN = ("Cochran, W. G. (1954). Some methods for strengthening the common chi-squared tests. "
            "Biometrics 10(4), 417-451 (expected count of at least 5 in every cell)")
_CI2020 = ("Coroneo, L. and Iacone, F. (2020). Comparing predictive accuracy in small samples using "
           "fixed-smoothing asymptotics. Journal of Applied Econometrics 35(4), 391-409")


def _one_step(label: str):
    def applies(h, params):
        return "" if int(h) == 1 else f"{label} assumes independence; h > 1"
    return applies


def _level(params) -> float:
    c = params.get("level")
    return 0.5 if c is None else float(c)


def _rare(params) -> float:
    c = _level(params)
    return min(c, 1.0 - c)


# ----------------------------------------------------------------------------- Diebold-Mariano
def _dm(loss_a, loss_b, *, h, positions=None, seed=0, params):
    r = diebold_mariano(loss_a, loss_b, h=h, method=params["method"],
                        bandwidth=int(params["bandwidth"]) or None,
                        alternative=params["alternative"], positions=positions)
    return TestResult("dm", r.stat, r.pvalue, r.n, r.note,
                      {"mean_diff": r.mean_diff, "kernel": r.kernel, "method": r.method,
                       "bandwidth": r.bandwidth, "df": r.df})


register_test(ComparisonTest(
    name="dm", label="Diebold–Mariano", kind="pairwise",
    reference=("Diebold, F. X. and Mariano, R. S. (1995). JBES 13(3), 253-263; fixed-m (default) "
               f"and fixed-b inference: {_CI2020}; HLN: Harvey, D., Leybourne, S. and Newbold, P. "
               "(1997). IJF 13(2), 281-291"),
    min_n=lambda h, p: dm_min_n(h, p["method"], int(p["bandwidth"])),
    min_rule=("fixed_m: T >= 8 and the highest frequency averaged, 2 pi m / T, at most 2 / h for "
              "this and every larger T (m = floor(T^(1/3))); fixed_b, hln, dm: T >= max(8, 10 h)"),
    min_source=("fixed_m: the MA(h - 1) spectrum is flat well inside its first zero 2 pi / h "
                f"(our reading of {_CI2020}); a Monte Carlo gives sizes 0.049-0.069 at 5 % at the "
                "boundary for equal-weight MA(h - 1) differentials, h = 1..9. Other methods: common "
                "practice, and they over-reject: at T = 10 h (h = 1..6) 0.05-0.09 (hln), 0.04-0.12 "
                "(fixed_b), 0.09-0.12 (dm)"),
    run=_dm, params={"method": "fixed_m", "bandwidth": 0, "alternative": "two-sided"},
    choices={"method": DM_METHODS, "alternative": ("greater", "less", "two-sided")},
    positional=True,
))


# ----------------------------------------------------------------------------- model confidence set
def _block(h) -> int:
    return max(int(h), 2)


def _mcs(losses, labels, *, h, seed=0, params):
    res = model_confidence_set(losses, alpha=float(params["alpha"]), block_len=_block(h),
                               n_boot=int(params["n_boot"]), seed=seed)
    p = np.asarray(res.pvalues)
    return [TestResult("mcs", math.nan, float(p[j]), res.n, "",
                       {"in_set": labels[j] in res.included, "alpha": float(params["alpha"])})
            for j in range(len(labels))]


register_test(ComparisonTest(
    name="mcs", label="model confidence set", kind="set",
    reference="Hansen, P. R., Lunde, A. and Nason, J. M. (2011). Econometrica 79(2), 453-497",
    min_n=lambda h, p: max(20, 10 * _block(h)),
    min_rule="T >= max(20, 10 b) periods with every model's loss, b = max(h, 2) the mean block length",
    min_source=("common practice: a block bootstrap needs about ten blocks to mimic the "
                "dependence; Politis, D. N. and Romano, J. P. (1994), JASA 89(428), 1303-1313"),
    run=_mcs, params={"alpha": 0.10, "n_boot": 1000}, seeded=True,
))


# ----------------------------------------------------------------------------- coverage
def _hits(x):
    x = np.asarray(x, dtype=np.float64)
    return x[np.isfinite(x)].astype(int)


def _kupiec(series, *, h, level, seed=0, params, positions=None):
    r = kupiec(_hits(series), level)
    return TestResult("kupiec", r.lr_uc, r.p_uc, r.n, "", {"hit_rate": r.hit_rate})


def _christoffersen(series, *, h, level, seed=0, params, positions=None):
    r = christoffersen(_hits(series), level)
    return TestResult("christoffersen", r.lr_cc, r.p_cc, r.n, "",
                      {"hit_rate": r.hit_rate, "p_ind": r.p_ind})


def _coverage_t(series, *, h, level, seed=0, params, positions=None):
    r = coverage_t(series, level, h, method=params["method"], positions=positions)
    return TestResult("coverage_t", r.stat, r.pvalue, r.n, r.note,
                      {"hit_rate": r.mean_diff + level if np.isfinite(r.mean_diff) else math.nan,
                       "method": r.method, "bandwidth": r.bandwidth, "df": r.df})


register_test(ComparisonTest(
    name="kupiec", label="Kupiec unconditional coverage", kind="calibration",
    reference="Kupiec, P. H. (1995). Journal of Derivatives 3(2), 73-84",
    min_n=lambda h, p: math.ceil(5.0 / _rare(p) - 1e-9),
    min_rule="n >= 5 / min(c, 1 - c): at least 5 expected hits and 5 expected misses; h = 1 only",
    min_source=_COCHRAN, run=_kupiec, applies=_one_step("Kupiec"),
))
register_test(ComparisonTest(
    name="christoffersen", label="Christoffersen conditional coverage", kind="calibration",
    reference="Christoffersen, P. F. (1998). International Economic Review 39(4), 841-862",
    min_n=lambda h, p: 1 + math.ceil(5.0 / _rare(p) ** 2 - 1e-9),
    min_rule=("n >= 1 + 5 / min(c, 1 - c)^2: at least 5 expected transitions in each cell of the "
              "2 x 2 transition table; h = 1 only"),
    min_source=_COCHRAN, run=_christoffersen, applies=_one_step("Christoffersen"),
))
register_test(ComparisonTest(
    name="coverage_t", label="hit-rate t-test (fixed-m)", kind="calibration",
    reference=("common practice (t-test of the mean hit indicator with a long-run variance); "
               f"fixed-m inference as in {_CI2020}"),
    min_n=lambda h, p: max(dm_min_n(h, p["method"]), math.ceil(5.0 * h / _rare(p) - 1e-9)),
    min_rule=("n >= the DM rule at h and n >= 5 h / min(c, 1 - c): at least 5 expected hits and "
              "misses per h overlapping forecasts"),
    min_source=(f"{_COCHRAN}, scaled by the overlap h (our reading); the suite's Monte Carlo on "
                "AR(1) h-step intervals gives sizes 0.05-0.075 at the boundary for c = 0.5, 0.7, 0.9"),
    run=_coverage_t, params={"method": "fixed_m"}, choices={"method": DM_METHODS},
    positional=True,
))


# ----------------------------------------------------------------------------- PIT
def _berkowitz(series, *, h, level=None, seed=0, params, positions=None):
    u = np.asarray(series, dtype=np.float64)
    r = berkowitz(u[np.isfinite(u)])
    return TestResult("berkowitz", r.lr, r.pvalue, r.n, r.note, {"rho": r.rho})


def _rs(series, *, h, level=None, seed=0, params, positions=None):
    u = np.asarray(series, dtype=np.float64)
    r = rossi_sekhposyan(u[np.isfinite(u)], h=h, n_boot=int(params["n_boot"]), seed=seed)
    return TestResult("rossi_sekhposyan", r.ks, r.ks_pvalue, r.n, "",
                      {"cvm": r.cvm, "cvm_pvalue": r.cvm_pvalue, "method": r.method})


def _knuppel(series, *, h, level=None, seed=0, params, positions=None):
    r = knuppel(series, h, moments=tuple(int(x) for x in params["moments"]),
                method=params["method"], joint=params["joint"], positions=positions)
    return TestResult("knuppel", r.stat, r.pvalue, r.n, r.note,
                      {"law": r.law, "deviations": r.deviations.tolist(), "method": r.method,
                       "bandwidth": r.bandwidth})


register_test(ComparisonTest(
    name="berkowitz", label="Berkowitz PIT test", kind="calibration",
    reference="Berkowitz, J. (2001). JBES 19(4), 465-474",
    min_n=lambda h, p: 20, min_rule="at least 20 PIT values; h = 1 only",
    min_source=("common practice; the suite's Monte Carlo gives sizes 0.046-0.063 for n = 16-30 at "
                "h = 1, and 0.26-0.98 at h = 2-4 (hence h = 1 only)"),
    run=_berkowitz, applies=_one_step("Berkowitz")))
register_test(ComparisonTest(
    name="rossi_sekhposyan", label="Rossi–Sekhposyan PIT uniformity", kind="calibration",
    reference="Rossi, B. and Sekhposyan, T. (2019). Journal of Econometrics 208(2), 638-657",
    min_n=lambda h, p: 20 if int(h) == 1 else 40 * int(h),
    min_rule="h = 1: at least 20 PIT values; h > 1 (block bootstrap): at least 40 h",
    min_source=("the suite's Monte Carlo on AR(1) h-step PITs: asymptotic critical values hold at "
                "n = 20 (0.06); the moving-block bootstrap over-rejects (0.10-0.20 for n <= 80 at "
                "h = 2-4) and reaches 0.06-0.09 only from about n = 40 h"),
    run=_rs, params={"n_boot": 499}, seeded=True))
register_test(ComparisonTest(
    name="knuppel", label="Knüppel raw-moment PIT test (fixed-m)", kind="calibration",
    reference=("Knüppel, M. (2015). Evaluating the calibration of multi-step-ahead density forecasts "
               f"using raw moments. JBES 33(2), 270-281; fixed-m inference: {_CI2020}"),
    min_n=lambda h, p: max(20, dm_min_n(h, "fixed_m")),
    min_rule="n >= max(20, the fixed-m DM rule at h)",
    min_source=("the suite's Monte Carlo on AR(1) h-step PITs: sizes 0.04-0.07 at the boundary "
                "(moments 1 and 2, Bonferroni)"),
    run=_knuppel, params={"moments": (1, 2), "method": "fixed_m", "joint": "bonferroni"},
    choices={"method": ("bartlett", "fixed_m"), "joint": ("bonferroni", "wald")},
    positional=True))


# ----------------------------------------------------------------------------- stability
def _fluctuation(loss_a, loss_b, *, h, positions=None, seed=0, params):
    r = fluctuation_test(loss_a, loss_b, mu=float(params["mu"]), alpha=float(params["alpha"]), h=h,
                         positions=positions)
    return TestResult("fluctuation", r.stat, math.nan, r.n, r.note,
                      {"path": r.path, "window_end": r.window_end, "critical": r.critical_value,
                       "reject": r.reject})


register_test(ComparisonTest(
    name="fluctuation", label="Giacomini–Rossi fluctuation test", kind="stability",
    reference="Giacomini, R. and Rossi, B. (2010). JAE 25(4), 595-620",
    min_n=lambda h, p: max(20, 10 * int(h), math.ceil(2 * int(h) / float(p["mu"]) - 1e-9)),
    min_rule="P >= max(20, 10 h) paired forecasts and a window m = mu P of at least 2 h",
    min_source="common practice (asymptotic critical values; the long-run variance uses h - 1 lags)",
    run=_fluctuation, params={"mu": 0.3, "alpha": 0.05}, positional=True))
