"""Command-line interface: a thin typer layer over the Python API.

Heavy libraries (pandas, xarray, numba-compiled scoring, matplotlib) are imported inside the
commands, never at module level, so that ``vintage-harness --help`` starts fast.
"""

from __future__ import annotations

from harness.cli._app import app, main

__all__ = ["app", "main"]
