"""The decision page: the verdicts table as the meeting reads it (HTML, Markdown, LaTeX, text, typed CSV).

One row per candidate × target variable × horizon band against the incumbent, read from
:class:`harness.verdicts.Verdicts`: the CRPS ratio with its p-value and n, in or out of the best
set (model confidence set), the calibration flag, whether it beats the incumbent under every
other truth, the change since the last review, and the verdict word followed by the verdict's own
reasons. Nothing here decides anything: every cell is a column of ``Verdicts.table`` or a claim
behind it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from harness.report.escape import escape_html, escape_latex, escape_markdown, fmt_number, fmt_p
from harness.report.grid import _write_all, align_text

#: the typed columns of ``decision.csv`` (from ``Verdicts.table`` and its claims), in order
COLUMNS = ("variable", "band", "model", "ratio", "pvalue", "n", "test_note", "in_best_set", "mcs_pvalue",
           "calibration", "calibration_p", "truths_beaten", "truths", "beats_every_truth", "leader_stable",
           "change", "verdict", "reasons")

#: the columns the page shows, with their headings
SHOWN = (("band", "band"), ("model", "candidate"), ("ratio", "CRPS ratio"), ("test", "p (n)"),
         ("best", "best set"), ("calibration", "calibration"), ("truths", "other truths"),
         ("change", "change"), ("verdict", "verdict \u2014 reasons"))


def decision_frame(verdicts, variables=None) -> pd.DataFrame:
    """The decision table, typed: floats, nullable booleans and integers, text only where it is text.

    ``variables`` orders the rows (e.g. as the spec lists the targets); bands and candidates keep
    the verdict stage's order.
    """
    t = verdicts.table
    if t is None or not len(t):
        return pd.DataFrame({c: pd.Series(dtype=object) for c in COLUMNS})
    t = t.reset_index(drop=True)
    if variables:
        order = {str(v): i for i, v in enumerate(variables)}
        t = t.iloc[sorted(range(len(t)), key=lambda i: (order.get(str(t["variable"].iloc[i]), len(order)), i))]
        t = t.reset_index(drop=True)
    beaten, of = [], []
    for r in t.itertuples(index=False):
        c = {cl.kind: cl for cl in verdicts.claims.get((r.model, r.variable, r.band), ())}
        tb = c.get("truths_beaten")
        beaten.append(int(tb.value["beaten"]) if tb is not None else pd.NA)
        of.append(int(tb.value["of"]) if tb is not None else pd.NA)

    def boolean(col):
        return pd.array([None if x is None or (isinstance(x, float) and np.isnan(x)) else bool(x)
                         for x in t[col].tolist()], dtype="boolean")

    out = pd.DataFrame({
        "variable": t["variable"].astype(str), "band": t["band"].astype(str), "model": t["model"].astype(str),
        "ratio": t["ratio"].astype(float), "pvalue": t["pvalue"].astype(float),
        "n": t["n"].astype("Int64"), "test_note": t["test_note"].astype(str),
        "in_best_set": boolean("in_best_set"),
        "mcs_pvalue": t["mcs_pvalue"].astype(float), "calibration": t["calibration"].astype(str),
        "calibration_p": t["calibration_p"].astype(float),
        "truths_beaten": pd.array(beaten, dtype="Int64"), "truths": pd.array(of, dtype="Int64"),
        "beats_every_truth": boolean("beats_every_truth"), "leader_stable": boolean("leader_stable"),
        "change": pd.to_numeric(t["change"], errors="coerce").astype(float),
        "verdict": t["verdict"].astype(str), "reasons": t["reasons"].astype(str)})
    return out[list(COLUMNS)]


#: reason clauses the HTML table's own columns already show (ratio, p and n, best set,
#: calibration passed, truths beaten): left out of its verdict cell so a row stays one line
_SHOWN_IN_COLUMNS = ("CRPS ratio ", "p = ", "p < ", "n too small for a test", "in the ", "not in the ",
                     "calibration not rejected", "beats ")


def cell_reasons(reasons: str) -> str:
    """The reasons minus the clauses the table's columns show (what the row adds in words)."""
    parts = [p for p in str(reasons).split("; ") if p and not p.startswith(_SHOWN_IN_COLUMNS)]
    return "; ".join(parts)


def _na(x) -> bool:
    return x is None or x is pd.NA or (isinstance(x, float | np.floating) and not np.isfinite(x))


def cell_texts(r) -> dict[str, str]:
    """The shown text of each column for one row of :func:`decision_frame` (plain text, unescaped)."""
    note = str(r["test_note"])
    if note.startswith("n too small"):
        test = f"n too small (n {r['n']})"
    elif _na(r["pvalue"]) or note == "no test":
        test = "not tested"
    else:
        test = f"p {fmt_p(r['pvalue'])} (n {r['n']})"
    best = "\u2014" if _na(r["in_best_set"]) else ("in" if r["in_best_set"] else "out")
    if _na(r["truths"]):
        truths = "not checked"
    else:
        truths = f"beats in {r['truths_beaten']}/{r['truths']}"
        if not _na(r["leader_stable"]) and not r["leader_stable"]:
            truths += "; leader changes"
    change = "\u2014" if _na(r["change"]) else f"{float(r['change']):+.2f}"
    return {"band": str(r["band"]), "model": str(r["model"]), "ratio": fmt_number(r["ratio"], 2), "test": test,
            "best": best, "calibration": str(r["calibration"]), "truths": truths, "change": change,
            "word": str(r["verdict"]), "reasons": str(r["reasons"])}


