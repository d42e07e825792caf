"""Business-cycle chronologies: read peak/trough dates, map periods to regimes, date cycles.

A chronology is a DataFrame with columns ``peak`` and ``trough`` (pandas Period, one
frequency), one row per recession, in time order. A trailing open recession has a missing
trough; a leading row with a missing peak means the sample opens in a recession.

Convention (common practice, as in NBER-style chronologies): the recession runs from the
period *after* the peak through the trough; the peak period itself is the last period of the
expansion.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from vintages.errors import InputError
from vintages.periods import freq_of, parse_periods

COLUMNS = ("peak", "trough")
RECESSION = "recession"
EXPANSION = "expansion"


def _empty_chronology(freq: str) -> pd.DataFrame:
    dtype = pd.PeriodDtype(freq)
    return pd.DataFrame({"peak": pd.Series([], dtype=dtype), "trough": pd.Series([], dtype=dtype)})


def _frame(peaks: np.ndarray, troughs: np.ndarray, freq: str) -> pd.DataFrame:
    """Chronology frame from ordinal arrays (-1 = missing)."""
    dtype = pd.PeriodDtype(freq)

    def col(o):
        idx = pd.PeriodIndex.from_ordinals(np.where(o < 0, 0, o).astype(np.int64), freq=freq)
        s = pd.Series(idx, dtype=dtype)
        s[o < 0] = pd.NaT
        return s

    return pd.DataFrame({"peak": col(peaks), "trough": col(troughs)})


def read_chronology(path: str | Path) -> pd.DataFrame:
    """Read a chronology CSV with columns ``peak,trough`` (labels such as 2008Q2 or 2008-06).

    Rules checked: both columns present; labels parse and share one frequency; each trough
    after its peak and each peak after the previous trough; an empty trough only on the last
    row (an open recession) and an empty peak only on the first (the sample opens in a
    recession); no row with both empty. Blank lines are skipped.

    Parameters
    ----------
    path : path-like

    Returns
    -------
    DataFrame
        Columns ``peak``, ``trough`` of a Period dtype; NaT where empty.

    Raises
    ------
    InputError
        Naming file, line (1 = header) and field of the first problem.
    """
    path = Path(path)
    src = str(path)
    if not path.is_file():
        raise InputError("chronology file not found or not a regular file", file=src)
    try:
        raw = pd.read_csv(path, dtype=str, keep_default_na=False, skip_blank_lines=False)
    except pd.errors.EmptyDataError:
        raise InputError("file is empty; expected a header 'peak,trough'", file=src) from None
    except Exception as exc:  # any reader failure is an input problem of this file
        raise InputError(f"cannot read file: {type(exc).__name__}: {exc}".splitlines()[0],
                         file=src) from None
    raw.columns = [str(c).strip().lower() for c in raw.columns]
    missing = [c for c in COLUMNS if c not in raw.columns]
    if missing:
        raise InputError(f"missing column(s) {missing}; expected columns {list(COLUMNS)}, got "
                         f"{sorted(raw.columns)}", file=src, line=1, field=missing[0])
    return _from_cells(raw[list(COLUMNS)], src)


def parse_chronology_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A chronology frame of labels (or Periods) checked and converted by :func:`read_chronology`'s rules.

    Parameters
    ----------
    frame : DataFrame
        Columns ``peak`` and ``trough``: period labels, ``pandas.Period`` objects or a period
        dtype; empty strings or NaT where missing.

    Returns
    -------
    DataFrame
        Columns ``peak``, ``trough`` of a Period dtype.

    Raises
    ------
    InputError
        The first problem, with its row (1 = header, as in a file).
    """
    missing = [c for c in COLUMNS if c not in frame.columns]
    if missing:
        raise InputError(f"missing column(s) {missing}; expected columns {list(COLUMNS)}",
                         file="<chronology>")
    cells = frame[list(COLUMNS)].apply(
        lambda s: s.map(lambda x: "" if x is None or (not isinstance(x, str) and pd.isna(x)) else str(x)))
    return _from_cells(cells, "<chronology>")


