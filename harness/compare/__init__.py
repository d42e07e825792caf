"""Forecast comparison and calibration tests on per-forecast losses, hits and PITs.

Every test drops missing values first (pairs with a NaN on either side for comparisons) and
says so in its result's ``n``. Degenerate data (too few observations, a constant loss
differential) give NaN statistics with a ``note`` instead of an exception, so a loop over many
cells keeps going; invalid arguments raise ``ValueError``. The tests the evaluation runs, their
minimum-sample rules and their seeds are declared in :mod:`harness.compare.registry`.
"""

from __future__ import annotations

from harness.compare._checks import ALTERNATIVES, Alternative
from harness.compare.bootstrap import BOOTSTRAPS, Bootstrap, bootstrap_indices
from harness.compare.coverage import CoverageResult, christoffersen, coverage_t, kupiec
from harness.compare.dm import (
    DM_LABELS,
    DM_METHODS,
    RELATIVE_TOLERANCE,
    DMMethod,
    DMResult,
    diebold_mariano,
    dm_min_n,
    hln_factor,
)
from harness.compare.fluctuation import (
    FLUCTUATION_CV,
    FluctuationResult,
    fluctuation_test,
    simulate_fluctuation_cv,
)
from harness.compare.mcs import MCS_STATISTICS, MCSResult, MCSStatistic, model_confidence_set
from harness.compare.pit import (
    CVM_CV,
    KS_CV,
    BerkowitzResult,
    PITUniformityResult,
    RawMomentResult,
    berkowitz,
    cvm_limit_cdf,
    knuppel,
    pit_histogram,
    rossi_sekhposyan,
)
from vintages import KERNELS, Kernel, daniell_covariance, daniell_variance, long_run_variance

__all__ = [
    "ALTERNATIVES",
    "BOOTSTRAPS",
    "CVM_CV",
    "DM_LABELS",
    "DM_METHODS",
    "RELATIVE_TOLERANCE",
    "FLUCTUATION_CV",
    "KERNELS",
    "KS_CV",
    "MCS_STATISTICS",
    "Alternative",
    "BerkowitzResult",
    "Bootstrap",
    "CoverageResult",
    "DMMethod",
    "DMResult",
    "FluctuationResult",
    "Kernel",
    "MCSResult",
    "MCSStatistic",
    "PITUniformityResult",
    "RawMomentResult",
    "berkowitz",
    "bootstrap_indices",
    "christoffersen",
    "coverage_t",
    "cvm_limit_cdf",
    "daniell_covariance",
    "daniell_variance",
    "diebold_mariano",
    "dm_min_n",
    "fluctuation_test",
    "hln_factor",
    "knuppel",
    "kupiec",
    "long_run_variance",
    "model_confidence_set",
    "pit_histogram",
    "rossi_sekhposyan",
    "simulate_fluctuation_cv",
]
