"""Which release moved the forecast: the news decomposition between two origins of a run.

:func:`news_for_run` rebuilds the two origins' information sets from the run's store, exactly as
the run saw them (same variables, transformations, policy and mode), refits the model at both
and splits the change of its point forecast into the contribution of each newly released value,
the revisions of values published before, and the re-estimation of the parameters
(:func:`harness.models.news.news_decomposition`; Bańbura & Modugno 2014).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from harness.errors import OptionError, UnknownNameError

#: model types whose forecasts the decomposition covers (linear-Gaussian given parameters)
NEWS_MODELS: tuple[str, ...] = ("dfm", "bvar")


def news_models(manifest) -> list[str]:
    """The run's models whose type the news decomposition covers, in the run's order."""
    return [m for m in manifest.models
            if str(manifest.model_specs.get(m, {}).get("type", "")) in NEWS_MODELS]


def news_for_run(run_dir: str | Path, *, model: str | None = None, target: str | None = None,
                 horizon: int = 0, origins: tuple[str, str] | None = None) -> pd.DataFrame:
    """The news decomposition of one run's forecast between two of its origins.

    Parameters
    ----------
    run_dir : path
        A run directory.
    model : str, optional
        A model of the run of type ``dfm`` or ``bvar`` (default the first such model).
    target : str, optional
        A target variable (default the first).
    horizon : int
        Horizon relative to the later origin's quarter (0 = the nowcast of that quarter).
    origins : (str, str), optional
        Two origins of the run, earlier first (default the last two).

    Returns
    -------
    DataFrame
        As :func:`harness.models.news.news_decomposition` (contributions add up to the total).

    Raises
    ------
    ValueError
        No model the decomposition covers, an unknown model, target or origin (the message lists
        the valid ones).
    """
    from harness.backtest.manifest import RunManifest
    from harness.models import get_model_class
    from harness.models.news import news_decomposition
    from vintages import SeriesSpec, VintageStore, build_infosets

    man = RunManifest.read(run_dir)
    covered = news_models(man)
    if not covered:
        raise OptionError(f"{run_dir}: no model of the run has a news decomposition (types "
                         f"{list(NEWS_MODELS)}); models: {list(man.models)}")
    model = model or covered[0]
    if model not in covered:
        raise UnknownNameError(f"model {model!r} has no news decomposition; expected one of {covered}")
    target = target or man.targets[0]
    if target not in man.targets:
        raise UnknownNameError(f"unknown target {target!r}; expected one of {list(man.targets)}")
    run_origins = list(man.origins)
    if origins is None:
        if len(run_origins) < 2:
            raise ValueError(f"{run_dir}: the run has {len(run_origins)} origin(s); a decomposition needs two")
        origins = (run_origins[-2], run_origins[-1])
    old, new = (str(pd.Timestamp(o).date()) for o in origins)
    for o in (old, new):
        if o not in run_origins:
            raise UnknownNameError(f"origin {o} is not an origin of the run ({run_origins[0]} … {run_origins[-1]})")
    if old >= new:
        raise OptionError(f"origins must be in time order, earlier first; got {old} and {new}")
    ms = man.model_specs[model]
    cls = get_model_class(ms["type"])
    instance = cls(**ms.get("params", {}))
    cube = VintageStore(man.store).cube(variables=list(man.variables))
    dates = np.array([old, new], dtype="datetime64[D]")
    if getattr(cls, "infoset_layout", "panel") == "native":
        series = {n: SeriesSpec(transform=s.get("transform", "level")) for n, s in man.variables.items()}
        infos = build_infosets(cube, dates, series, freq="M", layout="native", policy="keep", mode=man.mode)
    else:
        series = {n: SeriesSpec(**s) for n, s in man.variables.items()}
        infos = build_infosets(cube, dates, series, freq=man.freq, policy=man.policy, mode=man.mode)
    frame = news_decomposition(instance, infos[0], infos[1], target, int(horizon))
    frame.attrs["model"] = model
    return frame
