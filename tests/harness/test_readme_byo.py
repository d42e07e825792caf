"""The README's bring-your-own-model example passes the contract checks and runs from a spec as a file path."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from harness.backtest import read_ledger, run
from harness.spec import load_spec
from harness.testing import check_model
from tests.harness.conftest import write_spec

README = Path(__file__).resolve().parents[2] / "README.md"


def _example() -> str:
    text = README.read_text()
    section = text[text.index("## Bring your own model"):text.index("## Exit codes")]
    blocks = re.findall(r"```python\n(.*?)```", section, flags=re.S)
    assert len(blocks) == 1
    return blocks[0]


def test_the_readme_model_passes_check_model(tmp_path, monkeypatch):
    """Saved as a module, as a user would (a class defined in exec'd text would not pickle)."""
    import importlib

    (tmp_path / "naive_drift_readme.py").write_text(_example())
    monkeypatch.syspath_prepend(str(tmp_path))
    report = check_model(importlib.import_module("naive_drift_readme").NaiveDrift())
    assert report.ok, str(report)


def test_the_readme_model_runs_from_a_spec_by_file_path(tmp_path, small_store):
    """``type = "models/naive_drift.py:NaiveDrift"`` resolves relative to the spec: every task of
    the file's model succeeds and stores finite draws (its statistics are check_model's business,
    above)."""
    (tmp_path / "models").mkdir()
    (tmp_path / "models" / "naive_drift.py").write_text(_example())
    extra = '[models.drift]\ntype = "models/naive_drift.py:NaiveDrift"\n'
    spec = load_spec(write_spec(tmp_path, small_store, tmp_path / "run", extra))
    res = run(spec, jobs=1, progress=False)
    assert not res.failed, res.failed
    draws = read_ledger(res.run_dir).draws.sel(model="drift")
    assert np.isfinite(draws.values).any()
