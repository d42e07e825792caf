"""The review report: the meeting pack, its appendix, and every table as Markdown, LaTeX and CSV.

Public front: :func:`build_report` writes the report of an evaluated run (``report.html``, the
pack of at most four printed pages, and ``appendix.html``); :func:`make_report` evaluates a run
directory and writes it, showing progress; :func:`changes` lists what changed between two
reviews; :data:`SECTIONS` is the one ordered list of sections both pages follow. Every sentence
of the decision page comes from :mod:`harness.verdicts`.
"""

from __future__ import annotations

#: public name -> the module that defines it (loaded on first use, so that importing a light
#: submodule such as :mod:`harness.report.textout` does not load the HTML and figure machinery)
_PUBLIC = {
    "build_report": "harness.report.html",
    "Extras": "harness.report.inputs",
    "gather_extras": "harness.report.inputs",
    "CAUTION": "harness.report.labels",
    "h_label": "harness.report.labels",
    "make_report": "harness.report.make",
    "SECTION_IDS": "harness.report.sections",
    "SECTIONS": "harness.report.sections",
    "Section": "harness.report.sections",
    "page_ids": "harness.report.sections",
}

# eager: the function shares its name with its module, which would otherwise shadow it once
# imported (pandas only)
from harness.report.changes import changes  # noqa: E402, F401

__all__ = sorted([*_PUBLIC, "changes"])


def __getattr__(name: str):
    if name in _PUBLIC:
        import importlib

        value = getattr(importlib.import_module(_PUBLIC[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'harness.report' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_PUBLIC))
