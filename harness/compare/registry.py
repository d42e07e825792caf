"""The comparison-test registry: each test declared once, with one result shape.

A :class:`ComparisonTest` states a test's name and label, its kind (``pairwise``: a model
against the benchmark on one loss; ``set``: all models at once on one loss; ``calibration``: one
model's hits or PITs; ``stability``: a pairwise comparison over time), its published source, its
minimum-sample rule (a function of the horizon, with the rule in words and its source), its
parameters and defaults (e.g. bootstrap replications, overridable from the spec's
``[scoring.tests.NAME]`` table), whether it is random (its seed then comes from the spec's seed,
spawned per test and cell), and how to run it. Which scores a test applies to is declared on the
score (:attr:`harness.scores.registry.Score.tests`).

Every run returns :class:`TestResult` (``statistic``, ``pvalue``, ``n``, ``note`` and
test-specific ``extra`` fields). A cell below the minimum sample returns NaN with the note
``"n too small (n = 6 < 10: ...)"`` and is never starred.
"""

from __future__ import annotations

import math
import zlib
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

Kind = Literal["pairwise", "set", "calibration", "stability"]

__all__ = ["ComparisonTest", "TestResult", "cell_seed", "get_test", "register_test", "comparison_tests",
           "too_small"]


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
    """One comparison or calibration test, declared once (see the module docstring)."""

    name: str
    label: str
    kind: Kind
    reference: str
    min_n: Callable[[int, Mapping[str, Any]], int]
    min_rule: str
    run: Callable[..., Any]
    params: Mapping[str, Any] = field(default_factory=dict)
    seeded: bool = False

    def settings(self, overrides: Mapping[str, Any] | None = None) -> dict[str, Any]:
        """The defaults updated by ``overrides``; unknown names are refused (listing the valid ones)."""
        out = dict(self.params)
        for k, v in (overrides or {}).items():
            if k not in out:
                raise ValueError(f"test {self.name!r}: unknown setting {k!r}; settings: {sorted(out)}")
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


def _load() -> None:
    if not _REGISTRY:
        import harness.compare.builtin  # noqa: F401
