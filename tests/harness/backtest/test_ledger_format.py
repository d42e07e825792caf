"""The compact ledger: every score equals the one of a ledger written the old way; joint paths stay recoverable."""

from __future__ import annotations

import json
import shutil

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from harness.backtest import read_ledger, run
from harness.backtest.manifest import RunManifest
from harness.evaluation import evaluate
from harness.spec import load_spec
from tests.harness.conftest import write_spec

ADDED = ("draws_layout", "diagnostics_file", "diagnostics_rows", "diagnostic_warnings", "cache")


@pytest.fixture(scope="module")
def done(tmp_path_factory, small_store):
    d = tmp_path_factory.mktemp("fmt")
    spec = load_spec(write_spec(d, small_store, d / "run")).with_run(cache=d / "cache")
    run(spec, jobs=1, progress=False)
    return spec


def _write_old_format(run_dir, dest):
    """A copy of a run directory as the previous version wrote it: run-manifest/2, float32 draws in draw order."""
    shutil.copytree(run_dir, dest)
    led = read_ledger(run_dir)
    joint = led.joint_draws()
    t = pq.read_table(run_dir / led.manifest.ledger)
    df = t.select(["model", "origin", "variable", "horizon"]).to_pandas()
    idx = (pd.Index(led.models).get_indexer(df["model"]),
           np.searchsorted(joint["origin"].values.astype("datetime64[D]"), df["origin"].to_numpy().astype("datetime64[D]")),
           pd.Index(list(joint["variable"].values)).get_indexer(df["variable"]),
           np.searchsorted(joint["horizon"].values, df["horizon"].to_numpy()))
    vals = joint.values[idx].astype(np.float32)
    old = t.set_column(t.column_names.index("draws"), "draws",
                       pa.FixedSizeListArray.from_arrays(pa.array(vals.reshape(-1), pa.float32()), vals.shape[1]))
    (dest / led.manifest.ledger).unlink()
    pq.write_table(old, dest / "ledger-0ld0ld0ld0ld0ld0.parquet", compression="lz4")
    raw = json.loads((dest / "run.json").read_text())
    for k in ADDED:
        raw.pop(k, None)
    raw["format"] = "run-manifest/2"
    raw["ledger"] = "ledger-0ld0ld0ld0ld0ld0.parquet"
    (dest / "run.json").write_text(json.dumps(raw))
    return dest


def _numeric(df):
    return df.select_dtypes(include=[np.number]).reset_index(drop=True)


def test_scores_equal_those_of_an_old_format_ledger(done, tmp_path):
    """Every score, table, ratio and test statistic of the new ledger equals the old-format one's to 1e-6 relative."""
    old_dir = _write_old_format(done.out, tmp_path / "old")
    old, new = read_ledger(old_dir), read_ledger(done.out)
    assert old.manifest.draws_layout == "float32" and old.draw_order == "joint"
    assert new.manifest.draws_layout == "sorted" and new.draw_order == "sorted"
    # the old ledger held the draws in the order the models made them; the new one each cell sorted
    assert old.draws.values.tobytes() == new.joint_draws().values.tobytes()
    assert np.array_equal(np.sort(old.draws.values, axis=-1), new.draws.values, equal_nan=True)
    for truth in ("first", "latest"):
        a, b = evaluate(old_dir, truth), evaluate(done.out, truth)
        for name in ("forecasts", "table", "relative", "tests", "mcs", "calibration", "fluctuation"):
            x, y = getattr(a, name), getattr(b, name)
            assert list(x.columns) == list(y.columns), name
            assert len(x) == len(y), name
            xn, yn = _numeric(x), _numeric(y)
            np.testing.assert_allclose(yn.to_numpy(float), xn.to_numpy(float), rtol=1e-6, atol=1e-12,
                                       equal_nan=True, err_msg=f"{name} under {truth}")


