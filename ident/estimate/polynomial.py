"""Polynomial model structures: output-error, ARMAX and Box-Jenkins.

Each output ``y`` of a log is described by one multi-input single-output
(MISO) member of the general polynomial family ([1]_ sec. 4.2)::

    A(q) y(t) = sum_j B_j(q) / F_j(q) u_j(t - nk_j) + C(q) / D(q) e(t)

with ``A(q) = 1 + a_1 q^-1 + ... + a_na q^-na`` (``C``, ``D``, ``F_j`` alike),
``B_j(q) = b_j0 + b_j1 q^-1 + ... + b_j(nb_j-1) q^-(nb_j-1)`` and ``e`` white.
The structures a user asks for by name fix some polynomials to 1:

============  =====================================  ===============
structure     model                                  orders
============  =====================================  ===============
``"oe"``      ``y = sum_j (B_j/F_j) u_j + e``        nb, nf, nk
``"armax"``   ``A y = sum_j B_j u_j + C e``          na, nb, nc, nk
``"bj"``      ``y = sum_j (B_j/F_j) u_j + (C/D) e``  nb, nc, nd, nf, nk
============  =====================================  ===============

Several outputs get one model each, fitted separately with the same orders,
and are stacked into one state-space model.

Criterion and gradient
----------------------
The parameters ``theta = [a, b_1 .. b_m, c, d, f_1 .. f_m]`` of one output
minimise ``sum_t eps(t)^2`` over all experiments, with the prediction error
([1]_ sec. 10.3)::

    w_j = (B_j / F_j) u_j(t - nk_j),   v = A y - sum_j w_j,   eps = (D / C) v

and its derivatives::

    d eps / d a_k  =  (D/C) y(t-k)              d eps / d c_k = -(1/C) eps(t-k)
    d eps / d b_jk = -(D/(C F_j)) u_j(t-nk_j-k)  d eps / d d_k =  (1/C) v(t-k)
    d eps / d f_jk =  (D/(C F_j)) w_j(t-k)

The filters ``B_j/F_j`` start at rest at the first sample of each experiment
(inputs before it taken as zero); ``v`` and ``eps`` are formed from sample
``n0 = max(na, nk_j + nb_j - 1)`` on, where every lagged ``y`` and ``u`` that
``A y`` and ``B_j u_j`` need was measured, and ``D/C`` starts at rest there.
The derivatives above are exact for this finite-sample predictor (the test
suite checks them against central differences). Experiments are filtered
separately and never joined. The minimisation is the damped Gauss-Newton
search of :func:`ident.estimate.gauss_newton.minimize`, stopped when a full
Gauss-Newton step would move the parameters by less than ``step_tolerance``
of their standard deviations (``gtol = step_tolerance^2 / N``).

Admissible models
-----------------
``C``, ``D`` and every ``F_j`` must have all roots strictly inside the unit
circle (modulus below :data:`ident.estimate.sensitivity.STABLE_RADIUS`), so
that the predictor ``(D/C)`` and the simulation ``B_j/F_j`` are stable; ``A``
is free (an ARMAX predictor is ``(D/C) A y``, stable whatever ``A``). The loss of
any other point is infinite: the search refuses such steps like steps that
raise the loss, so the loss never increases and every accepted model is
admissible. When the best model lies on that boundary (a noise model with a
zero on the unit circle, an integrating ``F``), the search stops just inside
it with ``stop_reason == "boundary"``. Starting values with roots outside are
reflected into the unit circle (``z -> 1 / conj(z)``).

Starting values
---------------
ARMAX: Hannan-Rissanen [2]_: a long ARX model estimates the innovations,
then ``y`` is regressed on lagged ``y``, ``u`` and estimated innovations.
Output error: Steiglitz-McBride iterations [3]_ (data prefiltered by ``1/F``
of the previous iterate) solved with instruments from the previous
iterate's noise-free output, the simplified refined instrumental-variable
method [5]_, which coloured noise does not bias; one input at a time against
the output less the other inputs' current responses when there are several.
Box-Jenkins: the output-error estimate, refined, plus an ARMA model of its
residuals by Hannan-Rissanen.

Uncertainty
-----------
ARMAX and Box-Jenkins: ``cov(theta) = sigma^2 (psi^T psi)^-1`` with ``psi``
the gradient of the prediction and ``sigma^2 = sum eps^2 / (N - d)`` (Gauss'
approximation formula, [1]_ sec. 9.4; method ``"gauss"``). Output error: the
errors are the measurement noise, coloured in general, so the sandwich
``H^-1 S H^-1`` with a Newey-West estimate ``S`` of the gradient covariance
(:mod:`ident.estimate.hac`; method ``"robust"``, [1]_ sec. 9.3). The usual
caveats apply: the figures are first order, assume the true system is in the
model set, and say nothing about bias from unmodelled dynamics or
nonlinearity. Outputs are fitted separately, so no covariance between the
parameters of different outputs is stated. The covariance of the
state-space parameters follows exactly through the Jacobian of the
realisation below (whose entries are polynomial coefficients or products of
two of them).

State space
-----------
Every block is the observer form of a difference equation ([4]_ sec. 6.3)::

    A_blk = [[-alpha_1, 1, 0, ...], ..., [-alpha_n, 0, ..., 0]]
    B_blk[l-1] = beta_l - alpha_l beta_0,   C_blk = [1, 0, ..., 0],   D_blk = beta_0

for ``y = sum_l (-alpha_l y(t-l) + beta_l^T x(t-l)) + beta_0^T x(t)``.
Output error and Box-Jenkins: one block per input ``j`` for ``z^-nk_j B_j /
F_j`` (the delay as states, ``D`` from ``b_j0`` when ``nk_j = 0``); ARMAX:
one block for ``A`` with the inputs and the innovations as columns, so that
``K_l = c_l - a_l`` (the exact innovations form); Box-Jenkins adds, after the
plant states of every output, a block for ``C/D`` with ``K_l = c_l - d_l``
(``noise_states`` of the model). Output error has no noise gain.

References
----------
.. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
   Prentice Hall, 1999, sec. 4.2 (the general family of model structures),
   ch. 7 (prediction-error methods), sec. 9.3-9.4 (asymptotic covariance)
   and sec. 10.2-10.3 (Gauss-Newton search and the gradient of the general
   structure).
.. [2] E. J. Hannan and J. Rissanen, "Recursive estimation of mixed
   autoregressive-moving average order", *Biometrika* 69(1), 81-94, 1982.
.. [3] K. Steiglitz and L. E. McBride, "A technique for the identification of
   linear systems", *IEEE Trans. Automatic Control* 10(4), 461-464, 1965.
.. [4] G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of
   Dynamic Systems*, 3rd ed., Addison-Wesley, 1998, sec. 4.3 and 6.3.
.. [5] P. C. Young and A. J. Jakeman, "Refined instrumental variable methods
   of recursive time-series analysis. Part I: Single input, single output
   systems", *Int. J. Control* 29(1), 1-30, 1979.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, fields
from typing import Any, Literal

import numpy as np

from .._validate import int_in_range, names_tuple, one_of, options_from_mapping, positive_float
from ..choices import POLYNOMIAL_STRUCTURES
from ..errors import IdentificationError, OptionError, PipelineError
from ..lti.covariance import ParameterCovariance, theta_layout
from ..lti.models import StateSpaceModel
from .data import Experiment, as_experiments
from .gauss_newton import Linearization, minimize
from .hac import long_run_covariance
from .sensitivity import STABLE_RADIUS

__all__ = [
    "POLYNOMIAL_STRUCTURES",
    "PolynomialOptions",
    "PolynomialResult",
    "PolynomialProblem",
    "fit_polynomial",
    "polynomial_state_space",
]

#: Largest order of any polynomial.
_MAX_ORDER = 50
#: Largest input delay (samples).
_MAX_DELAY = 10_000
#: Which of the optional polynomials each structure has.
_HAS = {
    "oe": {"na": False, "nc": False, "nd": False, "nf": True},
    "armax": {"na": True, "nc": True, "nd": False, "nf": False},
    "bj": {"na": False, "nc": True, "nd": True, "nf": True},
}
#: Default order of a polynomial the structure has.
_DEFAULT_ORDER = 2
#: Steiglitz-McBride: iterations per input and sweeps over the inputs.
_SM_ITERATIONS = 30
_SM_SWEEPS = 3
#: Starting roots are kept within this radius.
_START_RADIUS = 0.99


# --------------------------------------------------------------------------- options


def _order(value: object, name: str) -> int:
    return int_in_range(value, name, 0, _MAX_ORDER)


def _spec(value: object, name: str, high: int) -> int | tuple[int, ...]:
    if isinstance(value, (list, tuple)):
        if not value:
            raise OptionError(f"{name} must be an integer in [0, {high}] or a non-empty list of them")
        return tuple(int_in_range(v, f"{name}[{k}]", 0, high) for k, v in enumerate(value))
    return int_in_range(value, name, 0, high)


def _per_input(value: int | tuple[int, ...], name: str, m: int) -> tuple[int, ...]:
    if isinstance(value, tuple):
        if len(value) != m:
            raise OptionError(f"{name} must hold one value per input ({m}); got {len(value)}")
        return value
    return (int(value),) * m


@dataclass(frozen=True, slots=True, eq=False, kw_only=True)
class PolynomialOptions:
    """Structure and orders of a polynomial model, and how long to search.

    Parameters
    ----------
    structure : {"oe", "armax", "bj"}
        Output-error, ARMAX or Box-Jenkins (see the module docstring).
    na : int, optional
        Order of ``A`` (ARMAX only). Default 2 for ARMAX; must be 0 otherwise.
    nb : int or tuple of int, default 2
        Coefficients of ``B_j`` per input (an int applies to every input); 0
        leaves an input out.
    nc : int, optional
        Order of ``C`` (ARMAX, Box-Jenkins). Default 2 there; 0 otherwise.
    nd : int, optional
        Order of ``D`` (Box-Jenkins). Default 2 there; 0 otherwise.
    nf : int or tuple of int, optional
        Order of ``F_j`` per input (output error, Box-Jenkins). Default 2
        there (0 for an input with ``nb = 0``); 0 otherwise.
    nk : int or tuple of int, default 1
        Input delay in samples per input (0: direct feed-through).
    max_iterations : int, default 50
        Largest number of accepted Gauss-Newton steps per output.
    step_tolerance : float, default 0.01
        Stop when a full Gauss-Newton step would move the parameters by less
        than this many of their standard deviations.

    Notes
    -----
    After construction every order is an int or a tuple of ints (the
    defaults resolved); an order asked for a polynomial the structure does
    not have is refused.
    """

    structure: Literal["oe", "armax", "bj"]
    na: int | None = None
    nb: int | tuple[int, ...] = 2
    nc: int | None = None
    nd: int | None = None
    nf: int | tuple[int, ...] | None = None
    nk: int | tuple[int, ...] = 1
    max_iterations: int = 50
    step_tolerance: float = 0.01

    def __post_init__(self) -> None:
        structure = one_of(self.structure, "structure", POLYNOMIAL_STRUCTURES)
        has = _HAS[structure]
        for name in ("na", "nc", "nd", "nf"):
            value = getattr(self, name)
            if value is None:
                value = _DEFAULT_ORDER if has[name] else 0
            value = _spec(value, name, _MAX_ORDER) if name == "nf" else _order(value, name)
            if not has[name] and any(np.atleast_1d(value)):
                raise OptionError(
                    f"{name} must be 0 for structure {structure!r} (its {name[1].upper()} is 1); got {value}"
                )
            object.__setattr__(self, name, value)
        object.__setattr__(self, "nb", _spec(self.nb, "nb", _MAX_ORDER))
        object.__setattr__(self, "nk", _spec(self.nk, "nk", _MAX_DELAY))
        object.__setattr__(self, "max_iterations", int_in_range(self.max_iterations, "max_iterations", 0, 10_000))
        tol = self.step_tolerance
        if isinstance(tol, bool) or not isinstance(tol, (int, float)) or not 0.0 < float(tol) <= 1.0:
            raise OptionError(f"step_tolerance must be a number in (0, 1]; got {tol!r}")
        object.__setattr__(self, "step_tolerance", float(tol))

    @classmethod
    def from_mapping(cls, mapping: Mapping[str, Any], *, key_path: str = "") -> PolynomialOptions:
        """Build options from a mapping such as a pipeline-file table (lists become tuples).

        Raises
        ------
        PipelineError
            A key that is not an option (with the valid keys), a missing
            ``structure``, or a value that is not allowed.
        """
        if isinstance(mapping, Mapping) and "structure" not in mapping:
            raise PipelineError(
                f"structure is required (one of {', '.join(map(repr, POLYNOMIAL_STRUCTURES))})",
                key_path=key_path or None,
            )
        if isinstance(mapping, Mapping):
            mapping = {k: tuple(v) if isinstance(v, list) else v for k, v in mapping.items()}
        return options_from_mapping(cls, mapping, key_path)

    def resolve(self, n_inputs: int) -> tuple[tuple[int, ...], tuple[int, ...], tuple[int, ...]]:
        """Return ``(nb, nf, nk)`` as per-input tuples for ``n_inputs`` inputs.

        Raises
        ------
        OptionError
            A tuple of the wrong length, or ``nf_j > 0`` with ``nb_j = 0``.
        """
        nb = _per_input(self.nb, "nb", n_inputs)
        nk = _per_input(self.nk, "nk", n_inputs)
        nf = _per_input(self.nf, "nf", n_inputs)
        if not isinstance(self.nf, tuple):  # one order for all: inputs left out get none
            nf = tuple(f if b else 0 for f, b in zip(nf, nb, strict=True))
        for j, (b, f) in enumerate(zip(nb, nf, strict=True)):
            if f and not b:
                raise OptionError(f"nf[{j}] must be 0 when nb[{j}] is 0 (input {j} is left out); got {f}")
        return nb, nf, nk

    def to_dict(self) -> dict[str, Any]:
        """Return the options as a plain dict (for provenance records)."""
        return {f.name: getattr(self, f.name) for f in fields(self)}


# --------------------------------------------------------------------------- result


@dataclass(frozen=True, slots=True, eq=False)
class PolynomialResult:
    """A fitted polynomial model, its state-space realisation and its uncertainty.

    Attributes
    ----------
    model : StateSpaceModel
        Discrete-time realisation (module Notes); ``operating_point`` is
        ``None`` (the caller sets it).
    options : PolynomialOptions
        The options asked for.
    structure : str
        ``"oe"``, ``"armax"`` or ``"bj"``.
    na, nc, nd : int
        Orders of ``A``, ``C``, ``D``.
    nb, nf, nk : tuple of int
        Per input: coefficients of ``B_j``, order of ``F_j``, delay (samples).
    a, c, d : tuple of numpy.ndarray
        Per output, ``[1, a_1, ..]``, ``[1, c_1, ..]``, ``[1, d_1, ..]``
        (``[1.]`` where the structure has no such polynomial).
    b : tuple of tuple of numpy.ndarray
        ``b[i][j]``: coefficients of ``q^-nk_j .. q^-(nk_j + nb_j - 1)``.
    f : tuple of tuple of numpy.ndarray
        ``f[i][j]``: ``[1, f_1, ..]``.
    parameters : tuple of numpy.ndarray
        Per output, ``theta = [a, b_1 .. b_m, c, d, f_1 .. f_m]`` (no leading 1s).
    std_errors : tuple of numpy.ndarray
        Standard errors of ``parameters`` (nan when the covariance is unknown).
    parameter_covariance : tuple of (numpy.ndarray or None)
        Per output, the covariance of ``parameters[i]``; ``None`` when the
        Gauss-Newton matrix is singular (parameters not identifiable from
        these data).
    covariance : ParameterCovariance or None
        Of the state-space ``theta = [vec A, vec B, vec C, vec D, vec K]`` of
        ``model`` (method ``"robust"`` for output error, ``"gauss"``
        otherwise); ``None`` when any output's covariance is unknown.
    loss : numpy.ndarray, shape (p,)
        Mean squared prediction error of each output.
    noise_variance : numpy.ndarray, shape (p,)
        ``sum eps^2 / (N - d)`` of each output.
    iterations : tuple of int
        Accepted Gauss-Newton steps per output.
    stop_reason : tuple of str
        Why each output's search stopped (:data:`ident.estimate.gauss_newton.STOP_REASONS`).
    history : tuple of tuple of float
        Per output, the mean squared error after each accepted step (first:
        the start); never increasing.
    n_parameters : int
        Coefficients of all outputs together.
    n_samples : int
        Prediction errors per output (samples from ``n0`` on, all experiments).
    """

    model: StateSpaceModel
    options: PolynomialOptions
    structure: str
    na: int
    nb: tuple[int, ...]
    nc: int
    nd: int
    nf: tuple[int, ...]
    nk: tuple[int, ...]
    a: tuple[np.ndarray, ...]
    b: tuple[tuple[np.ndarray, ...], ...]
    c: tuple[np.ndarray, ...]
    d: tuple[np.ndarray, ...]
    f: tuple[tuple[np.ndarray, ...], ...]
    parameters: tuple[np.ndarray, ...]
    std_errors: tuple[np.ndarray, ...]
    parameter_covariance: tuple[np.ndarray | None, ...]
    covariance: ParameterCovariance | None
    loss: np.ndarray
    noise_variance: np.ndarray
    iterations: tuple[int, ...]
    stop_reason: tuple[str, ...]
    history: tuple[tuple[float, ...], ...]
    n_parameters: int
    n_samples: int

    @property
    def converged(self) -> bool:
        """True when every output's search stopped at a local minimum (or at the stability boundary)."""
        return all(r in ("converged", "small_step", "boundary") for r in self.stop_reason)


