"""CSV written for spreadsheets never starts a text cell with a formula trigger (common practice, OWASP)."""

from __future__ import annotations

import pandas as pd

from harness.csvsafe import neutralise, write_csv


def test_text_cells_that_would_run_as_formulas_are_quoted(tmp_path):
    """'=HYPERLINK(…)', '+1', '-x', '@SUM' become text; numbers, including negative ones, are untouched."""
    f = pd.DataFrame({"model": ["=HYPERLINK(\"http://x\")", "+cmd", "-x", "@SUM(A1)", "ar"],
                      "ratio": [-0.5, 1.0, 2.0, 0.9, 1.1]})
    out = neutralise(f)
    assert list(out["model"]) == ["'=HYPERLINK(\"http://x\")", "'+cmd", "'-x", "'@SUM(A1)", "ar"]
    assert list(out["ratio"]) == [-0.5, 1.0, 2.0, 0.9, 1.1]
    p = write_csv(f, tmp_path / "t.csv")
    back = pd.read_csv(p)
    assert back["ratio"].tolist() == [-0.5, 1.0, 2.0, 0.9, 1.1]
    assert all(not str(x).startswith(("=", "+", "-", "@")) for x in back["model"])
