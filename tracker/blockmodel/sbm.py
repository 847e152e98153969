"""The ``sbm`` method: the static stochastic blockmodel as a registered position-finding method.

The model and its fit live in :mod:`tracker.models.sbm` (likelihoods in
:mod:`tracker.models.likelihood`, the one likelihood engine); this module only
turns their ``ValueError`` for bad arguments into the user-facing
:class:`tracker.errors.UsageError`.  See :class:`tracker.models.sbm.StaticSBM`
for the formulas and references (Holland, Laskey & Leinhardt 1983; Karrer &
Newman 2011; Daudin, Picard & Robin 2008).
"""

from __future__ import annotations

import functools

from tracker.errors import UsageError
from tracker.models import sbm as _model

__all__ = ["SBMPositions", "select_positions", "log_likelihood", "user_errors"]


def user_errors(fn):
    """Wrap a pure-maths call so that its ``ValueError`` reaches the user as a ``UsageError``."""

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        try:
            return fn(*args, **kwargs)
        except UsageError:
            raise
        except ValueError as exc:
            raise UsageError(str(exc)) from exc

    return wrapper


class SBMPositions(_model.StaticSBM):
    __doc__ = _model.StaticSBM.__doc__

    fit = user_errors(_model.StaticSBM.fit)

    @classmethod
    def select(cls, matrices, directed, k_range, *, seed=0, **options):
        """Choose the number of positions by ICL (see :func:`tracker.models.sbm.select_positions`)."""
        return select_positions(matrices, directed, k_range, seed=seed, **options)


log_likelihood = user_errors(_model.log_likelihood)
select_positions = user_errors(_model.select_positions)
