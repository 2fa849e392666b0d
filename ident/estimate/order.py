"""Information criteria for model-order selection: AIC, BIC (MDL) and FPE.

All three trade the fit of a model (its loss) against its number of estimated
parameters; the smallest value wins. They are shared by the ARX and subspace
estimators and by the top-level selection in :mod:`ident.estimate.identify`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .._validate import int_in_range, one_of
from ..errors import OptionError

__all__ = ["CRITERIA", "Criteria", "information_criteria", "best_index"]

#: Names of the information criteria, in the order they are reported.
CRITERIA = ("aic", "bic", "fpe")


@dataclass(frozen=True, slots=True, eq=False)
class Criteria:
    """Values of the information criteria for one model (smaller is better).

    Parameters
    ----------
    aic : float
        Akaike's information criterion, ``log V + 2 d / N``.
    bic : float
        Bayesian information criterion, equal to Rissanen's minimum description
        length (MDL): ``log V + d log(N) / N``.
    fpe : float
        Akaike's final prediction error, ``V (1 + d/N) / (1 - d/N)``.
    """

    aic: float
    bic: float
    fpe: float

    def get(self, name: str) -> float:
        """Return the criterion called ``name`` (one of :data:`CRITERIA`)."""
        return float(getattr(self, one_of(name, "criterion", CRITERIA)))

    def as_dict(self) -> dict[str, float]:
        """Return ``{"aic": ..., "bic": ..., "fpe": ...}``."""
        return {name: float(getattr(self, name)) for name in CRITERIA}


def information_criteria(loss: float, n_parameters: int, n_samples: int) -> Criteria:
    """AIC, BIC/MDL and FPE of a model from its loss and its size.

    Parameters
    ----------
    loss : float
        The loss ``V`` (>= 0). For one output, the mean squared residual
        ``V = (1/N) sum_k e[k]^2``. For ``p`` outputs, the determinant of the
        residual covariance ``V = det((1/N) sum_k e[k] e[k]^T)``.
    n_parameters : int
        Number of estimated parameters ``d`` (all outputs together).
    n_samples : int
        Number of residual samples ``N`` the loss was averaged over; must
        exceed ``n_parameters``.

    Returns
    -------
    Criteria
        The three criteria. A loss of exactly zero gives ``-inf`` for AIC and
        BIC and ``0`` for FPE.

    Raises
    ------
    OptionError
        If ``loss`` is negative or not finite, or ``n_samples <= n_parameters``.

    Notes
    -----
    With ``V`` the loss, ``d`` the number of parameters and ``N`` the number of
    samples, in the normalised (per-sample) form of [1]_::

        AIC = log V + 2 d / N
        BIC = MDL = log V + d log(N) / N
        FPE = V (1 + d/N) / (1 - d/N)

    For small ``d/N``, ``log FPE ~ AIC``. BIC penalises parameters more heavily
    than AIC once ``N > e^2 ~ 7.4`` and is consistent (picks the true order as
    ``N -> inf`` when it is among the candidates); AIC tends to over-fit.

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, sec. 16.4 (model structure selection: AIC, FPE,
       and Rissanen's MDL / BIC).
    .. [2] H. Akaike, "A new look at the statistical model identification",
       *IEEE Trans. Automatic Control*, 19(6), 716-723, 1974.
    .. [3] J. Rissanen, "Modeling by shortest data description",
       *Automatica*, 14(5), 465-471, 1978.

    Examples
    --------
    >>> c = information_criteria(0.5, 2, 100)
    >>> round(c.fpe, 6)
    0.520408
    """
    try:
        loss = float(loss)
    except (TypeError, ValueError) as exc:
        raise OptionError(f"loss must be a non-negative number; got {loss!r}") from exc
    if not math.isfinite(loss) or loss < 0:
        raise OptionError(f"loss must be a non-negative finite number; got {loss!r}")
    d = int_in_range(n_parameters, "n_parameters", 0)
    n = int_in_range(n_samples, "n_samples", 1)
    if n <= d:
        raise OptionError(
            f"n_samples must exceed n_parameters; got n_samples={n}, n_parameters={d}"
        )
    log_v = math.log(loss) if loss > 0 else -math.inf
    return Criteria(
        aic=log_v + 2.0 * d / n,
        bic=log_v + d * math.log(n) / n,
        fpe=loss * (1.0 + d / n) / (1.0 - d / n),
    )


def best_index(values: Sequence[float], n_parameters: Sequence[int], *,
               larger_is_better: bool = False) -> int:
    """Index of the best candidate; ties (to 1e-12 relative) go to fewer parameters.

    Parameters
    ----------
    values : sequence of float
        The score of each candidate (a criterion, or a validation fit).
    n_parameters : sequence of int
        Parameter count of each candidate, used to break ties.
    larger_is_better : bool, default False
        ``False`` for criteria (smaller wins), ``True`` for fit percent.

    Returns
    -------
    int
        Position of the best candidate. NaN and "worst infinity" scores never
        win unless no other score exists (then the simplest candidate is
        returned); a "best infinity" (``-inf`` criterion of an exact fit) wins.
    """
    vals = np.asarray(values, dtype=float)
    counts = np.asarray(n_parameters, dtype=int)
    if vals.size == 0 or vals.shape != counts.shape:
        raise OptionError(
            f"values and n_parameters must be non-empty and of equal length; got "
            f"{vals.size} and {counts.size}"
        )
    score = -vals if larger_is_better else vals.copy()
    valid = ~np.isnan(score) & (score < np.inf)
    if not valid.any():
        return int(np.argmin(counts))
    top = np.min(score[valid])
    if top == -np.inf:
        tied = np.flatnonzero(score == -np.inf)
    else:
        tol = 1e-12 * max(1.0, abs(top))
        tied = np.flatnonzero(valid & (score <= top + tol))
    return int(tied[np.argmin(counts[tied])])
