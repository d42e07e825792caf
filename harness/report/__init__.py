"""The review report: one self-contained HTML file plus every table as Markdown, LaTeX and CSV.

Public front: :func:`build_report` writes the report of an evaluated run; :func:`changes` lists
what changed between two reviews; :func:`headline` gives the plain-words verdict per variable.
"""

from __future__ import annotations

from harness.report.changes import changes
from harness.report.html import CAUTION, SECTION_IDS, build_report, headline

__all__ = ["CAUTION", "SECTION_IDS", "build_report", "changes", "headline"]