# --------------------------------------------------------------------------- one output


@dataclass(frozen=True, slots=True)
class _Layout:
    """Orders of one output's model and the positions of its coefficients in ``theta``."""

    na: int
    nb: tuple[int, ...]
    nc: int
    nd: int
    nf: tuple[int, ...]
    nk: tuple[int, ...]

    @property
    def m(self) -> int:
        return len(self.nb)

    @property
    def n0(self) -> int:
        """First sample with every lagged ``y`` and ``u`` of ``A y`` and ``B_j u_j`` measured."""
        lags = [k + b - 1 for k, b in zip(self.nk, self.nb, strict=True) if b]
        return max([self.na, 0, *lags])

    def slices(self) -> dict[str, Any]:
        """Return the positions: ``{"a": slice, "b": [slice per input], "c", "d", "f": [...], "size": d}``."""
        out: dict[str, Any] = {}
        k = 0

        def take(count: int) -> slice:
            nonlocal k
            k += count
            return slice(k - count, k)

        out["a"] = take(self.na)
        out["b"] = [take(b) for b in self.nb]
        out["c"] = take(self.nc)
        out["d"] = take(self.nd)
        out["f"] = [take(f) for f in self.nf]
        out["size"] = k
        return out


@dataclass(frozen=True, slots=True, eq=False)
class _Polys:
    """The polynomials of one output at one ``theta``: ``a, c, d, f_j`` with the leading 1."""

    a: np.ndarray
    b: tuple[np.ndarray, ...]
    c: np.ndarray
    d: np.ndarray
    f: tuple[np.ndarray, ...]


