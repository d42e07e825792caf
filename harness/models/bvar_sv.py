"""Bayesian VAR with stochastic volatility (random-walk log-volatilities), by Gibbs sampling.

Model (Cogley & Sargent 2005; Carriero, Clark & Marcellino 2019):

.. math::

    y_t = B'x_t + u_t, \\quad A u_t = \\Lambda_t^{1/2}\\varepsilon_t, \\quad
    \\Lambda_t = \\operatorname{diag}(e^{h_{1t}}, \\dots, e^{h_{nt}}), \\quad
    h_{it} = h_{i,t-1} + \\eta_{it},\\ \\eta_{it} \\sim N(0, \\phi_i),

with ``A`` unit lower triangular, so :math:`\\Sigma_t = A^{-1}\\Lambda_t A^{-1\\prime}`.

Priors: independent Minnesota-type normal on the coefficients (own first lag mean ``m_i``; s.d.
``lambda / l^d`` on own lags, ``lambda * cross / l^d * s_i / s_j`` on other variables' lags, a
nearly flat intercept); ``a_ij ~ N(0, a_prior_var)``; ``phi_i`` scaled inverse chi-square with
``vol_var_df`` degrees of freedom and scale ``vol_var_scale``; ``h_{i1} ~ N(log s_i^2, 4)`` with
``s_i^2`` the variance of the initial orthogonalised residuals (common practice).

Gibbs blocks, in the order required by Del Negro & Primiceri (2015):

1. ``B`` equation by equation with the triangular factorisation: the conditional posterior of
   equation ``i``'s coefficients combines equations ``j >= i`` of the orthogonalised system
   (the corrected triangular algorithm of Carriero, Chan, Clark & Marcellino 2022); ``k x k``
   solves instead of one ``nk x nk`` solve;
2. the free elements of ``A``, row by row (weighted least squares);
3. the mixture indicators of the Kim, Shephard & Chib (1998) 7-component approximation of
   ``log chi^2_1`` (inverse CDF per equation and period);
4. ``phi_i`` given the indicators with the log-volatility paths integrated out: the Gaussian
   marginal of the transformed residuals given the indicators and ``phi_i`` comes from the
   same banded Cholesky factor the precision sampler uses (Chan & Jeliazkov 2009; Chan & Grant
   2016), and ``log phi_i`` moves by a few random-walk Metropolis-Hastings steps whose scale
   adapts during burn-in only (Roberts & Rosenthal 2009);
5. all log-volatility paths given ``phi`` by the precision sampler (Chan & Jeliazkov 2009): the
   posterior precision is tridiagonal per equation, factorised by a banded Cholesky.

Blocks 4-5 draw ``(phi, h)`` jointly given the indicators (a collapsed step). The conjugate
inverse-gamma draw of ``phi`` given ``h`` that it replaces is the centred parameterisation
that mixes slowly when ``h`` is persistent and informative about ``phi``: on the demo's panel
the ESS of ``phi`` was about 20 of 700 draws; now it is in the hundreds. The block is checked by
a Geweke (2004) joint-distribution test (``tests/harness/models/test_models_sv_geweke.py``).

Several chains (``chains``, default 4, as Vehtari et al. 2021 recommend) run one after the other, each from its own start (``phi``
from its prior, shifted volatility levels); their draws are pooled for the predictive and the
diagnostics (:func:`harness.models.mcmc.mcmc_diagnostics`) use them as separate chains.

Implementation: :func:`sv_gibbs` runs the iterations in one numba-compiled kernel (cached on
disk; the first call in a fresh environment compiles it, some seconds), fed with random numbers
drawn in Python in the same order as the block-by-block NumPy/SciPy reference
(``sv_gibbs(..., reference=True)``, built from :func:`draw_coefficients`, :func:`draw_impacts`
and :func:`sample_log_volatility`). A seed therefore gives the same draws in both up to floating
point rounding, not bit for bit; in a strongly persistent chain rounding differences can grow
until an indicator draw differs, after which the two chains are different draws from the same
posterior.

Predictive draws simulate future log-volatilities and, like :class:`BayesianVAR`, condition on
the observed ragged edge (Waggoner & Zha 1999) with the time-varying shock covariances.

References
----------
Kim, S., Shephard, N. and Chib, S. (1998). Stochastic volatility: likelihood inference and
comparison with ARCH models. *Review of Economic Studies* 65(3), 361-393 (Table 4).
Omori, Y., Chib, S., Shephard, N. and Nakajima, J. (2007). Stochastic volatility with leverage:
fast and efficient likelihood inference. *Journal of Econometrics* 140(2), 425-449 (10-component
table; not used here).
Chan, J. C. C. and Jeliazkov, I. (2009). Efficient simulation and integrated likelihood
estimation in state space models. *International Journal of Mathematical Modelling and
Numerical Optimisation* 1(1/2), 101-120.
Cogley, T. and Sargent, T. J. (2005). Drifts and volatilities: monetary policies and outcomes in
the post WWII US. *Review of Economic Dynamics* 8(2), 262-302.
Carriero, A., Clark, T. E. and Marcellino, M. (2019). Large Bayesian vector autoregressions
with stochastic volatility and non-conjugate priors. *Journal of Econometrics* 212(1), 137-154.
Carriero, A., Chan, J., Clark, T. E. and Marcellino, M. (2022). Corrigendum to "Large Bayesian
vector autoregressions with stochastic volatility and non-conjugate priors". *Journal of
Econometrics* 227(2), 506-512.
Del Negro, M. and Primiceri, G. E. (2015). Time varying structural vector autoregressions and
monetary policy: a corrigendum. *Review of Economic Studies* 82(4), 1342-1345.
Geyer, C. J. (1992). Practical Markov chain Monte Carlo. *Statistical Science* 7(4), 473-483.
Chan, J. C. C. and Grant, A. L. (2016). On the observed-data deviance information criterion for
volatility modeling. *Journal of Financial Econometrics* 14(4), 772-802.
Roberts, G. O. and Rosenthal, J. S. (2009). Examples of adaptive MCMC. *Journal of Computational
and Graphical Statistics* 18(2), 349-367.
Geweke, J. (2004). Getting it right: joint distribution tests of posterior simulators. *Journal
of the American Statistical Association* 99(467), 799-804.
"""

