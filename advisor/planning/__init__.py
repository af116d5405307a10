"""The next-campaign plan: which parameters matter, where to start, how many trials help,
and how long model fitting will take.

Four questions a team settles before a campaign, each answered from the logged trials
and a chosen surrogate:

* :func:`parameter_relevance` -- first-order and total Sobol indices of the surrogate's
  mean, with intervals from refits of the surrogate on half-samples of the trials (the
  model's uncertainty, not only Monte-Carlo error), cross-checked by held-out
  permutation importance and (for a GP) the fitted length scales; parameters whose
  effect is shown to be small are flagged as candidates to freeze at their best logged
  value.
* :func:`propose_batch` -- the first ``K`` settings of the next campaign, chosen by the
  surrogate and an acquisition setting from all logged trials, with predicted mean and
  90% interval, as a table with the log's own columns; the batch differs by
  construction (local penalization or distinct joint Thompson draws, one model fit, see
  :mod:`advisor.batching`) and varies every parameter unless freezing is asked for.
* :func:`learning_curve` -- held-out CRPS and NLL against the number of training trials,
  and a plain-words reading of whether more trials still help.
* :func:`cost_projection` -- measured fit and predict seconds against the number of
  trials, a fitted power-law exponent, and the projected time per iteration at the next
  campaign's size.

Everything works in minimization form internally (``TrialTable.y``); values shown to
the user (proposal means and intervals) are turned back into the user's units and
direction with ``TrialTable.sign``.

References
----------
.. [SAL2010] Saltelli, A., Annoni, P., Azzini, I., Campolongo, F., Ratto, M. &
   Tarantola, S. (2010). Variance based sensitivity analysis of model output. Design
   and estimator for the total sensitivity index. Computer Physics Communications 181,
   259-270 (Table 2, estimators (b) and (f); Sec. 5, the A/B design).
.. [SOB2001] Sobol', I. M. (2001). Global sensitivity indices for nonlinear mathematical
   models and their Monte Carlo estimates. Mathematics and Computers in Simulation 55,
   271-280.
.. [SW1989] Shao, J. & Wu, C. F. J. (1989). A general theory for jackknife variance
   estimation. Annals of Statistics 17, 1176-1197 (the delete-d jackknife; from memory).
.. [WU1990] Wu, C. F. J. (1990). On the asymptotic properties of the jackknife
   histogram. Annals of Statistics 18, 1438-1452 (the distribution of
   ``sqrt(r / (n - r)) (theta_r - theta_n)`` over subsamples of size r; from memory).
.. [BRE2001] Breiman, L. (2001). Random forests. Machine Learning 45, 5-32 (Sec. 10,
   variable importance by permuting a variable in the out-of-bag data).
.. [FRD2019] Fisher, A., Rudin, C. & Dominici, F. (2019). All models are wrong, but many
   are useful: learning a variable's importance by studying an entire class of
   prediction models simultaneously. JMLR 20(177) (model reliance, Eq. 3.3).
.. [GLC2010] Ginsbourger, D., Le Riche, R. & Carraro, L. (2010). Kriging is
   well-suited to parallelize optimization. In Computational Intelligence in Expensive
   Optimization Problems, Springer, 131-162 (Sec. 4.2, the kriging believer).
.. [GDHL2016] González, J., Dai, Z., Hennig, P. & Lawrence, N. D. (2016). Batch
   Bayesian optimization via local penalization. AISTATS, PMLR 51, 648-657.
.. [KKSP2018] Kandasamy, K., Krishnamurthy, A., Schneider, J. & Póczos, B. (2018).
   Parallelised Bayesian optimisation via Thompson sampling. AISTATS, PMLR 84, 133-142.
.. [GRWG2005] Gneiting, T., Raftery, A. E., Westveld, A. H. & Goldman, T. (2005).
   Calibrated probabilistic forecasting using ensemble model output statistics and
   minimum CRPS estimation. Monthly Weather Review 133, 1098-1118 (Eq. 5).
.. [LKOB2019] Letham, B., Karrer, B., Ottoni, G. & Bakshy, E. (2019). Constrained
   Bayesian optimization with noisy experiments. Bayesian Analysis 14(2), 495-519
   (eq. 7, noisy expected improvement).
.. [RW2006] Rasmussen, C. E. & Williams, C. K. I. (2006). Gaussian Processes for
   Machine Learning. MIT Press (Sec. 5.1, automatic relevance determination).
"""

from __future__ import annotations

from ..surrogates import make_surrogate
from ._common import CAUTION, PERMUTATION_FREEZE, RELEVANCE_CAUTION, TOTAL_EFFECT_FREEZE
from ._cost import cost_projection, scaling_exponent
from ._learning import learning_curve
from ._proposals import propose_batch
from ._relevance import parameter_relevance

__all__ = ["parameter_relevance", "propose_batch", "learning_curve", "cost_projection",
           "CAUTION", "RELEVANCE_CAUTION", "TOTAL_EFFECT_FREEZE", "PERMUTATION_FREEZE",
           "scaling_exponent", "make_surrogate"]
