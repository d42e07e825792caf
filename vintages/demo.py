"""The invented Veldmark economy and its statistics office: a simulated real-time data set.

Nothing here is real. "Veldmark" is an invented economy and "Statistics Veldmark" its invented
statistics office; every number comes from :func:`simulate` with a fixed seed.

The data-generating process
---------------------------
A latent monthly activity growth rate ``a_t`` (percent, month on month) is a regime-dependent
mean plus an AR(1) common factor whose shocks are larger in recessions. The regime path is the
scenario itself: expansions grow about 2.2 % a year; a mild recession, a deep recession and a
sudden stop (a collapse within one quarter and a sharp rebound) are placed on invented dates,
and the recession chronology (:data:`CHRONOLOGY`) is read off that same path. All five
variables load on the common factor, so the ragged edge is informative:

* ``gdp``: quarterly real output, a chain-volume-style index (2015 = 100), the quarterly mean
  of the latent activity level plus an idiosyncratic quarterly growth term;
* ``ip``: monthly industrial production (2015 = 100), coincident and more volatile;
* ``survey``: a monthly business-survey diffusion index (50 = no change) that reflects activity
  over the *next* three months, so it leads;
* ``unemp``: the unemployment rate (%), driven by activity over the *previous* three months
  (an Okun-type relation), so it lags;
* ``cpi``: a consumer price index (2015 = 100) whose monthly inflation is persistent and falls
  when activity has been weak over the past year.

How the statistics office publishes
-----------------------------------
Every release date publishes a complete vintage of one variable: all reference periods as known
that day. The *k*-th release of a period is therefore the *k*-th vintage that contains it. The
office keeps its releases from 1996-01-01 to 2026-11-30; the first vintage of each variable
already holds history back to 1995. Every release date is strictly after the end of its
reference period.

* ``gdp``: estimates about 30, 60 and 90 days after the quarter ends, and an annual benchmark
  revision in the August release (about 60 days after the second quarter) that revises the
  twelve quarters from the second quarter three years back to the first quarter of the current
  year. Each quarter thus goes through three regular estimates and three benchmarks; after the
  third benchmark it equals the truth (up to rounding).
* ``cpi``: released 13 days after the month; never revised except for a few corrections (a
  wrong first print corrected in the next release).
* ``unemp``: released 30 days after the month; each January release carries new seasonal
  factors that revise the three previous calendar years by small amounts.
* ``ip``: released 45 days after the month; revised in the next two releases, then final.
* ``survey``: released on the first day of the next month (no lag in practice); never revised.

Revisions to growth rates (gdp and ip) mix *news* and *noise*. News: part of the true growth
(the idiosyncratic term) reaches the office only piece by piece with later source data, so an
early estimate is the truth minus news still to come, and that news is uncorrelated with the
estimate. Noise: an early estimate also carries a measurement error, uncorrelated with the
truth, that later estimates remove step by step. Early estimates understate growth slightly, so
revisions are upward on average.

References
----------
Mankiw, N. G. and Shapiro, M. D. (1986). News or noise? An analysis of GNP revisions.
    *Survey of Current Business* 66(5), 20-25.
Croushore, D. and Stark, T. (2001). A real-time data set for macroeconomists. *Journal of
    Econometrics* 105(1), 111-130.
(Volume and page numbers from memory.)
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.signal import lfilter

from vintages.periods import format_periods, parse_periods, period_end, period_index
from vintages.store import VintageStore, atomic_write_bytes

DEFAULT_SEED = 20261201
CALENDAR_START = np.datetime64("1996-01-01", "D")
CALENDAR_END = np.datetime64("2026-11-30", "D")
FIRST_MONTH = "1995-01"

# Peaks and troughs of the invented chronology. A recession runs from the quarter after the peak
# through the trough quarter (the usual peak-to-trough dating convention; common practice).
CHRONOLOGY: tuple[tuple[str, str], ...] = (
    ("2001Q4", "2002Q3"),  # mild recession
    ("2008Q4", "2010Q2"),  # deep recession
    ("2016Q4", "2017Q2"),  # sudden stop
)

VARIABLES: dict[str, dict] = {
    "gdp": {
        "freq": "Q",
        "units": "index, 2015 = 100, chain-volume, seasonally adjusted",
        "description": "Veldmark real gross domestic product (invented; Statistics Veldmark)",
    },
    "cpi": {
        "freq": "M",
        "units": "index, 2015 = 100",
        "description": "Veldmark consumer price index (invented; Statistics Veldmark)",
    },
    "unemp": {
        "freq": "M",
        "units": "percent of the labour force, seasonally adjusted",
        "description": "Veldmark unemployment rate (invented; Statistics Veldmark)",
    },
    "ip": {
        "freq": "M",
        "units": "index, 2015 = 100, seasonally adjusted",
        "description": "Veldmark industrial production (invented; Statistics Veldmark)",
    },
    "survey": {
        "freq": "M",
        "units": "diffusion index, 50 = no change",
        "description": "Veldmark business-survey balance (invented; Veldmark business survey)",
    },
}

# Publication lags in days after the end of the reference period.
_GDP_LAGS = (30, 60, 90)
_LAG = {"cpi": 13, "unemp": 30, "ip": 45, "survey": 1}
_DECIMALS = {"gdp": 3, "cpi": 2, "unemp": 1, "ip": 2, "survey": 1}

# Growth revisions of gdp, annualised percentage points, by stage: first, second, third estimate,
# first and second benchmark (the third benchmark gives the truth). Sizes are chosen so that the
# first-to-latest mean absolute revision is a few tenths of a point, benchmarks revise more than
# the regular monthly estimates and early estimates understate growth slightly (common practice).
_GDP_NEWS_SD = (0.25, 0.20, 0.55, 0.40, 0.30)  # news arriving after each stage
_GDP_NOISE_SD = (0.55, 0.45, 0.38, 0.22, 0.10)  # measurement noise left in each stage
_GDP_BIAS = (0.15, 0.12, 0.10, 0.05, 0.02)  # understatement of growth in each stage
# Industrial production, month-on-month percent: first and second estimate (the third is final).
_IP_NEWS_SD = (0.35, 0.25)
_IP_NOISE_SD = (0.35, 0.15)
_IP_BIAS = (0.05, 0.02)
# Unemployment: share of the first-print seasonal error left after each January revision.
_UNEMP_SEASONAL_SD = 0.12
_UNEMP_SEASONAL_LEFT = np.array([1.0, 0.6, 0.3, 0.0])
_CPI_CORRECTIONS = 4

_EXPANSION_GROWTH = 0.18  # % per month, about 2.2 % a year


@dataclass(frozen=True, eq=False)
class DemoData:
    """The invented Veldmark data set.

    Attributes
    ----------
    releases : pandas.DataFrame
        The release log: columns ``variable`` (str), ``period`` (label ``2001Q3`` / ``2001-07``),
        ``release`` (datetime64[s], a calendar day), ``value`` (float64). Each release date of a
        variable publishes that variable's complete vintage.
    variables : dict[str, dict]
        Per variable: ``freq`` (``"Q"`` or ``"M"``), ``units`` and ``description``.
    chronology : pandas.DataFrame
        Columns ``peak`` and ``trough`` (quarter labels), one row per recession.
    final : dict[str, pandas.Series]
        The true underlying values of each variable (unrounded), indexed by a PeriodIndex over
        the periods that have at least one release.
    description : str
        A paragraph describing the invented scenario, for a README or report.
    """

    releases: pd.DataFrame
    variables: dict[str, dict]
    chronology: pd.DataFrame
    final: dict[str, pd.Series]
    description: str


DESCRIPTION = (
    "Veldmark is an invented economy and Statistics Veldmark its invented statistics office; "
    "all data are simulated with a fixed seed and describe no real country. Quarterly real output "
    "(gdp) is first estimated about 30 days after each quarter, revised at about 60 and 90 days, "
    "and benchmarked every August, when the last three years are revised. Monthly consumer prices "
    "(cpi) appear after 13 days and are corrected only a few times in the whole sample; the "
    "unemployment rate (unemp) appears after 30 days and gets new seasonal factors each January; "
    "industrial production (ip) appears after 45 days and is revised in the next two releases; a "
    "business-survey diffusion index (survey) appears on the first day of the next month and is "
    "never revised. The series share a common activity factor: the survey leads, industrial "
    "production is coincident and unemployment lags. The sample, 1995 to 2026 with releases kept "
    "from 1996, holds a mild recession (2002Q1-2002Q3), a deep recession (2009Q1-2010Q2) and a "
    "sudden stop (2017Q1-2017Q2) in which output collapses within a quarter and rebounds the next. "
    "Revisions mix news and noise, and early growth estimates are slightly too low on average."
)


# ---------------------------------------------------------------------------- public API
def simulate(seed: int = DEFAULT_SEED) -> DemoData:
    """Simulate the invented Veldmark economy and every release of its statistics office.

    Parameters
    ----------
    seed : int
        Seed of the ``numpy.random.SeedSequence`` from which each component (activity, each
        variable's idiosyncratic part, each variable's revisions) draws its own child stream.

    Returns
    -------
    DemoData
        The release log (about 320 000 rows), variable metadata, the recession chronology, the
        true values and a description of the scenario.

    References
    ----------
    Mankiw, N. G. and Shapiro, M. D. (1986). News or noise? An analysis of GNP revisions.
        *Survey of Current Business* 66(5), 20-25 (the news and noise revision models).

    Examples
    --------
    >>> demo = simulate()
    >>> sorted(demo.variables)
    ['cpi', 'gdp', 'ip', 'survey', 'unemp']
    """
    # One child stream per component, so changing one component never shifts another's draws.
    streams = [np.random.default_rng(s) for s in np.random.SeedSequence(int(seed)).spawn(10)]
    truth, news = _simulate_truth(streams[:6])
    frames = [
        _gdp_releases(truth["gdp"], news["gdp"], streams[6]),
        _cpi_releases(truth["cpi"], streams[7]),
        _unemp_releases(truth["unemp"], streams[8]),
        _ip_releases(truth["ip"], news["ip"], streams[9]),
        _survey_releases(truth["survey"]),
    ]
    releases = pd.concat(frames, ignore_index=True)
    final = {}
    for name, (ords, values) in truth.items():
        freq = VARIABLES[name]["freq"]
        published = np.unique(
            parse_periods(releases.loc[releases["variable"] == name, "period"].to_numpy())[0]
        )
        keep = np.isin(ords, published)
        final[name] = pd.Series(values[keep], index=period_index(ords[keep], freq), name=name)
    return DemoData(
        releases=releases,
        variables={k: dict(v) for k, v in VARIABLES.items()},
        chronology=chronology(),
        final=final,
        description=DESCRIPTION,
    )


def chronology() -> pd.DataFrame:
    """The invented recession chronology of Veldmark.

    Returns
    -------
    pandas.DataFrame
        Columns ``peak`` and ``trough`` (quarter labels such as ``2008Q4``), oldest first. A
        recession covers the quarters after the peak up to and including the trough.
    """
    return pd.DataFrame(list(CHRONOLOGY), columns=["peak", "trough"])


def write_chronology(path: str | os.PathLike, chronology_frame: pd.DataFrame | None = None) -> Path:
    """Write the recession chronology as CSV with columns ``peak,trough``.

    Parameters
    ----------
    path : path-like
        The CSV file to write; its parent directory must exist.
    chronology_frame : pandas.DataFrame, optional
        A chronology to write instead of the invented Veldmark one.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    FileNotFoundError
        When the parent directory does not exist.
    ValueError
        When ``chronology_frame`` lacks the ``peak`` or ``trough`` column.
    """
    p = Path(path)
    if not p.parent.is_dir():
        raise FileNotFoundError(
            f"write_chronology: directory {p.parent} does not exist; create it first"
        )
    frame = chronology() if chronology_frame is None else chronology_frame
    missing = sorted({"peak", "trough"} - set(frame.columns))
    if missing:
        raise ValueError(
            f"write_chronology: chronology lacks column(s) {missing}; expected columns "
            f"['peak', 'trough'], got {sorted(map(str, frame.columns))}"
        )
    atomic_write_bytes(p, frame[["peak", "trough"]].astype(str).to_csv(index=False).encode())
    return p


def recession_quarters(chronology_frame: pd.DataFrame | None = None) -> pd.PeriodIndex:
    """The quarters in recession: after each peak up to and including its trough.

    The rule is :func:`vintages.chronology.regimes`' (the one definition of a recession).

    Parameters
    ----------
    chronology_frame : pandas.DataFrame, optional
        Columns ``peak`` and ``trough``; the Veldmark chronology when omitted.

    Returns
    -------
    pandas.PeriodIndex
        Quarterly periods, sorted.
    """
    from vintages.chronology import RECESSION, parse_chronology_frame, regimes

    frame = parse_chronology_frame(chronology() if chronology_frame is None else chronology_frame)
    if not len(frame):
        return period_index(np.zeros(0, dtype=np.int64), "Q")
    ords = np.concatenate([frame[c].array.asi8 for c in ("peak", "trough")])
    ords = ords[ords != np.iinfo(np.int64).min]  # NaT: an open end
    lo, hi = int(ords.min()), int(ords.max())
    quarters = period_index(np.arange(lo, hi + 1), "Q")
    reg = regimes(frame, quarters)
    return quarters[(reg == RECESSION).to_numpy()]


def build_demo_store(
    path: str | os.PathLike, seed: int = DEFAULT_SEED, *, data: DemoData | None = None
) -> VintageStore:
    """Create a vintage store at ``path`` holding every Veldmark release.

    The releases are appended in one batch per variable, so each batch is validated and
    committed atomically by :meth:`vintages.store.VintageStore.append`.

    Parameters
    ----------
    path : path-like
        A new (absent or empty) directory for the store.
    seed : int
        Passed to :func:`simulate`.
    data : DemoData, optional
        An already simulated data set to store instead of simulating again (``seed`` is then
        only recorded in the batches' source).

    Returns
    -------
    vintages.store.VintageStore
        The store, with variable metadata (frequency, units, description) set.

    Raises
    ------
    FileExistsError
        When ``path`` already holds a store or is a non-empty directory.
    """
    demo = simulate(seed) if data is None else data
    store = VintageStore.init(path)
    for name, rows in demo.releases.groupby("variable", sort=False):
        store.append(
            rows.reset_index(drop=True),
            variables={name: demo.variables[name]},
            source=f"veldmark-demo:{name}:seed={int(seed)}",
        )
    return store


# ---------------------------------------------------------------------------- the truth
def _month_grid() -> np.ndarray:
    """Monthly ordinals simulated: 1995-01 through three months past the calendar's end."""
    first = parse_periods([FIRST_MONTH])[0][0]
    last = int(CALENDAR_END.astype("datetime64[M]").astype(np.int64)) + 3
    return np.arange(first, last + 1, dtype=np.int64)


def _regime_path(months: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mean activity growth (% m/m) and shock scale of each month, from the scenario's episodes."""
    mu = np.full(len(months), _EXPANSION_GROWTH)
    scale = np.ones(len(months))
    m0 = int(months[0])

    def span(first: str, last: str) -> slice:
        a, b = parse_periods([first, last])[0]
        return slice(int(a) - m0, int(b) - m0 + 1)

    # Monthly growth turns negative from the peak quarter's last month to the trough quarter's
    # second month, so quarterly averages fall, in mean, over the chronology's recession quarters.
    mu[span("2001-12", "2002-08")] = -0.30
    mu[span("2008-12", "2009-08")] = -0.55
    mu[span("2009-09", "2010-05")] = -0.25
    scale[span("2008-12", "2010-05")] = 1.5
    mu[span("2010-06", "2011-12")] = 0.25  # faster growth in the recovery
    mu[span("2017-03", "2017-09")] = [-4.0, -6.0, -1.5, 1.5, 3.0, 2.5, 1.5]
    scale[span("2017-03", "2017-09")] = 2.0
    return mu, scale


def _ar1(shocks: np.ndarray, phi: float) -> np.ndarray:
    """x_t = phi x_{t-1} + e_t from x_{-1} = 0, along the first axis."""
    return lfilter([1.0], [1.0, -phi], shocks, axis=0)


def _rolling_mean(x: np.ndarray, window: int, shift: int) -> np.ndarray:
    """Mean of x[t + shift : t + shift + window] (edges padded with the nearest value)."""
    pad = np.concatenate([np.full(window, x[0]), x, np.full(window, x[-1])])
    c = np.concatenate([[0.0], np.cumsum(pad)])
    t = np.arange(len(x)) + window + shift
    return (c[t + window] - c[t]) / window


def _index_2015(log_level: np.ndarray, ords: np.ndarray, freq: str) -> np.ndarray:
    """Rescale a log level to an index whose 2015 average is 100."""
    per_year = 4 if freq == "Q" else 12
    in2015 = (ords // per_year) + 1970 == 2015
    level = np.exp(log_level - log_level.max())
    return 100.0 * level / level[in2015].mean()


def _simulate_truth(rngs: list[np.random.Generator]) -> tuple[dict, dict]:
    """True values ``{name: (period ordinals, values)}`` and the news pieces of gdp and ip growth."""
    r_act, r_gdp, r_ip, r_survey, r_unemp, r_cpi = rngs
    months = _month_grid()
    n = len(months)
    mu, scale = _regime_path(months)
    factor = _ar1(0.15 * scale * r_act.standard_normal(n), 0.5)
    a = mu + factor  # latent activity growth, % m/m
    gap = a - _EXPANSION_GROWTH

    # gdp: quarterly mean of the monthly activity level plus an idiosyncratic quarterly growth
    # term. That term is the news of the revision process: the statistics office learns it piece
    # by piece (later source data), so it is absent from early estimates and uncorrelated with them.
    quarters_all = months // 3
    full = np.bincount(quarters_all - quarters_all[0]) == 3
    q_ords = np.unique(quarters_all)[full]
    log_act = np.cumsum(a) / 100.0
    q_level = (
        np.bincount(quarters_all - quarters_all[0], weights=np.exp(log_act - log_act[0]))[full]
        / 3.0
    )
    gdp_news = _news(len(q_ords), _GDP_NEWS_SD, r_gdp)
    gdp = _index_2015(np.log(q_level) + np.cumsum(gdp_news.sum(axis=1)) / 400.0, q_ords, "Q")

    # ip: coincident and more volatile than activity; part of its own shock is news to be revised.
    ip_news = _news(n, _IP_NEWS_SD, r_ip)
    ip_growth = 0.10 + 1.6 * gap + _ar1(0.3 * r_ip.standard_normal(n), -0.2) + ip_news.sum(axis=1)
    ip = _index_2015(np.cumsum(ip_growth) / 100.0, months, "M")

    # survey: expectations of activity over the next three months, saturating at the extremes.
    lead = _rolling_mean(gap, 3, 1)
    survey = 50.0 + 22.0 * np.tanh(lead / 0.35) + _ar1(1.2 * r_survey.standard_normal(n), 0.6)

    # unemp: Okun-type response to activity over the previous three months, mean-reverting.
    lag3 = _rolling_mean(gap, 3, -3)
    drive = 0.03 * 6.0 - 0.30 * lag3 + 0.07 * r_unemp.standard_normal(n)
    unemp = lfilter([1.0], [1.0, -0.97], drive, zi=[0.97 * 7.2])[0]

    # cpi: persistent inflation, lower after a year of weak activity.
    slack = _rolling_mean(gap, 12, -12)
    infl = 0.17 + _ar1(0.10 * slack + 0.15 * r_cpi.standard_normal(n), 0.35)
    cpi = _index_2015(np.cumsum(infl) / 100.0, months, "M")

    truth = {
        "gdp": (q_ords, gdp),
        "cpi": (months, cpi),
        "unemp": (months, unemp),
        "ip": (months, ip),
        "survey": (months, survey),
    }
    return truth, {"gdp": gdp_news, "ip": ip_news}


def _news(n: int, news_sd, rng: np.random.Generator) -> np.ndarray:
    """Independent news pieces ``(n, K)``, column k learnt after stage k + 1; row 0 is the base."""
    z = rng.standard_normal((n, len(news_sd))) * np.asarray(news_sd, dtype=np.float64)
    z[0] = 0.0
    return z


# ---------------------------------------------------------------------------- the releases
def _staged_estimates(
    truth: np.ndarray, news: np.ndarray, noise_sd, bias, rng: np.random.Generator
) -> np.ndarray:
    """Estimates of growth ``truth`` by stage, ``(n, K + 1)``; the last column is the truth itself.

    Stage k misses the news still to come (``news[:, k-1:]`` summed), which is independent of
    everything known at stage k: early estimate = truth - news (news model). It also carries a
    measurement error, common to the stages and scaled down stage by stage, independent of the
    truth: early estimate = truth + noise (noise model; Mankiw and Shapiro, 1986). A small bias
    understates growth, so revisions are upward on average (common practice).
    """
    noise_sd, bias = np.asarray(noise_sd, dtype=np.float64), np.asarray(bias, dtype=np.float64)
    pending = np.cumsum(news[:, ::-1], axis=1)[:, ::-1]
    noise = rng.standard_normal(len(truth))[:, None] * noise_sd
    est = truth[:, None] - pending + noise - bias
    est[0] = truth[0]  # the base period carries no growth estimate
    return np.column_stack([est, truth])


def _frame(
    name: str, labels: np.ndarray, releases: np.ndarray, known: np.ndarray, values: np.ndarray
) -> pd.DataFrame:
    """Long rows of the known cells of a (release, period) grid."""
    j, i = np.nonzero(known)
    return pd.DataFrame(
        {
            "variable": np.full(len(j), name, dtype=object),
            "period": labels[i].astype(object),
            "release": releases[j].astype("datetime64[s]"),
            "value": np.round(values[j, i], _DECIMALS[name]),
        }
    )


def _in_calendar(dates: np.ndarray) -> np.ndarray:
    return (dates >= CALENDAR_START) & (dates <= CALENDAR_END)


def _gdp_releases(
    truth: tuple[np.ndarray, np.ndarray], news: np.ndarray, rng: np.random.Generator
) -> pd.DataFrame:
    """Every gdp vintage: three regular estimates, then three August benchmarks, then the truth."""
    ords, level = truth
    ends = period_end(ords, "Q")
    first = ends + np.timedelta64(_GDP_LAGS[0], "D")
    keep = first <= CALENDAR_END
    ords, level, ends, first, news = ords[keep], level[keep], ends[keep], first[keep], news[keep]
    dates = (ends[:, None] + np.array(_GDP_LAGS, dtype="timedelta64[D]")).ravel()
    releases = np.unique(dates[_in_calendar(dates)])

    growth = np.concatenate([[0.0], 400.0 * np.diff(np.log(level))])
    est = _staged_estimates(growth, news, _GDP_NOISE_SD, _GDP_BIAS, rng)

    r = releases[:, None]
    regular = sum(
        (r >= ends[None, :] + np.timedelta64(lag, "D")).astype(np.int64) for lag in _GDP_LAGS
    )
    # Benchmark of year Y (the August release, 60 days after Q2) revises quarters (Y-3)Q2 .. YQ1.
    year = r.astype("datetime64[Y]").astype(np.int64) + 1970
    q2_end = period_end((year - 1970) * 4 + 1, "Q")
    last_bench_year = np.where(r >= q2_end + np.timedelta64(_GDP_LAGS[1], "D"), year, year - 1)
    y_min = 1970 + -(-ords // 4)  # ceil(o / 4)
    y_max = 1973 + (ords - 1) // 4
    benchmarks = np.clip(last_bench_year - y_min[None, :] + 1, 0, (y_max - y_min + 1)[None, :])
    stage = regular + benchmarks  # 1..6; 0 = not yet published
    known = regular > 0

    chosen = np.take_along_axis(
        np.broadcast_to(est, (len(releases),) + est.shape),
        np.maximum(stage - 1, 0)[:, :, None],
        axis=2,
    )[:, :, 0]
    log_level = np.log(level[0]) + np.cumsum(chosen, axis=1) / 400.0
    return _frame("gdp", format_periods(ords, "Q"), releases, known, np.exp(log_level))


def _monthly_calendar(name: str, ords: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Periods published by the calendar's end, their first release dates, and the release dates."""
    first = period_end(ords, "M") + np.timedelta64(_LAG[name], "D")
    keep = first <= CALENDAR_END
    return ords[keep], first[keep], first[keep & (first >= CALENDAR_START)]


def _cpi_releases(truth, rng: np.random.Generator) -> pd.DataFrame:
    """Every cpi vintage: the truth, except a few wrong first prints corrected a month later."""
    ords, values = truth
    ords, first, releases = _monthly_calendar("cpi", ords)
    values = values[: len(ords)]
    known = releases[:, None] >= first[None, :]
    grid = np.broadcast_to(values, known.shape).copy()
    # Corrections only for periods whose first print lies in the calendar and that have a next one.
    eligible = np.flatnonzero((first >= CALENDAR_START) & (first < releases[-1]))
    wrong = np.sort(rng.choice(eligible, size=_CPI_CORRECTIONS, replace=False))
    size = rng.choice([-1.0, 1.0], size=_CPI_CORRECTIONS) * rng.uniform(0.2, 0.4, _CPI_CORRECTIONS)
    grid[np.searchsorted(releases, first[wrong]), wrong] += size
    return _frame("cpi", format_periods(ords, "M"), releases, known, grid)


def _unemp_releases(truth, rng: np.random.Generator) -> pd.DataFrame:
    """Every unemp vintage: a seasonal error shrunk at each of the next three January releases."""
    ords, values = truth
    ords, first, releases = _monthly_calendar("unemp", ords)
    values = values[: len(ords)]
    seasonal = _UNEMP_SEASONAL_SD * rng.standard_normal(len(ords))
    known = releases[:, None] >= first[None, :]
    # The January release (December's data, 30 days on) of year Y revises calendar years Y-3..Y-1.
    r = releases[:, None]
    year = r.astype("datetime64[Y]").astype(np.int64) + 1970
    january = period_end((year - 1971) * 12 + 11, "M") + np.timedelta64(_LAG["unemp"], "D")
    last_round = np.where(r >= january, year, year - 1)
    rounds = np.clip(last_round - (ords[None, :] // 12 + 1970), 0, 3)
    grid = values[None, :] + _UNEMP_SEASONAL_LEFT[rounds] * seasonal[None, :]
    return _frame("unemp", format_periods(ords, "M"), releases, known, grid)


def _ip_releases(truth, news: np.ndarray, rng: np.random.Generator) -> pd.DataFrame:
    """Every ip vintage: growth estimated, revised in the next two releases, then final."""
    ords, level = truth
    ords, first, releases = _monthly_calendar("ip", ords)
    level, news = level[: len(ords)], news[: len(ords)]
    growth = np.concatenate([[0.0], 100.0 * np.diff(np.log(level))])
    est = _staged_estimates(growth, news, _IP_NOISE_SD, _IP_BIAS, rng)
    r = releases[:, None]
    known = r >= first[None, :]
    # The k-th estimate of month t comes with the release of month t + k - 1.
    nxt1 = period_end(ords + 1, "M") + np.timedelta64(_LAG["ip"], "D")
    nxt2 = period_end(ords + 2, "M") + np.timedelta64(_LAG["ip"], "D")
    stage = 1 + (r >= nxt1[None, :]).astype(np.int64) + (r >= nxt2[None, :])
    chosen = np.take_along_axis(
        np.broadcast_to(est, (len(releases),) + est.shape), (stage - 1)[:, :, None], axis=2
    )[:, :, 0]
    log_level = np.log(level[0]) + np.cumsum(chosen, axis=1) / 100.0
    return _frame("ip", format_periods(ords, "M"), releases, known, np.exp(log_level))


def _survey_releases(truth) -> pd.DataFrame:
    """Every survey vintage: the same values each time (never revised)."""
    ords, values = truth
    ords, first, releases = _monthly_calendar("survey", ords)
    values = values[: len(ords)]
    known = releases[:, None] >= first[None, :]
    return _frame(
        "survey", format_periods(ords, "M"), releases, known, np.broadcast_to(values, known.shape)
    )


__all__ = [
    "CHRONOLOGY",
    "DEFAULT_SEED",
    "DemoData",
    "build_demo_store",
    "chronology",
    "recession_quarters",
    "simulate",
    "write_chronology",
]
