"""Revision statistics and news-versus-noise regressions between two estimates of a variable.

The two estimates are truths (:func:`vintages.truths.truth_values`), so the transformation is
computed inside each estimate's own vintage: the revision of gdp growth between its first and
its latest estimate compares the growth rate published first with the growth rate in the
latest vintage, not growth rates of mixed levels.

For each period with both estimates, the revision is ``r = later - earlier``.

Statistics
----------
``mean``, ``mean_abs``, ``std`` (ddof = 1), ``rms``
    Of the revisions; ``mean_t``/``mean_p`` test a zero mean with a Newey–West standard error
    (a regression of ``r`` on a constant), as revisions overlap and are autocorrelated.
``noise_to_signal``
    ``std(r) / std(later)``: the size of the revisions relative to the variability of the later
    estimate (Orphanides and van Norden 2002 use this ratio, N/S, for output-gap revisions).
``sign_change_share``
    Share of periods where the two estimates have opposite signs (``earlier * later < 0``),
    Orphanides and van Norden's OPSIGN; meaningful for growth rates, not for index levels.
News versus noise (Mankiw and Shapiro 1986)
    *Noise*: the earlier estimate is the later one plus measurement error orthogonal to it, so
    the revision is uncorrelated with the **later** estimate: in ``r = a + b·later + e`` the
    noise hypothesis is ``b = 0``. *News*: the earlier estimate is an efficient forecast of the
    later one, so the revision is uncorrelated with the **earlier** estimate: in
    ``r = a + b·earlier + e`` the news hypothesis is ``b = 0``. Slopes are reported with
    Newey–West (Bartlett kernel) standard errors and normal p-values.

HAC lags: by default ``floor(4 (n/100)^(2/9))``, the rule of thumb of Newey and West (1994);
pass ``hac_lags`` to choose.

References
----------
Mankiw, N. G. and Shapiro, M. D. (1986). News or noise? An analysis of GNP revisions. *Survey of
Current Business* 66(5), 20–25.
Newey, W. K. and West, K. D. (1987). A simple, positive semi-definite, heteroskedasticity and
autocorrelation consistent covariance matrix. *Econometrica* 55(3), 703–708.
Newey, W. K. and West, K. D. (1994). Automatic lag selection in covariance matrix estimation.
*Review of Economic Studies* 61(4), 631–653.
Orphanides, A. and van Norden, S. (2002). The unreliability of output-gap estimates in real
time. *Review of Economics and Statistics* 84(4), 569–583.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from vintages.contract import SeriesSpec
from vintages.hac import newey_west_lags, ols_hac
from vintages.periods import format_periods
from vintages.resolve import to_ordinals as _to_ordinals
from vintages.truths import parse_truth, truth_values

if TYPE_CHECKING:
    from vintages.cube import Cube

#: columns of :func:`revisions_table`, in order
COLUMNS: tuple[str, ...] = (
    "variable",
    "transform",
    "from",
    "to",
    "n",
    "first_period",
    "last_period",
    "mean",
    "mean_abs",
    "std",
    "rms",
    "noise_to_signal",
    "sign_change_share",
    "mean_se",
    "mean_t",
    "mean_p",
    "noise_slope",
    "noise_se",
    "noise_t",
    "noise_p",
    "news_slope",
    "news_se",
    "news_t",
    "news_p",
    "hac_lags",
)


def _default_freq(cube: Cube, variable: str, spec: SeriesSpec) -> str:
    return "Q" if spec.convert is not None else cube.freq_of(variable)


def default_transform(cube: Cube, variable: str) -> str:
    """``dlog_ann`` for an index (units starting "index"), else ``level`` (a rate, a balance)."""
    units = str(cube.meta.get(variable, {}).get("units", "")).lower()
    return "dlog_ann" if units.startswith("index") else "level"


def revision_stats(
    cube: Cube,
    variable: str,
    spec=None,
    frm: str = "first",
    to: str = "latest",
    *,
    freq: str | None = None,
    periods=None,
    hac_lags: int | None = None,
    small_sample: bool = False,
) -> dict[str, Any]:
    """Revision statistics and news/noise regressions of one variable between two estimates.

    Parameters
    ----------
    cube : Cube
    variable : str
    spec : SeriesSpec, mapping, transform name or None
        Transformation (and conversion) computed inside each estimate's vintage.
        None: :func:`default_transform`.
    frm, to : str
        Truth rules of the earlier and the later estimate (:func:`vintages.truths.parse_truth`).
    freq : {"Q", "M"}, optional
        Default: the variable's own frequency (``"Q"`` when the spec converts).
    periods : target periods, optional
        Default: every period of the variable.
    hac_lags : int, optional
        Newey–West truncation lag; default :func:`newey_west_lags` of the sample size.
    small_sample : bool
        Scale the HAC covariances by ``n/(n-k)``.

    Returns
    -------
    dict
        The keys of :data:`COLUMNS`. Statistics that need more observations than there are
        (n < 3 for the regressions) are NaN.

    References
    ----------
    Mankiw and Shapiro (1986); Newey and West (1987, 1994); Orphanides and van Norden (2002):
    see the module docstring.

    Examples
    --------
    >>> revision_stats(cube, "gdp", "dlog_ann", "first", "latest")["mean_abs"]  # doctest: +SKIP
    """
    s = SeriesSpec.coerce(spec if spec is not None else default_transform(cube, variable), variable)
    freq = freq or _default_freq(cube, variable, s)
    frm_s, to_s = str(parse_truth(frm)), str(parse_truth(to))
    early, _, _ = truth_values(cube, frm, variable, s, periods, freq=freq)
    late, _, _ = truth_values(cube, to, variable, s, periods, freq=freq)
    if periods is None:
        fc, _ = cube.part(variable)
        t = np.unique(fc.periods // 3) if cube.freq_of(variable) != freq else np.asarray(fc.periods)
    else:
        t = _to_ordinals(periods, freq, "periods")
    ok = ~np.isnan(early) & ~np.isnan(late)
    e, lt, tt = early[ok], late[ok], t[ok]
    r = lt - e
    n = int(len(r))
    nan = float("nan")
    out: dict[str, Any] = {c: nan for c in COLUMNS}
    out.update(
        variable=variable,
        transform=s.transform,
        n=n,
        hac_lags=nan,
        first_period=None,
        last_period=None,
    )
    out["from"], out["to"] = frm_s, to_s
    if n == 0:
        return out
    out.update(
        first_period=str(format_periods([tt[0]], freq)[0]),
        last_period=str(format_periods([tt[-1]], freq)[0]),
        mean=float(r.mean()),
        mean_abs=float(np.abs(r).mean()),
        rms=float(np.sqrt(np.mean(r**2))),
        sign_change_share=float(np.mean(e * lt < 0)),
    )
    if n >= 2:
        sd_r, sd_l = float(r.std(ddof=1)), float(lt.std(ddof=1))
        out.update(std=sd_r, noise_to_signal=sd_r / sd_l if sd_l > 0 else nan)
    if n >= 3:
        L = newey_west_lags(n) if hac_lags is None else int(hac_lags)
        out["hac_lags"] = L
        one = np.ones(n)
        m = ols_hac(r, one[:, None], L, small_sample=small_sample)
        out.update(mean_se=float(m["se"][0]), mean_t=float(m["t"][0]), mean_p=float(m["p"][0]))
        for key, x in (("noise", lt), ("news", e)):
            if np.ptp(x) == 0:
                continue  # a constant regressor: the slope is not identified
            f = ols_hac(r, np.column_stack([one, x]), L, small_sample=small_sample)
            out.update(
                {
                    f"{key}_slope": float(f["beta"][1]),
                    f"{key}_se": float(f["se"][1]),
                    f"{key}_t": float(f["t"][1]),
                    f"{key}_p": float(f["p"][1]),
                }
            )
    return out


def revisions_table(
    cube: Cube,
    variables,
    *,
    transform: str | None = None,
    specs: Mapping | None = None,
    frm: str = "first",
    to: str = "latest",
    pairs: Sequence[tuple[str, str]] | None = None,
    freq: str | None = None,
    hac_lags: int | None = None,
    small_sample: bool = False,
) -> pd.DataFrame:
    """Revision statistics for several variables and estimate pairs, one row each.

    Parameters
    ----------
    cube : Cube
    variables : str, sequence of str, or mapping name -> series spec
    transform : str, optional
        One transformation for every variable not given a spec (default
        :func:`default_transform` per variable).
    specs : mapping name -> series spec, optional
        Per-variable specs (override ``transform``).
    frm, to : str
        The estimate pair when ``pairs`` is not given.
    pairs : sequence of (from, to), optional
        Several estimate pairs, e.g. ``[("first", "release:3"), ("first", "latest")]``.
    freq, hac_lags, small_sample
        As in :func:`revision_stats`.

    Returns
    -------
    DataFrame
        Columns :data:`COLUMNS`; ready to print or to write with ``to_csv``.
    """
    if isinstance(variables, str):
        variables = [variables]
    given = dict(variables) if isinstance(variables, Mapping) else {v: None for v in variables}
    given.update(dict(specs or {}))
    pairs = list(pairs) if pairs is not None else [(frm, to)]
    rows = []
    for name, spec in given.items():
        sp = spec if spec is not None else (transform or default_transform(cube, name))
        for a, b in pairs:
            rows.append(
                revision_stats(
                    cube, name, sp, a, b, freq=freq, hac_lags=hac_lags, small_sample=small_sample
                )
            )
    return pd.DataFrame(rows, columns=list(COLUMNS))


__all__ = [
    "COLUMNS",
    "default_transform",
    "newey_west_lags",
    "ols_hac",
    "revision_stats",
    "revisions_table",
]