@dataclass
class DecisionTable:
    """The decision table in every format; ``frame`` is what ``decision.csv`` holds (typed)."""

    frame: pd.DataFrame
    benchmark: str
    truth: str
    score: str = "crps"
    name: str = "decision"
    notes: list[str] = field(default_factory=list)
    since: bool = False

    @classmethod
    def from_verdicts(cls, verdicts, *, since: bool = False, variables=None) -> DecisionTable:
        """The table of a :class:`harness.verdicts.Verdicts` (``since``: show the change column)."""
        return cls(decision_frame(verdicts, variables), verdicts.benchmark, verdicts.truth, verdicts.score,
                   notes=list(verdicts.notes), since=since)

    @property
    def title(self) -> str:
        return (f"Decision table: every candidate against the incumbent {self.benchmark} "
                f"({self.score.upper()}, truth '{self.truth}')")

    def to_frame(self) -> pd.DataFrame:
        return self.frame

    def _shown(self) -> list[tuple[str, str]]:
        return [(k, lab) for k, lab in SHOWN if k != "change" or self.since]

    def to_html(self) -> str:
        e = escape_html
        shown = self._shown()
        # longer tables print denser so that the decision page stays one page
        n = len(self.frame)
        density = " dense" if 18 < n <= 30 else " denser" if n > 30 else ""
        parts = [f'<div class="wrap"><table id="{e(self.name)}" class="decision{density}">',
                 f"<caption>{e(self.title)}</caption>", "<thead><tr>"
                 + "".join(f'<th scope="col" class="c-{k}">{e(lab)}</th>' for k, lab in shown) + "</tr></thead>"]
        if not len(self.frame):
            parts.append(f'<tbody><tr><td colspan="{len(shown)}">No candidate has scored forecasts yet.'
                         "</td></tr></tbody>")
        for var, g in self.frame.groupby("variable", sort=False):
            parts.append(f'<tbody><tr class="group"><th colspan="{len(shown)}" scope="rowgroup">'
                         f"{e(var)}</th></tr>")
            for _, r in g.iterrows():
                t = cell_texts(r)
                tds = []
                for k, _lab in shown:
                    if k == "verdict":
                        cls = {"better": "v-better", "worse": "v-worse"}.get(t["word"], "v-none")
                        # the full reasons in the tooltip, the clauses the columns do not show in print
                        tds.append(f'<td class="c-verdict" title="{e(t["reasons"])}"><span class="verdict {cls}">'
                                   f'{e(t["word"])}</span> <span class="reasons">{e(cell_reasons(t["reasons"]))}'
                                   "</span></td>")
                    elif k == "truths":
                        # break between the clauses only, never inside one
                        tds.append(f'<td class="c-{k}">' + "; ".join(f'<span class="nw">{e(x)}</span>'
                                                                    for x in t[k].split("; ")) + "</td>")
                    else:
                        tds.append(f'<td class="c-{k}">{e(t[k])}</td>')
                parts.append("<tr>" + "".join(tds) + "</tr>")
            parts.append("</tbody>")
        parts.append("</table></div>")
        if self.notes:
            parts.append('<p class="note">' + "<br>".join(e(n) for n in self.notes) + "</p>")
        return "\n".join(parts)

    def to_markdown(self) -> str:
        shown = [("variable", "variable")] + self._shown()
        lines = [f"**{escape_markdown(self.title)}**", "",
                 "| " + " | ".join(escape_markdown(lab) for _, lab in shown) + " |",
                 "|" + "|".join("---" for _ in shown) + "|"]
        for _, r in self.frame.iterrows():
            t = dict(cell_texts(r), variable=str(r["variable"]))
            vals = [escape_markdown(t[k]) for k, _ in shown[:-1]]
            vals.append(f"**{escape_markdown(t['word'])}** \u2014 {escape_markdown(t['reasons'])}")
            lines.append("| " + " | ".join(vals) + " |")
        lines += [""] + [escape_markdown(n) for n in self.notes]
        return "\n".join(lines) + "\n"

    def to_latex(self) -> str:
        shown = [("variable", "variable")] + self._shown()
        spec = "l" * (len(shown) - 1) + "p{7cm}"
        lines = [f"% {escape_latex(self.title)}", f"\\begin{{tabular}}{{{spec}}}", "\\toprule",
                 " & ".join(escape_latex(lab) for _, lab in shown) + r" \\", "\\midrule"]
        for _, r in self.frame.iterrows():
            t = dict(cell_texts(r), variable=str(r["variable"]))
            vals = [escape_latex(t[k]) for k, _ in shown[:-1]]
            vals.append(f"\\textbf{{{escape_latex(t['word'])}}} \\textemdash{{}} {escape_latex(t['reasons'])}")
            lines.append(" & ".join(vals) + r" \\")
        lines += ["\\bottomrule", "\\end{tabular}"] + [f"% {escape_latex(n)}" for n in self.notes]
        return "\n".join(lines) + "\n"

    def to_text(self) -> str:
        """Aligned text: one line per candidate and band, grouped by variable; the reasons indented below."""
        if not len(self.frame):
            return self.title + "\nNo candidate has scored forecasts yet.\n"
        shown = [(k, lab) for k, lab in self._shown() if k != "verdict"]
        out = [self.title, "verdicts: better / no evidence / worse; the reasons follow each row", ""]
        for var, g in self.frame.groupby("variable", sort=False):
            rows = [[lab for _, lab in shown] + ["verdict"]]
            reasons = []
            for _, r in g.iterrows():
                t = cell_texts(r)
                rows.append([t[k] for k, _ in shown] + [t["word"]])
                reasons.append(t["reasons"])
            lines = align_text(rows)
            out.append(str(var))
            out.append("  " + lines[0])
            for ln, why in zip(lines[1:], reasons, strict=True):
                out.append("  " + ln)
                out.append("      " + why)
            out.append("")
        return "\n".join(out)

    def write(self, directory: Path) -> dict[str, Path]:
        return _write_all(self, directory)
