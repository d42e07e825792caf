"""Start-up: no command imports a heavy library it does not use (each checked in a fresh interpreter).

Heavy here: ``scipy.stats`` (about 1 s of docstring processing), ``properscoring`` (compiles numba
kernels at import, about 2.6 s), ``matplotlib``, ``statsmodels``; for ``--help`` also the numerical
stack itself and rich's Markdown renderer. Timings are the benchmark's business
(``scripts/bench.py --only cli``); these tests check only which modules get loaded.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
HEAVY = ("scipy.stats", "properscoring", "matplotlib", "statsmodels")
# --help needs none of the numerical stack
HELP_HEAVY = HEAVY + ("numpy", "pandas", "xarray", "pyarrow", "scipy", "numba", "dask", "rich.markdown",
                      "markdown_it")

# every command's --help; each is run in the same interpreter, and what it loaded is recorded
HELP_COMMANDS = [[], ["run"], ["score"], ["report"], ["sensitivity"], ["demo"], ["cache"], ["cache", "info"],
                 ["cache", "clean"], ["vintages"], ["vintages", "init"], ["vintages", "ingest"],
                 ["vintages", "info"], ["vintages", "verify"], ["vintages", "cleanup"], ["vintages", "describe"],
                 ["vintages", "asof"], ["vintages", "export"], ["vintages", "revisions"], ["news"], ["ledger"],
                 ["ledger", "export"]]

SCRIPT = """
import json, sys
from harness.cli._app import main
watch, commands = json.loads(sys.argv[1]), json.loads(sys.argv[2])
out = []
for argv in commands:
    sys.argv = ["vintage-harness"] + argv
    try:
        main()
    except SystemExit:
        pass
    out.append([argv, sorted(m for m in watch if m in sys.modules)])
print(json.dumps(out))
"""


def _run(watch, commands, cwd=ROOT):
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    res = subprocess.run([sys.executable, "-c", SCRIPT, json.dumps(list(watch)), json.dumps(commands)],
                         capture_output=True, text=True, cwd=cwd, env=env, timeout=300)
    assert res.returncode == 0, res.stderr
    return json.loads(res.stdout.strip().splitlines()[-1])


def test_help_of_every_command_imports_no_numerical_library():
    """'vintage-harness --help' and every command's --help load none of numpy, pandas, scipy, xarray, rich's Markdown."""
    got = _run(HELP_HEAVY, [c + ["--help"] for c in HELP_COMMANDS])
    assert got == [[c + ["--help"], []] for c in HELP_COMMANDS]


def test_help_lists_every_command():
    """The plain-text help still lists every command group (rich formatting is off, not the content)."""
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    res = subprocess.run([sys.executable, "-m", "harness.cli._app", "--help"], capture_output=True, text=True,
                         cwd=ROOT, env=env, timeout=60)
    for name in ("run", "score", "report", "sensitivity", "demo", "vintages", "cache"):
        assert f"  {name} " in res.stdout


@pytest.fixture(scope="module")
def small_run(tmp_path_factory):
    """A small store, spec and finished run (nochange and AR models)."""
    from tests.harness.conftest import make_small_store, write_spec

    d = tmp_path_factory.mktemp("imports")
    make_small_store(d / "store")
    spec = write_spec(d, d / "store", d / "run")
    env = dict(os.environ, PYTHONPATH=str(ROOT), HARNESS_CACHE=str(d / "cache"))
    subprocess.run([sys.executable, "-m", "harness.cli._app", "run", str(spec), "-q"], cwd=ROOT, env=env,
                   check=True, capture_output=True, timeout=300)
    return d


@pytest.mark.parametrize("argv, allowed", [
    (["run", "{d}/spec.toml", "-q"], ()),
    (["score", "{d}/run"], ()),
    (["cache", "info", "--cache", "{d}/cache"], ()),
    (["cache", "clean", "--cache", "{d}/cache"], ()),
    (["vintages", "info", "{d}/store"], ()),
    (["vintages", "asof", "{d}/store", "2012-05-01"], ()),
    (["vintages", "verify", "{d}/store"], ()),
    (["vintages", "export", "{d}/store", "{d}/all.parquet"], ()),
    (["vintages", "revisions", "{d}/store", "gdp"], ("scipy.stats",)),  # regression p-values
    (["ledger", "export", "{d}/run", "--out", "{d}/q.parquet"], ()),
    (["news", "{d}/run"], ()),  # refused (no model with a decomposition) before any heavy import
    (["score", "{d}/run", "--table", "matrix"], ()),
    pytest.param(["report", "{d}/run", "--out", "{d}/report"], ("matplotlib",),  # plots
                 marks=pytest.mark.slow),
    (["sensitivity", "{d}/spec.toml", "--no-data-check"], ("scipy.stats",)),  # rank correlations
])
def test_command_imports_only_what_it_uses(small_run, argv, allowed, monkeypatch):
    """Running the command loads none of the heavy libraries except those it uses."""
    monkeypatch.setenv("HARNESS_CACHE", str(small_run / "cache"))
    cmd = [a.format(d=small_run) for a in argv]
    (_, loaded), = _run(HEAVY, [cmd])
    assert [m for m in loaded if m not in allowed] == []