def _from_cells(raw: pd.DataFrame, src: str) -> pd.DataFrame:
    """Validate text cells (one row per recession) and build the Period-dtype chronology."""
    lines = np.arange(2, len(raw) + 2)
    cells = raw.apply(lambda s: s.astype(str).str.strip())
    blank = (cells == "").all(axis=1).to_numpy()
    cells, lines = cells[~blank].reset_index(drop=True), lines[~blank]
    if cells.empty:
        raise InputError("the chronology has a header but no rows", file=src)
    ords: dict[str, np.ndarray] = {}
    freqs: dict[str, np.ndarray] = {}
    for c in COLUMNS:
        text = cells[c].to_numpy(dtype=object)
        o, f = parse_periods(text)
        empty = text == ""
        bad = (f == "") & ~empty
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(f"cannot read {c} {text[i]!r}; expected a quarter like 2008Q2 or a "
                             "month like 2008-06", file=src, line=int(lines[i]), field=c)
        ords[c] = np.where(empty, -1, o)
        freqs[c] = np.where(empty, "", f)
    allf = np.concatenate([freqs["peak"], freqs["trough"]])
    kinds = sorted(set(allf[allf != ""]))
    if len(kinds) > 1:
        first = allf[allf != ""][0]
        for c in COLUMNS:
            wrong = (freqs[c] != "") & (freqs[c] != first)
            if wrong.any():
                i = int(np.flatnonzero(wrong)[0])
                raise InputError(f"mixes frequencies {kinds}; a chronology has one frequency",
                                 file=src, line=int(lines[i]), field=c)
    freq = kinds[0]
    peak, trough = ords["peak"], ords["trough"]
    n = len(cells)
    for i in range(n):  # a chronology has a few dozen rows: clarity over vectorisation
        if peak[i] < 0 and trough[i] < 0:
            raise InputError("row has neither peak nor trough", file=src, line=int(lines[i]), field="peak")
        if peak[i] < 0 and i > 0:
            raise InputError("empty peak; only the first row may omit it (sample opens in a "
                             "recession)", file=src, line=int(lines[i]), field="peak")
        if trough[i] < 0 and i < n - 1:
            raise InputError("empty trough; only the last row may omit it (a recession still "
                             "under way)", file=src, line=int(lines[i]), field="trough")
        if peak[i] >= 0 and trough[i] >= 0 and trough[i] <= peak[i]:
            raise InputError(f"trough {cells['trough'].iloc[i]} is not after peak "
                             f"{cells['peak'].iloc[i]}", file=src, line=int(lines[i]), field="trough")
        if i > 0 and peak[i] <= trough[i - 1]:
            raise InputError(f"peak {cells['peak'].iloc[i]} is not after the previous trough "
                             f"{cells['trough'].iloc[i - 1]}", file=src, line=int(lines[i]), field="peak")
    return _frame(peak, trough, freq)


def _last_month(ords: np.ndarray, freq: str) -> np.ndarray:
    return ords * 3 + 2 if freq == "Q" else ords


