"""The command line as a user meets it: vintages commands, exit codes, one-line errors, untouched store."""

from __future__ import annotations

import hashlib
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

from harness.cli import app

runner = CliRunner()


def _digest(path: Path) -> dict[str, str]:
    return {str(p.relative_to(path)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(path.rglob("*")) if p.is_file() and p.name != ".lock"}


@pytest.fixture
def store(tmp_path):
    s = tmp_path / "store"
    assert runner.invoke(app, ["vintages", "init", str(s)]).exit_code == 0
    f = tmp_path / "rel.csv"
    f.write_text("variable,period,release,value\n"
                 "gdp,2020Q1,2020-04-30,100.0\n"
                 "gdp,2020Q1,2020-05-30,100.5\n"
                 "gdp,2020Q2,2020-07-30,98.0\n")
    out = runner.invoke(app, ["vintages", "ingest", str(s), str(f), "--freq", "Q", "--units", "index"])
    assert out.exit_code == 0, out.output
    return s


def test_ingest_info_asof_export_roundtrip(store, tmp_path):
    """ingest → info → asof (csv) → export show exactly what was published and when."""
    info = runner.invoke(app, ["vintages", "info", str(store)])
    assert info.exit_code == 0 and "gdp" in info.output and "2020Q2" in info.output
    asof = runner.invoke(app, ["vintages", "asof", str(store), "2020-06-01", "--format", "csv"])
    assert asof.exit_code == 0
    assert asof.output.splitlines() == ["variable,period,value", "gdp,2020Q1,100.5"]
    exp = tmp_path / "all.csv"
    assert runner.invoke(app, ["vintages", "export", str(store), str(exp)]).exit_code == 0
    assert len(pd.read_csv(exp)) == 3


def test_reingest_is_a_noop_and_conflict_needs_supersede(store, tmp_path):
    """Re-ingesting identical data changes nothing; a changed published value needs --supersede."""
    before = _digest(store)
    f = tmp_path / "same.csv"
    f.write_text("variable,period,release,value\ngdp,2020Q1,2020-04-30,100.0\n")
    out = runner.invoke(app, ["vintages", "ingest", str(store), str(f)])
    assert out.exit_code == 0 and "nothing new" in out.output
    assert _digest(store) == before
    f.write_text("variable,period,release,value\ngdp,2020Q1,2020-04-30,101.0\n")
    out = runner.invoke(app, ["vintages", "ingest", str(store), str(f)])
    assert out.exit_code == 1 and "--supersede" in out.output
    assert _digest(store) == before
    out = runner.invoke(app, ["vintages", "ingest", str(store), str(f), "--supersede", "--reason", "typo"])
    assert out.exit_code == 0 and "superseded" in out.output


@pytest.mark.parametrize("body,needle", [
    ("variable,period,release,value\ngdp,2020Q3,2020-10-30,abc\n", "line 2, field 'value'"),
    ("variable,period,release,value\ngdp,2020Q3,2020-13-30,1\n", "line 2, field 'release'"),
    ("variable,period,release,value\ngdp,2020-07,2020-10-30,1\n", "field 'period'"),
    ("variable,period,value\ngdp,2020Q3,1\n", "missing column"),
    ("", "empty"),
])
def test_bad_file_one_line_error_exit_1_store_untouched(store, tmp_path, body, needle):
    """A bad file stops with a one-line error naming file, line and field, exit 1, store byte-identical."""
    before = _digest(store)
    f = tmp_path / "bad.csv"
    f.write_text(body)
    out = runner.invoke(app, ["vintages", "ingest", str(store), str(f)])
    assert out.exit_code == 1
    err = [ln for ln in out.output.splitlines() if ln.startswith("error:")]
    assert len(err) == 1 and needle in err[0] and str(f) in err[0]
    assert _digest(store) == before


def test_usage_errors_exit_2(store):
    """Unknown options and bad choices are usage errors (exit code 2)."""
    assert runner.invoke(app, ["vintages", "ingest", str(store), "x.csv", "--layout", "nope"]).exit_code == 2
    assert runner.invoke(app, ["vintages", "asof", str(store), "not-a-date"]).exit_code == 2
    assert runner.invoke(app, ["vintages", "frobnicate"]).exit_code == 2


def test_missing_store_is_a_data_error(tmp_path):
    """Pointing at a directory that is not a store says so and exits 1."""
    out = runner.invoke(app, ["vintages", "info", str(tmp_path / "nowhere")])
    assert out.exit_code == 1 and "not a vintage store" in out.output


def test_help_does_not_import_heavy_libraries():
    """``vintage-harness --help`` imports neither pandas, xarray, numba nor matplotlib (fast start-up)."""
    code = ("import sys; from harness.cli import app; "
            "heavy = [m for m in ('pandas', 'xarray', 'numba', 'matplotlib', 'properscoring') if m in sys.modules]; "
            "print(','.join(heavy))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""
