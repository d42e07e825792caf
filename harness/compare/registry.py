"""The comparison-test registry: each test declared once, with one result shape.

A :class:`ComparisonTest` states a test's name and label, its kind (``pairwise``: a model
against the benchmark on one loss; ``set``: all models at once on one loss; ``calibration``: one
model's hits or PITs; ``stability``: a pairwise comparison over time), its published source, its
minimum-sample rule (a function of the horizon, with the rule in words and its source), its
parameters and defaults (e.g. bootstrap replications, overridable from the spec's
``[scoring.tests.NAME]`` table, with the allowed values of option-like settings), whether it is
random (its seed then comes from the spec's seed, spawned per test and cell), when it does not
apply at all (``applies``: e.g. tests that assume independent forecasts, at h > 1), and how to
run it. Which scores a test applies to is declared on the score
(:attr:`harness.scores.registry.Score.tests`).

Every run returns :class:`TestResult` (``statistic``, ``pvalue``, ``n``, ``note`` and
test-specific ``extra`` fields). :func:`screen` is the one gate before a run: a test that does
not apply returns NaN with its reason (``"Berkowitz assumes independence; h > 1"``), a cell
below the minimum sample NaN with the note ``"n too small (n = 6 < 10: ...)"``; neither is ever
starred.
"""

from __future__ import annotations

import math
import zlib
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

Kind = Literal["pairwise", "set", "calibration", "stability"]

__all__ = ["ComparisonTest", "TestResult", "cell_seed", "comparison_tests", "get_test", "inapplicable",
           "register_test", "screen", "too_small"]


@dataclass(frozen=True)
class TestResult:
    """The one result shape of every registered test.

    Attributes
    ----------
    test : str
        Registry name of the test.
    statistic, pvalue : float
        NaN when the test could not be run (see ``note``).
    n : int
        Observations (pairs, periods) the test used.
    note : str
        Why a NaN was returned ("n too small …", "zero variance …"), else empty.
    extra : dict
        Test-specific fields (e.g. ``mean_diff`` of a pairwise test, ``in_set`` of the MCS,
        ``path`` of the fluctuation test).
    """

    __test__ = False  # not a pytest test class

    test: str
    statistic: float
    pvalue: float
    n: int
    note: str = ""
    extra: dict = field(default_factory=dict)

    @property
    def usable(self) -> bool:
        """A p-value that may carry a significance marker."""
        return bool(np.isfinite(self.pvalue)) and not self.note.startswith("n too small")


@dataclass(frozen=True)
class ComparisonTest:
    """One comparison or calibration test, declared once (see the module docstring).

    Attributes
    ----------
    name, label : str
        Registry name and human label.
    kind : {"pairwise", "set", "calibration", "stability"}
    reference : str
        Published source of the test.
    min_n : callable
        ``min_n(h, params) -> int``: the smallest sample the test is run on at h steps ahead
        (``params`` also carries ``level``, the nominal coverage, for coverage tests).
    min_rule : str
        The rule in words (shown in the "n too small" note).
    min_source : str
        Where the rule comes from (a publication, "common practice", or the Monte Carlo of
        the test suite).
    run : callable
        Runs the test; returns :class:`TestResult` (a list of them for set tests).
    params : mapping
        Settings and their defaults.
    choices : mapping
        Allowed values of option-like settings.
    seeded : bool
        Random (bootstrap): its seed comes from the spec's seed per cell.
    applies : callable, optional
        ``applies(h, params) -> str``: empty when the test applies at h steps, else the reason
        it does not.
    positional : bool
        The run accepts ``positions`` (time positions of the observations, for gaps).
    """

    name: str
    label: str
    kind: Kind
    reference: str
    min_n: Callable[[int, Mapping[str, Any]], int]
    min_rule: str
    run: Callable[..., Any]
    params: Mapping[str, Any] = field(default_factory=dict)
    seeded: bool = False
    min_source: str = "common practice"
    choices: Mapping[str, tuple] = field(default_factory=dict)
    applies: Callable[[int, Mapping[str, Any]], str] | None = None
    positional: bool = False

    def settings(self, overrides: Mapping[str, Any] | None = None) -> dict[str, Any]:
        """The defaults updated by ``overrides``; unknown names and values are refused (listing the valid ones)."""
        out = dict(self.params)
        for k, v in (overrides or {}).items():
            if k not in out:
                raise ValueError(f"test {self.name!r}: unknown setting {k!r}; settings: {sorted(out)}")
            allowed = self.choices.get(k)
            if allowed is not None and v not in allowed:
                raise ValueError(f"test {self.name!r}: setting {k!r} must be one of "
                                 f"{sorted(map(str, allowed))}; got {v!r}")
            default = self.params[k]
            if isinstance(default, (int, float)) and not isinstance(default, bool) and (
                    isinstance(v, bool) or not isinstance(v, (int, float))):
                raise ValueError(f"test {self.name!r}: setting {k!r} must be a number; got {v!r}")
            out[k] = v
        return out


_REGISTRY: dict[str, ComparisonTest] = {}


def register_test(test: ComparisonTest) -> ComparisonTest:
    """Add a test declaration (its name must be new)."""
    if test.name in _REGISTRY:
        raise ValueError(f"test {test.name!r} is already registered")
    _REGISTRY[test.name] = test
    return test


def comparison_tests(kind: Kind | None = None) -> list[ComparisonTest]:
    """Registered tests in declaration order, optionally of one kind."""
    _load()
    return [t for t in _REGISTRY.values() if kind is None or t.kind == kind]


def get_test(name: str) -> ComparisonTest:
    """The test registered under ``name`` (the message lists the valid names)."""
    _load()
    try:
        return _REGISTRY[name]
    except KeyError:
        raise ValueError(f"unknown test {name!r}; expected one of {sorted(_REGISTRY)}") from None


def cell_seed(seed: int, test: str, cell: Sequence[Any]) -> int:
    """A deterministic seed for one test in one cell, spawned from the spec's seed.

    ``SeedSequence(seed, spawn_key=(crc32(test), crc32(cell)))``: the same whatever the order in
    which cells are evaluated.
    """
    key = (zlib.crc32(test.encode()), zlib.crc32("\x1f".join(map(str, cell)).encode()))
    return int(np.random.SeedSequence(int(seed), spawn_key=key).generate_state(1)[0])


def too_small(test: ComparisonTest, n: int, h: int, params: Mapping[str, Any]) -> TestResult | None:
    """The "n too small" result when ``n`` is below the test's minimum for steps ahead ``h``, else None."""
    need = int(test.min_n(h, params))
    if n >= need:
        return None
    return TestResult(test.name, math.nan, math.nan, int(n),
                      f"n too small (n = {n} < {need}: {test.min_rule})")


def inapplicable(test: ComparisonTest, n: int, h: int, params: Mapping[str, Any]) -> TestResult | None:
    """The NaN result with the reason when ``test`` does not apply at ``h`` steps, else None."""
    reason = test.applies(h, params) if test.applies is not None else ""
    if not reason:
        return None
    return TestResult(test.name, math.nan, math.nan, int(n), reason)


def screen(test: ComparisonTest, n: int, h: int, params: Mapping[str, Any]) -> TestResult | None:
    """The one gate before a run: :func:`inapplicable`, then :func:`too_small`; None to run."""
    return inapplicable(test, n, h, params) or too_small(test, n, h, params)


def _load() -> None:
    if not _REGISTRY:
        import harness.compare.builtin  # noqa: F401
