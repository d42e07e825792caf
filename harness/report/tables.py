"""The report's tables: one structure, four renderings (HTML, Markdown, LaTeX, CSV).

A :class:`GridTable` holds numeric cells laid out as rows (models) × columns (score ×
sub-period, …), optionally split into row groups (one per horizon). Each cell keeps its value,
the number of forecasts behind it, the p-value of a comparison test and a "best in its column"
flag, so that every rendering shows the same facts. A :class:`FrameTable` shows a tidy
DataFrame as it is (failures, verdicts, what changed).

Laws (tested):

* the numbers in the Markdown, LaTeX and CSV files equal the DataFrame's they were built from;
* the bold cell of a column (within a row group) is the column's minimum when ``best="min"``;
* text from data is escaped for the target format (HTML entities, LaTeX specials, Markdown
  punctuation), so a name with markup shows as text.
"""

from __future__ import annotations

import html
import math
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

# Significance thresholds of the stars (common practice: * 10%, ** 5%, *** 1%).
STAR_LEVELS = ((0.01, "***"), (0.05, "**"), (0.10, "*"))

# Ratio bins of the diverging colour scale: |log ratio| thresholds, symmetric around 1 so that a
# model 20% better and one 20% worse get the same lightness (the magnitude reads in grey print).
RATIO_STEPS = (1.03, 1.10, 1.25, 1.50)
# CIE L* per level (0 = neutral) and the chroma the hue gets at that level (reduced to fit sRGB).
_LEVEL_L = (97.0, 89.0, 80.0, 70.0, 60.0)
_LEVEL_C = (0.0, 16.0, 28.0, 40.0, 52.0)
# Hue angles in CIELAB (degrees): blue for "lower loss than the benchmark", orange for "higher";
# blue/orange stays distinguishable under the common red-green colour-vision deficiencies.
_HUE_BETTER = 262.0
_HUE_WORSE = 62.0
MARK_BETTER = "\u25bc"  # ▼ lower loss than the benchmark
MARK_WORSE = "\u25b2"  # ▲ higher loss than the benchmark


# --------------------------------------------------------------------------- escaping
def escape_html(text) -> str:
    """HTML-escape any value's text (``&``, ``<``, ``>``, both quotes)."""
    return html.escape(str(text), quote=True)


_LATEX_SPECIAL = {
    "\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
    "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}",
    "<": r"\textless{}", ">": r"\textgreater{}", '"': r"\textquotedbl{}", "|": r"\textbar{}",
}
_LATEX_RE = re.compile("|".join(re.escape(k) for k in _LATEX_SPECIAL))


def escape_latex(text) -> str:
    """Escape LaTeX's special characters so that ``text`` typesets literally (one pass)."""
    return _LATEX_RE.sub(lambda m: _LATEX_SPECIAL[m.group(0)], str(text))


_MD_RE = re.compile(r"([\\`*_{}\[\]()#+!|~])")


def escape_markdown(text) -> str:
    """Escape Markdown punctuation and HTML's ``&``, ``<``, ``>`` (Markdown renderers pass raw HTML)."""
    s = str(text).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    s = _MD_RE.sub(r"\\\1", s)
    return s.replace("\n", " ")


# --------------------------------------------------------------------------- cell helpers
def stars(p) -> str:
    """Significance stars of a p-value: ``***`` below 1%, ``**`` below 5%, ``*`` below 10%."""
    if p is None or not np.isfinite(p):
        return ""
    for level, mark in STAR_LEVELS:
        if p < level:
            return mark
    return ""


