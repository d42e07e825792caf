"""Spec validation: every mistake is named by key, with the allowed values."""

from __future__ import annotations

import pytest

from harness.errors import SpecError
from harness.spec import load_spec
from tests.harness.conftest import SMALL_SPEC


def _write(tmp_path, text):
    p = tmp_path / "spec.toml"
    p.write_text(text)
    return p


@pytest.fixture
def good(tmp_path, small_store):
    return SMALL_SPEC.format(store=small_store, out=tmp_path / "run", extra="")


def test_good_spec_parses(tmp_path, good):
    """A valid spec resolves paths, horizons and models."""
    s = load_spec(_write(tmp_path, good))
    assert s.targets.horizons == (-1, 0, 1, 2)
    assert [m.name for m in s.models] == ["rw", "ar"]
    assert s.scoring.benchmark == "rw"
    assert s.out == (tmp_path / "run").resolve()


BAD = [
    ("unknown top-level key", lambda t: t + "\n[extras]\nx = 1\n", "unknown key 'extras'"),
    ("unknown run key (typo)", lambda t: t.replace("draws = 50", "drawz = 50"), "unknown key 'drawz'"),
    ("bad date", lambda t: t.replace('start = "2010-01-01"', 'start = "2010-13-01"'), "not a valid calendar date"),
    ("date not a date", lambda t: t.replace('start = "2010-01-01"', 'start = "soon"'), "expected a date YYYY-MM-DD"),
    ("unknown model type", lambda t: t.replace('type = "ar"', 'type = "arr"'), "[models.ar] type"),
    ("empty horizon range", lambda t: t.replace("{ min = -1, max = 2 }", "{ min = 3, max = 1 }"), "empty range"),
    ("missing store", lambda t: t.replace('store = "', 'store = "/nonexistent'), "no vintage store"),
    ("bad policy", lambda t: t.replace('policy = "keep"', 'policy = "cut"'), "balance, keep, realign"),
    ("bad frequency", lambda t: t.replace('freq = "Q"', 'freq = "W"'), "expected one of M, Q"),
    ("target not a variable", lambda t: t.replace('variables = ["gdp", "cpi"]', 'variables = ["gdp", "ip"]'),
     "'ip' is not among [variables]"),
    ("unknown transform", lambda t: t.replace('transform = "dlog_ann"\n[variables.cpi]', 'transform = "growth"\n[variables.cpi]'),
     "transform"),
    ("unknown convert", lambda t: t.replace('convert = "mean"', 'convert = "median"'), "last, mean, mean3, sum"),
    ("benchmark not a model", lambda t: t.replace('benchmark = "rw"', 'benchmark = "bvar"'), "not a model of this spec"),
    ("bad truth", lambda t: t.replace('truths = ["first", "latest"]', 'truths = ["final"]'), "[scoring] truths"),
    ("draws not an integer", lambda t: t.replace("draws = 50", 'draws = "many"'), "expected an integer"),
    ("bad model parameter", lambda t: t.replace("max_lags = 2", "max_lagz = 2"), "[models.ar]"),
    ("not TOML", lambda t: t.replace("[run]", "[run"), "not valid TOML"),
]


@pytest.mark.parametrize("label,edit,message", BAD, ids=[b[0] for b in BAD])
def test_bad_spec_is_refused_with_its_key(tmp_path, good, label, edit, message):
    """Each bad spec raises SpecError naming the file and the offending key or value."""
    p = _write(tmp_path, edit(good))
    with pytest.raises(SpecError) as exc:
        load_spec(p)
    assert message in str(exc.value)
    assert str(p) in str(exc.value)


def test_error_names_the_line_of_the_offending_key(tmp_path, good):
    """A bad key's error carries the line it stands on (the TOML reader gives none)."""
    text = good.replace("max_lags = 2", "max_lagz = 2")
    p = _write(tmp_path, text)
    line = 1 + text.splitlines().index("max_lagz = 2")
    with pytest.raises(SpecError) as exc:
        load_spec(p)
    assert f"{p}, line {line}:" in str(exc.value) and "unknown key 'max_lagz'" in str(exc.value)
