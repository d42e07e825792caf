"""The review report: the meeting pack, its appendix, and every table as Markdown, LaTeX and CSV.

Both HTML files need nothing but a browser: CSS inline, figures embedded as base64 PNG, no
script, no network; the pack links to the appendix beside it and back. ``report.html`` is the
pack (decision page, the key score table per target, the fan chart, the calibration panel), at
most four A4 pages when printed; ``appendix.html`` holds every other table and figure. Every
colour has a text twin (numbers, ▼/▲ direction markers, stars), and the p-value and the number
of forecasts behind each cell are printed in it.

Layout of ``out_dir``::

    report.html                    the meeting pack
    appendix.html                  everything else
    report.md                      every section in Markdown (tables inline, figures linked)
    tables/<name>.md|.tex|.csv     every table of both pages
    figures/<name>.png             every figure (also embedded in the HTML)
"""

from __future__ import annotations

import base64
import datetime as _dt
import re
from pathlib import Path
from string import Template

from harness.report.escape import escape_html, escape_markdown, slug
from harness.report.inputs import Extras
from harness.report.labels import CAUTION, CAUTION_SHORT
from harness.report.sections import SECTIONS, ReportContext, _variables, manifest_value
from vintages import atomic_write_bytes

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
        self.page = "pack"
        self.tables_on: dict[str, list[str]] = {"pack": [], "appendix": []}

    def table(self, t) -> str:
        t.name = self.names(t.name)
        for k, p in t.write(self.tables_dir).items():
            self.paths[f"tables/{k}"] = p
        self.tables_on[self.page].append(t.name)
        self.markdown.append(t.to_markdown())
        return t.to_html()

    def figure(self, png: bytes | None, stem: str, caption: str, alt: str) -> str:
        if png is None:
            return ""
        name = self.names(slug(stem))
        self.fig_dir.mkdir(parents=True, exist_ok=True)
        p = self.fig_dir / f"{name}.png"
        atomic_write_bytes(p, png)
        self.paths[f"figures/{name}.png"] = p
        self.markdown.append(f"![{escape_markdown(caption)}](figures/{name}.png)\n")
        b64 = base64.b64encode(png).decode("ascii")
        return (f'<figure id="fig-{escape_html(name)}"><img src="data:image/png;base64,{b64}" '
                f'alt="{escape_html(alt)}"><figcaption>{escape_html(caption)}</figcaption></figure>')


def _section(sid: str, title: str, body: str) -> str:
    return f'<section id="{sid}">\n<h2>{escape_html(title)}</h2>\n{body}\n</section>'


def _check_self_contained(page: str, name: str) -> None:
    # Defence in depth: the page must not reach out to the network.
    # Data text is escaped (no "<" survives), so only the page's own tags can match.
    if re.search(r"""<[^>]*\s(?:src|href)\s*=\s*["']?\s*(?:https?:)?//""", page, flags=re.I):
        raise RuntimeError(f"build_report: {name} references an external resource; expected a "
                           "self-contained file (images as data: URIs)")


def _facts(ev) -> str:
    origins = manifest_value(ev, "origins") or []
    span = f"{len(origins)} origins, {origins[0]} to {origins[-1]}" if origins else ""
    return " · ".join(x for x in (f"incumbent {ev.benchmark}", f"truth '{ev.truth}'", "score CRPS", span) if x)


