"""A model template: copy this file, rename the class, replace ``draw``. It passes check_model as is.

Use it from a spec with ``type = "mypackage.mymodule:LocalDrift"`` (any importable module; the
workers import it by that path), and check it first::

    from harness.testing import check_model
    print(check_model(LocalDrift()))             # every law, passed / failed / skipped, and why
    check_model(LocalDrift()).raise_if_failed()  # in a test

or run ``python docs/model_template.py``.

The contract (what :func:`harness.testing.check_model` verifies)
----------------------------------------------------------------
1. **name and version.** ``name`` is a non-empty string (it labels the model in messages and
   the ledger); ``version`` is a string you bump whenever the model's results change, so cached
   forecasts are not reused.
2. **Hyperparameters are keyword-only and stored unchanged.** ``__init__`` takes them as
   keyword-only arguments, stores each under its own name exactly as given, and does nothing
   else: no validation, no fitting, no data. Declare the values each accepts in
   ``param_constraints`` (:mod:`harness.models.params`); :meth:`BaseModel.validate` checks them
   at forecast time and the spec parser when the spec is read.
3. **params().** ``type(model)(**model.params())`` must forecast exactly like ``model`` and
   ``params()`` must be JSON-able (a spec stores it). :class:`~harness.models.base.BaseModel`
   derives it from the constructor's signature.
4. **Only info and rng.** The draws depend on the information set and the generator passed in,
   nothing else: no global NumPy random state, no clock, files, network, store or environment.
   Read data through :class:`~harness.models.base.TargetLayout` (``layout.values`` is the panel
   with partial quarters left out); never modify ``info``.
5. **Published targets are returned as published.** A target already in the information set
   is returned as that value in every draw. The template does it for you
   (:func:`~harness.models.base.output_array`). A partial quarter (``InfoSet.partial``) is not
   a published value: the layout leaves it out, so your model forecasts it.
6. **Too little data raises, never NaN.** When the information set cannot support the estimate
   raise :class:`~harness.models.errors.InsufficientDataError` (``self.insufficient_data(...)``) saying which
   variable, how many observations were needed and how many were found. The runner records the
   failure and carries on; NaN draws are refused by the output contract.
7. **It pickles.** Workers receive the model by pickling: define the class at module level, keep
   only plain values as attributes (no lambdas, open files, locks), and put learned state in
   attributes ending in ``_`` (set in ``draw``, never in ``__init__``).
8. **Output.** ``forecast(info, targets, n_draws, rng)`` returns an ``xarray.DataArray`` of dims
   ``(draw, variable, horizon)`` with the targets' coordinates, float64, all finite
   (:func:`harness.models.contract.validate_forecast`). With :class:`BaseModel` you only write
   ``draw(layout, rng)`` returning a ``(n_draws, n_target_variables, n_horizons)`` array.
9. **A deterministic path is continued.** On a noise-free straight line the draws must centre on
   its continuation at each target's own period (so a model one horizon off fails). A model
   that by design continues only a constant (a random walk without drift) says so in its
   ``check_cases`` class method (``CheckCase(..., exact_path="constant")``); so does a model that
   needs a special information set (``infoset_layout = "native"``).

The example: a random walk with drift under the diffuse prior
-------------------------------------------------------------
Per target variable, from the last ``window`` one-period changes ``d_t`` of its own trailing
stretch of observations: ``sigma^2 ~ SSR / chi^2_{m-1}``, ``mu | sigma^2 ~ N(mean(d),
sigma^2 / m)`` and ``y_{T+s} | mu, sigma^2 ~ N(y_T + s mu, s sigma^2)``, i.e. the posterior
predictive of a Gaussian random walk with drift under ``p(mu, sigma^2) ~ 1/sigma^2`` (Zellner
1971, ch. 3). One step ahead it is Student-t with ``m - 1`` degrees of freedom, location
``y_T + mean(d)`` and scale ``s_d sqrt(1 + 1/m)``.

References
----------
Zellner, A. (1971). *An Introduction to Bayesian Inference in Econometrics*, Wiley, ch. 3.
"""

from __future__ import annotations

import numpy as np

from harness.models.base import BaseModel, TargetLayout
from harness.models.params import Interval


class LocalDrift(BaseModel):
    """Random walk with drift per target variable, parameters integrated over their posterior.

    Parameters
    ----------
    window : int, default 40
        Number of most recent one-period changes used to estimate drift and scale (at least 3).
    """

    name = "local_drift"
    version = "1"
    # one declaration of what each parameter accepts: the spec parser and validate() read it
    param_constraints = {"window": [Interval(int, 3, None)]}

    def __init__(self, *, window: int = 40):
        self.window = window  # stored unchanged; no work here

    def draw(self, layout: TargetLayout, rng: np.random.Generator) -> np.ndarray:
        """Draws ``(n_draws, n_target_variables, n_horizons)``; published cells are filled later."""
        window = self.validate()["window"]
        n_draws = layout.n_draws
        out = np.zeros((n_draws, *layout.observed.shape))
        # per target variable: its trailing stretch of observations and the steps of each target
        runs, steps = layout.own_runs()
        fitted = {}
        for j, ((start, stop), col) in enumerate(zip(runs, layout.columns, strict=True)):
            name = layout.targets.variables[j]
            y = layout.values[start:stop, col]
            changes = np.diff(y)[-window:]
            m = len(changes)
            if m < 3:
                raise self.insufficient_data(f"variable {name!r} needs at least 4 consecutive observations "
                                 f"(3 changes), got {len(y)}")
            mean = changes.mean()
            ssr = float(((changes - mean) ** 2).sum())
            sigma2 = ssr / rng.chisquare(m - 1, size=n_draws)
            mu = mean + np.sqrt(sigma2 / m) * rng.standard_normal(n_draws)
            live = np.flatnonzero(steps[j] > 0)
            s = steps[j, live].astype(float)
            z = rng.standard_normal((n_draws, len(live)))
            out[:, j, live] = y[-1] + mu[:, None] * s + np.sqrt(sigma2[:, None] * s) * z
            fitted[name] = {"drift": float(mean), "n_changes": m}
        self.fits_ = fitted  # learned state ends in "_"
        return out


if __name__ == "__main__":
    from harness.testing import check_model

    print(check_model(LocalDrift()))
