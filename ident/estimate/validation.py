"""The "continued" fit figure of a validation: the model run through the data before the record.

:func:`ident.assess.diagnostics.validate_model` gives the fit *from rest* and
with the *initial state estimated* on a leading window that is not scored. When
the data just before the validated record are at hand (the estimation part
before a held-out tail, or the part of a log before ``check --from``), the
honest figure is the model *continued* from them: its state at the start of the
record is its own, and every sample of the record is scored. This module
computes that figure with the held-out scoring of the identification
(:func:`ident.estimate.scoring.held_out_score` with a warm-up), so ``fit``,
``check`` and ``run`` report the same number for the same data.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..assess.diagnostics import FitFigure
from ..lti.models import StateSpaceModel
from .data import Experiment
from .preprocess import PreparedData
from .scoring import held_out_score, score_window, warmups_for

__all__ = ["continued_fit", "continued_fits"]


def continued_fit(model: StateSpaceModel, u: np.ndarray, y: np.ndarray, warmup_u: np.ndarray,
                  warmup_y: np.ndarray) -> FitFigure | None:
    """Fit of ``model`` on ``(u, y)`` continued from the samples just before them.

    Parameters
    ----------
    model : StateSpaceModel
    u, y : numpy.ndarray, shape (N, m) and (N, p)
        The record (deviations from the operating point).
    warmup_u, warmup_y : numpy.ndarray
        The samples just before it; ``None`` is returned when there are none.

    Returns
    -------
    FitFigure or None
        Kind ``"continued"``: the initial state (and a constant output offset,
        on long warm-ups) fitted to the start of the warm-up, the model run
        through it, every sample of the record scored.
    """
    if warmup_u.shape[0] == 0:
        return None
    record = Experiment(u, y)
    window = score_window([record], model.n_states)
    score = held_out_score(model, [record], window, warmups=[Experiment(warmup_u, warmup_y)])
    return FitFigure("continued", score.fit, 0, "continued from the data before")


def continued_fits(model: StateSpaceModel, prep: PreparedData) -> list[FitFigure | None]:
    """Return the continued figure of every validation record (``None`` where no estimation record leads in).

    Separate validation records (another log) are never continued.
    """
    warm: Sequence[Experiment | None] = warmups_for(prep.validation, prep.estimation, prep.validation_ranges,
                                                    prep.estimation_ranges)
    out: list[FitFigure | None] = []
    for record, before in zip(prep.validation, warm, strict=True):
        if before is None or prep.separate_validation:
            out.append(None)
            continue
        out.append(continued_fit(model, record.u, record.y, before.u, before.y))
    return out
