"""One-line readings of revision statistics: news or noise, with the test behind the words.

Mankiw and Shapiro (1986): under *news* the earlier estimate is an efficient forecast of the
later one, so the revision is uncorrelated with the earlier estimate (news slope zero); under
*noise* the earlier estimate is the later one plus measurement error, so the revision is
uncorrelated with the later estimate (noise slope zero). The columns are those of
:func:`vintages.revisions_table` (slopes with Newey–West standard errors).

References
----------
Mankiw, N. G. and Shapiro, M. D. (1986). News or noise? An analysis of GNP revisions. Survey of
Current Business 66(5), 20–25.
"""

from __future__ import annotations

import math

from harness.report.escape import fmt_p

#: fewer revisions than this and the reading says the sample is too small (common practice)
MIN_REVISIONS = 20


def revision_reading(row, alpha: float = 0.05) -> str:
    """The reading of one row of :func:`vintages.revisions_table`, in one line.

    Examples
    --------
    >>> revision_reading({"variable": "gdp", "from": "first", "to": "latest", "n": 120, "std": 0.8,
    ...                   "news_p": 0.40, "noise_p": 0.001})
    "gdp, first → latest: news — revisions are unrelated to the earlier estimate (news slope p = 0.400) but related to the later one (noise slope p = 0.001); n = 120, level 0.05"
    """
    name = f"{row['variable']}, {row['from']} \u2192 {row['to']}"
    n = int(row["n"]) if row.get("n") is not None and row["n"] == row["n"] else 0
    std = row.get("std")
    if n == 0:
        return f"{name}: no period has both estimates"
    if std is not None and std == std and float(std) == 0.0:
        return f"{name}: no revisions (n = {n})"
    if n < MIN_REVISIONS:
        return f"{name}: too few revisions (n = {n} < {MIN_REVISIONS}) to tell news from noise"
    news_p, noise_p = float(row["news_p"]), float(row["noise_p"])
    if not (math.isfinite(news_p) and math.isfinite(noise_p)):
        return f"{name}: the news and noise regressions could not be estimated (n = {n})"
    tail = (f"(news slope p = {fmt_p(news_p)}, noise slope p = {fmt_p(noise_p)}; n = {n}, level {alpha:g})")
    news_ok, noise_ok = news_p >= alpha, noise_p >= alpha
    if news_ok and not noise_ok:
        return (f"{name}: news — revisions are unrelated to the earlier estimate (news slope p = "
                f"{fmt_p(news_p)}) but related to the later one (noise slope p = {fmt_p(noise_p)}); n = {n}, "
                f"level {alpha:g}")
    if noise_ok and not news_ok:
        return (f"{name}: noise — revisions are unrelated to the later estimate (noise slope p = "
                f"{fmt_p(noise_p)}) but related to the earlier one (news slope p = {fmt_p(news_p)}); n = {n}, "
                f"level {alpha:g}")
    if news_ok and noise_ok:
        return f"{name}: cannot tell news from noise — neither is rejected {tail}"
    return f"{name}: neither pure news nor pure noise — both are rejected {tail}"
