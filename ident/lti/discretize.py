"""Continuous <-> discrete time: ZOH, FOH, Tustin and matched pole-zero.

``to_discrete`` samples a continuous model, ``to_continuous`` undoes it, and
``pole_to_continuous`` / ``poles_to_continuous`` map single poles with
``s = ln(z) / T``, which works even when no real continuous model exists.
Results keep the signal names, units and operating point; a noise gain is not
carried over.
"""

from __future__ import annotations

import math
from typing import Any, Literal

import numpy as np

from .._validate import one_of, optional_positive_float, positive_float, sample_time_value
from ..choices import DISCRETIZE_METHODS
from ..errors import ModelError
from .models import StateSpaceModel, TransferFunctionModel, require_state_space, signal_metadata
from .zeros import channel_zeros_gains

__all__ = [
    "DISCRETIZE_METHODS",
    "to_discrete",
    "to_continuous",
    "pole_to_continuous",
    "poles_to_continuous",
]

#: Discretisation methods, for both directions.
DiscretizeMethod = Literal["zoh", "foh", "tustin", "matched"]

_CAUSES = (
    "usual causes: a model order too high (a pole fitting noise) or a sample rate "
    "too low for the dynamics"
)


def _fmt(z: complex) -> str:
    z = complex(z)
    if z.imag == 0:
        return f"{z.real:.6g}"
    return f"{z.real:.6g}{z.imag:+.6g}j"


def _on_negative_axis(z: np.ndarray) -> np.ndarray:
    """Flag values at 0 or on the negative real axis (no real logarithm)."""
    z = np.asarray(z, dtype=complex)
    mag = np.abs(z)
    tiny = 1e-12
    return (mag <= tiny) | ((z.real < 0) & (np.abs(z.imag) <= tiny * np.maximum(mag, 1.0)))


def pole_to_continuous(z: complex, sample_time: float) -> complex | None:
    """Continuous-time equivalent ``s = ln(z) / T`` of one discrete pole.

    Parameters
    ----------
    z : complex
        Discrete-time pole.
    sample_time : float
        Sample time ``T`` in seconds.

    Returns
    -------
    complex or None
        ``s`` with the principal logarithm (``|Im s| <= pi / T``), or ``None``
        when ``z`` is 0 or on the negative real axis, where no real
        continuous pole maps to it.

    Examples
    --------
    >>> round(pole_to_continuous(0.5, 0.1).real, 6)
    -6.931472
    >>> pole_to_continuous(-0.3, 0.1) is None
    True
    """
    T = positive_float(sample_time, "sample_time")
    z = complex(z)
    if _on_negative_axis(np.array([z]))[0]:
        return None
    return complex(np.log(z) / T)


def poles_to_continuous(z: Any, sample_time: float) -> np.ndarray:
    """Vectorised :func:`pole_to_continuous`.

    Parameters
    ----------
    z : array_like, complex
        Discrete-time poles.
    sample_time : float
        Sample time in seconds.

    Returns
    -------
    numpy.ndarray, complex, same shape as ``z``
        ``ln(z) / T``; ``nan + nan j`` where undefined (0 or negative real axis).
    """
    T = positive_float(sample_time, "sample_time")
    z = np.asarray(z, dtype=complex)
    bad = _on_negative_axis(z)
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.log(np.where(bad, 1.0, z)) / T
    s[bad] = complex(np.nan, np.nan)
    return s


def _tustin_constant(sample_time: float, prewarp_hz: float | None) -> float:
    """``k`` in ``s = k (z - 1) / (z + 1)``: ``2/T``, or pre-warped."""
    if prewarp_hz is None:
        return 2.0 / sample_time
    w = 2 * math.pi * prewarp_hz
    if w * sample_time / 2 >= math.pi / 2:
        raise ModelError(
            f"prewarp_hz must be below the Nyquist frequency {0.5 / sample_time:.6g} Hz; "
            f"got {prewarp_hz:g}"
        )
    return w / math.tan(w * sample_time / 2)


def _new(model: StateSpaceModel, A, B, C, D, sample_time) -> StateSpaceModel:
    return StateSpaceModel(A=A, B=B, C=C, D=D, sample_time=sample_time, **signal_metadata(model))


