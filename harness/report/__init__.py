"""The review report: the meeting pack, its appendix, and every table as Markdown, LaTeX and CSV.

Public front: :func:`build_report` writes the report of an evaluated run (``report.html``, the
pack of at most four printed pages, and ``appendix.html``); :func:`make_report` evaluates a run
directory and writes it, showing progress; :func:`changes` lists what changed between two
reviews; :data:`SECTIONS` is the one ordered list of sections both pages follow. Every sentence
of the decision page comes from :mod:`harness.verdicts`.
"""

from __future__ import annotations

from harness.report.changes import changes
from harness.report.html import build_report
from harness.report.inputs import Extras, gather_extras
from harness.report.labels import CAUTION, h_label
from harness.report.make import make_report
from harness.report.sections import SECTION_IDS, SECTIONS, Section, page_ids

__all__ = ["CAUTION", "SECTIONS", "SECTION_IDS", "Extras", "Section", "build_report", "changes",
           "gather_extras", "h_label", "make_report", "page_ids"]
