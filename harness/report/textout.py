"""Tables for the terminal and for files: one call renders text, Markdown, LaTeX, CSV or Parquet.

Every table command (``score``, ``sensitivity``, ``vintages info|asof|revisions``) hands its
tables (:class:`harness.report.grid.GridTable`, :class:`~harness.report.grid.FrameTable`,
:class:`harness.report.decision.DecisionTable`) to :func:`emit`, so a number has the same label
and digits in the terminal as in the report. Text, Markdown and LaTeX carry the caution; CSV and
Parquet are data (typed columns, text cells neutralised against spreadsheet formulas) and the
caution goes to standard error instead. Files are written atomically: a failed write leaves no
half-written file.
"""

from __future__ import annotations

import io
import sys
from pathlib import Path

import pandas as pd

from harness.errors import OptionError
from harness.report.escape import csv_safe, escape_latex, escape_markdown
from harness.report.grid import FrameTable
from harness.report.labels import CAUTION_SHORT

FORMATS: tuple[str, ...] = ("text", "md", "tex", "csv", "parquet")
_SUFFIX = {".md": "md", ".markdown": "md", ".tex": "tex", ".csv": "csv", ".parquet": "parquet", ".pq": "parquet",
           ".txt": "text"}


class FormatError(OptionError):
    """An output format that is unknown or cannot go where it was asked to (Parquet to a terminal);
    a usage error (exit 2)."""


def resolve_format(fmt: str | None, out: Path | None) -> str:
    """The format asked for, else the one ``out``'s suffix names, else ``text``; ``table`` means ``text``.

    Raises
    ------
    FormatError
        An unknown format, or Parquet without a file.
    """
    suffix = Path(out).suffix.lower() if out else ""
    if not (fmt or "").strip() and suffix and suffix not in _SUFFIX:
        raise FormatError(f"--out {out}: unknown suffix {suffix!r}; use one of "
                          f"{', '.join(sorted(_SUFFIX))} or name the format with --format")
    f = (fmt or "").strip().lower() or (_SUFFIX.get(suffix, "text") if out else "text")
    f = "text" if f == "table" else f
    if f not in FORMATS:
        raise FormatError(f"unknown format {fmt!r}; expected one of {', '.join(sorted(FORMATS))}")
    if f == "parquet" and out is None:
        raise FormatError("parquet is written to a file only: add --out FILE.parquet")
    return f


class Lines:
    """Plain lines placed among the tables (a heading, a note); no data in CSV or Parquet."""

    def __init__(self, *lines: str):
        self.lines = [str(x) for x in lines]

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame()

    def to_text(self) -> str:
        return "\n".join(self.lines) + "\n"

    def to_markdown(self) -> str:
        return "\n\n".join(escape_markdown(x) for x in self.lines) + "\n"

    def to_latex(self) -> str:
        return "\n".join(f"% {escape_latex(x)}" for x in self.lines) + "\n"


def frame_table(df: pd.DataFrame, title: str, *, name: str = "table", notes=(), digits: int = 3,
                pvalue_columns=()) -> FrameTable:
    """A DataFrame as a table for :func:`emit`."""
    return FrameTable(name, title, df.reset_index(drop=True), digits=digits, notes=list(notes),
                      pvalue_columns=tuple(pvalue_columns))


def tidy(tables) -> pd.DataFrame:
    """The tables' typed frames stacked (CSV and Parquet hold one table)."""
    frames = [t.to_frame() for t in tables if t is not None]
    frames = [f for f in frames if len(f.columns)]
    if not frames:
        return pd.DataFrame()
    return pd.concat(frames, ignore_index=True) if len(frames) > 1 else frames[0].reset_index(drop=True)


def render(tables, fmt: str, *, caution: bool = True, extra_lines=()) -> str:
    """Text, Markdown, LaTeX or CSV of ``tables`` (``extra_lines``: plain lines after them, text/md only)."""
    tables = [t for t in tables if t is not None]
    if fmt == "csv":
        return csv_safe(tidy(tables)).to_csv(index=False)
    if fmt == "md":
        parts = [t.to_markdown() for t in tables] + [escape_markdown(x) + "\n" for x in extra_lines]
        return "\n".join(parts + ([f"*{escape_markdown(CAUTION_SHORT)}*\n"] if caution else []))
    if fmt == "tex":
        parts = [t.to_latex() for t in tables]
        return "\n".join(parts + ([f"% {escape_latex(CAUTION_SHORT)}\n"] if caution else []))
    if fmt == "text":
        parts = [t.to_text() for t in tables] + [str(x) for x in extra_lines]
        return "\n".join(parts + ([CAUTION_SHORT] if caution else [])) + "\n"
    raise FormatError(f"render: format {fmt!r} is not text; expected one of csv, md, tex, text")


def _atomic_write(path: Path, data: bytes) -> None:
    """The project's one atomic write (temporary file, fsync, rename), creating the folder."""
    from vintages import atomic_write_bytes

    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_bytes(path, data)


def emit(tables, fmt: str | None = None, out: Path | None = None, *, stdout=None, stderr=None,
         extra_lines=(), caution: bool = True) -> tuple[str, Path | None]:
    """Render ``tables`` in ``fmt`` to ``out`` (a file, atomically) or to standard output.

    ``caution``: tables of backtest results carry the caution (in the text; on standard error
    for CSV and Parquet); tables describing the data (the vintage store) do not need it.

    Returns
    -------
    (str, Path or None)
        The format used and the file written.
    """
    stdout = stdout or sys.stdout
    stderr = stderr or sys.stderr
    f = resolve_format(fmt, out)
    tables = [t for t in tables if t is not None]
    if f in ("csv", "parquet") and caution:
        stderr.write(CAUTION_SHORT + "\n")
    if f == "parquet":
        buf = io.BytesIO()
        tidy(tables).to_parquet(buf, index=False)
        _atomic_write(out, buf.getvalue())
        return f, Path(out)
    text = render(tables, f, extra_lines=extra_lines, caution=caution)
    if out is not None:
        _atomic_write(out, text.encode("utf-8"))
        return f, Path(out)
    stdout.write(text)
    stdout.flush()
    return f, None
