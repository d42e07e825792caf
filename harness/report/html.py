"""The review report: one self-contained HTML file plus every table as Markdown, LaTeX and CSV.

The HTML needs nothing but a browser: CSS inline, figures embedded as base64 PNG, no script, no
network. It prints: each section starts a new page, colours are kept, every colour has a text
twin (numbers, ▼/▲ direction markers, stars), and the number of forecasts behind each cell is
printed under it.

Layout of ``out_dir``::

    report.html
    report.md                      the same sections in Markdown (tables inline, figures linked)
    tables/<name>.md|.tex|.csv     every table of the report
    figures/<name>.png             every figure of the report (also embedded in the HTML)
"""

from __future__ import annotations

import base64
import datetime as _dt
import re
from pathlib import Path
from string import Template

from harness.report.escape import escape_html, escape_markdown, slug
from harness.report.grid import FrameTable, GridTable
from harness.report.sections import SECTIONS, ReportContext, _variables, manifest_value

_TEMPLATE_DIR = Path(__file__).with_name("templates")


def _template(name: str) -> Template:
    return Template((_TEMPLATE_DIR / name).read_text(encoding="utf-8"))


class _Names:
    """Unique file stems / HTML ids (two variables may slug to the same text)."""

    def __init__(self):
        self.used: set[str] = set()

    def __call__(self, stem: str) -> str:
        s, k = stem, 2
        while s in self.used:
            s, k = f"{stem}-{k}", k + 1
        self.used.add(s)
        return s


class ReportWriter:
    """Writes tables and figures under the output directory and keeps them per section for the Markdown."""

    def __init__(self, out_dir: Path):
        self.out = Path(out_dir)
        self.tables_dir = self.out / "tables"
        self.fig_dir = self.out / "figures"
        self.paths: dict[str, Path] = {}
        self.names = _Names()
        self.markdown: list[str] = []  # the current section's Markdown blocks

    def table(self, t: GridTable | FrameTable) -> str:
        t.name = self.names(t.name)
        for k, p in t.write(self.tables_dir).items():
            self.paths[f"tables/{k}"] = p
        self.markdown.append(t.to_markdown())
        return t.to_html()

    def figure(self, png: bytes | None, stem: str, caption: str, alt: str) -> str:
        if png is None:
            return ""
        name = self.names(slug(stem))
        self.fig_dir.mkdir(parents=True, exist_ok=True)
        p = self.fig_dir / f"{name}.png"
        p.write_bytes(png)
        self.paths[f"figures/{name}.png"] = p
        self.markdown.append(f"![{escape_markdown(caption)}](figures/{name}.png)\n")
        b64 = base64.b64encode(png).decode("ascii")
        return (f'<figure id="fig-{escape_html(name)}"><img src="data:image/png;base64,{b64}" '
                f'alt="{escape_html(alt)}"><figcaption>{escape_html(caption)}</figcaption></figure>')




def _section(sid: str, title: str, body: str) -> str:
    return f'<section id="{sid}">\n<h2>{escape_html(title)}</h2>\n{body}\n</section>'


def build_report(evaluation, out_dir, *, sensitivity=None, ledger=None, fan_truths: dict | None = None,
                 since=None, title: str | None = None, verdicts=None) -> dict[str, Path]:
    """Write the review report for one evaluated run.

    Parameters
    ----------
    evaluation : harness.evaluation.Evaluation
        The run scored under one truth.
    out_dir : path-like
        Created if needed; receives ``report.html``, ``tables/`` and ``figures/``.
    sensitivity : harness.evaluation.sensitivity.Sensitivity, optional
        Truth and data sensitivity tables; without it the section says it was not run.
    ledger : harness.backtest.Ledger, optional
        The run's draws, for the fan charts.
    fan_truths : dict of str to Evaluation, optional
        Outcomes drawn on the fan charts (e.g. ``{"first": ev_first, "latest": ev_latest}``);
        default the evaluation's own truth.
    verdicts : harness.verdicts.Verdicts, optional
        The decision table (default: decided here from the evaluation, sensitivity and since).
    since : harness.evaluation.Evaluation, optional
        The evaluation shown at the last review; adds the "What changed" section.
    title : str, optional
        Page title (default from the run's name).

    Returns
    -------
    dict of str to Path
        ``"report.html"`` and every ``"tables/<file>"`` and ``"figures/<file>"`` written.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    rep = ReportWriter(out)
    ev = evaluation
    variables = _variables(ev)
    title = title or f"Model review: {manifest_value(ev, 'name') or ev.run_dir}"
    if verdicts is None:
        from harness.verdicts import decide

        verdicts = decide(ev, sensitivity=sensitivity, since=since)
    ctx = ReportContext(rep, ev, variables, ledger, fan_truths, sensitivity, since, verdicts)
    built, md = [], [f"# {escape_markdown(title)}", ""]
    for sec in SECTIONS:
        if not sec.include(ctx):
            continue
        rep.markdown = []
        body = sec.build(ctx)
        built.append((sec.id, sec.title, body))
        md += [f"## {escape_markdown(sec.title)}", ""] + rep.markdown
    nav = "".join(f'<li><a href="#{sid}">{escape_html(t)}</a></li>' for sid, t, _ in built)
    now = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    page = _template("report.html").substitute(
        title=escape_html(title),
        css=(_TEMPLATE_DIR / "report.css").read_text(encoding="utf-8"),
        subtitle=escape_html(f"Truth: {ev.truth}; benchmark: {ev.benchmark}; generated {now}."),
        nav=nav,
        sections="\n".join(_section(sid, t, body) for sid, t, body in built),
    )
    # Defence in depth: the page must not reach out to the network.
    # Data text is escaped (no "<" survives), so only the page's own tags can match.
    if re.search(r"""<[^>]*\s(?:src|href)\s*=\s*["']?\s*(?:https?:)?//""", page, flags=re.I):
        raise RuntimeError("build_report: the page references an external resource; expected a "
                           "self-contained file (images as data: URIs)")
    p = out / "report.html"
    p.write_text(page, encoding="utf-8")
    (out / "report.md").write_text("\n".join(md) + "\n", encoding="utf-8")
    return {"report.html": p, "report.md": out / "report.md", **rep.paths}
