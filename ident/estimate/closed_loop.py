"""Logs taken in closed loop: detecting feedback, and the two-stage method through a reference.

When a controller closes the loop, the input depends on past outputs and so on
the disturbances: an output-error fit, consistent in open loop, is then biased
([1]_ sec. 13.4). Two remedies are used by :func:`ident.estimate.identify.identify`:

- a prediction-error fit with a noise model (the innovations form, ``K``
  estimated with ``A, B, C, D``), consistent under feedback when the noise
  model can describe the disturbance ([1]_ sec. 13.4, the direct approach);
- when the reference (set point) the controller acted on is logged, the
  **two-stage method** [2]_: the part of the input explained by the reference,
  ``u_r = S(q) r`` (``S`` the input sensitivity, estimated from ``r`` to ``u``
  by an output-error fit, consistent because the reference does not see the
  disturbances), is free of the disturbances, so the plant is identified from
  ``u_r`` to ``y`` as if in open loop.

:func:`feedback_evidence` tells open from closed loop. In open loop the
disturbances never reach the input, so the innovations of the output (the
residuals of a high-order ARX model from the inputs to the outputs, which whiten
the disturbance) do not help to predict the input beyond what its own past
(and the reference) predict; with feedback their past does. An F-test of the
lagged residuals in a least-squares regression of the input decides (Granger's
test of causality [3]_, applied to feedback detection in [4]_). Testing the
residuals rather than the outputs themselves keeps a strongly coloured or swept
input, whose long memory the outputs carry, from looking like feedback.

References
----------
.. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
   Prentice Hall, 1999, ch. 13.
.. [2] P. M. J. Van den Hof and R. J. P. Schrama, "An indirect method for
   transfer function estimation from closed loop data", *Automatica* 29(6),
   1523-1527, 1993.
.. [3] C. W. J. Granger, "Investigating causal relations by econometric models
   and cross-spectral methods", *Econometrica* 37(3), 424-438, 1969.
.. [4] P. E. Caines and C. W. Chan, "Feedback between stationary stochastic
   processes", *IEEE Trans. Automatic Control* 20(4), 498-508, 1975.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .._validate import int_in_range
from ..errors import OptionError
from .data import Experiment, as_experiments
from .regression import r_factor

__all__ = ["FeedbackEvidence", "feedback_evidence", "f_survival", "explained_share"]

#: Lags of the input and of the outputs in the feedback regression.
FEEDBACK_LAGS = 10

#: Level of the feedback test.
FEEDBACK_SIGNIFICANCE = 0.001

#: At most this many samples per experiment enter the feedback test.
_FEEDBACK_SAMPLES = 100_000


@dataclass(frozen=True, slots=True, eq=False)
class FeedbackEvidence:
    """Whether past outputs help predict the input (feedback).

    Attributes
    ----------
    f_statistic : float
        F statistic of the output lags in the input regression.
    p_value : float
        Its p-value (small: feedback).
    lags : int
        Input and output lags of the regression.
    closed_loop : bool
        ``p_value < significance``.
    significance : float
    """

    f_statistic: float
    p_value: float
    lags: int
    closed_loop: bool
    significance: float

    def as_dict(self) -> dict:
        """Return a JSON-friendly dict."""
        return {"f_statistic": self.f_statistic, "p_value": self.p_value, "lags": self.lags,
                "closed_loop": self.closed_loop, "significance": self.significance}


def _lagged(x: np.ndarray, lags: int) -> np.ndarray:
    """Columns ``x[t-1] .. x[t-lags]`` (rows t = lags .. N-1) of every column of ``x``."""
    N = x.shape[0]
    return np.hstack([x[lags - k:N - k] for k in range(1, lags + 1)])


def feedback_evidence(data: Experiment | Sequence[Experiment], *, references: Sequence[np.ndarray] | None = None,
                      lags: int = FEEDBACK_LAGS, significance: float = FEEDBACK_SIGNIFICANCE,
                      input_delay: int = 0) -> FeedbackEvidence:
    """Test for feedback from the outputs to the inputs (see the module docstring).

    Parameters
    ----------
    data : Experiment or sequence of Experiment
        Input/output deviations.
    references : sequence of numpy.ndarray, optional
        Per experiment, the logged reference signals (N_k, r); their current and
        past values join the regressors (the controller acts on them).
    lags : int
        Lags of inputs, outputs (and references) in the regression.
    significance : float
        Level of the test.
    input_delay : int
        Smallest delay (samples) from any input to any output. When it is at
        least one, the plant cannot answer an input within the same sample, so
        the current output innovation also enters the test (a controller acting
        on the latest measurement shows there); with a direct term only past
        innovations do.

    Returns
    -------
    FeedbackEvidence

    Notes
    -----
    The output innovations ``e`` are the residuals of an ARX model with ``L``
    lags of every output and input (inputs from lag 1 when ``input_delay >= 1``,
    else from lag 0). For each input, ``u_j[t]`` is regressed on
    ``u[t-1..t-L]`` (all inputs), references ``r[t..t-L]`` (when given) and,
    in the full model, also on ``e[t-1..t-L]`` (and on ``e[t]`` when
    ``input_delay >= 1``). The F statistic of the added residual lags, pooled
    over the inputs (sums of squares added), is referred to
    ``F(p L m, N_rows m - d)``.
    """
    experiments = as_experiments(data)
    lags = int_in_range(lags, "lags", 1, 200)
    current = int(input_delay) >= 1
    innovations = _innovations(experiments, lags, current)
    rows_full, target, k_small = [], [], 0
    for k, e in enumerate(experiments):
        u, y = e.u[:_FEEDBACK_SAMPLES], innovations[k]
        if u.shape[0] <= 3 * lags:
            continue
        base = [_lagged(u, lags)]
        if references is not None:
            r = np.asarray(references[k], dtype=float)[:_FEEDBACK_SAMPLES].reshape(u.shape[0], -1)
            base.append(r[lags:])
            base.append(_lagged(r, lags))
        small = [*base, np.ones((u.shape[0] - lags, 1))]
        k_small = sum(x.shape[1] for x in small)
        past = _lagged(y, lags)
        rows_full.append(np.hstack([*small, y[lags:], past] if current else [*small, past]))
        target.append(u[lags:])
    if not rows_full:
        raise OptionError(f"the feedback test needs more than {3 * lags} samples per experiment")
    return _f_test(np.vstack(rows_full), k_small, np.vstack(target), lags, significance)


def f_survival(f: float, d1: float, d2: float) -> float:
    """Upper tail ``P(F > f)`` of the F distribution with ``(d1, d2)`` degrees of freedom.

    Paulson's normal approximation of the cube root of ``F`` (Abramowitz & Stegun,
    *Handbook of Mathematical Functions*, 1964, eq. 26.6.15): accurate to a few
    per cent of the tail probability for ``d1 >= 3``, plenty for a test at 0.1 %
    and without loading scipy on the fit path.
    """
    if not f > 0:
        return 1.0
    a, b = 2.0 / (9.0 * d1), 2.0 / (9.0 * d2)
    c = f ** (1.0 / 3.0)
    z = ((1.0 - b) * c - (1.0 - a)) / math.sqrt(b * c * c + a)
    return 0.5 * math.erfc(z / math.sqrt(2.0))


def _innovations(experiments: Sequence[Experiment], lags: int, strictly_proper: bool) -> list[np.ndarray]:
    """Residuals of an ARX model (``lags`` output and input lags) of each output, per experiment.

    Inputs enter from lag 1 for a strictly proper plant, else from lag 0. The
    first ``lags`` samples of each experiment (no full regressor) are zero.
    """
    out = []
    for e in experiments:
        u, y = e.u[:_FEEDBACK_SAMPLES], e.y[:_FEEDBACK_SAMPLES]
        N = u.shape[0]
        resid = np.zeros_like(y)
        if N > 3 * lags:
            now = [] if strictly_proper else [u[lags:]]
            X = np.hstack([_lagged(y, lags), *now, _lagged(u, lags), np.ones((N - lags, 1))])
            k = X.shape[1]
            R = r_factor(np.hstack([X, y[lags:]]))
            coef, *_ = np.linalg.lstsq(R[:k, :k], R[:k, k:], rcond=None)  # minimum norm if deficient
            resid[lags:] = y[lags:] - X @ coef
        out.append(resid)
    return out


def _f_test(full: np.ndarray, k_small: int, target: np.ndarray, lags: int, significance: float):
    """F-test of the columns of ``full`` after its first ``k_small`` ones, pooled over the targets.

    One R factor of ``[full, target]`` gives both residual sums of squares: a
    target column's residual on the first ``k`` columns is the norm of its R
    entries from row ``k`` down.
    """
    k_full, m = full.shape[1], target.shape[1]
    R = r_factor(np.hstack([full, target]))
    T = R[:, k_full:]
    rss_s, rss_f = float(np.sum(T[k_small:] ** 2)), float(np.sum(T[k_full:] ** 2))
    q = (k_full - k_small) * m
    dof = target.shape[0] * m - k_full * m
    if dof <= 0 or rss_f <= 0:
        return FeedbackEvidence(math.nan, math.nan, lags, False, significance)
    f = ((rss_s - rss_f) / q) / (rss_f / dof)
    p = f_survival(f, q, dof)
    return FeedbackEvidence(float(f), p, lags, bool(p < significance), significance)


def explained_share(u: np.ndarray, u_r: np.ndarray) -> float:
    """Share of the input's variation the reference explains: ``1 - ||u - u_r||^2 / ||u||^2``."""
    u = np.asarray(u, dtype=float)
    return 1.0 - float(np.sum((u - np.asarray(u_r, dtype=float)) ** 2)) / max(float(np.sum(u * u)), 1e-300)
