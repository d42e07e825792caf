"""The typed spec: model parameters checked on load, every option writable in TOML, every key used."""

from __future__ import annotations

import pandas as pd
import pytest
from typer.testing import CliRunner

from harness.cli import app
from harness.errors import SpecError
from harness.spec import load_spec
from harness.spec.sections import RunSection, ScoringSection, section_keys
from tests.harness.conftest import SMALL_SPEC

runner = CliRunner()


def _write(tmp_path, small_store, extra="", edit=lambda t: t):
    p = tmp_path / "spec.toml"
    p.write_text(edit(SMALL_SPEC.format(store=small_store, out=tmp_path / "run", extra=extra)))
    return p


def test_invalid_model_parameter_refused_by_explain_with_exit_2(tmp_path, small_store):
    """--explain exits 2 naming the file, line, model, parameter and the allowed values."""
    p = _write(tmp_path, small_store, '[models.ar2]\ntype = "ar"\nic = "hqic"\n')
    res = runner.invoke(app, ["run", str(p), "--explain"])
    assert res.exit_code == 2
    err = res.output.strip().splitlines()[-1]
    assert str(p) in err and "line" in err and "ar2" in err and "'ic'" in err and "'aic', 'bic'" in err


@pytest.mark.parametrize("value,why", [('"two"', "integer"), ("-1", "integer in")])
def test_bad_max_lags_is_refused_up_front(tmp_path, small_store, value, why):
    """max_lags = "two" or -1 is refused when the spec is read, not in every task."""
    p = _write(tmp_path, small_store, edit=lambda t: t.replace("max_lags = 2", f"max_lags = {value}"))
    with pytest.raises(SpecError, match=why):
        load_spec(p)


def test_fixed_lag_order_can_be_written_in_toml(tmp_path, small_store):
    """ic = "none" in TOML is the fixed order (ic=None in Python)."""
    p = _write(tmp_path, small_store, '[models.ar_fixed]\ntype = "ar"\nic = "none"\nmax_lags = 2\n')
    s = load_spec(p)
    assert s.model("ar_fixed").params == {"ic": None, "max_lags": 2}


def test_every_declared_key_is_read(tmp_path, small_store):
    """Every key of [run] and [scoring] is a declared field (unknown keys cannot pass by construction)."""
    assert set(section_keys(RunSection)) == {"store", "out", "seed", "draws", "freq", "policy", "mode",
                                             "cache", "name"}
    assert {"min_phase", "min_cycle", "tests", "interval_levels"} <= set(section_keys(ScoringSection))


def test_min_phase_and_min_cycle_change_the_dated_turning_points(tmp_path):
    """Longer minimum phases censor short cycles (Harding & Pagan 2002 rules; synthetic path)."""
    from harness.evaluation.evaluator import regimes_for
    from vintages import harding_pagan

    # a path with one short dip (2 quarters) and one long recession (6 quarters), invented
    level = [0, 1, 2, 3, 2.5, 2.2, 3, 4, 5, 6, 5, 4, 3, 2, 1, 0.5, 1, 2, 3, 4, 5, 6, 7]
    s = pd.Series(level, index=pd.period_range("2000Q1", periods=len(level), freq="Q"), dtype=float)
    loose, strict = harding_pagan(s, min_phase=2, min_cycle=5), harding_pagan(s, min_phase=3, min_cycle=5)
    assert len(loose) == 2 and len(strict) == 1

    class _Cube:
        def freq_of(self, v):
            return "Q"

        def latest(self, f):
            import xarray as xr

            return xr.DataArray(s.to_numpy()[None, :], dims=("variable", "period"),
                                coords={"variable": ["gdp"], "period": s.index})

    class _Man:
        freq = "Q"
        targets = ("gdp",)

        def __init__(self, sc):
            self.scoring = sc

    periods = s.index
    a = regimes_for(_Man(ScoringSection(min_phase=2)), _Cube(), periods)
    b = regimes_for(_Man(ScoringSection(min_phase=3)), _Cube(), periods)
    assert len(a[2]) == 2 and len(b[2]) == 1 and "min_phase 3" in b[1]


@pytest.mark.parametrize("edit,needle", [
    (lambda t: t.replace('truths = ["first", "latest"]', "truths = 5"), "[scoring] truths"),
    (lambda t: t.replace('truths = ["first", "latest"]', "truths = []"), "[scoring] truths"),
    (lambda t: t.replace('truths = ["first", "latest"]', 'truths = ["lag:abc"]'), "[scoring] truths"),
    (lambda t: t.replace("[scoring]", '[scoring]\ntruth = "lag:abc"'), "[scoring] truth"),
    (lambda t: t + '\n[scoring.subperiods]\nbad = ["2021Q4", "2020Q3"]\n', "starts (2021Q4) after"),
    (lambda t: t.replace("[origins]", 'x = 1\n[origins]'), "[run]"),
    (lambda t: t.replace("draws = 50", "draws = 1000000000000"), "[run] draws"),
    (lambda t: t.replace('type = "ar"', 'type = ".evil:X"'), "[models.ar] type"),
])
def test_specs_refused_up_front(tmp_path, small_store, edit, needle):
    """Values that would fail later are refused by --explain with exit 2 and a one-line message."""
    p = _write(tmp_path, small_store, edit=edit)
    res = runner.invoke(app, ["run", str(p), "--explain"])
    assert res.exit_code == 2, res.output
    lines = [ln for ln in res.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and needle in lines[0] and str(p) in lines[0]


def test_out_inside_the_store_or_a_file_is_refused(tmp_path, small_store):
    """A run directory inside the store, or an existing file, is refused with the key named."""
    p = _write(tmp_path, small_store, edit=lambda t: t.replace(f'out = "{tmp_path / "run"}"',
                                                               f'out = "{small_store / "runs"}"'))
    with pytest.raises(SpecError, match=r"\[run\] out"):
        load_spec(p)
    f = tmp_path / "afile"
    f.write_text("x")
    p = _write(tmp_path, small_store, edit=lambda t: t.replace(f'out = "{tmp_path / "run"}"', f'out = "{f}"'))
    with pytest.raises(SpecError, match="is a file"):
        load_spec(p)


def test_origins_not_a_table_is_one_line(tmp_path, small_store):
    """``origins = "x"`` at the top level is refused naming the section, not a Python traceback."""
    p = _write(tmp_path, small_store, edit=lambda t: t.replace(
        '[origins]\nrule = "quarterly"\nday = 15\nmonth_of_quarter = 2\nstart = "2010-01-01"\nend = "2015-06-30"\n',
        "").replace("[run]", 'origins = "x"\n[run]', 1))
    res = runner.invoke(app, ["run", str(p), "--explain"])
    assert res.exit_code == 2 and "[origins]: expected a table" in res.output
