"""Escaping of data text for HTML, LaTeX and Markdown, number formatting and file-safe names."""

from __future__ import annotations

import html
import math
import re

import pandas as pd


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


def fmt_p(p) -> str:
    """A p-value as printed in cells: ``0.004``, ``<0.001`` (three decimals; NaN as an em dash)."""
    try:
        pf = float(p)
    except (TypeError, ValueError):
        return "\u2014"
    if not math.isfinite(pf):
        return "\u2014"
    return "<0.001" if pf < 0.001 else f"{pf:.3f}"


def slug(*parts) -> str:
    """A file-safe name built from parts (characters outside ``[A-Za-z0-9_.-]`` become ``-``)."""
    s = "_".join(str(p) for p in parts)
    return re.sub(r"[^A-Za-z0-9_.-]+", "-", s).strip("-") or "table"


# Characters a spreadsheet may read as the start of a formula (OWASP, "CSV Injection": = + - @,
# and tab / carriage return): common practice is to prefix such text cells with a quote.
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def csv_safe_text(x):
    """Text that a spreadsheet would read as a formula gets a leading ``'``; anything else is unchanged."""
    if isinstance(x, str) and x.startswith(_FORMULA_START):
        return "'" + x
    return x


def csv_safe(df: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``df`` whose text cells cannot start a spreadsheet formula (numbers stay numbers).

    Only object and string columns are touched: a float ``-0.5`` stays a number, a model named
    ``=cmd()`` becomes the text ``'=cmd()``. Column names are neutralised the same way.

    Examples
    --------
    >>> csv_safe(pd.DataFrame({"m": ["=1+1", "ar"], "v": [-0.5, 1.0]})).to_dict("list")
    {'m': ["'=1+1", 'ar'], 'v': [-0.5, 1.0]}
    """
    out = df.copy()
    for c in out.columns:
        col = out[c]
        if col.dtype == object or pd.api.types.is_string_dtype(col.dtype):
            vals = col.tolist()
            if any(isinstance(x, str) and x.startswith(_FORMULA_START) for x in vals):
                out[c] = pd.Series([csv_safe_text(x) for x in vals], index=col.index, dtype=object)
    out.columns = [csv_safe_text(str(c)) if isinstance(c, str) else c for c in out.columns]
    return out