def to_discrete(
    model: StateSpaceModel,
    sample_time: float,
    *,
    method: DiscretizeMethod = "zoh",
    prewarp_hz: float | None = None,
) -> StateSpaceModel:
    """Discrete-time equivalent of a continuous-time model.

    Parameters
    ----------
    model : StateSpaceModel
        Continuous-time model (``sample_time is None``).
    sample_time : float
        Sample time ``T`` in seconds.
    method : {"zoh", "foh", "tustin", "matched"}, default "zoh"
        ``zoh``: exact for inputs held constant between samples.
        ``foh``: exact for inputs interpolated linearly between samples
        (triangle hold, as :func:`scipy.signal.cont2discrete`).
        ``tustin``: bilinear map ``s = k (z - 1) / (z + 1)``, ``k = 2 / T``.
        ``matched``: every pole and finite zero mapped by ``z = exp(s T)``,
        zeros at infinity put at ``z = -1``, gain matched at DC; for models
        with one input and one output (or no states) only.
    prewarp_hz : float, optional
        Tustin only: choose ``k = w / tan(w T / 2)``, ``w = 2 pi prewarp_hz``,
        so that the discrete frequency response equals the continuous one at
        that frequency. Must be below the Nyquist frequency.

    Returns
    -------
    StateSpaceModel
        Discrete-time model with ``sample_time = T``. ``zoh``, ``foh`` and
        ``tustin`` keep the order and are computed on the state space;
        ``matched`` works on the transfer function's poles and zeros and
        returns a minimal realisation of the same order.

    Raises
    ------
    ModelError
        When the model is already discrete, for Tustin a pole sits at
        ``s = k`` (the map is singular there), or ``matched`` is asked for a
        model with several inputs or outputs: done channel by channel it would
        repeat every pole once per channel (a 4-state 2x2 model would come back
        with 8 states), so it is refused with a pointer to ``zoh``/``tustin``.

    Notes
    -----
    ZOH: ``exp([[A, B], [0, 0]] T) = [[Ad, Bd], [0, I]]``, ``Cd = C``,
    ``Dd = D`` [1]_. Tustin: ``Ad = (I - A/k)^-1 (I + A/k)``,
    ``Bd = (2/k) (I - A/k)^-1 B``, ``Cd = C (I - A/k)^-1``,
    ``Dd = D + C Bd / 2`` (a generalised bilinear transform with
    ``alpha = 1/2`` and ``T`` replaced by ``2/k``). Matched: the gain is
    matched at DC (``s = 0``, ``z = 1``); when a channel has a pole or zero at
    ``s = 0`` it is matched in magnitude, with the sign of the real part, at
    ``f = 1 / (100 T)`` instead.

    References
    ----------
    .. [1] G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of
       Dynamic Systems*, 3rd ed., Addison-Wesley, 1998, Chapter 6 (discrete
       equivalents: ZOH, FOH/triangle hold, Tustin with pre-warping, matched
       pole-zero).
    """
    require_state_space(model)
    T = sample_time_value(sample_time)
    one_of(method, "method", DISCRETIZE_METHODS)
    prewarp_hz = optional_positive_float(prewarp_hz, "prewarp_hz")
    if model.is_discrete:
        raise ModelError(
            f"model is already discrete (sample time {model.sample_time:g} s)",
            hint="convert it to continuous time first to resample it",
        )
    if prewarp_hz is not None and method != "tustin":
        raise ModelError(f"prewarp_hz applies to method 'tustin' only; method is {method!r}")
    from scipy import linalg  # here, not at the top: the fit path maps poles without scipy

    A, B, C, D = model.A, model.B, model.C, model.D
    n, m = model.n_states, model.n_inputs
    if method == "zoh":
        M = np.zeros((n + m, n + m))
        M[:n, :n] = A
        M[:n, n:] = B
        E = linalg.expm(M * T)
        return _new(model, E[:n, :n], E[:n, n:], C, D, T)
    if method == "foh":
        from scipy.signal import cont2discrete

        Ad, Bd, Cd, Dd, _ = cont2discrete((A, B, C, D), T, method="foh")
        return _new(model, Ad, Bd, Cd, Dd, T)
    if method == "tustin":
        k = _tustin_constant(T, prewarp_hz)
        _check_tustin_poles(model, k)
        ima = np.eye(n) - A / k
        lu = linalg.lu_factor(ima)
        Ad = linalg.lu_solve(lu, np.eye(n) + A / k)
        Bd = linalg.lu_solve(lu, B) * (2.0 / k)
        Cd = linalg.lu_solve(lu, C.T, trans=1).T
        Dd = D + 0.5 * C @ Bd
        return _new(model, Ad, Bd, Cd, Dd, T)
    return _matched(model, T, to_discrete=True)


