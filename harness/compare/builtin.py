"""The built-in test declarations (see :mod:`harness.compare.registry`), wrapping the test functions."""

from __future__ import annotations

import math

import numpy as np

from harness.compare.coverage import christoffersen, kupiec
from harness.compare.dm import diebold_mariano
from harness.compare.fluctuation import fluctuation_test
from harness.compare.mcs import model_confidence_set
from harness.compare.pit import berkowitz, rossi_sekhposyan
from harness.compare.registry import ComparisonTest, TestResult, register_test


def _dm(loss_a, loss_b, *, h, positions=None, seed=0, params):
    r = diebold_mariano(loss_a, loss_b, h=h, hln=bool(params["hln"]))
    return TestResult("dm", r.stat, r.pvalue, r.n, r.note,
                      {"mean_diff": r.mean_diff, "kernel": r.kernel})


register_test(ComparisonTest(
    name="dm", label="Diebold–Mariano (HLN)", kind="pairwise",
    reference=("Diebold, F. X. and Mariano, R. S. (1995). JBES 13(3), 253-263; Harvey, D., "
               "Leybourne, S. and Newbold, P. (1997). IJF 13(2), 281-291"),
    min_n=lambda h, p: 4,
    min_rule="at least 4 paired forecasts",
    run=_dm, params={"hln": True},
))


def _mcs(losses, labels, *, h, seed=0, params):
    res = model_confidence_set(losses, alpha=float(params["alpha"]),
                               block_len=max(int(h), 2), n_boot=int(params["n_boot"]), seed=seed)
    p = np.asarray(res.pvalues)
    return [TestResult("mcs", math.nan, float(p[j]), res.n, "",
                       {"in_set": labels[j] in res.included, "alpha": float(params["alpha"])})
            for j in range(len(labels))]


register_test(ComparisonTest(
    name="mcs", label="model confidence set", kind="set",
    reference="Hansen, P. R., Lunde, A. and Nason, J. M. (2011). Econometrica 79(2), 453-497",
    min_n=lambda h, p: 10,
    min_rule="at least 10 periods with every model's loss",
    run=_mcs, params={"alpha": 0.10, "n_boot": 1000}, seeded=True,
))


def _hits(x):
    x = np.asarray(x, dtype=np.float64)
    return x[np.isfinite(x)].astype(int)


def _kupiec(series, *, h, level, seed=0, params):
    r = kupiec(_hits(series), level)
    return TestResult("kupiec", r.lr_uc, r.p_uc, r.n, "", {"hit_rate": r.hit_rate})


def _christoffersen(series, *, h, level, seed=0, params):
    r = christoffersen(_hits(series), level)
    return TestResult("christoffersen", r.lr_cc, r.p_cc, r.n, "",
                      {"hit_rate": r.hit_rate, "p_ind": r.p_ind})


for _name, _label, _ref, _fn in (
        ("kupiec", "Kupiec unconditional coverage",
         "Kupiec, P. H. (1995). Journal of Derivatives 3(2), 73-84", _kupiec),
        ("christoffersen", "Christoffersen conditional coverage",
         "Christoffersen, P. F. (1998). International Economic Review 39(4), 841-862", _christoffersen)):
    register_test(ComparisonTest(
        name=_name, label=_label, kind="calibration", reference=_ref,
        min_n=lambda h, p: 8, min_rule="at least 8 scored forecasts", run=_fn))


def _berkowitz(series, *, h, level=None, seed=0, params):
    u = np.asarray(series, dtype=np.float64)
    r = berkowitz(u[np.isfinite(u)])
    return TestResult("berkowitz", r.lr, r.pvalue, r.n, r.note, {"rho": r.rho})


def _rs(series, *, h, level=None, seed=0, params):
    u = np.asarray(series, dtype=np.float64)
    r = rossi_sekhposyan(u[np.isfinite(u)], h=h, n_boot=int(params["n_boot"]), seed=seed)
    return TestResult("rossi_sekhposyan", r.ks, r.ks_pvalue, r.n, "",
                      {"cvm": r.cvm, "cvm_pvalue": r.cvm_pvalue, "method": r.method})


register_test(ComparisonTest(
    name="berkowitz", label="Berkowitz PIT test", kind="calibration",
    reference="Berkowitz, J. (2001). JBES 19(4), 465-474",
    min_n=lambda h, p: 8, min_rule="at least 8 PIT values", run=_berkowitz))
register_test(ComparisonTest(
    name="rossi_sekhposyan", label="Rossi–Sekhposyan PIT uniformity", kind="calibration",
    reference="Rossi, B. and Sekhposyan, T. (2019). Journal of Econometrics 208(2), 638-657",
    min_n=lambda h, p: 8, min_rule="at least 8 PIT values", run=_rs,
    params={"n_boot": 499}, seeded=True))


def _fluctuation(loss_a, loss_b, *, h, positions=None, seed=0, params):
    r = fluctuation_test(loss_a, loss_b, mu=float(params["mu"]), alpha=float(params["alpha"]), h=h)
    return TestResult("fluctuation", r.stat, math.nan, r.n, r.note,
                      {"path": r.path, "window_end": r.window_end, "critical": r.critical_value,
                       "reject": r.reject})


register_test(ComparisonTest(
    name="fluctuation", label="Giacomini–Rossi fluctuation test", kind="stability",
    reference="Giacomini, R. and Rossi, B. (2010). JAE 25(4), 595-620",
    min_n=lambda h, p: 20, min_rule="at least 20 paired forecasts",
    run=_fluctuation, params={"mu": 0.3, "alpha": 0.05}))