from __future__ import annotations

import numpy as np

from harness.models.base import (
    BaseModel,
    TargetLayout,
    ar1_scales,
    per_variable,
    register,
)
from harness.models.bvar import ragged_split
from harness.models.conditional import var_paths
from harness.models.errors import ModelParameterError
from harness.models.mcmc import effective_sample_size, mcmc_diagnostics  # noqa: F401
from harness.models.params import Interval, PerVariable
from harness.models.sv_blocks import sample_log_volatility
from harness.models.sv_sampler import SVPosterior, _minnesota_independent, sv_gibbs
from harness.models.sv_tables import KSC_MEANS, KSC_OFFSET, KSC_PROBS, KSC_VARIANCES

_N_ITER, _BURN = 1000, 300  # per chain; see the class docstring
_MIN_KEPT = 8  # kept draws per chain the split-chain diagnostics need

__all__ = [
    "KSC_MEANS",
    "KSC_OFFSET",
    "KSC_PROBS",
    "KSC_VARIANCES",
    "BayesianVARSV",
    "SVPosterior",
    "effective_sample_size",
    "sample_log_volatility",
]


@register
class BayesianVARSV(BaseModel):
    """BVAR with random-walk stochastic volatility (Gibbs sampler); see the module docstring.

    Parameters
    ----------
    lags : int, default 4
    tightness : float, default 0.2
        Prior s.d. ``lambda`` of own-lag coefficients at lag 1.
    cross : float, default 0.5
        Relative prior s.d. of other variables' lags (free here: the prior is not conjugate).
    lag_decay : float, default 1.0
    prior_mean : float or dict, default 0.0
        Prior mean of own first lags (1 for levels, 0 for growth rates).
    a_prior_var : float, default 10.0
        Prior variance of the free elements of ``A``.
    vol_var_df, vol_var_scale : float, default 5.0 and 0.01
        ``phi_i ~ vol_var_df * vol_var_scale / chi^2_{vol_var_df}`` (scaled inverse chi-square).
    n_iter, burn, thin : int, default 1000, 300, 1
        Gibbs iterations, burn-in, thinning per chain: ``(n_iter - burn) // thin`` kept draws
        each (at least 8, for the split-chain diagnostics). On the demo's panel (4 variables x 2
        lags x 40-120 quarters) two chains give a bulk ESS of the worst key parameter of about
        50-250 (median about 130), below the threshold at about a fifth of the origins; four
        chains (the default) about 160-310 at the six worst of those origins and split R-hat at
        most about 1.03, for 0.50 s per fit against 0.44 s with two (one core, kernel compiled,
        2,000 predictive draws).
    chains : int, default 4
        Chains, run one after the other from the model's generator; draws pooled.

    Attributes
    ----------
    posterior_ : SVPosterior
        Kept draws after :meth:`forecast`.
    diagnostics_ : dict
        :func:`harness.models.mcmc.mcmc_diagnostics` of the own first-lag coefficients, the last
        log-volatilities and the ``phi_i`` over the chains (``ess`` the multi-chain bulk ESS,
        ``rhat`` the rank-normalised split R-hat, ``min_ess``, ``max_rhat``, ``n_kept`` over
        all chains, ``n_chains``, ``converged`` against :data:`~harness.models.mcmc.ESS_MIN` and
        :data:`~harness.models.mcmc.RHAT_MAX`, ``flagged``), the settings, and
        ``vol_var_accept``: the acceptance rate of the ``phi`` proposals per variable.

    Notes
    -----
    Estimation uses the balanced block (see :class:`BayesianVAR`), which needs at least
    ``lags + 3`` rows. Stationarity is not imposed. On a ragged edge the tail is conditioned on
    exactly given each draw's future volatilities, which are simulated from the random walk and
    not updated by the observed tail values (an approximation, negligible for short tails). When ``n_draws`` exceeds the kept Gibbs draws,
    the kept draws are resampled with replacement (each with its own future shocks).
    """

    name = "bvar_sv"
    version = "3"
    param_constraints = {
        "lags": [Interval(int, 1, None)],
        "tightness": [Interval(float, 0, None, closed="neither")],
        "cross": [Interval(float, 0, None, closed="neither")],
        "lag_decay": [Interval(float, 0, None)],
        "prior_mean": [Interval(float), PerVariable(Interval(float))],
        "a_prior_var": [Interval(float, 0, None, closed="neither")],
        "vol_var_df": [Interval(float, 0, None, closed="neither")],
        "vol_var_scale": [Interval(float, 0, None, closed="neither")],
        "n_iter": [Interval(int, 1, None)],
        "burn": [Interval(int, 0, None)],
        "thin": [Interval(int, 1, None)],
        "chains": [Interval(int, 1, None)],
    }

    def __init__(self, lags: int = 4, tightness: float = 0.2, cross: float = 0.5,
                 lag_decay: float = 1.0, prior_mean: float | dict = 0.0, a_prior_var: float = 10.0,
                 vol_var_df: float = 5.0, vol_var_scale: float = 0.01, n_iter: int = _N_ITER,
                 burn: int = _BURN, thin: int = 1, chains: int = 4):
        self.lags = lags
        self.tightness = tightness
        self.cross = cross
        self.lag_decay = lag_decay
        self.prior_mean = prior_mean
        self.a_prior_var = a_prior_var
        self.vol_var_df = vol_var_df
        self.vol_var_scale = vol_var_scale
        self.n_iter = n_iter
        self.burn = burn
        self.thin = thin
        self.chains = chains

    @classmethod
    def check_params(cls, params: dict, model: str) -> None:
        """At least one Gibbs draw must be kept after burn-in and thinning."""
        n_iter, burn, thin = (int(params.get(k, d)) for k, d in (("n_iter", _N_ITER), ("burn", _BURN),
                                                                 ("thin", 1)))
        if (n_iter - burn) // thin < _MIN_KEPT:
            raise ModelParameterError(f"model {model!r}: parameter 'n_iter' must be large enough to "
                                      f"keep {_MIN_KEPT} draws per chain (for the diagnostics) after "
                                      f"burn={burn} with thin={thin}; got {n_iter}")

    def fit_sample(self, y: np.ndarray, variables: list[str], rng: np.random.Generator) -> SVPosterior:
        """Run the Gibbs sampler on a balanced sample ``(T, n)``; sets ``posterior_`` and ``diagnostics_``."""
        self.validate()
        p = int(self.lags)
        if y.shape[0] < p + 3:
            raise self._fail(f"the balanced sample (all {len(variables)} variables observed) needs "
                             f"at least lags + 3 = {p + 3} periods, got {y.shape[0]}")
        n = y.shape[1]
        m = per_variable(self, "prior_mean", self.prior_mean, variables)
        b0, v0 = _minnesota_independent(n, p, float(self.tightness), float(self.cross),
                                        float(self.lag_decay), m, ar1_scales(y))
        post = sv_gibbs(y, p, b0, v0, float(self.a_prior_var), float(self.vol_var_df),
                        float(self.vol_var_scale), int(self.n_iter), int(self.burn), int(self.thin),
                        rng, chains=int(self.chains))
        idx = np.arange(n)
        draws = {}
        for label, arr in (("own_lag1", post.coefs[:, idx, idx]), ("log_vol_last", post.log_vol[:, -1]),
                           ("vol_innov_var", post.phi)):
            by_chain = post.by_chain(np.asarray(arr))  # (kept per chain, chains, n)
            for k, v in enumerate(variables):
                draws[f"{label}[{v}]"] = by_chain[:, :, k]
        diag = mcmc_diagnostics(draws)
        self.posterior_ = post
        self.diagnostics_ = {**diag, "n_kept": int(post.phi.shape[0]), "n_iter": int(self.n_iter),
                             "burn": int(self.burn), "thin": int(self.thin),
                             "vol_var_accept": {v: float(post.phi_accept[:, k].mean())
                                                for k, v in enumerate(variables)}}
        return post

    def draw(self, layout: TargetLayout, rng: np.random.Generator) -> np.ndarray:
        """Predictive draws ``(draw, variable, horizon)``; see the class docstring."""
        lay, n_draws = layout, layout.n_draws
        start, stop, tail_end = ragged_split(lay.values)
        post = self.fit_sample(lay.values[start:stop], lay.variables, rng)
        steps = lay.steps(lay.ordinals[stop - 1])
        horizon = max(int(steps.max()), tail_end - stop)
        draws = np.zeros((n_draws, *steps.shape))
        if horizon > 0:
            paths = self.simulate(post, lay.values[stop - int(self.lags):stop],
                                  lay.values[stop:tail_end], horizon, n_draws, rng)
            j, k = np.nonzero(steps > 0)
            draws[:, j, k] = paths[:, steps[j, k] - 1, lay.columns[j]]
        return draws

    def simulate(self, post: SVPosterior, init: np.ndarray, tail: np.ndarray, horizon: int,
                 n_draws: int, rng: np.random.Generator) -> np.ndarray:
        """Predictive paths ``(D, horizon, n)`` with simulated future log-volatilities."""
        m = post.phi.shape[0]
        idx = rng.choice(m, size=n_draws, replace=n_draws > m)
        n = post.phi.shape[1]
        h = post.log_vol[idx, -1][:, None, :] + np.cumsum(
            rng.standard_normal((n_draws, horizon, n)) * np.sqrt(post.phi[idx])[:, None, :], axis=1)
        a_inv = np.linalg.inv(post.a[idx])
        factors = a_inv[:, None, :, :] * np.exp(0.5 * h)[:, :, None, :]
        z = rng.standard_normal((n_draws, horizon, n))
        return var_paths(post.coefs[idx], init, factors, z, tail if tail.shape[0] else None)
