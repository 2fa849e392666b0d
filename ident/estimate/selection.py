"""Choosing among candidate models: a test on the held-out errors and an information criterion.

The candidate with the best held-out fit is not automatically the one to keep:
a larger model may be better by an amount the held-out data cannot tell from
chance, and a smaller model may be "nearly as good" on a short held-out record
while missing a slow mode the estimation data show clearly. The rule here
uses both pieces of evidence:

1. **Held-out test.** Every candidate simpler than the best (fewer states, or
   as many with fewer parameters) is compared with it on the same held-out
   samples by the Diebold-Mariano test of equal predictive accuracy [1]_: the
   loss differential ``d(t) = sum_i (e_small,i(t)^2 - e_best,i(t)^2) / var(y_i)``
   has mean zero if the two predict equally well; its long-run variance
   (Bartlett weights, :mod:`ident.estimate.hac`) accounts for the strong
   autocorrelation of simulation errors. A simpler candidate whose one-sided
   p-value exceeds ``significance`` is *tied* with the best. With several
   outputs it must also not be significantly worse on any single output
   (per-output tests at ``significance / p``, Bonferroni; :func:`as_accurate_pvalue`).
2. **Information criterion among the tied.** Among the best and the tied
   candidates, the one with the smallest Bayesian information criterion on the
   estimation data wins, ``BIC = N_eff ln V + d ln N_eff`` with ``V`` the mean
   normalised squared error on the estimation data and ``d`` the free
   parameters [2]_. ``N_eff`` is the estimation sample count divided by the
   integrated autocorrelation of the best candidate's errors, so errors that
   are not white (output-error models under coloured noise) are not counted as
   independent evidence (the effective sample size of a correlated series,
   [3]_ sec. 7.1). A mode the estimation data support lowers ``V`` far more
   than its parameters cost and is kept; a model that only fits noise is not
   preferred over a simpler tied one. A tied candidate with a mode that nearly
   cancels a zero (``redundant``: the mode hardly shows in the response, the
   order is too high) is passed over when a tied candidate without one exists:
   a pole-zero pair fitted to noise is not identified, and the information
   criterion cannot be trusted to price it ([2]_ sec. 16.5).

Candidates are compared only with others fitted and scored on the same data.

References
----------
.. [1] F. X. Diebold and R. S. Mariano, "Comparing predictive accuracy",
   *Journal of Business & Economic Statistics* 13(3), 253-263, 1995.
.. [2] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
   Prentice Hall, 1999, sec. 16.4 (model structure selection, AIC and MDL/BIC).
.. [3] M. B. Priestley, *Spectral Analysis and Time Series*, Academic Press,
   1981, sec. 5.3 and 7.1 (variance of the mean of a correlated series).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..errors import IdentificationError, OptionError
from .hac import andrews_bandwidth, long_run_covariance

__all__ = ["LOSS_FLOOR", "Contender", "SelectionRecord", "as_accurate_pvalue", "equal_accuracy_pvalue",
           "effective_samples", "select"]

#: Normalised estimation losses below this (an RMS error of 1e-8 of the output's
#: spread) count as an exact fit: differences there are rounding, not evidence,
#: so exact models tie and the fewest parameters win.
LOSS_FLOOR = 1e-16


@dataclass(frozen=True, slots=True, eq=False)
class Contender:
    """What :func:`select` needs to know of one candidate.

    Attributes
    ----------
    n_states : int
    n_parameters : int
        Free parameters (initial states not counted).
    held_out_errors : tuple of numpy.ndarray
        Free-run errors on the held-out samples (empty when it diverged).
    held_out_fit : float
        Mean fit percent on the held-out data (``-inf`` when it diverged).
    estimation_loss : float
        Mean over the outputs of the squared estimation error divided by the
        output's variance (``nan`` when unknown).
    estimation_samples : int
    estimation_errors : tuple of numpy.ndarray, optional
        The estimation errors (for the effective sample count).
    unstable : bool
        The model has a pole outside the unit circle.
    redundant : bool
        The model has a mode that nearly cancels a zero (``near_cancellation``).
    """

    n_states: int
    n_parameters: int
    held_out_errors: tuple[np.ndarray, ...]
    held_out_fit: float
    estimation_loss: float
    estimation_samples: int
    estimation_errors: tuple[np.ndarray, ...] = ()
    unstable: bool = False
    redundant: bool = False


@dataclass(frozen=True, slots=True, eq=False)
class SelectionRecord:
    """Why :func:`select` chose what it chose.

    Attributes
    ----------
    chosen : int
        Index of the winner.
    best_fit : int
        Index of the best held-out fit.
    tied : tuple of int
        Simpler candidates statistically tied with the best (held-out test).
    p_values : dict
        Candidate index -> one-sided p-value of "as accurate as the best".
    bic : dict
        Candidate index -> BIC among the best and the tied.
    effective_samples : float
        ``N_eff`` used in the BIC.
    significance : float
        Level of the held-out test.
    reason : str
        One sentence for the user.
    """

    chosen: int
    best_fit: int
    tied: tuple[int, ...]
    p_values: dict[int, float]
    bic: dict[int, float]
    effective_samples: float
    significance: float
    reason: str

    def as_dict(self) -> dict:
        """Return a JSON-friendly dict."""
        return {"chosen": self.chosen, "best_fit": self.best_fit, "tied": list(self.tied),
                "p_values": {str(k): v for k, v in self.p_values.items()},
                "bic": {str(k): v for k, v in self.bic.items()},
                "effective_samples": self.effective_samples, "significance": self.significance,
                "reason": self.reason}


def _normal_sf(z: float) -> float:
    return 0.5 * math.erfc(z / math.sqrt(2.0))


def equal_accuracy_pvalue(errors_a: Sequence[np.ndarray], errors_b: Sequence[np.ndarray],
                          scales: np.ndarray) -> float:
    """One-sided Diebold-Mariano p-value of "model a predicts as well as model b".

    Parameters
    ----------
    errors_a, errors_b : sequence of numpy.ndarray, each (N_k, p)
        Errors of the two models on the same samples.
    scales : numpy.ndarray, shape (p,)
        Output variances the squared errors are divided by.

    Returns
    -------
    float
        ``P(Z > mean(d) / se)`` with ``d = sum_i (e_a,i^2 - e_b,i^2) / scale_i``
        and ``se`` from the Bartlett long-run variance; small when ``a`` is
        clearly worse than ``b``. 1.0 when the differential is identically zero.
    """
    with np.errstate(over="ignore", invalid="ignore"):
        d = [np.sum((a**2 - b**2) / scales[None, :], axis=1) for a, b in zip(errors_a, errors_b, strict=True)]
    N = sum(x.size for x in d)
    if N < 2:
        return 1.0
    if not all(np.all(np.isfinite(x)) for x in d):  # one model's errors are astronomically larger
        worse_a = sum(float(np.sum(a**2, dtype=float)) for a in errors_a) > sum(
            float(np.sum(b**2, dtype=float)) for b in errors_b)
        return 0.0 if worse_a else 1.0
    peak = max(float(np.max(np.abs(x))) if x.size else 0.0 for x in d)
    if peak == 0.0:
        return 1.0
    d = [x / peak for x in d]  # the statistic is scale free; scaling keeps the squares finite
    mean = sum(float(x.sum()) for x in d) / N
    lrv = float(long_run_covariance([x[:, None] for x in d], demean=True)[0, 0]) / N
    if not lrv > 0:
        return 1.0 if mean <= 0 else 0.0
    return _normal_sf(mean / math.sqrt(lrv / N))


def as_accurate_pvalue(errors_a: Sequence[np.ndarray], errors_b: Sequence[np.ndarray],
                       scales: np.ndarray) -> float:
    """p-value of "model a is as accurate as model b", on all outputs together and on each one.

    The joint Diebold-Mariano test (:func:`equal_accuracy_pvalue`) can hide an
    output that a simpler model predicts clearly worse behind another it
    predicts a little better. With ``p`` outputs the hypothesis is rejected
    when the joint test or any per-output test rejects it, the per-output tests
    at ``significance / p`` (Bonferroni [4]_); the value returned is
    ``min(joint, p * min_i p_i)``, so comparing it with ``significance``
    applies that rule. One output: the joint p-value.

    References
    ----------
    .. [4] C. E. Bonferroni, "Teoria statistica delle classi e calcolo delle
       probabilita", Pubblicazioni del R. Istituto Superiore di Scienze
       Economiche e Commerciali di Firenze 8, 3-62, 1936.
    """
    joint = equal_accuracy_pvalue(errors_a, errors_b, scales)
    p = scales.shape[0]
    if p == 1:
        return joint
    each = min(equal_accuracy_pvalue([a[:, [i]] for a in errors_a], [b[:, [i]] for b in errors_b], scales[[i]])
               for i in range(p))
    return min(joint, p * each)


def effective_samples(errors: Sequence[np.ndarray]) -> float:
    """``N`` divided by the integrated autocorrelation (Bartlett-weighted) of the errors, at least 1.

    For each output the ratio of the long-run variance to the variance; the
    largest ratio over the outputs is used (the most correlated output sets the
    pace).
    """
    parts = [np.asarray(e, dtype=float) for e in errors if len(e)]
    N = sum(e.shape[0] for e in parts)
    if N < 3:
        return float(max(N, 1))
    L = andrews_bandwidth(parts)
    ratio = 1.0
    for i in range(parts[0].shape[1]):
        col = [e[:, [i]] for e in parts]
        var = sum(float(c[:, 0] @ c[:, 0]) for c in col)
        if var > 0:
            ratio = max(ratio, float(long_run_covariance(col, L)[0, 0]) / var)
    return max(N / ratio, 1.0)


def select(contenders: Sequence[Contender], output_variance: np.ndarray, *,
           significance: float = 0.05) -> SelectionRecord:
    """Choose among candidates scored on the same held-out samples (see the module docstring).

    Parameters
    ----------
    contenders : sequence of Contender
    output_variance : numpy.ndarray, shape (p,)
        Variance of each output on the held-out samples (normalises the errors).
    significance : float
        Level of the one-sided held-out test (default 0.05).

    Returns
    -------
    SelectionRecord

    Raises
    ------
    IdentificationError
        Every candidate diverged on the held-out data.
    """
    if not contenders:
        raise OptionError("contenders must not be empty")
    fits = np.array([c.held_out_fit for c in contenders], dtype=float)
    finite = np.isfinite(fits)
    if not finite.any():
        raise IdentificationError("every candidate model diverged on the validation data",
                                  hint="check the data (drift, saturation) or fix a low --order")
    stable = [k for k in range(len(contenders)) if finite[k] and not contenders[k].unstable]
    pool = stable if stable else [k for k in range(len(contenders)) if finite[k]]
    best = max(pool, key=lambda k: (fits[k], -contenders[k].n_states, -k))
    best = _unstable_if_supported(contenders, fits, finite, best, output_variance, significance)
    scales = np.where(output_variance > 0, output_variance, 1.0)
    p_values, tied = {}, []
    for k in pool:
        c, b = contenders[k], contenders[best]
        if k == best or (c.n_states, c.n_parameters) >= (b.n_states, b.n_parameters):
            continue
        p_values[k] = as_accurate_pvalue(c.held_out_errors, b.held_out_errors, scales)
        if p_values[k] > significance:
            tied.append(k)
    return _by_criterion(contenders, best, tuple(tied), p_values, significance)


def _unstable_if_supported(contenders, fits, finite, best_stable, output_variance, significance) -> int:
    """Let an unstable candidate win over the best stable one only when the held-out test says it is better."""
    unstable = [k for k in range(len(contenders)) if finite[k] and contenders[k].unstable]
    if not unstable or contenders[best_stable].unstable:
        return best_stable
    k = max(unstable, key=lambda j: fits[j])
    if fits[k] <= fits[best_stable]:
        return best_stable
    scales = np.where(output_variance > 0, output_variance, 1.0)
    p = equal_accuracy_pvalue(contenders[best_stable].held_out_errors, contenders[k].held_out_errors, scales)
    return k if p < significance else best_stable


def _by_criterion(contenders, best, tied, p_values, significance) -> SelectionRecord:
    pool = (best, *tied)
    if any(contenders[k].redundant for k in pool) and not all(contenders[k].redundant for k in pool):
        pool = tuple(k for k in pool if not contenders[k].redundant)
    n_eff = effective_samples(contenders[best].estimation_errors) if contenders[best].estimation_errors \
        else float(contenders[best].estimation_samples)
    bic = {}
    for k in pool:
        c = contenders[k]
        if math.isfinite(c.estimation_loss):
            loss = max(c.estimation_loss, LOSS_FLOOR)
            bic[k] = n_eff * math.log(loss) + c.n_parameters * math.log(max(n_eff, 2.0))
    chosen = min(bic, key=lambda k: (bic[k], contenders[k].n_states, contenders[k].n_parameters)) if bic else best
    if not tied:
        reason = ("best held-out fit; no simpler candidate is as accurate on the held-out data "
                  f"(one-sided test at {significance:g})" if p_values else "best held-out fit")
    elif chosen == best:
        reason = (f"best held-out fit; {len(tied)} simpler candidate(s) are as accurate on the held-out "
                  "data, but the estimation data support the extra parameters (smallest BIC)")
    elif contenders[best].redundant:
        reason = ("as accurate on the held-out data as the best fit (one-sided test at "
                  f"{significance:g}), which has a mode that nearly cancels a zero; smallest BIC among the rest")
    else:
        reason = ("as accurate on the held-out data as the best fit (one-sided test at "
                  f"{significance:g}) and the smallest BIC among those tied")
    return SelectionRecord(chosen=chosen, best_fit=best, tied=tied, p_values=p_values, bic=bic,
                           effective_samples=float(n_eff), significance=significance, reason=reason)
