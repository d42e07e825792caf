"""The run manifest is one versioned type; the ledger and its manifest are one unit."""

from __future__ import annotations

import json

import pytest

from harness.backtest import read_ledger, run
from harness.backtest.manifest import FORMAT, RunManifest
from harness.errors import RunError
from harness.spec import load_spec
from tests.harness.conftest import write_spec


@pytest.fixture(scope="module")
def done(tmp_path_factory, small_store):
    d = tmp_path_factory.mktemp("man")
    spec = load_spec(write_spec(d, small_store, d / "run"))
    run(spec, jobs=1, progress=False)
    return spec


def test_run_json_carries_its_format_and_round_trips(done):
    """run.json has a format field and reads back into the same typed manifest."""
    raw = json.loads((done.out / "run.json").read_text())
    assert raw["format"] == FORMAT
    man = RunManifest.read(done.out)
    assert RunManifest.from_dict(json.loads(man.to_json())) == man
    assert man.scoring.benchmark == "rw" and man.models == ("rw", "ar")


def test_unknown_manifest_format_stops_with_a_clear_message(done, tmp_path):
    """A manifest of another (or no) format is refused, naming the file and the readable formats."""
    import shutil

    d = tmp_path / "copy"
    shutil.copytree(done.out, d)
    raw = json.loads((d / "run.json").read_text())
    raw["format"] = "run-manifest/99"
    (d / "run.json").write_text(json.dumps(raw))
    with pytest.raises(RunError, match=r"run\.json: format 'run-manifest/99'; this version reads"):
        read_ledger(d)
    del raw["format"]
    (d / "run.json").write_text(json.dumps(raw))
    with pytest.raises(RunError, match="no format field"):
        read_ledger(d)


def test_ledger_that_disagrees_with_its_manifest_is_refused(done, tmp_path):
    """A manifest listing other models than its ledger holds is refused, naming both files."""
    import shutil

    d = tmp_path / "copy"
    shutil.copytree(done.out, d)
    raw = json.loads((d / "run.json").read_text())
    raw["models"] = ["rw", "kslow"]  # the ledger holds ar, not kslow
    (d / "run.json").write_text(json.dumps(raw))
    with pytest.raises(RunError) as exc:
        read_ledger(d)
    msg = str(exc.value)
    assert "disagree" in msg and raw["ledger"] in msg and "run.json" in msg
    raw["models"] = ["rw", "ar"]
    raw["ledger_rows"] += 1
    (d / "run.json").write_text(json.dumps(raw))
    with pytest.raises(RunError, match="rows"):
        read_ledger(d)


def test_ledger_files_are_content_addressed_and_stale_ones_removed(done):
    """The manifest names a ledger-<digest> file; no other ledger file is left in the run directory."""
    man = RunManifest.read(done.out)
    assert man.ledger.startswith("ledger-") and (done.out / man.ledger).is_file()
    assert [p.name for p in done.out.glob("ledger-*.parquet")] == [man.ledger]