def _check_tustin_poles(model: StateSpaceModel, k: float) -> None:
    poles = model.poles()
    bad = poles[np.abs(poles - k) <= 1e-10 * max(1.0, k)]
    if bad.size:
        raise ModelError(
            f"pole s={_fmt(bad[0])} sits where the Tustin map is singular (s = {k:.6g})"
        )


def to_continuous(
    model: StateSpaceModel,
    *,
    method: DiscretizeMethod = "zoh",
    prewarp_hz: float | None = None,
) -> StateSpaceModel:
    """Continuous-time model whose discretisation by ``method`` gives ``model``.

    Parameters
    ----------
    model : StateSpaceModel
        Discrete-time model.
    method : {"zoh", "foh", "tustin", "matched"}, default "zoh"
        The inverse of the same method of :func:`to_discrete` (``matched``: one
        input and one output, or no states).
    prewarp_hz : float, optional
        Tustin only: the pre-warping frequency used for the discretisation.

    Returns
    -------
    StateSpaceModel
        Continuous-time model (``sample_time is None``).

    Raises
    ------
    ModelError
        When the model is already continuous, or no real continuous model
        exists: under ``zoh``/``foh``/``matched`` a pole at ``z = 0`` or on the
        negative real axis (named in the message), under ``tustin`` a pole at
        ``z = -1``.

    Notes
    -----
    ZOH: the principal matrix logarithm of the augmented matrix,
    ``logm([[Ad, Bd], [0, I]]) / T = [[A, B], [0, 0]]`` (scipy.linalg.logm).
    It is real exactly when no eigenvalue of ``Ad`` lies on the closed
    negative real axis. FOH: ``A`` from the logarithm of ``Ad``, then ``B``
    and ``D`` from the linear relations of the triangle-hold formulas. Tustin:
    ``A = k (Ad + I)^-1 (Ad - I)``, ``B = k (Ad + I)^-1 Bd``,
    ``C = 2 Cd (Ad + I)^-1``, ``D = Dd - C Bd / 2``. Matched: poles and zeros
    by ``s = ln(z) / T``; zeros at ``z = -1`` go back to infinity; DC gain kept.
    A ``k``-fold zero at ``z = -1`` (relative degree ``k``) comes out of the
    zero computation split into ``k`` zeros about ``eps**(1/k)`` from ``-1``;
    they are recognised as one cluster by their spread and their mean (see
    ``_cluster_at_minus_one``), so the matched discretisation of any model
    is inverted. The round trip goes through transfer-function polynomials,
    whose roots lose accuracy when many poles crowd near ``z = 1`` (a sample
    time far shorter than several similar time constants); ``zoh`` works on
    the state space and has no such limit.

    References
    ----------
    .. [1] G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of
       Dynamic Systems*, 3rd ed., Addison-Wesley, 1998, Chapter 6.
    """
    require_state_space(model)
    one_of(method, "method", DISCRETIZE_METHODS)
    prewarp_hz = optional_positive_float(prewarp_hz, "prewarp_hz")
    if not model.is_discrete:
        raise ModelError("model is already continuous (sample_time is None)")
    if prewarp_hz is not None and method != "tustin":
        raise ModelError(f"prewarp_hz applies to method 'tustin' only; method is {method!r}")
    T = model.sample_time
    A, B, C, D = model.A, model.B, model.C, model.D
    n, m = model.n_states, model.n_inputs
    if method == "tustin":
        k = _tustin_constant(T, prewarp_hz)
        poles = model.poles()
        bad = poles[np.abs(poles + 1.0) <= 1e-10]
        if bad.size:
            raise ModelError(
                f"pole z={_fmt(bad[0])} has no Tustin continuous-time equivalent "
                "(it maps to s = infinity); " + _CAUSES
            )
        from scipy import linalg

        lu = linalg.lu_factor(A + np.eye(n))
        Ac = k * linalg.lu_solve(lu, A - np.eye(n))
        Bc = k * linalg.lu_solve(lu, B)
        Cc = 2.0 * linalg.lu_solve(lu, C.T, trans=1).T
        Dc = D - 0.5 * Cc @ B
        return _new(model, Ac, Bc, Cc, Dc, None)
    _refuse_negative_real(model, method)
    if method == "matched":
        return _matched(model, T, to_discrete=False)
    if n == 0:
        return _new(model, A, B, C, D, None)
    if method == "zoh":
        M = np.zeros((n + m, n + m))
        M[:n, :n] = A
        M[:n, n:] = B
        M[n:, n:] = np.eye(m)
        L = _real_logm(M) / T
        return _new(model, L[:n, :n], L[:n, n:], C, D, None)
    # foh: Ad = exp(A T); Bd = (G1 - G2 + Ad G2) B; Dd = D + C G2 B
    Ac = _real_logm(A) / T
    E = np.zeros((3 * n, 3 * n))
    E[:n, :n] = Ac * T
    E[:n, n : 2 * n] = np.eye(n) * T
    E[n : 2 * n, 2 * n :] = np.eye(n)
    from scipy import linalg

    S = linalg.expm(E)
    G1 = S[:n, n : 2 * n]
    G2 = S[:n, 2 * n :]
    Bc = linalg.solve(G1 - G2 + A @ G2, B)
    Dc = D - C @ G2 @ Bc
    return _new(model, Ac, Bc, C, Dc, None)


