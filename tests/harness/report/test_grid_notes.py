"""A ratio cell whose test was not run (fewer forecasts than the test's rule) says "n too small" in
every rendering and carries no significance mark (the rule of the verdicts issue; common practice:
an untested difference is not starred)."""

from __future__ import annotations

from harness.report.grid import Cell, GridTable, RowGroup


def _table() -> GridTable:
    rows = [("rw", [Cell(1.0, 12)]),
            ("ar", [Cell(0.71, 12, None, note="n too small")]),
            ("bvar", [Cell(0.80, 40, 0.004)])]
    return GridTable("t", "Ratio", [("crps",)], ("score",), "model", [RowGroup("h = 6", {"horizon": 6}, rows)])


def test_every_rendering_says_n_too_small_and_marks_only_the_tested_cell():
    t = _table()
    html, text, md, tex = t.to_html(), t.to_text(), t.to_markdown(), t.to_latex()
    for out in (html, text, md, tex):
        assert "n too small" in out
    frame = t.to_frame().set_index("model")
    assert frame.loc["ar", "note"] == "n too small" and frame.loc["ar", "mark"] == ""
    assert frame.loc["bvar", "mark"] != "" and frame.loc["bvar", "note"] == ""