def ratio_level(ratio) -> np.ndarray:
    """Signed colour level of ratios: 0 near 1, -1…-4 better (below 1), +1…+4 worse.

    Parameters
    ----------
    ratio : array-like of float
        Ratios to the benchmark; NaN maps to level 0.

    Returns
    -------
    numpy.ndarray of int, same shape
    """
    r = np.asarray(ratio, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        mag = np.abs(np.log(r))
    mag = np.where(np.isfinite(mag), mag, 0.0)
    level = np.searchsorted(np.log(np.asarray(RATIO_STEPS)), mag, side="right")
    return (np.sign(np.nan_to_num(r - 1.0)) * level).astype(int)


def _lab_to_srgb(L, a, b) -> np.ndarray:
    """CIELAB (D65) to linear sRGB (not clipped); arrays broadcast, last axis RGB."""
    # CIE 15:2004 inverse of the L*a*b* transform, then the sRGB matrix of IEC 61966-2-1.
    L, a, b = np.broadcast_arrays(np.asarray(L, float), np.asarray(a, float), np.asarray(b, float))
    fy = (L + 16.0) / 116.0
    fx = fy + a / 500.0
    fz = fy - b / 200.0
    eps = 6.0 / 29.0

    def finv(t):
        return np.where(t > eps, t**3, 3 * eps**2 * (t - 4.0 / 29.0))

    xyz = np.stack([0.95047 * finv(fx), finv(fy), 1.08883 * finv(fz)], axis=-1)
    m = np.array([[3.2406, -1.5372, -0.4986], [-0.9689, 1.8758, 0.0415], [0.0557, -0.2040, 1.0570]])
    return xyz @ m.T


def _encode_srgb(lin: np.ndarray) -> np.ndarray:
    c = np.clip(lin, 0.0, 1.0)
    return np.where(c <= 0.0031308, 12.92 * c, 1.055 * c ** (1 / 2.4) - 0.055)


def _palette() -> dict[int, str]:
    """Hex colour per signed level, chroma reduced until the colour fits in sRGB (L* kept)."""
    levels = np.arange(-4, 5)
    k = np.abs(levels)
    L = np.asarray(_LEVEL_L)[k]
    C = np.asarray(_LEVEL_C)[k]
    hue = np.deg2rad(np.where(levels < 0, _HUE_BETTER, _HUE_WORSE))
    scale = np.linspace(1.0, 0.0, 101)[:, None]
    lin = _lab_to_srgb(L[None, :], (scale * C) * np.cos(hue), (scale * C) * np.sin(hue))
    ok = np.all((lin >= -1e-9) & (lin <= 1 + 1e-9), axis=-1)  # (scales, levels)
    first = np.argmax(ok, axis=0)  # largest chroma in gamut (scale 0 is grey: always in gamut)
    rgb = _encode_srgb(lin[first, np.arange(len(levels))])
    out = {}
    for lv, c in zip(levels, np.round(rgb * 255).astype(int), strict=True):
        out[int(lv)] = "#{:02x}{:02x}{:02x}".format(*c)
    return out


PALETTE = _palette()


def ratio_colour(ratio) -> str:
    """Background colour (hex) of a ratio cell on the blue–orange scale (NaN: neutral)."""
    return PALETTE[int(ratio_level(ratio))]


def ratio_marker(ratio) -> str:
    """Text marker of the direction (▼ better, ▲ worse) for ratios outside the neutral bin."""
    lv = int(ratio_level(ratio))
    return MARK_BETTER if lv < 0 else MARK_WORSE if lv > 0 else ""


def fmt_number(x, digits: int = 3) -> str:
    """A float with ``digits`` decimals; NaN and None as an em dash."""
    if x is None:
        return "\u2014"
    try:
        xf = float(x)
    except (TypeError, ValueError):
        return str(x)
    if not math.isfinite(xf):
        return "\u2014"
    return f"{xf:.{digits}f}"


# --------------------------------------------------------------------------- structures
@dataclass
class Cell:
    """One numeric cell: value, forecasts behind it, test p-value, best-in-column flag."""

    value: float = float("nan")
    n: int | None = None
    pvalue: float | None = None
    best: bool = False


@dataclass
class RowGroup:
    """Rows sharing a key (e.g. one horizon); ``best`` is decided within a group."""

    label: str
    key: dict
    rows: list[tuple[str, list[Cell]]] = field(default_factory=list)


@dataclass
class GridTable:
    """A numeric table rendered identically in HTML, Markdown, LaTeX and CSV.

    Attributes
    ----------
    name : str
        File stem (``tables/<name>.md`` …), also the HTML ``id`` of the table.
    title : str
        Caption.
    columns : list of tuple of str
        Column keys, one tuple per column (e.g. ``("crps", "full")``); the levels are named by
        ``column_levels``.
    column_labels : dict
        Display text of each level's values (e.g. ``{"se_mean": "RMSE"}``); default the value.
    row_name : str
        Name of the row label (``"model"``).
    groups : list of RowGroup
    best : {"min", None}
        Which cell of each column (within a group) gets bold.
    kind : {"ratio", "pvalue", "plain"}
        ``ratio``: blue–orange background and direction markers; ``pvalue``: stars on the value
        itself; ``plain``: numbers only.
    notes : list of str
        Printed under the table (plain text, escaped on output).
    """

    name: str
    title: str
    columns: list[tuple[str, ...]]
    column_levels: tuple[str, ...]
    row_name: str
    groups: list[RowGroup]
    column_labels: dict = field(default_factory=dict)
    best: str | None = "min"
    kind: str = "ratio"
    digits: int = 3
    notes: list[str] = field(default_factory=list)
    group_name: str | None = None

    def __post_init__(self):
        self.mark_best()

    def mark_best(self) -> None:
        """Flag the minimum of each column within each group (ties all flagged)."""
        if self.best != "min":
            return
        for g in self.groups:
            if not g.rows:
                continue
            vals = np.array([[c.value for c in cells] for _, cells in g.rows], dtype=np.float64)
            with np.errstate(invalid="ignore"):
                colmin = np.nanmin(np.where(np.isfinite(vals), vals, np.inf), axis=0)
            # Compare formatted values too: two cells shown equal are both best.
            shown = np.round(vals, self.digits)
            flag = np.isfinite(vals) & (np.isclose(vals, colmin[None, :], rtol=0, atol=0)
                                        | (shown == np.round(colmin, self.digits)[None, :]))
            for i, (_, cells) in enumerate(g.rows):
                for j, c in enumerate(cells):
                    c.best = bool(flag[i, j])

    def label(self, level: int, value: str) -> str:
        return str(self.column_labels.get(value, value))

    # ----------------------------------------------------------------- renderings
    def to_frame(self) -> pd.DataFrame:
        """The tidy form written to CSV: one row per cell, full precision."""
        recs = []
        for g in self.groups:
            for row, cells in g.rows:
                for col, c in zip(self.columns, cells, strict=True):
                    rec = dict(g.key)
                    rec[self.row_name] = row
                    rec.update(dict(zip(self.column_levels, col, strict=True)))
                    rec.update(value=c.value, n=c.n, pvalue=c.pvalue, stars=stars(c.pvalue), best=c.best)
                    recs.append(rec)
        return pd.DataFrame(recs)

    def _header_spans(self) -> list[list[tuple[str, int]]]:
        """Per header level, runs of equal labels (for colspan / multicolumn)."""
        out = []
        for lv in range(len(self.column_levels)):
            runs: list[tuple[str, int]] = []
            prev = None
            for col in self.columns:
                key = col[: lv + 1]
                if runs and key == prev:
                    runs[-1] = (runs[-1][0], runs[-1][1] + 1)
                else:
                    runs.append((col[lv], 1))
                prev = key
            out.append(runs)
        return out

    def to_html(self) -> str:
        """The table as HTML (every text escaped; cell facts also in ``title`` attributes)."""
        e = escape_html
        parts = [f'<div class="wrap"><table id="{e(self.name)}" class="grid {e(self.kind)}">',
                 f"<caption>{e(self.title)}</caption>", "<thead>"]
        spans = self._header_spans()
        for lv, runs in enumerate(spans):
            parts.append("<tr>")
            if lv == 0:
                parts.append(f'<th class="rowh" rowspan="{len(spans)}" scope="col">{e(self.row_name)}</th>')
            for text, width in runs:
                parts.append(f'<th colspan="{width}" scope="col">{e(self.label(lv, text))}</th>')
            parts.append("</tr>")
        parts.append("</thead>")
        ncol = len(self.columns) + 1
        for g in self.groups:
            parts.append("<tbody>")
            if g.label:
                parts.append(f'<tr class="group"><th colspan="{ncol}" scope="rowgroup">{e(g.label)}</th></tr>')
            for row, cells in g.rows:
                parts.append(f'<tr><th class="rowh" scope="row">{e(row)}</th>')
                parts.extend(self._html_cell(c) for c in cells)
                parts.append("</tr>")
            parts.append("</tbody>")
        parts.append("</table></div>")
        if self.notes:
            parts.append('<p class="note">' + "<br>".join(e(n) for n in self.notes) + "</p>")
        return "\n".join(parts)

    def _html_cell(self, c: Cell) -> str:
        e = escape_html
        text = fmt_number(c.value, self.digits)
        val = f"<strong>{text}</strong>" if c.best else text
        tip = []
        if c.n is not None:
            tip.append(f"n = {c.n} forecasts")
        if c.pvalue is not None and np.isfinite(c.pvalue):
            tip.append(f"p = {c.pvalue:.3f}")
        style = ""
        mark = ""
        if self.kind == "ratio":
            style = f' style="background:{ratio_colour(c.value)}"'
            m = ratio_marker(c.value)
            mark = f'<span class="dir">{m}</span>' if m else ""
        sig = stars(c.pvalue)
        sig_html = f'<span class="sig">{sig}</span>' if sig else ""
        n_html = f'<span class="n">n={c.n}</span>' if c.n is not None else ""
        title = f' title="{e("; ".join(tip))}"' if tip else ""
        cls = ' class="best"' if c.best else ""
        return (f"<td{cls}{style}{title}>{mark}<span class=\"v\">{val}</span>{sig_html}"
                f"{'<br>' + n_html if n_html else ''}</td>")

    def to_markdown(self) -> str:
        """GitHub-flavoured Markdown: group key and row label as leading columns."""
        key_names = list(self.groups[0].key) if self.groups else []
        head = [escape_markdown(k) for k in key_names] + [escape_markdown(self.row_name)]
        head += [escape_markdown(" ".join(self.label(i, v) for i, v in enumerate(col))) for col in self.columns]
        lines = [f"**{escape_markdown(self.title)}**", "", "| " + " | ".join(head) + " |",
                 "|" + "|".join([":---"] * (len(key_names) + 1) + ["---:"] * len(self.columns)) + "|"]
        for g in self.groups:
            for row, cells in g.rows:
                vals = [escape_markdown(g.key[k]) for k in key_names] + [escape_markdown(row)]
                for c in cells:
                    t = fmt_number(c.value, self.digits)
                    t = f"**{t}**" if c.best and t != "\u2014" else t
                    s = stars(c.pvalue)
                    t += escape_markdown(s)
                    if c.n is not None:
                        t += f" (n={c.n})"
                    vals.append(t)
                lines.append("| " + " | ".join(vals) + " |")
        if self.notes:
            lines.append("")
            lines.extend(escape_markdown(n) for n in self.notes)
        return "\n".join(lines) + "\n"

    def to_latex(self) -> str:
        """A booktabs ``tabular`` (needs ``\\usepackage{booktabs}``), groups as ruled blocks."""
        ncol = len(self.columns)
        spec = "l" + "r" * ncol
        lines = [f"% {escape_latex(self.title)}", f"\\begin{{tabular}}{{{spec}}}", "\\toprule"]
        for lv, runs in enumerate(self._header_spans()):
            cells = [escape_latex(self.row_name) if lv == len(self.column_levels) - 1 else ""]
            for text, width in runs:
                t = escape_latex(self.label(lv, text))
                cells.append(f"\\multicolumn{{{width}}}{{c}}{{{t}}}" if width > 1 else t)
            lines.append(" & ".join(cells) + r" \\")
        lines.append("\\midrule")
        for gi, g in enumerate(self.groups):
            if g.label:
                if gi:
                    lines.append("\\midrule")
                lines.append(f"\\multicolumn{{{ncol + 1}}}{{l}}{{\\emph{{{escape_latex(g.label)}}}}} \\\\")
            for row, cells in g.rows:
                vals = [escape_latex(row)]
                for c in cells:
                    t = fmt_number(c.value, self.digits)
                    if t == "\u2014":
                        vals.append("--")
                        continue
                    t = f"\\textbf{{{t}}}" if c.best else t
                    s = stars(c.pvalue)
                    if s:
                        t += f"$^{{{s}}}$"
                    if c.n is not None:
                        t += f" {{\\scriptsize({c.n})}}"
                    vals.append(t)
                lines.append(" & ".join(vals) + r" \\")
        lines += ["\\bottomrule", "\\end{tabular}"]
        for n in self.notes:
            lines.append(f"% {escape_latex(n)}")
        return "\n".join(lines) + "\n"

    def write(self, directory: Path) -> dict[str, Path]:
        """Write ``<name>.md``, ``<name>.tex`` and ``<name>.csv`` under ``directory``."""
        return _write_all(self, directory)


@dataclass
class FrameTable:
    """A tidy DataFrame shown as it is; floats get ``digits`` decimals, text is escaped."""

    name: str
    title: str
    frame: pd.DataFrame
    digits: int = 3
    notes: list[str] = field(default_factory=list)
    pvalue_columns: tuple[str, ...] = ()

    def _cell(self, col: str, x) -> str:
        if isinstance(x, bool | np.bool_):
            return "yes" if x else "no"
        if isinstance(x, float | np.floating):
            t = fmt_number(x, self.digits)
            return t + (stars(float(x)) if col in self.pvalue_columns else "")
        if x is None or (isinstance(x, float) and math.isnan(x)) or x is pd.NaT:
            return "\u2014"
        if isinstance(x, pd.Timestamp | np.datetime64):
            return str(pd.Timestamp(x).date())
        return str(x)

    def _cells(self) -> list[list[str]]:
        cols = list(self.frame.columns)
        return [[self._cell(c, x) for c, x in zip(cols, row, strict=True)]
                for row in self.frame.itertuples(index=False, name=None)]

    def to_frame(self) -> pd.DataFrame:
        return self.frame

    def to_html(self) -> str:
        e = escape_html
        cols = list(self.frame.columns)
        num = [pd.api.types.is_numeric_dtype(self.frame[c]) and not pd.api.types.is_bool_dtype(self.frame[c])
               for c in cols]
        parts = [f'<div class="wrap"><table id="{e(self.name)}" class="frame">', f"<caption>{e(self.title)}</caption>",
                 "<thead><tr>" + "".join(f'<th scope="col">{e(c)}</th>' for c in cols) + "</tr></thead><tbody>"]
        for row in self._cells():
            tds = "".join(f'<td class="{"num" if isnum else "txt"}">{e(v)}</td>' for v, isnum in zip(row, num,
                                                                                                   strict=True))
            parts.append(f"<tr>{tds}</tr>")
        parts.append("</tbody></table></div>")
        if self.notes:
            parts.append('<p class="note">' + "<br>".join(e(n) for n in self.notes) + "</p>")
        return "\n".join(parts)

    def to_markdown(self) -> str:
        cols = list(self.frame.columns)
        lines = [f"**{escape_markdown(self.title)}**", "", "| " + " | ".join(escape_markdown(c) for c in cols) + " |",
                 "|" + "|".join("---" for _ in cols) + "|"]
        for row in self._cells():
            lines.append("| " + " | ".join(escape_markdown(v) for v in row) + " |")
        if self.notes:
            lines.append("")
            lines.extend(escape_markdown(n) for n in self.notes)
        return "\n".join(lines) + "\n"

    def to_latex(self) -> str:
        cols = list(self.frame.columns)
        lines = [f"% {escape_latex(self.title)}", f"\\begin{{tabular}}{{{'l' * len(cols)}}}", "\\toprule",
                 " & ".join(escape_latex(c) for c in cols) + r" \\", "\\midrule"]
        for row in self._cells():
            lines.append(" & ".join("--" if v == "\u2014" else escape_latex(v) for v in row) + r" \\")
        lines += ["\\bottomrule", "\\end{tabular}"]
        for n in self.notes:
            lines.append(f"% {escape_latex(n)}")
        return "\n".join(lines) + "\n"

    def write(self, directory: Path) -> dict[str, Path]:
        return _write_all(self, directory)


def _write_all(table, directory: Path) -> dict[str, Path]:
    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    out = {}
    for ext, text in (("md", table.to_markdown()), ("tex", table.to_latex())):
        p = directory / f"{table.name}.{ext}"
        p.write_text(text, encoding="utf-8")
        out[f"{table.name}.{ext}"] = p
    p = directory / f"{table.name}.csv"
    table.to_frame().to_csv(p, index=False)
    out[f"{table.name}.csv"] = p
    return out


# --------------------------------------------------------------------------- builders
SCORE_LABELS = {
    "crps": "CRPS", "se_mean": "RMSE", "ae_mean": "MAE", "log_score": "log score",
    "crps_left": "left-tail CRPS", "crps_right": "right-tail CRPS", "crps_centre": "centre CRPS",
    "crps_tails": "two-tail CRPS", "qs_05": "QS 5%", "qs_10": "QS 10%", "qs_90": "QS 90%", "qs_95": "QS 95%",
}


def slug(*parts) -> str:
    """A file-safe name built from parts (characters outside ``[A-Za-z0-9_.-]`` become ``-``)."""
    s = "_".join(str(p) for p in parts)
    return re.sub(r"[^A-Za-z0-9_.-]+", "-", s).strip("-") or "table"


def horizon_groups(horizons) -> list[list[int]]:
    """Backcasts and the nowcast together, then forecast horizons in blocks of four."""
    hs = sorted(int(h) for h in horizons)
    early = [h for h in hs if h <= 0]
    later = [h for h in hs if h > 0]
    groups = [early] if early else []
    groups += [later[i:i + 4] for i in range(0, len(later), 4)]
    return groups


def horizon_label(hs) -> str:
    """``h = -1…0`` style label of a horizon block."""
    hs = list(hs)
    return f"h = {hs[0]}" if len(hs) == 1 else f"h = {hs[0]}\u2026{hs[-1]}"


def model_order(models, benchmark: str) -> list[str]:
    """The benchmark first, then the others in their given order."""
    ms = [str(m) for m in pd.unique(pd.Series(list(models), dtype=object))]
    return ([benchmark] if benchmark in ms else []) + [m for m in ms if m != benchmark]


def ratio_frame(evaluation, scores, subperiods=None) -> pd.DataFrame:
    """Ratios to the benchmark in long form: model, variable, horizon, subperiod, score, ratio, n.

    ``se_mean`` (mean squared error) becomes the RMSE ratio ``sqrt(MSE ratio)``. Scores absent
    from ``evaluation.relative`` (e.g. quantile scores) are divided here from ``evaluation.table``.
    """
    rel = evaluation.relative
    tab = evaluation.table
    key = ["model", "variable", "horizon", "subperiod"]
    out = []
    for s in scores:
        if s in rel.columns:
            r = rel[key + ["n", s]].rename(columns={s: "ratio"})
        elif s in tab.columns:
            bench = tab[tab["model"] == evaluation.benchmark][key[1:] + [s]].rename(columns={s: "_b"})
            r = tab[key + ["n", s]].merge(bench, on=key[1:], how="left")
            with np.errstate(divide="ignore", invalid="ignore"):
                r["ratio"] = r[s].to_numpy(dtype=float) / r["_b"].to_numpy(dtype=float)
            r = r[key + ["n", "ratio"]]
        else:
            continue
        r = r.assign(score=s)
        if s == "se_mean":
            r["ratio"] = np.sqrt(r["ratio"].to_numpy(dtype=float))
        out.append(r)
    if not out:
        return pd.DataFrame(columns=key + ["n", "ratio", "score"])
    df = pd.concat(out, ignore_index=True)
    if subperiods is not None:
        df = df[df["subperiod"].isin(list(subperiods))]
    return df


def _var_order(present, variables=None) -> list[str]:
    """``variables`` first (those present), then any other present variable in order of appearance."""
    present = [str(v) for v in pd.unique(pd.Series(list(present), dtype=object))]
    wanted = [str(v) for v in (variables or [])]
    return [v for v in wanted if v in present] + [v for v in present if v not in wanted]


def _group_label(h: int, rows) -> str:
    """``horizon h``, flagged when every ratio is 1 (all models score the same, e.g. a published target)."""
    vals = np.array([c.value for _, cs in rows for c in cs], dtype=np.float64)
    same = len(rows) > 1 and bool(len(vals)) and bool(np.all(np.isfinite(vals))) and bool(
        np.allclose(vals, 1.0, rtol=0, atol=1e-9))
    return f"horizon {h}" + (" (every model scores the same here)" if same else "")


def _pvalues(evaluation) -> dict:
    t = evaluation.tests
    if t is None or not len(t):
        return {}
    keys = zip(t["model"], t["variable"], t["horizon"].astype(int), t["subperiod"], t["score"], strict=True)
    return dict(zip(keys, t["pvalue"].to_numpy(dtype=float), strict=True))


def ratio_tables(evaluation, *, scores=("crps", "se_mean"), subperiods=None, prefix: str = "relative",
                 title: str = "Ratio to the benchmark", by_horizon_group: bool = True,
                 variables=None) -> list[GridTable]:
    """Ratio tables (benchmark first), one per variable × horizon block.

    Parameters
    ----------
    evaluation : harness.evaluation.Evaluation
    scores : sequence of str
        Loss scores; ``se_mean`` is shown as the RMSE ratio (square root of the MSE ratio).
    subperiods : sequence of str, optional
        Default ``evaluation.subperiod_names`` (those present).
    prefix, title : str
        File stem prefix and caption start.
    by_horizon_group : bool
        One table per block of horizons (see :func:`horizon_groups`) instead of one per variable.
    variables : sequence of str, optional
        Order of the variables (default: order of appearance).

    Returns
    -------
    list of GridTable
        Cells carry the ratio, the number of forecasts ``n`` and the p-value of the HLN-corrected
        Diebold–Mariano test against the benchmark of the same score (``se_mean`` for RMSE).

    References
    ----------
    Diebold, F. X. and Mariano, R. S. (1995). Comparing predictive accuracy. Journal of Business &
    Economic Statistics 13, 253–263. Harvey, D., Leybourne, S. and Newbold, P. (1997). Testing the
    equality of prediction mean squared errors. International Journal of Forecasting 13, 281–291.
    """
    rf = ratio_frame(evaluation, scores)
    if not len(rf):
        return []
    present = list(pd.unique(rf["subperiod"]))
    names = [s for s in (subperiods or evaluation.subperiod_names or present) if s in present]
    names += [s for s in present if s not in names and subperiods is None]
    scores = [s for s in scores if s in set(rf["score"])]
    pv = _pvalues(evaluation)
    bench = evaluation.benchmark
    lookup = {(m, v, int(h), sp, s): (r, n) for m, v, h, sp, s, r, n in
              zip(rf["model"], rf["variable"], rf["horizon"], rf["subperiod"], rf["score"], rf["ratio"], rf["n"],
                  strict=True)}
    columns = [(s, sp) for s in scores for sp in names]
    tables = []
    order = _var_order(rf["variable"], variables)
    note = (f"Ratio of each model's mean score to the benchmark {bench}'s on the same cell; below 1 = better."
            + (" RMSE ratio = square root of the MSE ratio." if "se_mean" in scores else ""))
    for var in order:
        sub = rf[rf["variable"].astype(str) == var]
        models = model_order(sub["model"], bench)
        blocks = horizon_groups(pd.unique(sub["horizon"])) if by_horizon_group else [
            sorted(int(h) for h in pd.unique(sub["horizon"]))]
        for block in blocks:
            groups = []
            for h in block:
                rows = []
                for m in models:
                    cells = []
                    for s, sp in columns:
                        r, n = lookup.get((m, var, h, sp, s), (np.nan, None))
                        p = None if m == bench else pv.get((m, var, h, sp, s))
                        cells.append(Cell(float(r), None if n is None or pd.isna(n) else int(n), p))
                    rows.append((m, cells))
                groups.append(RowGroup(_group_label(h, rows), {"variable": str(var), "horizon": h}, rows))
            name = slug(prefix, var, f"h{block[0]}" if len(block) == 1 else f"h{block[0]}to{block[-1]}")
            tables.append(GridTable(
                name=name, title=f"{title}: {var}, {horizon_label(block)}", columns=columns,
                column_levels=("score", "subperiod"), row_name="model", groups=groups,
                column_labels=SCORE_LABELS, group_name="horizon", notes=[note]))
    return tables


def coverage_tables(evaluation, levels=(50, 70, 90), variables=None) -> list[GridTable]:
    """Empirical coverage of central intervals with Kupiec and Christoffersen p-values, and PIT tests.

    Returns
    -------
    list of GridTable
        One per variable; rows models, groups horizons; columns per level (rate, Kupiec p,
        Christoffersen p), then Berkowitz p and Rossi–Sekhposyan p. Stars on a p-value mean the
        test rejects correct calibration at that level.

    References
    ----------
    Kupiec, P. (1995). Techniques for verifying the accuracy of risk measurement models. Journal of
    Derivatives 3, 73–84. Christoffersen, P. (1998). Evaluating interval forecasts. International
    Economic Review 39, 841–862. Berkowitz, J. (2001). Testing density forecasts, with applications
    to risk management. Journal of Business & Economic Statistics 19, 465–474. Rossi, B. and
    Sekhposyan, T. (2019). Alternative tests for correct specification of conditional predictive
    densities. Journal of Econometrics 208, 638–657.
    """
    cal = evaluation.calibration
    if cal is None or not len(cal):
        return []
    cols: list[tuple[str, str, str]] = []
    for lv in levels:
        if f"cover_{lv}_rate" in cal:
            cols += [(f"{lv}% interval", "rate", f"cover_{lv}_rate"),
                     (f"{lv}% interval", "Kupiec p", f"cover_{lv}_kupiec_p"),
                     (f"{lv}% interval", "Christoffersen p", f"cover_{lv}_christoffersen_p")]
    for c, lab in (("berkowitz_p", "Berkowitz p"), ("rs_p", "Rossi–Sekhposyan p")):
        if c in cal:
            cols.append(("PIT", lab, c))
    tables = []
    for var in _var_order(cal["variable"], variables):
        sub = cal[cal["variable"].astype(str) == var]
        models = model_order(sub["model"], evaluation.benchmark)
        groups = []
        for h in sorted(int(x) for x in pd.unique(sub["horizon"])):
            rows = []
            for m in models:
                r = sub[(sub["model"] == m) & (sub["horizon"] == h)]
                cells = []
                for _, kind, c in cols:
                    v = float(r[c].iloc[0]) if len(r) and c in r and pd.notna(r[c].iloc[0]) else np.nan
                    n = int(r["n"].iloc[0]) if len(r) and kind == "rate" else None
                    cells.append(Cell(v, n, v if kind != "rate" else None))
                rows.append((m, cells))
            groups.append(RowGroup(f"horizon {h}", {"variable": str(var), "horizon": h}, rows))
        tables.append(GridTable(
            name=slug("calibration", var), title=f"Interval coverage and PIT tests: {var}",
            columns=[(a, b) for a, b, _ in cols], column_levels=("test", "statistic"), row_name="model",
            groups=groups, best=None, kind="pvalue", group_name="horizon",
            notes=["rate: share of outcomes inside the central interval (nominal level in the header); "
                   "p: p-value of the test of correct coverage / calibration; stars: rejected at "
                   "10% (*), 5% (**), 1% (***)."]))
    return tables


def sensitivity_ratio_tables(sensitivity, benchmark: str, variables=None) -> list[GridTable]:
    """CRPS ratio to the benchmark under each truth (columns), per variable; groups horizons."""
    tt = sensitivity.truth_table
    if tt is None or not len(tt):
        return []
    truths = list(pd.unique(tt["truth"]))
    tables = []
    for var in _var_order(tt["variable"], variables):
        sub = tt[tt["variable"].astype(str) == var]
        models = model_order(sub["model"], benchmark)
        lookup = {(m, int(h), t): (r, n) for m, h, t, r, n in
                  zip(sub["model"], sub["horizon"], sub["truth"], sub["ratio"], sub["n"], strict=True)}
        groups = []
        for h in sorted(int(x) for x in pd.unique(sub["horizon"])):
            rows = []
            for m in models:
                cells = []
                for t in truths:
                    r, n = lookup.get((m, h, t), (np.nan, None))
                    cells.append(Cell(float(r), None if n is None or pd.isna(n) else int(n)))
                rows.append((m, cells))
            groups.append(RowGroup(_group_label(h, rows), {"variable": str(var), "horizon": h}, rows))
        tables.append(GridTable(
            name=slug("sensitivity_truths", var), title=f"CRPS ratio to the benchmark under each truth: {var}",
            columns=[("CRPS ratio", t) for t in truths], column_levels=("score", "truth"), row_name="model",
            groups=groups, group_name="horizon",
            notes=["The same forecasts scored against different truths (full sample); below 1 = better "
                   "than the benchmark."]))
    return tables
