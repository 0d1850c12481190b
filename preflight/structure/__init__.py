"""Global structure: a causal order, pruned parents, noise estimates and cross-checks, one module per job.

* :mod:`.order` -- :func:`causal_order`, the DirectLiNGAM search (Shimizu
  et al. 2011) with the pairwise likelihood-ratio measure of Hyvärinen &
  Smith (2013).
* :mod:`.entropy` -- the entropy approximations behind that measure and
  :func:`pairwise_likelihood_ratios`.
* :mod:`.parents` -- :func:`prune_parents`, t-tests of each variable on its
  predecessors, corrected for multiplicity across all coefficients, and
  :func:`noise_estimates`, the residuals of the structural equations.
* :mod:`.ica_screen` -- :func:`fastica_gaussian_components`, the FastICA
  cross-check: how many independent components look Gaussian, and whether
  they are in fact independent.
* :mod:`.joint_normality` -- :func:`henze_zirkler`, multivariate normality
  of the whole table.
* :mod:`.sample_size` -- :func:`rows_needed`, rows for Jarque-Bera to see a
  given noise shape.
* :mod:`.sortability` -- :func:`varsortability`, Reisach et al. (2021):
  would sorting by marginal variance already give the order?
* :func:`spectral_confounding` -- re-exported from
  :mod:`preflight.checks.confounding`.
"""

from __future__ import annotations

from preflight.checks.confounding import spectral_confounding
from preflight.structure.entropy import (
    LOGCOSH_GAMMA,
    LOGCOSH_K_EVEN,
    LOGCOSH_K_ODD,
    LOGCOSH_MAX_EVALUATIONS,
    MEASURES,
    pairwise_likelihood_ratios,
)
from preflight.structure.ica_screen import (
    COMPONENT_DEPENDENCE_MAX_N,
    ICA_FIT_MAX_N,
    ComponentScreen,
    fastica_gaussian_components,
)
from preflight.structure.joint_normality import HENZE_ZIRKLER_MAX_N, henze_zirkler
from preflight.structure.order import EXPLAINED_SHARE, causal_order
from preflight.structure.parents import noise_estimates, prune_parents
from preflight.structure.sample_size import rows_needed
from preflight.structure.sortability import varsortability

__all__ = [
    "COMPONENT_DEPENDENCE_MAX_N",
    "EXPLAINED_SHARE",
    "HENZE_ZIRKLER_MAX_N",
    "ICA_FIT_MAX_N",
    "LOGCOSH_GAMMA",
    "LOGCOSH_K_EVEN",
    "LOGCOSH_K_ODD",
    "LOGCOSH_MAX_EVALUATIONS",
    "MEASURES",
    "ComponentScreen",
    "causal_order",
    "fastica_gaussian_components",
    "henze_zirkler",
    "noise_estimates",
    "pairwise_likelihood_ratios",
    "prune_parents",
    "rows_needed",
    "spectral_confounding",
    "varsortability",
]