def _refuse_negative_real(model: StateSpaceModel, method: str) -> None:
    poles = model.poles()
    bad = poles[_on_negative_axis(poles)]
    if bad.size:
        where = "at the origin" if abs(bad[0]) <= 1e-12 else "on the negative real axis"
        raise ModelError(
            f"pole z={_fmt(bad[0])} is {where}: no real continuous-time model has this "
            f"{method.upper() if method != 'matched' else 'matched'} equivalent; " + _CAUSES,
            hint="lower the model order or sample faster; single poles can still be "
            "mapped one by one with s = ln(z)/T",
        )


def _real_logm(M: np.ndarray) -> np.ndarray:
    from scipy import linalg

    L = linalg.logm(M)
    L = np.asarray(L)
    if np.iscomplexobj(L):
        scale = max(1.0, float(np.max(np.abs(L))))
        if np.max(np.abs(L.imag)) > 1e-8 * scale:
            raise ModelError("the matrix logarithm is not real; no real continuous model exists")
        L = L.real
    return L


def _matched(model: StateSpaceModel, T: float, *, to_discrete: bool) -> StateSpaceModel:
    from .convert import tf_to_ss

    if model.n_states and (model.n_inputs, model.n_outputs) != (1, 1):
        # channel by channel, a model with several inputs or outputs would come back with
        # every pole once per channel (a 4-state 2x2 model with 8 states), and the way back
        # would be refused: the rule is defined for single-input single-output models only
        raise ModelError(
            f"the matched pole-zero rule maps one transfer function; this model has {model.n_inputs} "
            f"input(s) and {model.n_outputs} output(s)",
            hint="use --method zoh or tustin, which keep one state per pole for any number of channels",
        )

    poles = np.linalg.eigvals(model.A) if model.n_states else np.zeros(0, dtype=complex)
    nums, dens = [], []
    for channels in channel_zeros_gains(model):
        nrow, drow = [], []
        for zeros, gain in channels:
            num, den = _matched_channel(poles, zeros, gain, T, to_discrete)
            nrow.append(num)
            drow.append(den)
        nums.append(nrow)
        dens.append(drow)
    tf = TransferFunctionModel(
        num=nums,
        den=dens,
        sample_time=T if to_discrete else None,
        **signal_metadata(model),
    )
    return tf_to_ss(tf)


