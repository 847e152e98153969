"""Statistical network models (pure maths on arrays; bad arguments raise ``ValueError``).

* :mod:`tracker.models.likelihood`: the SBM likelihoods (Bernoulli, Poisson,
  degree-corrected) on sparse block statistics, the one likelihood engine;
* :mod:`tracker.models.sbm`: the static blockmodel of one period;
* :mod:`tracker.models.dynamic`: the dynamic blockmodel (Markov positions).
"""