def regimes(chronology: pd.DataFrame, periods: pd.PeriodIndex) -> pd.Series:
    """Map each period to "recession" or "expansion".

    A period is in recession when its last month lies after the last month of a peak period
    and no later than the last month of the trough period (so recession = the periods after
    the peak through the trough, and quarterly chronologies apply to monthly periods and vice
    versa). Open recessions run to the end; periods before the first peak are expansion.

    Parameters
    ----------
    chronology : DataFrame
        Columns ``peak``, ``trough`` (see :func:`read_chronology`).
    periods : PeriodIndex
        Quarterly or monthly periods.

    Returns
    -------
    Series
        Index ``periods``, values "recession"/"expansion".

    Raises
    ------
    ValueError
        Not a PeriodIndex of frequency Q or M, or a malformed chronology.
    """
    if not isinstance(periods, pd.PeriodIndex):
        raise ValueError(f"regimes: periods must be a pandas PeriodIndex; got {type(periods).__name__}")
    pf = (freq_of(periods) or "")
    if pf == "":
        raise ValueError(f"regimes: periods must be quarterly or monthly; got {periods.dtype}")
    missing = [c for c in COLUMNS if c not in chronology.columns]
    if missing:
        raise ValueError(f"regimes: chronology lacks column(s) {missing}; expected {list(COLUMNS)}")
    cf = {freq_of(chronology[c].dtype) or "" for c in COLUMNS}
    if len(cf) != 1 or "" in cf:
        raise ValueError("regimes: chronology columns must share a Q or M Period dtype; got "
                         f"{[str(chronology[c].dtype) for c in COLUMNS]}")
    freq = cf.pop()
    pk = chronology["peak"].array.asi8.astype(np.int64)
    tr = chronology["trough"].array.asi8.astype(np.int64)
    nat = np.iinfo(np.int64).min
    lo = np.where(pk == nat, np.iinfo(np.int64).min // 2, _last_month(pk, freq))
    hi = np.where(tr == nat, np.iinfo(np.int64).max // 2, _last_month(tr, freq))
    month = _last_month(periods.asi8.astype(np.int64), pf)
    inside = ((month[:, None] > lo[None, :]) & (month[:, None] <= hi[None, :])).any(axis=1)
    return pd.Series(np.where(inside, RECESSION, EXPANSION), index=periods, name="regime")


def _alternate(t: list[int], kind: list[int], y: np.ndarray) -> tuple[list[int], list[int]]:
    """Of consecutive turning points of one kind keep the most extreme (the first on a tie)."""
    out_t: list[int] = []
    out_k: list[int] = []
    for ti, ki in zip(t, kind, strict=True):
        if out_k and out_k[-1] == ki:
            better = y[ti] > y[out_t[-1]] if ki == 1 else y[ti] < y[out_t[-1]]
            if better:
                out_t[-1] = ti
            continue
        out_t.append(ti)
        out_k.append(ki)
    return out_t, out_k


def harding_pagan(series: pd.Series, min_phase: int = 2, min_cycle: int = 5,
                  window: int = 2) -> pd.DataFrame:
    """Date peaks and troughs of a level series by the Harding-Pagan (BBQ) rules.

    1. Candidates: a peak at t when ``y_t > y_{t+-j}`` for j = 1..window (strictly), a trough
       when ``y_t < y_{t+-j}``; the first and last ``window`` periods cannot be candidates.
    2. Alternation: of two consecutive peaks keep the higher, of two troughs the lower.
    3. Censoring, repeated (each time after step 2) until none applies, shortest first: a phase
       (peak to trough or trough to peak) shorter than ``min_phase`` periods removes both of its
       turning points; a cycle (peak to peak or trough to trough) shorter than ``min_cycle``
       removes the less extreme of its two ends together with the turning point between them.

    Parameters
    ----------
    series : Series
        Levels (e.g. log real output) indexed by a PeriodIndex; no missing values.
    min_phase : int
        Minimum phase length in periods (BBQ quarterly: 2).
    min_cycle : int
        Minimum cycle length in periods (BBQ quarterly: 5).
    window : int
        Half-width of the local extremum window (BBQ quarterly: 2).

    Returns
    -------
    DataFrame
        A chronology (columns ``peak``, ``trough``) usable by :func:`regimes`.

    Raises
    ------
    ValueError
        Not a PeriodIndex, missing values, or non-positive rule lengths.

    References
    ----------
    Harding, D. and Pagan, A. (2002). Dissecting the cycle: a methodological investigation.
    Journal of Monetary Economics 49(2), 365-381.
    Bry, G. and Boschan, C. (1971). Cyclical Analysis of Time Series: Selected Procedures and
    Computer Programs. NBER.
    """
    where = "harding_pagan"
    if not isinstance(series, pd.Series) or not isinstance(series.index, pd.PeriodIndex):
        raise ValueError(f"{where}: series must be a pandas Series indexed by a PeriodIndex")
    freq = (freq_of(series.index) or "")
    if freq == "":
        raise ValueError(f"{where}: the index must be quarterly or monthly; got {series.index.dtype}")
    for name, val in (("min_phase", min_phase), ("min_cycle", min_cycle), ("window", window)):
        if isinstance(val, bool) or int(val) != val or val < 1:
            raise ValueError(f"{where}: {name} must be a positive integer; got {val!r}")
    y = series.to_numpy(dtype=np.float64)
    if np.isnan(y).any():
        raise ValueError(f"{where}: series has {int(np.isnan(y).sum())} missing value(s); "
                         "dating needs a complete series")
    if not (np.diff(series.index.asi8) == 1).all():
        raise ValueError(f"{where}: the index must be consecutive periods without gaps")
    n = y.size
    w = int(window)
    peak = np.zeros(n, dtype=bool)
    trough = np.zeros(n, dtype=bool)
    if n > 2 * w:
        core = y[w: n - w]
        up = np.ones(core.size, dtype=bool)
        down = np.ones(core.size, dtype=bool)
        for j in range(1, w + 1):
            for other in (y[w - j: n - w - j], y[w + j: n - w + j]):
                up &= core > other
                down &= core < other
        peak[w: n - w], trough[w: n - w] = up, down
    t = np.flatnonzero(peak | trough).tolist()
    kind = [1 if peak[i] else -1 for i in t]
    t, kind = _alternate(t, kind, y)
    while True:
        gaps = []  # (length, start position, "phase"/"cycle")
        for i in range(len(t) - 1):
            if t[i + 1] - t[i] < min_phase:
                gaps.append((t[i + 1] - t[i], i, "phase"))
        for i in range(len(t) - 2):
            if t[i + 2] - t[i] < min_cycle:
                gaps.append((t[i + 2] - t[i], i, "cycle"))
        if not gaps:
            break
        _, i, what = min(gaps)
        if what == "phase":
            drop = {i, i + 1}
        else:
            a, b = t[i], t[i + 2]
            weaker_first = y[a] < y[b] if kind[i] == 1 else y[a] > y[b]
            drop = {i, i + 1} if weaker_first else {i + 1, i + 2}
        t = [x for j, x in enumerate(t) if j not in drop]
        kind = [x for j, x in enumerate(kind) if j not in drop]
        t, kind = _alternate(t, kind, y)
    if not t:
        return _empty_chronology(freq)
    ords = series.index.asi8
    peaks, troughs = [], []
    j = 0
    if kind[0] == -1:  # the sample opens in a recession
        peaks.append(-1)
        troughs.append(int(ords[t[0]]))
        j = 1
    while j < len(t):
        peaks.append(int(ords[t[j]]))
        troughs.append(int(ords[t[j + 1]]) if j + 1 < len(t) else -1)
        j += 2
    return _frame(np.array(peaks), np.array(troughs), freq)
