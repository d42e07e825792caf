"""The score registry: every score declared once, read by every table, test, export and ``--help``.

A :class:`Score` states a score's facts — its column name(s), human labels, unit, whether lower
is better, how it is set against the benchmark (``ratio``, ``sqrt_ratio`` for squared-error
scores shown as RMSE-type ratios, or ``difference`` for scores that can be negative), which
comparison tests apply, its roles in the report (headline, tail, interval) and the published
source — and how the fused pass computes it from sorted draws (:mod:`harness.scores.fused`).
A *family* (quantile scores, coverage, interval scores) declares a pattern such as ``qs_{pct}``
and expands to one column per level of the evaluation's :class:`ScoreConfig`.

Adding a score is one declaration here, its rule in a scores module, and its tests: the tables
(:mod:`harness.scores.frames`), the comparison tests, the terminal, CSV, Parquet, LaTeX,
Markdown and HTML outputs and the command line's ``--score`` choices all read this registry.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from typing import Any, Literal

Orientation = Literal["lower", "calibration"]
Versus = Literal["ratio", "sqrt_ratio", "difference"]

# Default levels of the families (whole percentages) and the log score's density floor. This
# module imports nothing heavy, so the command line can list the scores in its help at once.
DEFAULT_QUANTILE_LEVELS = (0.05, 0.10, 0.25, 0.50, 0.75, 0.90, 0.95)
DEFAULT_COVERAGE_LEVELS = (0.5, 0.7, 0.9)
DEFAULT_INTERVAL_LEVELS = (0.5, 0.8)
# Densities of a spread-out ensemble far below this mean "the observation was impossible";
# flooring keeps one outlier from dominating a mean log score (score capped at -log(1e-10)).
DEFAULT_DENSITY_FLOOR = 1e-10

__all__ = [
    "Column",
    "Score",
    "ScoreConfig",
    "columns",
    "is_score_column",
    "register_score",
    "resolve",
    "score_names",
    "scores",
]


@dataclass(frozen=True)
class ScoreConfig:
    """Which levels the families expand to, and the settings of the fused pass.

    Attributes
    ----------
    quantile_levels : tuple of float
        Levels of the quantile scores ``qs_NN``.
    coverage_levels : tuple of float
        Nominal coverages of the central-interval hit indicators ``cover_NN``.
    interval_levels : tuple of float
        Nominal coverages of the interval scores ``interval_NN`` (central intervals).
    n_levels : int
        Midpoint nodes of the quantile-weighted CRPS integrals.
    method : {"linear", "inverted_cdf"}
        Ensemble quantile estimator (Hyndman & Fan 1996, definitions 7 and 1).
    density_floor : float
        Floor of the kernel density in the log score.
    """

    quantile_levels: tuple[float, ...] = DEFAULT_QUANTILE_LEVELS
    coverage_levels: tuple[float, ...] = DEFAULT_COVERAGE_LEVELS
    interval_levels: tuple[float, ...] = DEFAULT_INTERVAL_LEVELS
    n_levels: int = 99
    method: str = "linear"
    density_floor: float = DEFAULT_DENSITY_FLOOR


@dataclass(frozen=True)
class Score:
    """One score (or one family of scores), declared once.

    Attributes
    ----------
    key : str
        Registry key; also the column name of a single score (``crps``).
    label : str
        Human label of the mean score (``"CRPS"``, ``"MSE"``); a family uses ``{pct}``.
    relative_label : str
        Label of the number set against the benchmark (``"CRPS ratio"``, ``"RMSE ratio"``).
    unit : str
        Unit of the mean score.
    orientation : {"lower", "calibration"}
        ``lower``: a loss, lower is better. ``calibration``: describes calibration (PIT,
        coverage); no ratio, best = closest to the nominal value (coverage) or none (PIT).
    versus : {"ratio", "sqrt_ratio", "difference"} or None
        How a model's mean is set against the benchmark's in the same cell.
    tests : tuple of str
        Comparison tests (names of :mod:`harness.compare.registry`) that apply.
    roles : frozenset of str
        Where it appears: ``headline``, ``tail``, ``interval``, ``point``, ``density``.
    reference : str
        Published source.
    pattern : str, optional
        Column pattern of a family, e.g. ``"qs_{pct}"`` (``pct`` = the level in whole percent).
    config_levels : str, optional
        The :class:`ScoreConfig` field holding the family's levels.
    needs : callable, optional
        ``needs(cfg) -> ndarray`` of the quantile levels the fused pass must compute.
    compute : callable, optional
        ``compute(chunk, cfg) -> dict[column, ndarray]`` from a :class:`harness.scores.fused.Chunk`;
        None for columns users compute themselves (e.g. threshold-weighted CRPS).
    level_roles : callable, optional
        ``level_roles(level) -> set of roles`` added per family member.
    """

    key: str
    label: str
    relative_label: str
    unit: str
    orientation: Orientation
    versus: Versus | None
    tests: tuple[str, ...] = ()
    roles: frozenset[str] = frozenset()
    reference: str = ""
    pattern: str | None = None
    config_levels: str | None = None
    needs: Callable[[ScoreConfig], Any] | None = None
    compute: Callable[[Any, ScoreConfig], dict[str, Any]] | None = None
    level_roles: Callable[[float], set[str]] | None = None
    _regex: re.Pattern | None = field(default=None, compare=False, repr=False)

    def __post_init__(self):
        if self.pattern:
            rx = re.escape(self.pattern).replace(r"\{pct\}", r"(?P<pct>\d\d)")
            object.__setattr__(self, "_regex", re.compile(f"^{rx}$"))

    def match(self, name: str) -> float | None | bool:
        """The level a column of this family stands for; True for the single score; None if no match."""
        if self._regex is None:
            return True if name == self.key or (self.key == "twcrps" and name.startswith("twcrps_")) \
                else None
        m = self._regex.match(name)
        return int(m.group("pct")) / 100.0 if m else None


@dataclass(frozen=True)
class Column:
    """One score column, resolved: its name, its declaration, and its level (families)."""

    name: str
    score: Score
    level: float | None = None

    @property
    def label(self) -> str:
        return self._fill(self.score.label)

    @property
    def relative_label(self) -> str:
        return self._fill(self.score.relative_label)

    @property
    def relative_name(self) -> str:
        """Column name of the relative number in ``Evaluation.relative``."""
        return self.name + ("_diff" if self.score.versus == "difference" else "")

    @property
    def roles(self) -> frozenset[str]:
        extra = self.score.level_roles(self.level) if (self.score.level_roles and self.level) else set()
        return self.score.roles | frozenset(extra)

    @property
    def is_loss(self) -> bool:
        return self.score.orientation == "lower"

    @property
    def nominal(self) -> float | None:
        """Nominal value of a calibration column (coverage level), else None."""
        return self.level if self.score.orientation == "calibration" else None

    def _fill(self, text: str) -> str:
        return text.replace("{pct}", f"{round(self.level * 100):d}") if self.level is not None else text


_REGISTRY: dict[str, Score] = {}


def register_score(score: Score) -> Score:
    """Add a score declaration (its key must be new)."""
    if score.key in _REGISTRY:
        raise ValueError(f"score {score.key!r} is already registered")
    _REGISTRY[score.key] = score
    return score


def scores() -> list[Score]:
    """Every declared score, in declaration order (the order of tables and outputs)."""
    _load()
    return list(_REGISTRY.values())


def _level_name(pattern: str, level: float, where: str) -> str:
    pct = round(level * 100)
    if abs(level * 100 - pct) > 1e-9 or not 1 <= pct <= 99:
        raise ValueError(f"{where}: level {level!r} cannot be named {pattern.replace('{pct}', 'NN')}; "
                         "expected whole percentages between 0.01 and 0.99")
    return pattern.replace("{pct}", f"{pct:02d}")


def columns(cfg: ScoreConfig | None = None, *, computed: bool = True) -> list[Column]:
    """The columns the declarations expand to under ``cfg`` (only fused-pass ones if ``computed``)."""
    cfg = cfg or ScoreConfig()
    out: list[Column] = []
    for s in scores():
        if computed and s.compute is None:
            continue
        if s.pattern is None:
            out.append(Column(s.key, s))
            continue
        levels = tuple(getattr(cfg, s.config_levels)) if s.config_levels else ()
        names = [_level_name(s.pattern, a, "score config") for a in levels]
        if len(set(names)) != len(names):
            raise ValueError(f"score config: repeated levels {list(levels)} for {s.key}")
        out += [Column(n, s, float(a)) for n, a in zip(names, levels, strict=True)]
    return out


def resolve(name: str) -> Column | None:
    """The declaration behind a column name (``crps``, ``qs_05``, ``interval_80``), or None."""
    if not isinstance(name, str):
        return None
    for s in scores():
        hit = s.match(name)
        if hit is None:
            continue
        return Column(name, s, None if hit is True else float(hit))
    return None


def is_score_column(name: Any) -> bool:
    """Whether a frame column is a score column (any declared score or family member)."""
    return resolve(name) is not None


def score_names(cfg: ScoreConfig | None = None, *, role: str | None = None,
                losses_only: bool = False) -> list[str]:
    """Column names under ``cfg``, optionally only those with a role or only losses."""
    return [c.name for c in columns(cfg) if (role is None or role in c.roles)
            and (not losses_only or c.is_loss)]


def iter_declarations() -> Iterator[Score]:
    """Every declaration (for documentation and help texts)."""
    yield from scores()


def _load() -> None:
    # the built-in declarations live beside their rules; importing the module registers them
    if not _REGISTRY:
        import harness.scores.builtin  # noqa: F401