def _matched_channel(poles, zeros, gain, T, to_discrete):
    if gain == 0.0:
        return np.zeros(1), np.ones(1)
    if to_discrete:
        new_poles = np.exp(poles * T)
        new_zeros = np.concatenate([np.exp(zeros * T), -np.ones(poles.size - zeros.size)])
        old_at, new_at = 0.0, 1.0
        old_ref, new_ref = 1j * 2 * np.pi / (100 * T), np.exp(1j * 2 * np.pi / 100)
    else:
        new_poles = np.log(poles) / T
        finite = ~_cluster_at_minus_one(zeros)
        bad = zeros[finite & _on_negative_axis(zeros)]
        if bad.size:
            raise ModelError(
                f"zero z={_fmt(bad[0])} is on the negative real axis: no matched "
                "continuous-time equivalent"
            )
        new_zeros = np.log(zeros[finite]) / T
        old_at, new_at = 1.0, 0.0
        old_ref, new_ref = np.exp(1j * 2 * np.pi / 100), 1j * 2 * np.pi / (100 * T)
    new_poles = _conj_clean(new_poles)
    new_zeros = _conj_clean(new_zeros)

    def value(point, zs, ps):
        return np.prod(point - zs) / np.prod(point - ps)

    singular = np.any(np.abs(np.concatenate([poles, zeros]) - old_at) <= 1e-10)
    if not singular:
        old = gain * value(old_at, zeros, poles)
        k = float(np.real(old / value(new_at, new_zeros, new_poles)))
    else:
        old = gain * value(old_ref, zeros, poles)
        new = value(new_ref, new_zeros, new_poles)
        ratio = old / new
        k = float(abs(ratio) * (1.0 if ratio.real >= 0 else -1.0))
    num = k * np.real(np.poly(new_zeros)) if new_zeros.size else np.array([k])
    den = np.real(np.poly(new_poles)) if new_poles.size else np.ones(1)
    return num, den


#: A cluster of ``k`` zeros is at ``z = -1`` when each is within ``_CLUSTER_SPREAD * eps**(1/k)``
#: of it (at least ``_CLUSTER_FLOOR``) and their mean within ``_CLUSTER_CENTRE``.
_CLUSTER_SPREAD = 100.0
_CLUSTER_FLOOR = 1e-8
_CLUSTER_CENTRE = 1e-8


def _cluster_at_minus_one(zeros: np.ndarray) -> np.ndarray:
    """Mask of the zeros that stand for a zero of some multiplicity ``k`` at ``z = -1``.

    A ``k``-fold root perturbed by a relative error ``eps`` splits into ``k``
    roots about ``eps**(1/k)`` away from it (``1e-8`` for two, ``6e-6`` for
    three, ``1e-4`` for four in double precision), while their mean (the
    coefficient of the deflated polynomial) moves only by about ``eps``. So the
    ``k`` zeros nearest ``-1`` are taken as a ``k``-fold zero there when all lie
    within a distance that grows with ``k`` and their mean is at ``-1`` to
    ``1e-8``; the largest such ``k`` wins. A genuine zero near ``-1`` (say at
    ``-0.98``) moves the mean far more than that and is kept.
    """
    zeros = np.asarray(zeros, dtype=complex)
    mask = np.zeros(zeros.shape, dtype=bool)
    if zeros.size == 0:
        return mask
    dist = np.abs(zeros + 1.0)
    order = np.argsort(dist, kind="stable")
    eps = np.finfo(float).eps
    best = 0
    for k in range(1, zeros.size + 1):
        cluster = zeros[order[:k]]
        spread_ok = dist[order[k - 1]] <= max(_CLUSTER_FLOOR, _CLUSTER_SPREAD * eps ** (1.0 / k))
        if spread_ok and abs(cluster.mean() + 1.0) <= _CLUSTER_CENTRE:
            best = k
    mask[order[:best]] = True
    return mask


def _conj_clean(x: np.ndarray) -> np.ndarray:
    """Make nearly real values real so that np.poly returns real coefficients."""
    x = np.asarray(x, dtype=complex).copy()
    small = np.abs(x.imag) <= 1e-12 * np.maximum(1.0, np.abs(x))
    x[small] = x[small].real
    return x
