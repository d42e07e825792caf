"""What the report reads besides the evaluation: small read helpers over the run and its store.

:class:`Extras` holds the optional inputs of :func:`harness.report.build_report` — the history
of each target as published at the latest origin (for the fan chart), revision statistics, news
decompositions, the pools' weights and model diagnostics — and :func:`gather_extras` reads them
from a run directory. Each part that cannot be read is left empty with the reason in ``notes``,
so the report says what is missing instead of failing.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

#: columns of the diagnostics table the appendix reads (one row per model × origin × quantity)
DIAGNOSTICS_COLUMNS = ("model", "origin", "name", "value")


@dataclass
class Extras:
    """Optional inputs of the report; every field may be empty (``notes`` says why)."""

    history: dict[str, pd.Series] = field(default_factory=dict)
    history_origin: str = ""
    revisions: pd.DataFrame | None = None
    news: list[pd.DataFrame] = field(default_factory=list)
    pool_weights: pd.DataFrame | None = None
    diagnostics: pd.DataFrame | None = None
    notes: dict[str, str] = field(default_factory=dict)


def check_diagnostics(diag: pd.DataFrame | None) -> pd.DataFrame | None:
    """Validate a diagnostics table (``model, origin, name, value``); None passes through.

    Raises
    ------
    ValueError
        A column is missing (the message names the expected columns).
    """
    if diag is None:
        return None
    missing = [c for c in DIAGNOSTICS_COLUMNS if c not in diag.columns]
    if missing:
        raise ValueError(f"diagnostics table: missing column(s) {missing}; expected {list(DIAGNOSTICS_COLUMNS)}")
    out = diag[list(DIAGNOSTICS_COLUMNS)].copy()
    out["origin"] = pd.to_datetime(out["origin"])
    out["value"] = pd.to_numeric(out["value"], errors="coerce").astype(float)
    return out


def news_pairs(origins, limit: int = 3) -> list[tuple[str, str]]:
    """Consecutive origin pairs ending in the latest origin's quarter (at most ``limit``, latest last).

    The pair leading into the quarter is included, so with one origin per quarter the result is
    the last pair; with monthly origins it is the path through the latest quarter.
    """
    o = sorted(pd.Timestamp(x) for x in origins)
    if len(o) < 2:
        return []
    q = o[-1].to_period("Q")
    first = next(i for i, x in enumerate(o) if x.to_period("Q") == q)
    start = max(first - 1, 0)
    pairs = [(str(a.date()), str(b.date())) for a, b in zip(o[start:-1], o[start + 1:], strict=True)]
    return pairs[-limit:]


def read_pool_weights(run_dir, manifest) -> pd.DataFrame | None:
    """The pools' weights table the manifest names (``RUN/<manifest.pools>``), or None."""
    name = getattr(manifest, "pools", "") or ""
    if not name:
        return None
    return pd.read_parquet(Path(run_dir) / name)


def read_diagnostics(run_dir, manifest) -> pd.DataFrame | None:
    """The run's diagnostics table (``manifest.diagnostics_file``, columns ``model, origin, name,
    value, key``), or None when the run recorded none."""
    name = getattr(manifest, "diagnostics_file", "") or ""
    if not name:
        return None
    return check_diagnostics(pd.read_parquet(Path(run_dir) / name))


def history_at(cube, manifest, origin, variables) -> dict[str, pd.Series]:
    """Each variable as published at ``origin``, transformed as the run saw it (its information set)."""
    from vintages import SeriesSpec, build_infosets

    series = {v: SeriesSpec(**manifest.variables[v]) for v in variables if v in manifest.variables}
    if not series:
        return {}
    info = build_infosets(cube, [pd.Timestamp(origin).date().isoformat()], series, freq=manifest.freq,
                          policy="keep", mode="real-time")[0]
    panel = info.panel
    out = {}
    for v in series:
        s = panel.sel(variable=v).to_series().dropna()
        out[v] = pd.Series(s.to_numpy(dtype=float), index=[str(p) for p in s.index])
    return out


def gather_extras(run_dir, manifest, *, news: bool = True, log=None, diagnostics=None) -> Extras:
    """Read what the report shows besides the evaluation: store-side history, revisions, news, pools.

    Parameters
    ----------
    run_dir : path
    manifest : harness.backtest.manifest.RunManifest
    news : bool
        Compute the news decomposition for one model of each covered type (dfm, bvar; a refit at
        two origins per pair).
    diagnostics : DataFrame, optional
        The run's diagnostics when already read (:attr:`harness.backtest.Ledger.diagnostics`);
        else the file the manifest names is read.
    log : callable, optional
        Told what is being read (for a progress display).
    """
    from harness.evaluation.news import news_for_run, news_models

    say = log or (lambda msg: None)
    ex = Extras()
    targets = list(manifest.targets)
    try:
        from vintages import VintageStore, revisions_table

        cube = VintageStore(manifest.store).cube(variables=list(manifest.variables))
        say("history at the latest origin")
        ex.history_origin = str(manifest.origins[-1]) if manifest.origins else ""
        if ex.history_origin:
            ex.history = history_at(cube, manifest, ex.history_origin, targets)
        say("revision statistics")
        specs = {v: manifest.variables[v] for v in targets if v in manifest.variables}
        ex.revisions = revisions_table(cube, specs, pairs=[("first", "release:2"), ("first", "latest")])
    except (OSError, ValueError, KeyError, RuntimeError) as exc:  # the store may live on another machine
        ex.notes["store"] = f"the store {manifest.store} could not be read ({str(exc).splitlines()[0]})"
    if news:
        covered = news_models(manifest)
        if not covered:
            ex.notes["news"] = "no model of the run has a news decomposition (types dfm, bvar)"
        else:
            # one model of each type with a decomposition, the factor model first (the factor model
            # and the BVAR answer the question differently; two BVARs of one run much alike)
            types = {m: str(manifest.model_specs.get(m, {}).get("type", "")) for m in covered}
            first_of_type = {}
            for m in covered:
                first_of_type.setdefault(types[m], m)
            for model in sorted(first_of_type.values(), key=lambda m: types[m] != "dfm"):
                for a, b in news_pairs(manifest.origins):
                    for t in targets:
                        say(f"news {model} {t} {a} → {b}")
                        try:
                            ex.news.append(news_for_run(run_dir, model=model, target=t, horizon=0, origins=(a, b)))
                        except (OSError, ValueError, KeyError, RuntimeError, ArithmeticError) as exc:
                            ex.notes["news"] = f"news decomposition failed ({str(exc).splitlines()[0]})"
    try:
        ex.pool_weights = read_pool_weights(run_dir, manifest)
        ex.diagnostics = (check_diagnostics(diagnostics) if diagnostics is not None and len(diagnostics)
                          else read_diagnostics(run_dir, manifest))
    except (OSError, ValueError) as exc:
        ex.notes["run files"] = f"a file the manifest names could not be read ({str(exc).splitlines()[0]})"
    return ex
