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

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from harness.report.colours import ratio_colour, ratio_marker, significance, stars
from harness.report.escape import escape_html, escape_latex, escape_markdown, fmt_number


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

    def _mark(self, c: Cell) -> str:
        """Significance mark of a cell: directional for ratio cells (↓ better, ↑ worse), stars otherwise."""
        if self.kind == "ratio":
            return significance(c.pvalue, (c.value - 1.0) if c.value == c.value else None)
        return stars(c.pvalue)

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
                    rec.update(value=c.value, n=c.n, pvalue=c.pvalue, stars=stars(c.pvalue),
                               mark=self._mark(c), best=c.best)
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
        sig = self._mark(c)
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
                    s = self._mark(c)
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
                    s = self._mark(c)
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
