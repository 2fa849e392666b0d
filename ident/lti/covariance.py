"""Parameter covariance of a state-space model and its first-order propagation.

An estimator that knows the covariance of ``theta = [vec A, vec B, vec C,
vec D, vec K]`` (row-major ``vec``; :func:`theta_layout`) knows, to first
order, the covariance of everything computed from the model (Gauss'
approximation formula, [1]_ sec. 9.4):

- the poles: ``d lambda_k = w_k^T dA v_k`` with ``v_k`` the right and
  ``w_k^T`` the left eigenvector of ``A`` (normalised so ``w_k^T v_k = 1``,
  [2]_ sec. 7.2.2), giving the covariance of ``(Re z, Im z)`` per pole;
- the frequency response: ``dG = dC R B + C R dA R B + C R dB + dD`` with
  ``R = (zI - A)^-1`` at ``z = exp(j 2 pi f T)``, giving the covariance of
  ``(Re G, Im G)`` per channel and frequency, and from it standard deviations
  of magnitude and phase;
- the DC gain (``z = 1``).

The covariance is stored as a factor ``L`` with ``cov = L L^T``: estimators
work in a few local coordinates (for a state-space model ``d = n (m + p) + ...``
of them, far fewer than the entries of ``theta``), so the factor is thin.

References
----------
.. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
   Prentice Hall, 1999, sec. 9.4.
.. [2] G. H. Golub and C. F. Van Loan, *Matrix Computations*, 4th ed., Johns
   Hopkins University Press, 2013, sec. 7.2.2 (eigenvalue sensitivity).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import OptionError
from .models import StateSpaceModel

__all__ = [
    "THETA_BLOCKS",
    "COVARIANCE_METHODS",
    "theta_layout",
    "ParameterCovariance",
    "pole_covariance",
    "frequency_response_covariance",
    "magnitude_phase_std",
    "ResponseBand",
    "response_band",
    "dc_gain_std",
]

#: The blocks of ``theta`` in order; each is stored row-major.
THETA_BLOCKS = ("A", "B", "C", "D", "K")

#: How a covariance was obtained: ``"gauss"`` (noise variance times the inverse
#: Gauss-Newton matrix), ``"robust"`` (sandwich form with a Newey-West estimate
#: of the gradient covariance, for output-error models under coloured noise),
#: ``"arx"`` (least squares, propagated from ARX polynomial coefficients).
COVARIANCE_METHODS = ("gauss", "robust", "arx")


def theta_layout(n: int, m: int, p: int) -> dict[str, slice]:
    """Positions of ``A, B, C, D, K`` (row-major) in ``theta`` for ``n`` states, ``m`` inputs, ``p`` outputs.

    Examples
    --------
    >>> lay = theta_layout(2, 1, 1)
    >>> lay["A"], lay["K"]
    (slice(0, 4, None), slice(8, 10, None))
    """
    sizes = {"A": n * n, "B": n * m, "C": p * n, "D": p * m, "K": n * p}
    out, k = {}, 0
    for name in THETA_BLOCKS:
        out[name] = slice(k, k + sizes[name])
        k += sizes[name]
    return out


@dataclass(frozen=True, slots=True, eq=False)
class ParameterCovariance:
    """Covariance of the state-space parameters ``theta`` of one model.

    Parameters
    ----------
    factor : array_like, shape (q, r)
        ``L`` with ``cov(theta) = L L^T``; ``q = n^2 + n m + p n + p m + n p``.
    method : {"gauss", "robust", "arx"}
        How it was obtained (see :data:`COVARIANCE_METHODS`).
    n_states, n_inputs, n_outputs : int
        Dimensions of the model it belongs to.
    """

    factor: np.ndarray
    method: str
    n_states: int
    n_inputs: int
    n_outputs: int

    def __post_init__(self) -> None:
        if self.method not in COVARIANCE_METHODS:
            raise OptionError(f"method must be one of {', '.join(COVARIANCE_METHODS)}; got {self.method!r}")
        L = np.array(self.factor, dtype=float, copy=True)
        q = theta_layout(self.n_states, self.n_inputs, self.n_outputs)["K"].stop
        if L.ndim != 2 or L.shape[0] != q:
            raise OptionError(f"factor must have {q} rows (the entries of theta); got shape {L.shape}")
        if not np.all(np.isfinite(L)):
            raise OptionError("factor must be finite")
        L.flags.writeable = False
        object.__setattr__(self, "factor", L)

    def matrix(self) -> np.ndarray:
        """``cov(theta)``, shape (q, q)."""
        return self.factor @ self.factor.T

    def block(self, name: str) -> np.ndarray:
        """Rows of the factor for one block (``"A"``, ``"B"``, ...)."""
        return self.factor[theta_layout(self.n_states, self.n_inputs, self.n_outputs)[name]]

    def matches(self, model: StateSpaceModel) -> bool:
        """Tell whether the dimensions are those of ``model``."""
        return (self.n_states, self.n_inputs, self.n_outputs) == (
            model.n_states, model.n_inputs, model.n_outputs)


def _require_match(model: StateSpaceModel, cov: ParameterCovariance) -> None:
    if not isinstance(cov, ParameterCovariance):
        raise OptionError(f"covariance must be a ParameterCovariance; got {type(cov).__name__}")
    if not cov.matches(model):
        raise OptionError(
            f"the covariance belongs to a model with {cov.n_states} states, {cov.n_inputs} inputs and "
            f"{cov.n_outputs} outputs; this one has {model.n_states}, {model.n_inputs} and {model.n_outputs}"
        )


def _pair(targets: np.ndarray, found: np.ndarray) -> list[int]:
    """Index into ``found`` of the nearest unused entry for each target (greedy, nearest first)."""
    dist = np.abs(targets[:, None] - found[None, :])
    out = [-1] * targets.size
    used = np.zeros(found.size, dtype=bool)
    for flat in np.argsort(dist, axis=None, kind="stable"):
        r, c = divmod(int(flat), found.size)
        if out[r] < 0 and not used[c]:
            out[r] = c
            used[c] = True
    return out


def pole_covariance(model: StateSpaceModel, covariance: ParameterCovariance) -> np.ndarray:
    """Covariance of ``(Re z, Im z)`` of every pole, in ``model.poles()`` order.

    Parameters
    ----------
    model : StateSpaceModel
    covariance : ParameterCovariance
        Of this model's ``theta``.

    Returns
    -------
    numpy.ndarray, shape (len(model.poles()), 2, 2)
        nan blocks for poles that are repeated (within ``1e-6 max(1, |z|)``),
        whose first-order sensitivity is undefined; real poles have zero
        variance in the imaginary direction.
    """
    _require_match(model, covariance)
    k = model.n_plant_states
    poles = model.poles()
    out = np.full((poles.size, 2, 2), np.nan)
    if k == 0:
        return out
    Ak = model.A[:k, :k]
    lam, V = np.linalg.eig(Ak)
    lam_left, W = np.linalg.eig(Ak.T)  # left eigenvectors: columns w with w^T A = lambda w^T
    n = model.n_states
    rows = covariance.block("A").reshape(n, n, -1)[:k, :k].reshape(k * k, -1)
    for r, c in enumerate(_pair(poles, lam)):
        others = np.delete(lam, c)
        if others.size and np.min(np.abs(others - lam[c])) <= 1e-6 * max(1.0, abs(lam[c])):
            continue  # repeated pole (a delay chain, a double root): no first-order sensitivity
        w = W[:, int(np.argmin(np.abs(lam_left - lam[c])))]
        scale = w @ V[:, c]
        if abs(scale) <= 1e-12 * np.linalg.norm(w) * np.linalg.norm(V[:, c]):
            continue
        g = np.outer(w, V[:, c]).ravel() / scale
        G = np.vstack([g.real, g.imag]) @ rows
        out[r] = G @ G.T
        if poles[r].imag == 0:
            out[r, 1, :] = out[r, :, 1] = 0.0
    return out


def frequency_response_covariance(
    model: StateSpaceModel, covariance: ParameterCovariance, frequencies_hz: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Frequency response and the covariance of its real and imaginary parts.

    Parameters
    ----------
    model : StateSpaceModel
        Discrete-time model.
    covariance : ParameterCovariance
    frequencies_hz : array_like, shape (F,)

    Returns
    -------
    response : numpy.ndarray of complex, shape (F, p, m)
    covariance : numpy.ndarray, shape (F, p, m, 2, 2)
        Of ``(Re G, Im G)`` per channel and frequency.
    """
    _require_match(model, covariance)
    if not model.is_discrete:
        raise OptionError("frequency_response_covariance needs a discrete-time model")
    n, m, p = model.n_states, model.n_inputs, model.n_outputs
    lay = theta_layout(n, m, p)
    L = covariance.factor
    f = np.atleast_1d(np.asarray(frequencies_hz, dtype=float))
    z = np.exp(2j * np.pi * f * model.sample_time)
    G = np.empty((f.size, p, m), dtype=complex)
    cov = np.empty((f.size, p, m, 2, 2))
    eye = np.eye(n)
    LA = L[lay["A"]].reshape(n, n, -1)
    LB = L[lay["B"]].reshape(n, m, -1)
    LC = L[lay["C"]].reshape(p, n, -1)
    LD = L[lay["D"]].reshape(p, m, -1)
    for k in range(f.size):
        R = np.linalg.solve(z[k] * eye - model.A, eye) if n else np.zeros((0, 0))
        CR, RB = model.C @ R, R @ model.B
        G[k] = CR @ model.B + model.D
        # dG (p, m, r) for each column of the factor
        dG = (np.einsum("oa,abr,bi->oir", CR, LA, RB) + np.einsum("oa,air->oir", CR, LB)
              + np.einsum("obr,bi->oir", LC, RB) + LD)
        parts = np.stack([dG.real, dG.imag], axis=2)  # (p, m, 2, r)
        cov[k] = np.einsum("oiar,oibr->oiab", parts, parts)
    return G, cov


