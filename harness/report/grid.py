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

from harness.report.colours import (
    MARK_BETTER,
    MARK_WORSE,
    PALETTE,
    ratio_level,
    significance,
    stars,
)
from harness.report.escape import (
    csv_safe,
    escape_html,
    escape_latex,
    escape_markdown,
    fmt_number,
    fmt_p,
)
from vintages import atomic_write_bytes


@dataclass
class Cell:
    """One numeric cell: value, forecasts behind it, test p-value, best-in-column flag.

    ``flag`` is the cell's yes/no fact where the table has one (``kind="set"``: in the model
    confidence set).
    """

    value: float = float("nan")
    n: int | None = None
    pvalue: float | None = None
    best: bool = False
    flag: bool | None = None
    #: why there is no p-value where one was expected ("n too small": below the test's rule)
    note: str = ""


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
    kind : {"ratio", "pvalue", "coverage", "set", "plain"}
        ``ratio``: blue–orange background and direction markers, the p-value of the test
        against the benchmark printed in the cell; ``pvalue``: the value is a p-value, stars
        mark rejections; ``coverage``: the value is a hit rate, ``pvalue`` its coverage test
        (stars mark rejections); ``set``: ``flag`` in/out of a set, the value its p-value;
        ``plain``: numbers only.
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
    #: the typed frame CSV and Parquet hold, when the table has a better one than one row per cell
    data: pd.DataFrame | None = None
    #: text and Markdown headers show the last column level only (the HTML and LaTeX show all)
    short_header: bool = False

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
        if self.kind == "set":
            return ""
        return stars(c.pvalue)

    def _value_text(self, c: Cell) -> str:
        """The cell's main text: the number, or ``in``/``out`` for set membership."""
        if self.kind == "set":
            return "\u2014" if c.flag is None else ("in" if c.flag else "out")
        return fmt_number(c.value, self.digits)

    def _detail(self, c: Cell, style: str = "html") -> str:
        """The printed twin of the tooltip: ``p 0.004 · n 83`` (html), ``p=0.004, n=83`` (md, text)."""
        p = c.value if self.kind == "set" else c.pvalue
        parts = []
        eq, sep = (" ", " \u00b7 ") if style == "html" else ("=", ", ")
        if self.kind != "pvalue" and p is not None and np.isfinite(p):
            parts.append(f"p{eq}{fmt_p(p)}")
        elif c.note:
            parts.append(c.note)
        if c.n is not None:
            parts.append(f"n{eq}{c.n}")
        return sep.join(parts)

    def label(self, level: int, value) -> str:
        return str(self.column_labels.get(value, value))

    def _flat_label(self, col) -> str:
        """One line of header for a column (text and Markdown)."""
        if self.short_header:
            return self.label(len(col) - 1, col[-1])
        return " ".join(self.label(i, v) for i, v in enumerate(col))

    # ----------------------------------------------------------------- renderings
    def to_frame(self) -> pd.DataFrame:
        """The tidy form written to CSV: one row per cell, full precision (or ``data`` when given)."""
        if self.data is not None:
            return self.data
        recs = []
        for g in self.groups:
            for row, cells in g.rows:
                for col, c in zip(self.columns, cells, strict=True):
                    rec = dict(g.key)
                    rec[self.row_name] = row
                    rec.update(dict(zip(self.column_levels, col, strict=True)))
                    rec.update(value=c.value, n=c.n, pvalue=c.pvalue, stars=stars(c.pvalue),
                               mark=self._mark(c), best=c.best, note=c.note)
                    if self.kind == "set":
                        rec.update(in_set=c.flag, pvalue=c.value)
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
        # colour levels of every cell at once (one vectorised call, not one per cell)
        allc = [c for g in self.groups for _, cells in g.rows for c in cells]
        levels = iter(ratio_level([c.value for c in allc]).tolist()) if allc and self.kind == "ratio" else None
        for g in self.groups:
            parts.append("<tbody>")
            if g.label:
                parts.append(f'<tr class="group"><th colspan="{ncol}" scope="rowgroup">{e(g.label)}</th></tr>')
            for row, cells in g.rows:
                parts.append(f'<tr><th class="rowh" scope="row">{e(row)}</th>')
                parts.extend(self._html_cell(c, None if levels is None else next(levels)) for c in cells)
                parts.append("</tr>")
            parts.append("</tbody>")
        parts.append("</table></div>")
        if self.notes:
            parts.append('<p class="note">' + "<br>".join(e(n) for n in self.notes) + "</p>")
        return "\n".join(parts)

    def _html_cell(self, c: Cell, level: int | None = None) -> str:
        e = escape_html
        text = self._value_text(c)
        val = f"<strong>{text}</strong>" if c.best else text
        tip = []
        if c.n is not None:
            tip.append(f"n = {c.n} forecasts")
        p = c.value if self.kind == "set" else c.pvalue
        if p is not None and np.isfinite(p):
            tip.append(f"p = {fmt_p(p)}")
        style = ""
        mark = ""
        if self.kind == "ratio":
            lv = int(ratio_level(c.value)) if level is None else level
            style = f' style="background:{PALETTE[lv]}"'
            m = MARK_BETTER if lv < 0 else MARK_WORSE if lv > 0 else ""
            mark = f'<span class="dir">{m}</span>' if m else ""
        sig = self._mark(c)
        sig_html = f'<span class="sig">{sig}</span>' if sig else ""
        detail = self._detail(c)
        # p and n printed under the number (the tooltip repeats them for screen readers)
        d_html = f'<br><span class="n">{e(detail)}</span>' if detail else ""
        title = f' title="{e("; ".join(tip))}"' if tip else ""
        cls = ' class="best"' if c.best else ""
        return f"<td{cls}{style}{title}>{mark}<span class=\"v\">{val}</span>{sig_html}{d_html}</td>"

    def to_text(self, transpose: bool | None = None) -> str:
        """Aligned plain text for a terminal or an e-mail: marks set apart from the numbers, p in the cell.

        ``transpose`` (default: when the table has one group) puts the columns (e.g. horizons)
        down the side and the rows (models) across, so that a table of many horizons fits a
        terminal; n then gets its own column when every cell of a line has the same n.
        """
        transpose = (len(self.groups) == 1) if transpose is None else transpose
        col_names = [self._flat_label(col) for col in self.columns]

        def cell_text(c: Cell, with_n: bool) -> str:
            t = self._value_text(c)
            m = self._mark(c)
            t = f"{t} {m}" if m else t
            if c.best and t != "\u2014":
                t += " <"
            p = c.value if self.kind == "set" else c.pvalue
            d = []
            if self.kind != "pvalue" and p is not None and np.isfinite(p):
                d.append(f"p {fmt_p(p)}")
            elif c.note:
                d.append(c.note)
            if with_n and c.n is not None:
                d.append(f"n {c.n}")
            return f"{t} ({', '.join(d)})" if d else t

        out = [self.title]
        if transpose:
            g = self.groups[0]
            head = [self.group_name or self.column_levels[-1]] + [str(r) for r, _ in g.rows]
            ns = [{c.n for _, cells in g.rows for c in [cells[j]] if c.n is not None} for j in range(len(self.columns))]
            shared_n = all(len(n) <= 1 for n in ns)
            if shared_n:
                head.append("n")
            rows = [head]
            for j, name in enumerate(col_names):
                line = [name] + [cell_text(cells[j], not shared_n) for _, cells in g.rows]
                if shared_n:
                    line.append(str(next(iter(ns[j]))) if ns[j] else "")
                rows.append(line)
            out += align_text(rows)
        else:
            head = [self.row_name] + col_names
            rows: list[list[str]] = []
            starts: dict[int, str] = {}
            for g in self.groups:
                if g.label and len(self.groups) > 1:
                    starts[len(rows)] = g.label
                for row, cells in g.rows:
                    rows.append([str(row)] + [cell_text(c, True) for c in cells])
            lines = align_text([head] + rows)
            out.append(lines[0])
            for i, ln in enumerate(lines[1:]):
                if i in starts:
                    out.append(starts[i])
                out.append(ln)
        out += list(self.notes)
        return "\n".join(out) + "\n"

    def to_markdown(self) -> str:
        """GitHub-flavoured Markdown: group key and row label as leading columns; p and n in the cell."""
        key_names = list(self.groups[0].key) if self.groups else []
        head = [escape_markdown(k) for k in key_names] + [escape_markdown(self.row_name)]
        head += [escape_markdown(self._flat_label(col)) for col in self.columns]
        lines = [f"**{escape_markdown(self.title)}**", "", "| " + " | ".join(head) + " |",
                 "|" + "|".join([":---"] * (len(key_names) + 1) + ["---:"] * len(self.columns)) + "|"]
        for g in self.groups:
            for row, cells in g.rows:
                vals = [escape_markdown(g.key[k]) for k in key_names] + [escape_markdown(row)]
                for c in cells:
                    t = self._value_text(c)
                    t = f"**{t}**" if c.best and t != "\u2014" else t
                    s = self._mark(c)
                    t += escape_markdown(s)
                    d = escape_markdown(self._detail(c, style="md"))
                    if d:
                        t += f" ({d})"
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
                    t = self._value_text(c)
                    if t == "\u2014":
                        vals.append("--")
                        continue
                    t = f"\\textbf{{{t}}}" if c.best else t
                    s = self._mark(c)
                    if s:
                        t += f"$^{{{s}}}$"
                    p = c.value if self.kind == "set" else c.pvalue
                    if self.kind != "pvalue" and p is not None and np.isfinite(p):
                        t += f" {{\\scriptsize[p {escape_latex(fmt_p(p))}]}}"
                    elif c.note:
                        t += f" {{\\scriptsize[{escape_latex(c.note)}]}}"
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
        if x is None or x is pd.NA or x is pd.NaT or (isinstance(x, float | np.floating) and math.isnan(x)):
            return "\u2014"
        if isinstance(x, bool | np.bool_):
            return "yes" if x else "no"
        if isinstance(x, float | np.floating):
            if col in self.pvalue_columns:
                return fmt_p(x) + stars(float(x))
            return fmt_number(x, self.digits)
        if isinstance(x, pd.Timestamp | np.datetime64):
            return str(pd.Timestamp(x).date())
        return str(x)

    def _cells(self) -> list[list[str]]:
        cols = list(self.frame.columns)
        return [[self._cell(c, x) for c, x in zip(cols, row, strict=True)]
                for row in self.frame.itertuples(index=False, name=None)]

    def to_frame(self) -> pd.DataFrame:
        """The frame itself, typed (booleans, floats, integers) as the builder made it."""
        return self.frame

    def to_text(self) -> str:
        """Aligned plain text: the title, the header and one line per row."""
        cols = [str(c) for c in self.frame.columns]
        right = [pd.api.types.is_numeric_dtype(self.frame[c]) and not pd.api.types.is_bool_dtype(self.frame[c])
                 for c in self.frame.columns]
        lines = ([self.title] + align_text([cols] + self._cells(), right=right) if len(self.frame)
                 else [self.title, "(no rows)"])
        return "\n".join(lines + list(self.notes)) + "\n"

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
        atomic_write_bytes(p, text.encode("utf-8"))
        out[f"{table.name}.{ext}"] = p
    p = directory / f"{table.name}.csv"
    atomic_write_bytes(p, csv_safe(table.to_frame()).to_csv(index=False).encode("utf-8"))
    out[f"{table.name}.csv"] = p
    return out


def align_text(rows: list[list[str]], gap: int = 2, right=None) -> list[str]:
    """Rows of text cells as aligned lines; ``right[j]`` right-aligns column j (default: all but the first)."""
    if not rows:
        return []
    n = max(len(r) for r in rows)
    rows = [list(r) + [""] * (n - len(r)) for r in rows]
    widths = [max(len(r[j]) for r in rows) for j in range(n)]
    right = [j > 0 for j in range(n)] if right is None else list(right) + [True] * (n - len(right))
    pad = " " * gap
    return [pad.join(c.rjust(widths[j]) if right[j] else c.ljust(widths[j]) for j, c in enumerate(r)).rstrip()
            for r in rows]