def test_crps_of_sorted_draws_matches_properscoring(done):
    """CRPS from the ledger's sorted draws equals properscoring's NumPy estimator on the joint draws (Gneiting & Raftery 2007, eq. 21)."""
    from properscoring._crps import _crps_ensemble_vectorized

    led = read_ledger(done.out)
    ev = evaluate(done.out, "latest", tests=False)
    f = ev.forecasts.dropna(subset=["crps"]).head(40)
    joint = led.joint_draws()
    for _, r in f.iterrows():
        ens = joint.sel(model=r["model"], origin=r["origin"], variable=r["variable"], horizon=r["horizon"]).values
        obs = np.float64(np.float32(r["truth"]))  # the evaluator compares at float32 resolution
        e = ens.astype(np.float64)[None, :]
        ref = float(_crps_ensemble_vectorized(np.array([obs]), e, np.ones_like(e))[0])
        assert r["crps"] == pytest.approx(ref, rel=1e-6, abs=1e-12)


def test_old_format_run_directory_is_upgraded_by_a_rerun(done, tmp_path):
    """A rerun into a run directory of format 2 computes nothing and rewrites it as format 3 with the same draws."""
    old_dir = _write_old_format(done.out, tmp_path / "old")
    again = run(done.with_run(out=old_dir), jobs=1, progress=False)
    assert again.computed == 0
    man = RunManifest.read(old_dir)
    assert man.format == "run-manifest/3" and man.draws_layout == "sorted"
    assert read_ledger(old_dir).draws.values.tobytes() == read_ledger(done.out).draws.values.tobytes()
    assert [p.name for p in old_dir.glob("ledger-*.parquet")] == [man.ledger]


def test_joint_layout_stores_draws_in_draw_order(done, tmp_path):
    """With draws_layout="joint" the ledger's draws are the joint paths, bit for bit."""
    res = run(done.with_run(out=tmp_path / "joint"), jobs=1, progress=False, draws_layout="joint")
    assert res.computed == 0  # same task cache
    led = read_ledger(res.run_dir)
    assert led.draw_order == "joint"
    assert led.draws.values.tobytes() == read_ledger(done.out).joint_draws().values.tobytes()


def test_joint_draws_name_the_missing_cache_entry(done, tmp_path):
    """Joint draws from an empty cache fail with the missing entry's path and the command that recomputes it."""
    from harness.errors import RunError

    led = read_ledger(done.out)
    with pytest.raises(RunError, match=r"tasks/.+\.parquet: the joint draws of .* rerun 'vintage-harness run"):
        led.joint_draws(cache=tmp_path / "empty")


def test_ledger_and_manifest_layout_must_agree(done, tmp_path):
    """A manifest claiming another draws layout than its ledger holds is refused, naming both files."""
    from harness.errors import RunError

    d = tmp_path / "copy"
    shutil.copytree(done.out, d)
    raw = json.loads((d / "run.json").read_text())
    raw["draws_layout"] = "joint"
    (d / "run.json").write_text(json.dumps(raw))
    with pytest.raises(RunError, match=r"stores draws as int32 but .*run\.json says layout 'joint'"):
        read_ledger(d)


def test_a_ledger_whose_bytes_do_not_match_its_name_is_refused(done, tmp_path):
    """Other forecasts copied under the ledger's content-addressed name (same rows, same models,
    other draws: what another run's ledger would be) are refused on read, naming the file."""
    from harness.errors import RunError

    d = tmp_path / "copy"
    shutil.copytree(done.out, d)
    name = RunManifest.read(d).ledger
    t = pq.read_table(d / name)
    keys = t.column("draws").combine_chunks()
    flat = keys.flatten().to_numpy(zero_copy_only=False).copy()
    flat[0] += 1  # one draw of one forecast differs
    t = t.set_column(t.column_names.index("draws"), "draws",
                     pa.FixedSizeListArray.from_arrays(pa.array(flat, pa.int32()), keys.type.list_size))
    pq.write_table(t, d / name)
    with pytest.raises(RunError, match=r"its content does not match its name"):
        read_ledger(d)
    assert read_ledger(done.out).draws.shape[0] == 2  # the original still reads
