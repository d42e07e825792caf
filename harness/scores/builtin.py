"""The built-in score declarations (see :mod:`harness.scores.registry`), each next to its rule.

Every ``compute`` below reads a :class:`harness.scores.fused.Chunk` (rows sorted once) and uses
the same kernels as the public rule named in its declaration; the tests check each fused column
against that rule.
"""

from __future__ import annotations

from harness.scores.registry import Score, ScoreConfig, _level_name, register_score

# The declarations import nothing numerical: the rules below load their kernels when they run,
# so listing the scores (e.g. in the command line's help) costs no numpy import.


def _k():
    from harness.scores import kernels

    return kernels


def _np():
    import numpy

    return numpy

_GR2007 = ("Gneiting, T. and Raftery, A. E. (2007). Strictly proper scoring rules, prediction, and "
           "estimation. JASA 102(477), 359-378")
_GR2011 = ("Gneiting, T. and Ranjan, R. (2011). Comparing density forecasts using threshold- and "
           "quantile-weighted scoring rules. JBES 29(3), 411-422")


def _grid(cfg: ScoreConfig):
    return _k()._midpoint_levels(int(cfg.n_levels))


def _ends(levels):
    np = _np()
    c = np.asarray(levels, dtype=np.float64)
    return np.concatenate([(1 - c) / 2, (1 + c) / 2])


def _none(cfg: ScoreConfig):
    return _np().zeros(0)


# ----------------------------------------------------------------------------- density scores
register_score(Score(
    key="crps", label="CRPS", relative_label="CRPS ratio", unit="units of the variable",
    orientation="lower", versus="ratio", tests=("dm", "mcs", "fluctuation"),
    roles=frozenset({"headline", "density"}),
    reference=f"{_GR2007}, eq. 21 (kernel form, exact for the ensemble)",
    needs=_none,
    compute=lambda ch, cfg: {"crps": _k()._crps_from_sorted(ch.s, ch.y, ch.k, ch.full)},
))


def _weighted(weight: str):
    def compute(ch, cfg):
        grid = _grid(cfg)
        return {f"crps_{weight}": _k()._weighted_from_quantiles(ch.pinball(grid), grid, weight)}
    return compute


for _w, _label, _roles in (("centre", "centre-weighted CRPS", {"density"}),
                           ("tails", "two-tail CRPS", {"tail"}),
                           ("left", "left-tail CRPS", {"tail"}),
                           ("right", "right-tail CRPS", {"tail"})):
    register_score(Score(
        key=f"crps_{_w}", label=_label, relative_label=f"{_label} ratio",
        unit="units of the variable", orientation="lower", versus="ratio", tests=("dm",),
        roles=frozenset(_roles),
        reference=f"{_GR2011} (quantile-weighted CRPS, weight '{_w}', unnormalised, midpoint rule)",
        needs=_grid, compute=_weighted(_w),
    ))


def _log_score_values(ch, cfg):
    """The capped log score of a chunk, computed once and shared with the floor indicator."""
    key = ("log_score", float(cfg.density_floor))
    if key not in ch._cache:
        k = _k()
        h = k._silverman(ch.s, ch.k, ch.full, ch.mean)
        ch._cache[key] = k._log_score_from_sorted(ch.s, ch.y, ch.k, ch.full, h, cfg.density_floor)
    return ch._cache[key]


def _log_score(ch, cfg):
    return {"log_score": _log_score_values(ch, cfg)}


def _log_score_floored(ch, cfg):
    import math

    np = _np()
    score = _log_score_values(ch, cfg)
    cap = -math.log(cfg.density_floor)
    # the kernel caps at -log(floor) (a far outlier, or a zero-spread ensemble); compare with a
    # relative margin of 1e-12 so that the cap's own rounding counts as floored
    out = (score >= cap * (1.0 - 1e-12)).astype(np.float64)
    out[~np.isfinite(score)] = np.nan
    return {"log_score_floored": out}


register_score(Score(
    key="log_score", label="log score", relative_label="log-score difference",
    unit="nats (negative log density)", orientation="lower", versus="difference", tests=("dm",),
    roles=frozenset({"headline", "density"}),
    reference=(f"{_GR2007} (logarithmic score); Silverman, B. W. (1986). Density Estimation for "
               "Statistics and Data Analysis, eq. 3.31 (kernel bandwidth). Floor rule: the kernel "
               "density is floored at ScoreConfig.density_floor (default 1e-10), so the score is "
               "capped at -log(floor) = 23.03 nats; a far outlier and a zero-spread ensemble both "
               "get the cap, which understates a bad model's mean: read it with "
               "log_score_floored, the share of forecasts at the cap"),
    needs=_none, compute=_log_score,
))
register_score(Score(
    key="log_score_floored", label="log score at the floor",
    relative_label="log score at the floor", unit="share of forecasts (0-1)",
    # not a loss: no ratio, no best, no tests; the cell mean of the 0/1 indicator is the share
    # of the cell's forecasts whose log score is the cap (count = share x n)
    orientation="calibration", versus=None, tests=(), roles=frozenset({"diagnostic"}),
    reference=("indicator that the log score hit its cap -log(density_floor) (see log_score); "
               "common practice of reporting how many forecasts a floored score affects"),
    needs=_none, compute=_log_score_floored,
))


