"""Every command of the README's tutorial runs, in order, on the demo's data with a reduced spec."""

from __future__ import annotations

import os
import re
import shlex
import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[3]


def tutorial_commands(readme: Path = ROOT / "README.md") -> list[str]:
    """The lines of the bash blocks of the README's "Tutorial" section, in order."""
    text = readme.read_text(encoding="utf-8")
    m = re.search(r"^## Tutorial\n(.*?)^## ", text, flags=re.S | re.M)
    assert m, "README.md has no '## Tutorial' section"
    blocks = re.findall(r"```bash\n(.*?)```", m.group(1), flags=re.S)
    return [ln for b in blocks for ln in b.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]


def reduce_spec(path: Path) -> None:
    """Fewer origins, draws and horizons, no stochastic-volatility model: the same commands in seconds."""
    s = path.read_text()
    s = re.sub(r'start = "\d{4}-\d{2}-\d{2}"', 'start = "2025-01-01"', s)
    s = re.sub(r"draws = \d+", "draws = 100", s)
    s = re.sub(r"horizons = \{ min = 0, max = \d+ \}", "horizons = { min = 0, max = 2 }", s)
    s = re.sub(r"\[models\.bvar_sv\].*?(?=\[scoring\])", "", s, flags=re.S)
    path.write_text(s)


def test_the_tutorial_reads_as_commands():
    """The tutorial has the workflow's commands, each a harness command or a copy, in the documented order."""
    cmds = tutorial_commands()
    firsts = [c.split()[0] for c in cmds]
    assert set(firsts) <= {"vintage-harness", "cp"}
    order = ["vintage-harness demo", "vintage-harness vintages init", "vintage-harness run", "vintage-harness score", "vintage-harness sensitivity",
             "vintage-harness report"]
    pos = [next(i for i, c in enumerate(cmds) if c.startswith(o)) for o in order]
    assert pos == sorted(pos)
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    for png in re.findall(r"\]\((reports/[^)]+\.png)\)", text):
        assert (ROOT / png).is_file(), png  # every screenshot the README shows is in the repository


@pytest.mark.slow
def test_every_tutorial_command_runs(tmp_path, monkeypatch):
    """Each tutorial line exits 0 in an empty directory (demo data, reduced spec); the promised files exist."""
    from typer.testing import CliRunner

    from harness.cli import app

    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("PYTHONPATH", os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]))
    runner = CliRunner()
    for cmd in tutorial_commands():
        words = shlex.split(cmd, comments=True)
        if words[0] == "vintage-harness":  # in-process: the same typer app the console script runs
            r = runner.invoke(app, words[1:])
            assert r.exit_code == 0, f"{cmd}\n{r.output[-3000:]}\n{r.exception!r}"
            out = r.stdout
        else:
            p = subprocess.run(words, capture_output=True, text=True, timeout=120, check=False)
            assert p.returncode == 0, f"{cmd}\n{p.stderr[-2000:]}"
            out = p.stdout
        if "--data-only" in cmd:
            reduce_spec(tmp_path / "mydemo" / "spec.toml")
        if cmd.startswith("vintage-harness vintages revisions"):
            assert "news" in out and "noise" in out
    for f in ("mystore/manifest.json", "asof.csv", "scores.csv", "scores/forecast_scores.csv",
              "mydemo/run/report/report.html", "mydemo/run/report/appendix.html", "mydemo/run/sensitivity",
              "mydemo/last-review/run.json"):
        assert (tmp_path / f).exists(), f
    appendix = (tmp_path / "mydemo/run/report/appendix.html").read_text(encoding="utf-8")
    assert '<section id="changes">' in appendix  # --since added the change since the last review
    assert not (tmp_path / "mydemo" / "report").exists()  # one report per run, in RUN/report
