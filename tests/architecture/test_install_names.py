"""The installed distribution: its console command and the packages an environment imports.

The distribution is ``vintage-harness``; it installs one console command of the same name (a
generic name such as ``harness`` would clash with other tools on ``PATH``) and the import
packages ``harness`` and ``vintages``. These checks read the installed metadata
(importlib.metadata, Python standard library) and ask a fresh interpreter which files it imports.
"""

from __future__ import annotations

import subprocess
import sys
from importlib import metadata
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def test_the_console_command_is_vintage_harness_only():
    eps = [e for e in metadata.distribution("vintage-harness").entry_points if e.group == "console_scripts"]
    assert [(e.name, e.value) for e in eps] == [("vintage-harness", "harness.cli:main")]


def test_an_installed_environment_imports_our_packages():
    """Run from another directory, `import harness, vintages` resolves to this checkout's packages
    (not to another distribution's module of the same name)."""
    code = ("import harness, vintages, harness.cli; print(harness.__file__); print(vintages.__file__); "
            "print(harness.cli.app.info.name)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                         cwd="/").stdout.split()
    assert Path(out[0]).resolve() == ROOT / "harness" / "__init__.py"
    assert Path(out[1]).resolve() == ROOT / "vintages" / "__init__.py"
    assert out[2] == "vintage-harness"
