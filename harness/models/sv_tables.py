"""Constants of the stochastic-volatility sampler: the Kim, Shephard & Chib (1998) mixture and priors."""

from __future__ import annotations

import numpy as np

# Kim, Shephard & Chib (1998), Table 4: the 7-component normal mixture approximating the density
# of log chi^2_1, component j with probability q_j, mean m_j - 1.2704 and variance v_j^2. The
# table's means are for the variate centred at E[log chi^2_1] = -1.2704, hence the offset.
# Values from memory, cross-checked against several independent public copies of the table;
# neither statsmodels nor arch ships them. The tests check their moments against scipy.
KSC_PROBS = np.array([0.00730, 0.10556, 0.00002, 0.04395, 0.34001, 0.24566, 0.25750])
KSC_MEANS = np.array([-10.12999, -3.97281, -8.56686, 2.77786, 0.61942, 1.79518, -1.08819])
KSC_VARIANCES = np.array([5.79596, 2.61369, 5.17950, 0.16735, 0.64009, 0.34023, 1.26261])
KSC_OFFSET = -1.2704

_MIX_MEANS = KSC_MEANS + KSC_OFFSET
_MIX_LOGW = np.log(KSC_PROBS) - 0.5 * np.log(KSC_VARIANCES)
_LOGSQ_OFFSET = 1e-6  # keeps log(e^2) finite for an exactly zero residual (common practice)
_H1_PRIOR_VAR = 4.0
_CONST_VAR = 1e4  # prior variance of the intercepts relative to s_i^2: nearly flat
# acceptance rate the adaptive random-walk step of log phi aims for during burn-in: efficient for a
# one-dimensional random walk Metropolis (Roberts & Rosenthal 2001, section 3)
_ACCEPT_TARGET = 0.44
_PHI_STEP0 = 1.0  # initial proposal s.d. of log phi (adapted during burn-in)
_PHI_STEPS = 3  # Metropolis-Hastings steps of phi per Gibbs iteration (each costs one O(T) pass)
