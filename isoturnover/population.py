"""Population estimates: random-effects meta-analysis of per-animal estimates.

Each animal ``i`` gives an estimate :math:`y_i` (for instance a log half-life) with a
standard error :math:`s_i`, :math:`v_i = s_i^2`. The random-effects model is

.. math::

    y_i = x_i^\\top \\beta + u_i + e_i, \\qquad u_i \\sim N(0, \\tau^2), \\quad
    e_i \\sim N(0, v_i),

with :math:`x_i = 1` (one population mean :math:`\\mu`) or a row of covariates with an
intercept (a mixed-effects meta-regression). For a given :math:`\\tau^2` the weights are
:math:`w_i = 1/(v_i + \\tau^2)` and :math:`\\hat\\beta = (X^\\top W X)^{-1} X^\\top W y`
with covariance :math:`(X^\\top W X)^{-1}`; the generalised statistic is
:math:`Q(\\tau^2) = \\sum_i w_i (y_i - x_i^\\top \\hat\\beta)^2`, with :math:`Q_E = Q(0)`
Cochran's heterogeneity statistic on :math:`k - p` degrees of freedom.

The between-animal variance :math:`\\tau^2 \\ge 0` is estimated by

* ``"dl"`` DerSimonian & Laird (1986), the moment estimator
  :math:`\\hat\\tau^2 = \\max\\{0, (Q_E - (k - p)) / \\operatorname{tr} P_0\\}`,
  :math:`P = W - W X (X^\\top W X)^{-1} X^\\top W` at :math:`\\tau^2 = 0` (for the mean
  alone :math:`\\operatorname{tr} P_0 = \\sum w_i - \\sum w_i^2 / \\sum w_i`);
* ``"pm"`` Paule & Mandel (1982): the root of :math:`Q(\\tau^2) = k - p` (0 when
  :math:`Q_E \\le k - p`), found with Brent's method;
* ``"reml"`` restricted maximum likelihood (Viechtbauer 2005), Fisher scoring
  :math:`\\tau^2 \\leftarrow \\tau^2 + (y^\\top P P y - \\operatorname{tr} P) /
  \\operatorname{tr}(P P)`, kept at :math:`\\tau^2 \\ge 0`, with step halving on the restricted
  log-likelihood :math:`-\\tfrac12[\\sum \\log(v_i + \\tau^2) + \\log|X^\\top W X| +
  Q(\\tau^2)]`.

Intervals: the mean (or each coefficient) by the normal approximation, or with
``adjust="hksj"`` the Hartung–Knapp–Sidik–Jonkman adjustment (covariance times
:math:`Q(\\hat\\tau^2)/(k - p)`, t on :math:`k - p` df; Hartung & Knapp 2001, Sidik &
Jonkman 2002); :math:`\\tau^2` by the Q-profile method (Viechtbauer 2007); a new animal's
value by the prediction interval of Higgins, Thompson & Spiegelhalter (2009),
:math:`\\hat\\mu \\pm t_{k-2} \\sqrt{\\hat\\tau^2 + SE(\\hat\\mu)^2}`; heterogeneity by
:math:`I^2 = \\max\\{0, (Q_E - (k - p))/Q_E\\}` (Higgins & Thompson 2002).

References
----------
DerSimonian R, Laird N (1986) Meta-analysis in clinical trials. Controlled Clinical Trials
7:177–188. Paule RC, Mandel J (1982) Consensus values and weighting factors. J Res Natl Bur
Stand 87:377–385. Viechtbauer W (2005) Bias and efficiency of meta-analytic variance
estimators in the random-effects model. J Educ Behav Stat 30:261–293. Viechtbauer W (2007)
Confidence intervals for the amount of heterogeneity in meta-analysis. Stat Med 26:37–52.
Higgins JPT, Thompson SG (2002) Quantifying heterogeneity in a meta-analysis. Stat Med
21:1539–1558. Higgins JPT, Thompson SG, Spiegelhalter DJ (2009) A re-evaluation of
random-effects meta-analysis. J R Stat Soc A 172:137–159. Hartung J, Knapp G (2001) On
tests of the overall treatment effect in meta-analysis with normally distributed responses.
Stat Med 20:1771–1782. Sidik K, Jonkman JN (2002) A simple confidence interval for
meta-analysis. Stat Med 21:3153–3159. Raudenbush SW (2009) Analyzing effect sizes:
random-effects models. In: The Handbook of Research Synthesis and Meta-Analysis, 2nd ed.
"""

from __future__ import annotations

from .popestimate import PopulationEstimate, population_estimate
from .randomeffects import TAU2_METHODS, RandomEffects, random_effects

__all__ = ["TAU2_METHODS", "RandomEffects", "PopulationEstimate", "random_effects",
           "population_estimate"]
