"""The review report: one self-contained HTML file plus every table as Markdown, LaTeX and CSV.

Public front: :func:`build_report` writes the report of an evaluated run; :func:`changes` lists
what changed between two reviews; :func:`headline` gives the plain-words verdict per variable;
:data:`SECTIONS` is the ordered list of sections every output follows.
"""

from __future__ import annotations

from harness.report.changes import changes
from harness.report.headline import headline
from harness.report.html import build_report
from harness.report.sections import CAUTION, SECTION_IDS, SECTIONS, Section

__all__ = ["CAUTION", "SECTIONS", "SECTION_IDS", "Section", "build_report", "changes", "headline"]
