"""Per-task model diagnostics: collected by the worker, stored with the ledger, checked for the summary.

A model may set ``diagnostics_`` after ``forecast`` (e.g. the stochastic-volatility BVAR's
effective sample sizes, the BVAR's chosen hyperparameters and log marginal likelihood): a dict
of numbers, possibly nested (``{"ess": {"own_lag1[gdp]": 412.0}}``). The worker flattens it
(:func:`flatten`: nested names joined by ``.``, values as float, anything not a number left out)
and keeps it with the task; the run writes one table per run, ``diagnostics-<digest>.parquet``
(columns model, origin, name, value, key), named by the manifest (``diagnostics_file``) and read
back as :attr:`harness.backtest.Ledger.diagnostics`.

Warnings: the run summary calls :func:`diagnostic_warnings` with that table; it returns the
messages of every check registered with :func:`register_diagnostic_check` (thresholds and rules
belong to the checks, none ship here). The run records the messages in its manifest
(``diagnostic_warnings``) and prints them after the summary line; the report shows them too.

One check ships: :func:`mcmc_convergence_check`, for every model that records the summary of
:func:`harness.models.mcmc.mcmc_diagnostics` (``converged``, ``min_ess``, ``max_rhat`` and the
thresholds it applied, ``ess_min`` and ``rhat_max``).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

COLUMNS = ("model", "origin", "name", "value", "key")
#: most diagnostics one task may record (a model returning a huge dict is cut, with a note)
MAX_PER_TASK = 500
_CHECKS: list[Callable] = []


def flatten(diag: Any, prefix: str = "") -> dict[str, float]:
    """Nested numbers of a ``diagnostics_`` mapping as ``{"a.b": float}`` (non-numbers left out)."""
    out: dict[str, float] = {}
    if not isinstance(diag, Mapping):
        return out
    for k, v in diag.items():
        name = f"{prefix}{k}"
        if isinstance(v, Mapping):
            out.update(flatten(v, name + "."))
        elif isinstance(v, bool):
            out[name] = float(v)
        else:
            try:
                x = float(v)
            except (TypeError, ValueError):
                continue
            out[name] = x  # NaN and inf are kept: a check may want to see them
        if len(out) >= MAX_PER_TASK:
            break
    return out


def take(model) -> dict[str, float]:
    """The flattened ``diagnostics_`` a model set in its last ``forecast`` (empty if none)."""
    return flatten(getattr(model, "diagnostics_", None))


def clear(model) -> None:
    """Forget a previous task's ``diagnostics_`` (a model object serves several tasks in one process)."""
    try:
        delattr(model, "diagnostics_")
    except AttributeError:
        pass


def register_diagnostic_check(check: Callable) -> Callable:
    """Register ``check(table) -> list[str]`` (warning messages); usable as a decorator.

    ``table`` is the run's diagnostics DataFrame (columns model, origin, name, value, key).
    """
    if check not in _CHECKS:
        _CHECKS.append(check)
    return check


def unregister_diagnostic_check(check: Callable) -> None:
    """Remove a registered check (tests, notebooks)."""
    if check in _CHECKS:
        _CHECKS.remove(check)


def has_checks() -> bool:
    """Whether any diagnostic check is registered."""
    return bool(_CHECKS)


def diagnostic_warnings(table) -> list[str]:
    """Messages of every registered check on the diagnostics ``table`` (a failing check says so)."""
    out: list[str] = []
    for check in list(_CHECKS):
        try:
            out.extend(str(m) for m in (check(table) or ()))
        except Exception as exc:  # a broken check must not lose a finished run
            name = getattr(check, "__qualname__", repr(check))
            out.append(f"diagnostic check {name} failed: {type(exc).__name__}: {exc}")
    return out


def mcmc_convergence_check(table) -> list[str]:
    """One warning per model whose sampler missed its ESS or split-R-hat threshold at some origin.

    Reads the rows ``converged``, ``min_ess``, ``max_rhat``, ``ess_min`` and ``rhat_max`` that
    :func:`harness.models.mcmc.mcmc_diagnostics` puts into a model's ``diagnostics_``
    (thresholds: Vehtari et al. 2021, as recorded by the model). Models without them are left
    alone.
    """
    if table is None or not len(table):
        return []
    names = {"converged", "min_ess", "max_rhat", "ess_min", "rhat_max"}
    t = table[table["name"].isin(names)]
    if not len(t) or "converged" not in set(t["name"]):
        return []
    out = []
    for model, g in t.groupby("model", sort=True):
        w = g.pivot_table(index="origin", columns="name", values="value", aggfunc="first")
        if "converged" not in w:
            continue
        bad = w[w["converged"] < 0.5]
        if not len(bad):
            continue
        parts = []
        if "min_ess" in w and "ess_min" in w:
            parts.append(f"lowest ESS {bad['min_ess'].min():.0f} (threshold {w['ess_min'].max():.0f})")
        if "max_rhat" in w and "rhat_max" in w:
            parts.append(f"highest split R-hat {bad['max_rhat'].max():.3f} (threshold {w['rhat_max'].max():.2f})")
        out.append(f"{model}: MCMC diagnostics below threshold at {len(bad)} of {len(w)} origins"
                   + (f" — {', '.join(parts)}" if parts else "")
                   + "; its draws may not represent the posterior (raise n_iter, thin or chains)")
    return out


register_diagnostic_check(mcmc_convergence_check)
