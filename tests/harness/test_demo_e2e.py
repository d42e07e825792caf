"""The demo end to end in a reduced size: every stage runs and every promised file is written."""

from __future__ import annotations

import re

import pytest

from harness.demo import run_pipeline, write_demo_data


@pytest.mark.slow
def test_reduced_demo_writes_every_file(tmp_path):
    """Invented economy → store → spec → run → scores → sensitivity → report, on few origins and draws."""
    spec = write_demo_data(tmp_path, small=True)
    text = spec.read_text()
    text = text.replace('start = "2016-01-01"', 'start = "2023-01-01"').replace("draws = 400", "draws = 100")
    text = re.sub(r"n_iter = \d+\nburn = \d+", "n_iter = 200\nburn = 100", text)
    spec.write_text(text)
    lines = []
    paths = run_pipeline(spec, tmp_path, jobs=2, echo=lines.append)
    run = paths["run"]
    from harness.backtest.manifest import RunManifest

    man = RunManifest.read(run)
    for f in (man.ledger, man.provenance, "run.json", "spec.toml"):
        assert (run / f).is_file(), f
    for f in ("forecast_scores.csv", "table.csv", "relative.csv", "tests.csv", "mcs.csv", "calibration.csv"):
        assert (run / "scores" / f).is_file(), f
    for f in ("sensitivity_truths.csv", "sensitivity_data.csv", "revision_exposure.csv", "sensitivity_verdicts.csv"):
        assert (run / "sensitivity" / f).is_file(), f
    report = paths["report"]
    html = report.read_text()
    assert report.name == "report.html" and "<section id=\"caution\"" in html
    tables = list((report.parent / "tables").glob("*"))
    assert {p.suffix for p in tables} >= {".md", ".tex", ".csv"}
    assert list((report.parent / "figures").glob("*.png"))
    _pack_pages_at_most_four(report, tmp_path)
    # the terminal summary gives a plain verdict for every candidate model (not the benchmark)
    summary = "\n".join(lines)
    for model in ("ar", "bvar", "bvar_sv"):
        assert re.search(rf"^- {model}: beats rw under every truth in \d+ of \d+ cells", summary, flags=re.M), model
    assert not re.search(r"^- rw: ", summary, flags=re.M)


def _pack_pages_at_most_four(report, tmp_path):
    """The demo's own pack (its full set of candidates) prints to at most four A4 pages in Chromium."""
    import shutil
    import subprocess

    chromium = shutil.which("chromium")
    if chromium is None:
        return  # CI installs it; the browser tests say so when it is missing
    pdf = tmp_path / "pack.pdf"
    subprocess.run([chromium, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                    "--disable-background-networking", "--disable-component-update", "--disable-sync",
                    f"--user-data-dir={tmp_path / 'profile'}", "--no-pdf-header-footer", f"--print-to-pdf={pdf}",
                    report.resolve().as_uri()], capture_output=True, timeout=120)
    # page objects are "/Type /Page" (ISO 32000-1, sect. 7.7.3.3); "/Pages" is the tree node
    n = len(re.findall(rb"/Type\s*/Page(?!s)", pdf.read_bytes()))
    assert 1 <= n <= 4, n