# ----------------------------------------------------------------------------- point errors
def _point(kind: str, err: str):
    def compute(ch, cfg):
        centre = ch.mean if kind == "mean" else ch.median
        e = centre - ch.y
        return {f"{err}_{kind}": e * e if err == "se" else abs(e)}
    return compute


for _kind in ("mean", "median"):
    register_score(Score(
        key=f"se_{_kind}", label=f"MSE ({_kind})" if _kind == "median" else "MSE",
        relative_label=f"RMSE ratio ({_kind})" if _kind == "median" else "RMSE ratio",
        unit="squared units of the variable", orientation="lower", versus="sqrt_ratio",
        tests=("dm",), roles=frozenset({"point"} | ({"headline"} if _kind == "mean" else set())),
        reference="common practice (squared error of the ensemble's point forecast); the RMSE "
                  "ratio is the square root of the MSE ratio",
        needs=_none, compute=_point(_kind, "se"),
    ))
    register_score(Score(
        key=f"ae_{_kind}", label=f"MAE ({_kind})" if _kind == "median" else "MAE",
        relative_label=f"MAE ratio ({_kind})" if _kind == "median" else "MAE ratio",
        unit="units of the variable", orientation="lower", versus="ratio", tests=("dm",),
        roles=frozenset({"point"}),
        reference="common practice (absolute error of the ensemble's point forecast)",
        needs=_none, compute=_point(_kind, "ae"),
    ))


# ----------------------------------------------------------------------------- quantiles and intervals
def _levels(values):
    return _np().asarray(values, dtype=float)


def _qs(ch, cfg):
    lev = _levels(cfg.quantile_levels)
    qs = ch.pinball(lev)
    return {_level_name("qs_{pct}", a, "quantile_levels"): qs[:, j] for j, a in enumerate(lev)}


register_score(Score(
    key="qs", label="QS {pct}%", relative_label="QS {pct}% ratio", unit="units of the variable",
    orientation="lower", versus="ratio", tests=("dm",), roles=frozenset({"quantile"}),
    reference=f"{_GR2011}, eq. 3 (pinball loss, scaled so that CRPS = 2 × its integral)",
    pattern="qs_{pct}", config_levels="quantile_levels",
    needs=lambda cfg: _levels(cfg.quantile_levels), compute=_qs,
    level_roles=lambda a: {"tail"} if (a <= 0.10 + 1e-12 or a >= 0.90 - 1e-12) else set(),
))


def _cover(ch, cfg):
    lev = _levels(cfg.coverage_levels)
    q = ch.quantiles(_ends(lev))
    hits = _k()._coverage_hits(ch.y, q[:, : lev.size], q[:, lev.size:])
    return {_level_name("cover_{pct}", a, "coverage_levels"): hits[:, j] for j, a in enumerate(lev)}


register_score(Score(
    key="cover", label="coverage of the {pct}% interval", relative_label="coverage {pct}%",
    unit="share of outcomes inside", orientation="calibration", versus=None,
    tests=("kupiec", "christoffersen", "coverage_t"), roles=frozenset({"calibration"}),
    reference="common practice (hit indicator of the closed central interval); tests: Kupiec "
              "(1995), Christoffersen (1998) at h = 1; the hit-rate t-test with a long-run "
              "variance at every h",
    pattern="cover_{pct}", config_levels="coverage_levels",
    needs=lambda cfg: _ends(cfg.coverage_levels), compute=_cover,
))


def _interval(ch, cfg):
    from harness.scores.quantiles import interval_score_from_q

    lev = _levels(cfg.interval_levels)
    q = ch.quantiles(_ends(lev))
    out = {}
    for j, c in enumerate(lev):
        out[_level_name("interval_{pct}", c, "interval_levels")] = interval_score_from_q(
            ch.y, q[:, j], q[:, lev.size + j], 1.0 - c)
    return out


register_score(Score(
    key="interval", label="interval score {pct}%", relative_label="interval score {pct}% ratio",
    unit="units of the variable", orientation="lower", versus="ratio", tests=("dm",),
    roles=frozenset({"interval"}),
    reference=f"{_GR2007}, eq. 43 (interval score of the central interval at level 1 - alpha)",
    pattern="interval_{pct}", config_levels="interval_levels",
    needs=lambda cfg: _ends(cfg.interval_levels), compute=_interval,
))


register_score(Score(
    key="pit", label="PIT", relative_label="PIT", unit="probability", orientation="calibration",
    versus=None, tests=("berkowitz", "rossi_sekhposyan", "knuppel"), roles=frozenset({"calibration"}),
    reference=("Gneiting, T., Balabdaoui, F. and Raftery, A. E. (2007). Probabilistic forecasts, "
               "calibration and sharpness. JRSS B 69(2), 243-268 (mid-rank ties)"),
    needs=_none,
    compute=lambda ch, cfg: {"pit": _k()._pit_from_sorted(ch.s, ch.y, ch.k, "mid", None)},
))

# Threshold-weighted CRPS needs a threshold per forecast: users compute it with
# harness.scores.threshold_weighted_crps and add columns named twcrps or twcrps_<name>.
register_score(Score(
    key="twcrps", label="threshold-weighted CRPS", relative_label="twCRPS ratio",
    unit="units of the variable", orientation="lower", versus="ratio", tests=("dm",),
    roles=frozenset({"tail"}),
    reference=f"{_GR2011}; Allen, Ginsbourger & Ziegel (2023), SIAM/ASA JUQ 11(3), 906-940",
))