def build_report(evaluation, out_dir, *, sensitivity=None, ledger=None, fan_truths: dict | None = None,
                 since=None, title: str | None = None, verdicts=None, extras: Extras | None = None,
                 diagnostics=None, progress=None) -> dict[str, Path]:
    """Write the review report (pack and appendix) for one evaluated run.

    Parameters
    ----------
    evaluation : harness.evaluation.Evaluation
        The run scored under one truth.
    out_dir : path-like
        Created if needed; receives ``report.html``, ``appendix.html``, ``report.md``,
        ``tables/`` and ``figures/``.
    sensitivity : harness.evaluation.sensitivity.Sensitivity, optional
        Truth and data sensitivity tables; without it the section says it was not run.
    ledger : harness.backtest.Ledger, optional
        The run's draws, for the fan chart, past bands and nowcast paths.
    fan_truths : dict of str to Evaluation, optional
        Outcomes drawn on the charts; ``"latest"`` gives the outcomes published since the last
        origin on the fan chart (default the evaluation's own truth).
    verdicts : harness.verdicts.Verdicts, optional
        The decision table (default: decided here from the evaluation, sensitivity and since).
    since : harness.evaluation.Evaluation, optional
        The evaluation shown at the last review; adds the change column and "What changed".
    title : str, optional
        Page title (default from the run's name).
    extras : harness.report.inputs.Extras, optional
        History at the latest origin, revision statistics, news, pool weights, diagnostics
        (:func:`harness.report.inputs.gather_extras` reads them from a run).
    diagnostics : DataFrame, optional
        Model diagnostics ``model, origin, name, value`` (overrides ``extras.diagnostics``).
    progress : object, optional
        Told of each section written (``start()``, ``update(ok)``, ``close()``; e.g.
        :class:`harness.ui.Progress`).

    Returns
    -------
    dict of str to Path
        ``"report.html"``, ``"appendix.html"``, ``"report.md"`` and every ``"tables/<file>"`` and
        ``"figures/<file>"`` written.
    """
    from harness.report.inputs import check_diagnostics

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    rep = ReportWriter(out)
    ev = evaluation
    variables = _variables(ev)
    extras = extras if extras is not None else Extras()
    if diagnostics is not None:
        extras.diagnostics = check_diagnostics(diagnostics)
    title = title or f"Model review: {manifest_value(ev, 'name') or ev.run_dir}"
    if verdicts is None:
        from harness.verdicts import decide

        verdicts = decide(ev, sensitivity=sensitivity, since=since)
    ctx = ReportContext(rep, ev, variables, ledger, fan_truths, sensitivity, since, verdicts, extras)
    todo = [s for s in SECTIONS if s.include(ctx)]
    if progress is not None:
        progress.total = len(todo)
        progress.start()
    built = {"pack": [], "appendix": []}
    md = [f"# {escape_markdown(title)}", "", escape_markdown(_facts(ev)), "", escape_markdown(CAUTION_SHORT), ""]
    for sec in todo:
        rep.markdown = []
        rep.page = sec.page
        body = sec.build(ctx)
        built[sec.page].append((sec.id, sec.title, body))
        md += [f"## {escape_markdown(sec.title)}", ""] + rep.markdown
        if progress is not None:
            progress.update(True)
    if progress is not None:
        progress.close()
    now = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    css = (_TEMPLATE_DIR / "report.css").read_text(encoding="utf-8")
    facts = escape_html(_facts(ev) + f" · generated {now}")
    pages = {}
    for page, fname, other, other_label in (("pack", "report.html", "appendix.html", "appendix"),
                                            ("appendix", "appendix.html", "report.html", "the meeting pack")):
        nav = "".join(f'<li><a href="#{sid}">{escape_html(t)}</a></li>' for sid, t, _ in built[page])
        text = _template(f"{page}.html").substitute(
            title=escape_html(title if page == "pack" else f"Appendix — {title}"),
            css=css, facts=facts, caution=escape_html(CAUTION_SHORT), caution_full=escape_html(CAUTION),
            other=other, other_label=escape_html(other_label), nav=nav,
            sections="\n".join(_section(sid, t, body) for sid, t, body in built[page]))
        _check_self_contained(text, fname)
        p = out / fname
        atomic_write_bytes(p, text.encode("utf-8"))
        pages[fname] = p
    atomic_write_bytes(out / "report.md", ("\n".join(md) + "\n").encode("utf-8"))
    return {**pages, "report.md": out / "report.md", **rep.paths}
