"""The backtest spec (TOML): typed, frozen sections, validated once when the file is read."""

from __future__ import annotations

from harness.spec.load import ModelSpec, Spec, load_spec, parse_spec

__all__ = ["ModelSpec", "Spec", "load_spec", "parse_spec"]
