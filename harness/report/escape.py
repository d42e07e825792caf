"""Escaping of data text for HTML, LaTeX and Markdown, number formatting and file-safe names."""

from __future__ import annotations

import html
import math
import re


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


def slug(*parts) -> str:
    """A file-safe name built from parts (characters outside ``[A-Za-z0-9_.-]`` become ``-``)."""
    s = "_".join(str(p) for p in parts)
    return re.sub(r"[^A-Za-z0-9_.-]+", "-", s).strip("-") or "table"