def magnitude_phase_std(response: np.ndarray, covariance: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return the standard deviations of ``|G|`` and of the phase (rad) from ``cov(Re G, Im G)``.

    First order: ``d|G| = (Re G dRe + Im G dIm) / |G|``, ``dphase = (Re G dIm - Im G dRe) / |G|^2``.
    """
    re, im = response.real, response.imag
    mag = np.abs(response)
    safe = np.where(mag > 0, mag, np.nan)
    gm = np.stack([re / safe, im / safe], axis=-1)
    gp = np.stack([-im / safe**2, re / safe**2], axis=-1)
    var_m = np.einsum("...a,...ab,...b->...", gm, covariance, gm)
    var_p = np.einsum("...a,...ab,...b->...", gp, covariance, gp)
    return np.sqrt(np.maximum(var_m, 0.0)), np.sqrt(np.maximum(var_p, 0.0))


@dataclass(frozen=True, slots=True, eq=False)
class ResponseBand:
    """First-order confidence band of a model's frequency response.

    Attributes
    ----------
    frequencies_hz : numpy.ndarray, shape (F,)
    response : numpy.ndarray of complex, shape (F, p, m)
        The model's response ``G``.
    magnitude_low, magnitude_high : numpy.ndarray, shape (F, p, m)
        ``|G| -+ q sigma_|G|`` (the lower edge kept above ``|G| / 1000`` so it
        can be drawn in dB), with ``q`` the two-sided normal quantile of
        ``confidence``.
    phase_halfwidth_rad : numpy.ndarray, shape (F, p, m)
        ``q sigma_phase``; the phase band is ``angle(G) -+`` this.
    radius : numpy.ndarray, shape (F, p, m)
        Radius of a circle about ``G`` in the complex plane that holds the
        response with probability at least ``confidence`` (chi-square, two
        degrees of freedom, on the larger principal axis of
        ``cov(Re G, Im G)``); comparable with the radius of a nonparametric
        estimate.
    confidence : float
    """

    frequencies_hz: np.ndarray
    response: np.ndarray
    magnitude_low: np.ndarray
    magnitude_high: np.ndarray
    phase_halfwidth_rad: np.ndarray
    radius: np.ndarray
    confidence: float


def response_band(model: StateSpaceModel, covariance: ParameterCovariance, frequencies_hz: np.ndarray,
                  confidence: float = 0.95) -> ResponseBand:
    """Confidence band of the frequency response from the parameter covariance.

    Parameters
    ----------
    model : StateSpaceModel
        Discrete-time model the covariance belongs to.
    covariance : ParameterCovariance
    frequencies_hz : array_like, shape (F,)
    confidence : float, default 0.95
        Two-sided level of the band, in (0, 1).

    Returns
    -------
    ResponseBand

    Notes
    -----
    Gauss' approximation formula ([1]_ sec. 9.4): the band is as good as the
    linearisation, so it is honest where it is narrow and only indicative
    where it is wide (near a lightly damped pole whose position is itself
    uncertain it understates the spread).
    """
    from scipy import stats

    if not 0.0 < confidence < 1.0:
        raise OptionError(f"confidence must lie in (0, 1); got {confidence!r}")
    f = np.atleast_1d(np.asarray(frequencies_hz, dtype=float))
    G, cov = frequency_response_covariance(model, covariance, f)
    mag_std, ph_std = magnitude_phase_std(G, cov)
    q = float(stats.norm.ppf(0.5 + confidence / 2.0))
    mag = np.abs(G)
    largest = np.linalg.eigvalsh(cov)[..., -1]
    radius = np.sqrt(float(stats.chi2.ppf(confidence, 2)) * np.maximum(largest, 0.0))
    return ResponseBand(
        frequencies_hz=f, response=G, magnitude_low=np.maximum(mag - q * mag_std, mag * 1e-3),
        magnitude_high=mag + q * mag_std, phase_halfwidth_rad=np.minimum(q * np.nan_to_num(ph_std, nan=np.pi), np.pi),
        radius=radius, confidence=float(confidence),
    )


def dc_gain_std(model: StateSpaceModel, covariance: ParameterCovariance) -> np.ndarray:
    """Return the standard deviation of each DC gain ``G(1)`` (p, m); inf for an integrating channel."""
    _require_match(model, covariance)
    k = model.n_plant_states
    if k and np.min(np.abs(model.poles() - 1.0)) < 1e-12:
        return np.full((model.n_outputs, model.n_inputs), np.inf)
    G, cov = frequency_response_covariance(model, covariance, np.zeros(1))
    return np.sqrt(np.maximum(cov[0, :, :, 0, 0], 0.0))