def _lfilter(b, a, x):
    from scipy.signal import lfilter

    return lfilter(b, a, x, axis=0)


def _shift(x: np.ndarray, k: int) -> np.ndarray:
    """``x(t - k)`` with zeros before the start (along axis 0)."""
    if k == 0:
        return x
    out = np.zeros_like(x)
    if k < x.shape[0]:
        out[k:] = x[:-k]
    return out


def _stable(poly: np.ndarray) -> bool:
    return poly.size <= 1 or float(np.max(np.abs(np.roots(poly)))) < STABLE_RADIUS


class PolynomialProblem:
    """Prediction errors of one output's polynomial model over several experiments.

    Parameters
    ----------
    parts : sequence of (u, y)
        Per experiment, inputs ``(N, m)`` and the output ``(N,)``.
    na, nc, nd : int
        Orders of ``A``, ``C``, ``D``.
    nb, nf, nk : sequence of int
        Per input: coefficients of ``B_j``, order of ``F_j``, delay.

    Notes
    -----
    ``theta = [a_1..a_na, b_1.., .., b_m.., c_1..c_nc, d_1..d_nd, f_1.., .., f_m..]``.
    :meth:`loss`, :meth:`linearize` and :meth:`step` are the three operations
    :func:`ident.estimate.gauss_newton.minimize` needs.
    """

    def __init__(self, parts, na: int, nb, nc: int, nd: int, nf, nk) -> None:
        self.layout = _Layout(int(na), tuple(nb), int(nc), int(nd), tuple(nf), tuple(nk))
        self.parts = tuple((np.asarray(u, dtype=float), np.asarray(y, dtype=float).ravel()) for u, y in parts)
        self.index = self.layout.slices()
        self.n_parameters = int(self.index["size"])
        self.n_residuals = sum(max(y.size - self.layout.n0, 0) for _, y in self.parts)

    def polynomials(self, theta: np.ndarray) -> _Polys:
        """Split ``theta`` into the polynomials (``a, c, d, f_j`` with their leading 1)."""
        ix = self.index
        one = np.ones(1)
        return _Polys(
            a=np.concatenate([one, theta[ix["a"]]]),
            b=tuple(np.asarray(theta[s]) for s in ix["b"]),
            c=np.concatenate([one, theta[ix["c"]]]),
            d=np.concatenate([one, theta[ix["d"]]]),
            f=tuple(np.concatenate([one, theta[s]]) for s in ix["f"]),
        )

    def admissible(self, theta: np.ndarray) -> bool:
        """Tell whether ``C``, ``D`` and every ``F_j`` have all roots inside the unit circle."""
        P = self.polynomials(theta)
        return all(_stable(p) for p in (P.c, P.d, *P.f)) and bool(np.all(np.isfinite(theta)))

    def _signals(self, P: _Polys, u: np.ndarray, y: np.ndarray):
        """``w_j`` (full length), ``v`` and ``eps`` (from ``n0`` on)."""
        lay = self.layout
        n0 = lay.n0
        w = []
        for j in range(lay.m):
            if lay.nb[j]:
                num = np.concatenate([np.zeros(lay.nk[j]), P.b[j]])
                w.append(_lfilter(num, P.f[j], u[:, j]))
            else:
                w.append(np.zeros(y.size))
        v = _lfilter(P.a, [1.0], y)[n0:] - sum(wj[n0:] for wj in w) if w else _lfilter(P.a, [1.0], y)[n0:]
        eps = _lfilter(P.d, P.c, v)
        return w, v, eps

    def errors(self, theta: np.ndarray, u: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Prediction errors ``eps(t)``, ``t = n0 .. N-1``, of one experiment."""
        return self._signals(self.polynomials(np.asarray(theta, dtype=float)), u, np.ravel(y))[2]

    def jacobian(self, theta: np.ndarray, u: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``eps`` and ``d eps / d theta`` (shape ``(N - n0, d)``) of one experiment (module Notes)."""
        P = self.polynomials(np.asarray(theta, dtype=float))
        y = np.ravel(y)
        lay, n0, N = self.layout, self.layout.n0, np.ravel(y).size
        w, v, eps = self._signals(P, u, y)
        M = N - n0
        through_dc = []  # columns filtered by D/C, with their sign
        through_dc.extend(y[n0 - k:N - k] for k in range(1, lay.na + 1))
        for j in range(lay.m):
            if lay.nb[j]:
                g = _lfilter([1.0], P.f[j], u[:, j])
                through_dc.extend(-g[n0 - lay.nk[j] - k:N - lay.nk[j] - k] for k in range(lay.nb[j]))
        for j in range(lay.m):
            if lay.nf[j]:
                h = _lfilter([1.0], P.f[j], w[j])
                through_dc.extend(_shift(h, k)[n0:] for k in range(1, lay.nf[j] + 1))
        dc = _lfilter(P.d, P.c, np.column_stack(through_dc)) if through_dc else np.zeros((M, 0))
        na_nb = lay.na + sum(lay.nb)
        through_c = [-_shift(eps, k) for k in range(1, lay.nc + 1)]
        through_c.extend(_shift(v, k) for k in range(1, lay.nd + 1))
        c_cols = _lfilter([1.0], P.c, np.column_stack(through_c)) if through_c else np.zeros((M, 0))
        J = np.hstack([dc[:, :na_nb], c_cols, dc[:, na_nb:]])
        return eps, J

    def loss(self, theta: np.ndarray) -> float:
        """``sum eps^2`` over all experiments; ``inf`` when ``theta`` is not admissible."""
        if not self.admissible(theta):
            return float("inf")
        P = self.polynomials(np.asarray(theta, dtype=float))
        total = sum(float(e @ e) for e in (self._signals(P, u, y)[2] for u, y in self.parts))
        return total if np.isfinite(total) else float("inf")

    def linearize(self, theta: np.ndarray) -> Linearization:
        """R factor and rotated errors of ``[J | eps]`` accumulated over the experiments."""
        d = self.n_parameters
        stack = np.zeros((0, d + 1))
        total = 0.0
        for u, y in self.parts:
            eps, J = self.jacobian(theta, u, y)
            total += float(eps @ eps)
            stack = np.linalg.qr(np.vstack([stack, np.column_stack([J, eps])]), mode="r")
        R = np.zeros((d, d))
        z = np.zeros(d)
        rows = min(stack.shape[0], d)
        R[:rows] = stack[:rows, :d]
        z[:rows] = stack[:rows, d]
        return Linearization(R=R, z=z, loss=total)

    @staticmethod
    def step(theta: np.ndarray, h: np.ndarray, lin: Linearization) -> np.ndarray:
        """``theta + h`` (the coordinates are the coefficients themselves)."""
        return np.asarray(theta, dtype=float) + h

    def gradient_parts(self, theta: np.ndarray) -> list[np.ndarray]:
        """Per experiment, the per-sample gradient contributions ``J_t eps_t`` (for Newey-West)."""
        out = []
        for u, y in self.parts:
            eps, J = self.jacobian(theta, u, y)
            out.append(J * eps[:, None])
        return out


# --------------------------------------------------------------------------- starting values


def _lagged(x: np.ndarray, first: int, count: int, t0: int) -> np.ndarray:
    """Columns ``x(t - first - k)``, ``k = 0 .. count-1``, for ``t = t0 .. N-1``."""
    N = x.shape[0]
    if count == 0:
        return np.zeros((N - t0, 0))
    return np.column_stack([x[t0 - first - k:N - first - k] for k in range(count)])


def _least_squares(rows: Sequence[tuple[np.ndarray, np.ndarray]]) -> np.ndarray:
    Phi = np.vstack([r for r, _ in rows])
    target = np.concatenate([t for _, t in rows])
    return np.linalg.lstsq(Phi, target, rcond=None)[0]


def _inside(poly: np.ndarray) -> np.ndarray:
    """``poly`` (leading 1) with its roots reflected into the disc of radius :data:`_START_RADIUS`."""
    if poly.size <= 1:
        return poly
    r = np.roots(poly).astype(complex)
    mag = np.abs(r)
    if float(np.max(mag)) < _START_RADIUS:
        return poly
    r = np.where(mag >= 1.0, 1.0 / np.conj(np.where(mag > 0, r, 1.0)), r)
    r = np.where(np.abs(r) > _START_RADIUS, r * _START_RADIUS / np.maximum(np.abs(r), 1e-300), r)
    return np.real(np.poly(r))


def _hannan_rissanen(parts, na: int, nb: Sequence[int], nk: Sequence[int], nc: int):
    """ARMAX coefficients ``a, b_j, c`` (no leading 1) by Hannan and Rissanen's two regressions.

    ``parts`` holds ``(u (N, m), y (N,))`` per experiment. A long ARX model gives
    the innovations ``e_hat``; then ``y(t)`` is regressed on ``-y(t-k)``,
    ``u_j(t-nk_j-k)`` and ``e_hat(t-k)``.
    """
    active = [j for j in range(len(nb)) if nb[j]]
    n0 = max([na, 0, *(nk[j] + nb[j] - 1 for j in active)])
    e_hat = [np.zeros(y.size) for _, y in parts]
    if nc:
        shortest = min(y.size for _, y in parts)
        high = max(min(max(20, 3 * (na + nc)), shortest // (4 * (1 + len(active)))), na + nc, 1)
        t0 = max([high, *(nk[j] + high - 1 for j in active)])
        rows = [(np.hstack([-_lagged(y, 1, high, t0), *(_lagged(u[:, j], nk[j], high, t0) for j in active)]), y[t0:])
                for u, y in parts]
        sol = _least_squares(rows)
        for k, (Phi, target) in enumerate(rows):
            e_hat[k][t0:] = target - Phi @ sol
        n0 = max(n0, t0 + nc)
    rows = []
    for (u, y), e in zip(parts, e_hat, strict=True):
        cols = [-_lagged(y, 1, na, n0), *(_lagged(u[:, j], nk[j], nb[j], n0) for j in range(len(nb))),
                _lagged(e, 1, nc, n0)]
        rows.append((np.hstack(cols), y[n0:]))
    sol = _least_squares(rows)
    b, k = [], na
    for j in range(len(nb)):
        b.append(sol[k:k + nb[j]])
        k += nb[j]
    c = _inside(np.concatenate([[1.0], sol[k:k + nc]]))[1:]
    return sol[:na], b, c


def _steiglitz_mcbride(parts, nb: int, nf: int, nk: int) -> tuple[np.ndarray, np.ndarray]:
    """``b, f`` (no leading 1) of ``y = q^-nk B/F u`` by prefiltered instrumental-variable iterations.

    ``parts`` holds ``(u (N,), y (N,))`` per experiment. The first iteration is
    the least-squares (ARX) estimate; each further one prefilters ``y`` and
    ``u`` by ``1/F`` of the previous iterate as Steiglitz and McBride do, and
    solves the normal equations with instruments built from the noise-free
    output ``x = q^-nk B/F u`` of that iterate (the simplified refined
    instrumental-variable method), so coloured noise biases it no more than
    white. ``F`` is kept stable by reflecting its roots.
    """
    f, b = np.ones(1), np.zeros(nb)
    t0 = max(nf, nk + nb - 1)
    previous = None
    for it in range(_SM_ITERATIONS if nf else 1):
        lhs, rhs = 0.0, 0.0
        for u, y in parts:
            yf, uf = _lfilter([1.0], f, y), _lfilter([1.0], f, u)
            inputs = _lagged(uf, nk, nb, t0)
            Phi = np.hstack([-_lagged(yf, 1, nf, t0), inputs])
            Z = Phi
            if it:
                xf = _lfilter([1.0], f, _lfilter(np.concatenate([np.zeros(nk), b]), f, u))
                Z = np.hstack([-_lagged(xf, 1, nf, t0), inputs])
            lhs = lhs + Z.T @ Phi
            rhs = rhs + Z.T @ yf[t0:]
        sol = np.linalg.lstsq(lhs, rhs, rcond=None)[0]
        f = _inside(np.concatenate([[1.0], sol[:nf]]))
        b = sol[nf:]
        current = np.concatenate([f, b])
        if previous is not None and np.max(np.abs(current - previous)) <= 1e-9 * max(1.0, np.max(np.abs(current))):
            break
        previous = current
    return b, f[1:]


def _oe_start(problem: PolynomialProblem) -> np.ndarray:
    """Output-error start: Steiglitz-McBride per input, against the output less the other inputs' responses."""
    lay, ix = problem.layout, problem.index
    theta = np.zeros(problem.n_parameters)
    active = [j for j in range(lay.m) if lay.nb[j]]
    w = [np.zeros((y.size, lay.m)) for _, y in problem.parts]
    for _ in range(_SM_SWEEPS if len(active) > 1 else 1):
        for j in active:
            sub = [(u[:, j], y - w[k].sum(axis=1) + w[k][:, j]) for k, (u, y) in enumerate(problem.parts)]
            b, f = _steiglitz_mcbride(sub, lay.nb[j], lay.nf[j], lay.nk[j])
            theta[ix["b"][j]], theta[ix["f"][j]] = b, f
            num = np.concatenate([np.zeros(lay.nk[j]), b])
            for k, (u, _) in enumerate(problem.parts):
                w[k][:, j] = _lfilter(num, np.concatenate([[1.0], f]), u[:, j])
    return theta


def _start(problem: PolynomialProblem, structure: str, options: PolynomialOptions) -> np.ndarray:
    """Return starting values of one output's parameters (module Notes)."""
    lay, ix = problem.layout, problem.index
    if structure == "armax":
        a, b, c = _hannan_rissanen(problem.parts, lay.na, lay.nb, lay.nk, lay.nc)
        theta = np.zeros(problem.n_parameters)
        theta[ix["a"]], theta[ix["c"]] = a, c
        for j in range(lay.m):
            theta[ix["b"][j]] = b[j]
        return theta
    if structure == "oe":
        return _oe_start(problem)
    oe = PolynomialProblem(problem.parts, 0, lay.nb, 0, 0, lay.nf, lay.nk)
    theta_oe = _minimize(oe, _oe_start(oe), options).point
    P = oe.polynomials(theta_oe)
    residuals = [(np.zeros((y.size - lay.n0, 0)), oe._signals(P, u, y)[1]) for u, y in oe.parts]
    d, _, c = _hannan_rissanen(residuals, lay.nd, (), (), lay.nc)
    theta = np.zeros(problem.n_parameters)
    theta[ix["c"]], theta[ix["d"]] = c, _inside(np.concatenate([[1.0], d]))[1:]
    for j in range(lay.m):
        theta[ix["b"][j]], theta[ix["f"][j]] = theta_oe[oe.index["b"][j]], theta_oe[oe.index["f"][j]]
    return theta


# --------------------------------------------------------------------------- search and covariance


def _minimize(problem: PolynomialProblem, theta0: np.ndarray, options: PolynomialOptions):
    if not np.isfinite(problem.loss(theta0)):
        raise IdentificationError("the starting values of the polynomial model are not admissible")
    return minimize(theta0, problem.loss, problem.linearize, problem.step,
                    max_iterations=options.max_iterations,
                    gtol=options.step_tolerance**2 / max(problem.n_residuals, 1))


def _parameter_covariance(problem: PolynomialProblem, final, robust: bool) -> np.ndarray | None:
    """Covariance of the coefficients at the minimum: Gauss, or the Newey-West sandwich; ``None`` if singular."""
    R = final.linearization.R
    d = R.shape[0]
    if d == 0:
        return np.zeros((0, 0))
    diag = np.abs(np.diag(R))
    if np.min(diag) <= 1e-12 * np.max(diag):
        return None
    Rinv = np.linalg.inv(R)
    H_inv = Rinv @ Rinv.T
    if not robust:
        return final.loss / max(problem.n_residuals - d, 1) * H_inv
    S = long_run_covariance(problem.gradient_parts(final.point))
    P = H_inv @ S @ H_inv
    return 0.5 * (P + P.T)


@dataclass(frozen=True, slots=True, eq=False)
class _OutputFit:
    theta: np.ndarray
    covariance: np.ndarray | None
    loss: float
    noise_variance: float
    iterations: int
    stop_reason: str
    history: tuple[float, ...]


def _fit_output(problem: PolynomialProblem, structure: str, options: PolynomialOptions) -> _OutputFit:
    final = _minimize(problem, _start(problem, structure, options), options)
    n = max(problem.n_residuals, 1)
    return _OutputFit(
        theta=np.asarray(final.point, dtype=float),
        covariance=_parameter_covariance(problem, final, robust=structure == "oe"),
        loss=final.loss / n,
        noise_variance=final.loss / max(problem.n_residuals - problem.n_parameters, 1),
        iterations=final.iterations,
        stop_reason=final.stop_reason,
        history=tuple(v / n for v in final.history),
    )


# --------------------------------------------------------------------------- state space


@dataclass(frozen=True, slots=True, eq=False)
class _Block:
    """One observer-form block: ``alpha`` (leading 1) and its columns, each with parameter indices (-1: fixed).

    ``columns`` holds ``(kind, column, shift, values, indices)``: ``kind`` ``"B"`` (input
    ``column``) or ``"K"`` (the innovations of output ``column``); ``values`` placed from
    power ``shift`` of ``q^-1`` on.
    """

    output: int
    alpha: tuple[np.ndarray, np.ndarray]
    columns: tuple[tuple[str, int, int, np.ndarray, np.ndarray], ...]

    @property
    def order(self) -> int:
        lags = [shift + vals.size - 1 for _, _, shift, vals, _ in self.columns]
        return max([self.alpha[0].size - 1, 0, *lags])


def _coef(theta: np.ndarray, sl: slice, offset: int, lead: bool) -> tuple[np.ndarray, np.ndarray]:
    vals, idx = theta[sl], np.arange(sl.start, sl.stop) + offset
    if lead:
        return np.concatenate([[1.0], vals]), np.concatenate([[-1], idx])
    return np.asarray(vals, dtype=float), idx


def _placed(vals: np.ndarray, idx: np.ndarray, shift: int, size: int) -> tuple[np.ndarray, np.ndarray]:
    out, out_idx = np.zeros(size), np.full(size, -1)
    out[shift:shift + vals.size] = vals
    out_idx[shift:shift + vals.size] = idx
    return out, out_idx


def _blocks(structure: str, layout: _Layout, thetas: Sequence[np.ndarray]) -> list[_Block]:
    """Observer-form blocks of every output: plant blocks of all outputs, then Box-Jenkins noise blocks."""
    ix = layout.slices()
    plant, noise = [], []
    offset = 0
    for i, theta in enumerate(thetas):
        inputs = [j for j in range(layout.m) if layout.nb[j]]
        b = {j: _coef(theta, ix["b"][j], offset, False) for j in inputs}
        if structure == "armax":
            cols = [("B", j, layout.nk[j], *b[j]) for j in inputs]
            cols.append(("K", i, 0, *_coef(theta, ix["c"], offset, True)))
            plant.append(_Block(i, _coef(theta, ix["a"], offset, True), tuple(cols)))
        else:
            plant.extend(_Block(i, _coef(theta, ix["f"][j], offset, True), (("B", j, layout.nk[j], *b[j]),))
                         for j in inputs)
        if structure == "bj":
            noise.append(_Block(i, _coef(theta, ix["d"], offset, True),
                                (("K", i, 0, *_coef(theta, ix["c"], offset, True)),)))
        offset += theta.size
    return plant + noise


def _realise(blocks: Sequence[_Block], m: int, p: int, n_params: int):
    """Return ``A, B, C, D, K`` of the stacked blocks and ``d theta_ss / d coefficients`` (exact)."""
    n = sum(blk.order for blk in blocks)
    mats = {"A": np.zeros((n, n)), "B": np.zeros((n, m)), "C": np.zeros((p, n)), "D": np.zeros((p, m)),
            "K": np.zeros((n, p))}
    lay = theta_layout(n, m, p)
    jac = np.zeros((lay["K"].stop, n_params))

    def add(name: str, r: int, c: int, param: int, value: float) -> None:
        if param >= 0:
            jac[lay[name].start + r * mats[name].shape[1] + c, param] += value

    s = 0
    for blk in blocks:
        k = blk.order
        alpha, aidx = _placed(*blk.alpha, 0, k + 1)
        if k:
            mats["A"][s:s + k, s] = -alpha[1:]
            mats["A"][s:s + k - 1, s + 1:s + k] += np.eye(k - 1)
            mats["C"][blk.output, s] = 1.0
        for row in range(k):
            add("A", s + row, s, int(aidx[row + 1]), -1.0)
        for kind, col, shift, vals, idx in blk.columns:
            beta, bidx = _placed(vals, idx, shift, k + 1)
            mats[kind][s:s + k, col] = beta[1:] - alpha[1:] * beta[0]
            for row in range(k):
                add(kind, s + row, col, int(bidx[row + 1]), 1.0)
                add(kind, s + row, col, int(aidx[row + 1]), -beta[0])
                add(kind, s + row, col, int(bidx[0]), -alpha[row + 1])
            if kind == "B":
                mats["D"][blk.output, col] += beta[0]
                add("D", blk.output, col, int(bidx[0]), 1.0)
        s += k
    return mats, jac


def polynomial_state_space(
    parameters: Sequence[np.ndarray],
    options: PolynomialOptions,
    n_inputs: int,
    sample_time: float,
    *,
    input_names: Sequence[str] | None = None,
    output_names: Sequence[str] | None = None,
) -> StateSpaceModel:
    """State-space realisation of a polynomial model (observer form, see the module Notes).

    Parameters
    ----------
    parameters : sequence of array_like
        Per output, ``theta = [a, b_1 .. b_m, c, d, f_1 .. f_m]`` (as in
        :attr:`PolynomialResult.parameters`).
    options : PolynomialOptions
        The structure and orders.
    n_inputs : int
        ``m``.
    sample_time : float
        Seconds.
    input_names, output_names : sequence of str, optional

    Returns
    -------
    StateSpaceModel
        Plant states of every output first, then (Box-Jenkins) the noise
        states; ``noise_gain`` set for ARMAX and Box-Jenkins, ``None`` for
        output error.

    Examples
    --------
    >>> opts = PolynomialOptions(structure="oe", nb=1, nf=1, nk=1)
    >>> model = polynomial_state_space([[0.5, -0.8]], opts, 1, 0.1)   # 0.5 q^-1 / (1 - 0.8 q^-1)
    >>> model.A.tolist(), model.B.tolist()
    ([[0.8]], [[0.5]])
    """
    sample_time = positive_float(sample_time, "sample_time")
    if not isinstance(options, PolynomialOptions):
        raise OptionError(f"options must be PolynomialOptions; got {type(options).__name__}")
    m = int_in_range(n_inputs, "n_inputs", 1)
    thetas = [np.asarray(t, dtype=float).ravel() for t in parameters]
    if not thetas:
        raise OptionError("parameters must hold one coefficient vector per output; got none")
    layout = _Layout(options.na, *_orders(options, m))
    size = layout.slices()["size"]
    for i, t in enumerate(thetas):
        if t.size != size or not np.all(np.isfinite(t)):
            raise OptionError(f"parameters[{i}] must hold {size} finite coefficients for these orders; got {t.size}")
    mats, _ = _realise(_blocks(options.structure, layout, thetas), m, len(thetas), size * len(thetas))
    return _model(options.structure, mats, len(thetas), layout, sample_time, input_names, output_names)


def _orders(options: PolynomialOptions, m: int) -> tuple:
    """``(nb, nc, nd, nf, nk)`` in :class:`_Layout` order after ``na``."""
    nb, nf, nk = options.resolve(m)
    return nb, options.nc, options.nd, nf, nk


def _model(structure, mats, p, layout, sample_time, input_names, output_names) -> StateSpaceModel:
    noise_states = p * max(layout.nc, layout.nd) if structure == "bj" else 0
    return StateSpaceModel(
        A=mats["A"], B=mats["B"], C=mats["C"], D=mats["D"], sample_time=sample_time,
        inputs=input_names, outputs=output_names,
        noise_gain=None if structure == "oe" else mats["K"], noise_states=noise_states,
    )


# --------------------------------------------------------------------------- the job


def fit_polynomial(
    data: Experiment | Sequence[Experiment],
    sample_time: float,
    options: PolynomialOptions,
    *,
    input_names: Sequence[str] | None = None,
    output_names: Sequence[str] | None = None,
) -> PolynomialResult:
    """Fit an output-error, ARMAX or Box-Jenkins model by minimising its prediction error.

    Parameters
    ----------
    data : Experiment or sequence of Experiment
        Input/output deviations from the operating point, ``(N, m)`` and
        ``(N, p)``; several experiments are combined without being joined.
    sample_time : float
        Seconds.
    options : PolynomialOptions
        Structure and orders.
    input_names, output_names : sequence of str, optional
        Names carried into the model (default ``u1..``, ``y1..``).

    Returns
    -------
    PolynomialResult

    Raises
    ------
    OptionError
        Orders that do not fit the number of inputs, or too few samples
        (every experiment needs more than ``n0`` samples, and all of them
        together more than the number of coefficients).
    IdentificationError
        No admissible starting values could be found.

    Notes
    -----
    See the module docstring: criterion, admissible models (the search
    refuses steps that make ``C``, ``D`` or an ``F_j`` unstable), starting
    values, covariance and realisation.

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, sec. 4.2, ch. 7, sec. 9.4 and 10.3.

    Examples
    --------
    >>> import numpy as np
    >>> from scipy.signal import lfilter
    >>> u = np.random.default_rng(0).standard_normal((400, 1))
    >>> y = lfilter([0, 0.5], [1, -0.8], u[:, 0])          # 0.5 q^-1 / (1 - 0.8 q^-1)
    >>> res = fit_polynomial(Experiment(u, y), 0.1, PolynomialOptions(structure="oe", nb=1, nf=1))
    >>> np.round(res.parameters[0], 6).tolist()
    [0.5, -0.8]
    """
    sample_time = positive_float(sample_time, "sample_time")
    if not isinstance(options, PolynomialOptions):
        raise OptionError(f"options must be PolynomialOptions; got {type(options).__name__}")
    experiments = as_experiments(data)
    m, p = experiments[0].n_inputs, experiments[0].n_outputs
    inputs = names_tuple(input_names, "input_names", m, "u")
    outputs = names_tuple(output_names, "output_names", p, "y")
    layout = _Layout(options.na, *_orders(options, m))
    _check_samples(experiments, layout)
    fits = []
    for i in range(p):
        problem = PolynomialProblem([(e.u, e.y[:, i]) for e in experiments], layout.na, layout.nb,
                                    layout.nc, layout.nd, layout.nf, layout.nk)
        fits.append(_fit_output(problem, options.structure, options))
    return _result(options, layout, fits, m, sample_time, inputs, outputs,
                   sum(e.n_samples - layout.n0 for e in experiments))


def _check_samples(experiments: Sequence[Experiment], layout: _Layout) -> None:
    n0, d = layout.n0, layout.slices()["size"]
    for k, e in enumerate(experiments):
        if e.n_samples <= n0:
            raise OptionError(
                f"experiment {k} has {e.n_samples} samples; these orders and delays need more than {n0}"
            )
    total = sum(e.n_samples - n0 for e in experiments)
    if total <= d:
        raise OptionError(f"{d} coefficients per output need more than {d} prediction errors; the data give {total}")


def _ro(x: Any) -> np.ndarray:
    """Return a read-only float copy (results hold no array the caller can change)."""
    arr = np.array(x, dtype=float, copy=True)
    arr.flags.writeable = False
    return arr


def _result(options, layout: _Layout, fits: Sequence[_OutputFit], m: int, sample_time: float,
            inputs, outputs, n_samples: int) -> PolynomialResult:
    p, size = len(fits), layout.slices()["size"]
    thetas = [fit.theta for fit in fits]
    mats, jac = _realise(_blocks(options.structure, layout, thetas), m, p, size * p)
    model = _model(options.structure, mats, p, layout, sample_time, inputs, outputs)
    covariance = None
    if all(fit.covariance is not None for fit in fits) and size:
        factors = []
        for fit in fits:
            w, V = np.linalg.eigh(fit.covariance)
            factors.append(V * np.sqrt(np.maximum(w, 0.0))[None, :])
        L = np.zeros((size * p, size * p))
        for i, F in enumerate(factors):
            L[i * size:(i + 1) * size, i * size:(i + 1) * size] = F
        covariance = ParameterCovariance(jac @ L, "robust" if options.structure == "oe" else "gauss",
                                         model.n_states, m, p)
    polys = [PolynomialProblem([], layout.na, layout.nb, layout.nc, layout.nd, layout.nf,
                               layout.nk).polynomials(t) for t in thetas]
    return PolynomialResult(
        model=model, options=options, structure=options.structure,
        na=layout.na, nb=layout.nb, nc=layout.nc, nd=layout.nd, nf=layout.nf, nk=layout.nk,
        a=tuple(_ro(P.a) for P in polys), b=tuple(tuple(map(_ro, P.b)) for P in polys),
        c=tuple(_ro(P.c) for P in polys), d=tuple(_ro(P.d) for P in polys),
        f=tuple(tuple(map(_ro, P.f)) for P in polys),
        parameters=tuple(map(_ro, thetas)),
        std_errors=tuple(_ro(np.full(size, np.nan) if fit.covariance is None else np.sqrt(np.diag(fit.covariance)))
                         for fit in fits),
        parameter_covariance=tuple(None if fit.covariance is None else _ro(fit.covariance) for fit in fits),
        covariance=covariance,
        loss=_ro([fit.loss for fit in fits]),
        noise_variance=_ro([fit.noise_variance for fit in fits]),
        iterations=tuple(fit.iterations for fit in fits),
        stop_reason=tuple(fit.stop_reason for fit in fits),
        history=tuple(fit.history for fit in fits),
        n_parameters=size * p,
        n_samples=n_samples,
    )
