"""Conversions between state space and transfer functions, and scipy.signal interop.

Transfer functions follow :mod:`ident.lti.models`: ``num[i][j]``/``den[i][j]`` in
descending powers of z (or s), denominators monic. Every conversion keeps the
sample time, signal names, units and operating point.
"""

from __future__ import annotations

from typing import Any, Literal

import numpy as np

from .._validate import names_tuple, one_of
from ..errors import ModelError, OptionError
from .models import StateSpaceModel, TransferFunctionModel, require_state_space, signal_metadata
from .realization import canonical_matrices, minimal_realization
from .zeros import channel_polynomials

__all__ = [
    "TF_TO_SS_FORMS",
    "ss_to_tf",
    "tf_to_ss",
    "to_scipy",
    "from_scipy",
    "ss_from_scipy",
    "tf_from_scipy",
]

#: Canonical forms offered by :func:`tf_to_ss`.
TF_TO_SS_FORMS = ("controllable", "observable")
#: Relative rank tolerance of the minimal reduction in a MIMO tf_to_ss (see its Notes).
_MIMO_RTOL = 1e-8

TfToSsForm = Literal["controllable", "observable"]


def ss_to_tf(model: StateSpaceModel) -> TransferFunctionModel:
    """Transfer-function matrix ``G = C (zI - A)^-1 B + D`` of a state-space model.

    Parameters
    ----------
    model : StateSpaceModel
        Continuous or discrete model of order ``n``.

    Returns
    -------
    TransferFunctionModel
        Every channel has the full denominator ``det(zI - A)`` (degree ``n``,
        nothing cancelled) and a numerator of degree at most ``n``. A channel
        that is identically zero has numerator ``[0]``.

    Notes
    -----
    Expanding ``C adj(zI - A) B`` symbolically, or using
    ``det(zI - A + B C) - det(zI - A)``, loses accuracy quickly with the
    order. Here the denominator is built from the eigenvalues of ``A``, and
    each numerator from the channel's zeros and its high-frequency gain (the
    first non-zero Markov parameter), both from an orthogonal deflation of the
    channel's Rosenbrock pencil (see :func:`ident.lti.analysis.transmission_zeros`;
    the algebra is in :mod:`ident.lti.zeros`) [1]_. Zeros that cancel poles
    (modes the channel does not see) are part of the numerator. This stays accurate to about order 20 for well-scaled
    models; the polynomial coefficients themselves become ill conditioned
    beyond that, whatever the method.

    References
    ----------
    .. [1] A. Varga and V. Sima, "Numerically stable algorithm for transfer
       function matrix evaluation", Int. J. Control 33(6), 1123-1133, 1981.

    Examples
    --------
    >>> from ident.lti.models import StateSpaceModel
    >>> m = StateSpaceModel(A=[[0.5]], B=[[1.0]], C=[[2.0]], D=[[1.0]], sample_time=0.1)
    >>> tf = ss_to_tf(m)
    >>> tf.num[0][0].tolist(), tf.den[0][0].tolist()
    ([1.0, 1.5], [1.0, -0.5])
    """
    require_state_space(model)
    nums, dens = channel_polynomials(model)
    return TransferFunctionModel(
        num=nums, den=dens, sample_time=model.sample_time, **signal_metadata(model)
    )


def tf_to_ss(model: TransferFunctionModel, *, form: TfToSsForm = "controllable") -> StateSpaceModel:
    """State-space realisation of a transfer-function model.

    Parameters
    ----------
    model : TransferFunctionModel
        Proper transfer-function matrix.
    form : {"controllable", "observable"}, default "controllable"
        Canonical form of each channel's realisation (see
        :func:`ident.lti.realization.controllable_form`).

    Returns
    -------
    StateSpaceModel
        SISO: the canonical form, of order ``deg den`` (common factors of
        ``num`` and ``den`` are kept). MIMO: for ``controllable``, one
        single-input canonical block per input and distinct denominator in its
        column (the outputs of a column that share a denominator share the
        block); for ``observable`` the dual, by rows. The blocks are stacked
        and reduced by :func:`ident.lti.realization.minimal_realization`, so no
        uncontrollable or unobservable state remains.
    """
    if not isinstance(model, TransferFunctionModel):
        raise OptionError(f"model must be a TransferFunctionModel; got {type(model).__name__}")
    one_of(form, "form", TF_TO_SS_FORMS)
    p, m = model.n_outputs, model.n_inputs
    meta = signal_metadata(model)
    if p == 1 and m == 1:
        A, B, C, D = canonical_matrices(model.num[0][0], model.den[0][0], form)
        return StateSpaceModel(A=A, B=B, C=C, D=D, sample_time=model.sample_time, **meta)
    # fewer inputs than outputs: one single-input block per input and distinct
    # denominator in its column (controllable structure); otherwise the dual,
    # one single-output block per output (observable structure)
    by_column = m <= p
    groups = _shared_denominator_groups(model, by_column=by_column)
    realised = []
    for fixed, den, members in groups:
        # SIMO controllable (or MISO observable) canonical form with common den
        nd = den.size - 1
        A0, B0, _, _ = canonical_matrices(np.zeros(1), den, "controllable")
        rows = []
        for other, num in members:
            _, _, Cx, Dx = canonical_matrices(num, den, "controllable")
            rows.append((other, Cx[0], Dx[0, 0]))
        realised.append((fixed, nd, A0, B0[:, 0], rows))
    n = sum(r[1] for r in realised)
    A = np.zeros((n, n))
    B = np.zeros((n, m))
    C = np.zeros((p, n))
    D = np.zeros((p, m))
    k = 0
    for fixed, nd, A0, b0, rows in realised:
        sl = slice(k, k + nd)
        if by_column:
            A[sl, sl] = A0
            B[sl, fixed] = b0
            for i, c, d in rows:
                C[i, sl] = c
                D[i, fixed] = d
        else:
            A[sl, sl] = A0.T
            C[fixed, sl] = b0
            for j, c, d in rows:
                B[sl, j] = c
                D[fixed, j] = d
        k += nd
    full = StateSpaceModel(A=A, B=B, C=C, D=D, sample_time=model.sample_time, **meta)
    return minimal_realization(full, tol=_MIMO_RTOL)


def _shared_denominator_groups(model: TransferFunctionModel, *, by_column: bool):
    """Group the channels of each column (row) by equal denominators.

    Returns ``(index, den, [(other_index, num), ...])`` per group, where
    ``index`` is the input (``by_column``) or output, and ``other_index`` the
    output (or input) of each member channel.
    """
    p, m = model.n_outputs, model.n_inputs
    outer, inner = (m, p) if by_column else (p, m)
    groups = []
    for a in range(outer):
        mine: list[tuple[np.ndarray, list]] = []
        for b in range(inner):
            i, j = (b, a) if by_column else (a, b)
            den, num = model.den[i][j], model.num[i][j]
            for gden, members in mine:
                if gden.size == den.size and np.array_equal(gden, den):
                    members.append((b, num))
                    break
            else:
                mine.append((den, [(b, num)]))
        groups.extend((a, gden, members) for gden, members in mine)
    return groups


def to_scipy(model: StateSpaceModel | TransferFunctionModel) -> Any:
    """Equivalent :mod:`scipy.signal` LTI object.

    Parameters
    ----------
    model : StateSpaceModel or TransferFunctionModel
        A transfer-function model must be SISO (scipy's ``TransferFunction``
        holds one channel).

    Returns
    -------
    scipy.signal.StateSpace or scipy.signal.TransferFunction
        Discrete (``dt = sample_time``) or continuous. Names, units and the
        operating point have no place in scipy's objects and are not kept.
    """
    from scipy import signal

    dt = {} if model.sample_time is None else {"dt": model.sample_time}
    if isinstance(model, StateSpaceModel):
        return signal.StateSpace(
            np.array(model.A), np.array(model.B), np.array(model.C), np.array(model.D), **dt
        )
    if isinstance(model, TransferFunctionModel):
        if model.n_inputs != 1 or model.n_outputs != 1:
            raise ModelError(
                "scipy.signal.TransferFunction holds one channel; the model has "
                f"{model.n_outputs} outputs and {model.n_inputs} inputs",
                hint="convert with tf_to_ss first and use the state-space form",
            )
        return signal.TransferFunction(np.array(model.num[0][0]), np.array(model.den[0][0]), **dt)
    raise OptionError(
        f"model must be a StateSpaceModel or TransferFunctionModel; got {type(model).__name__}"
    )


def _scipy_dt(system: Any) -> float | None:
    dt = system.dt
    if dt is None:
        return None
    if isinstance(dt, bool):
        raise ModelError("the scipy system has dt=True (unspecified sample time); give a number")
    return float(dt)


def ss_from_scipy(
    system: Any, *, inputs: Any = None, outputs: Any = None
) -> StateSpaceModel:
    """State-space model from a :class:`scipy.signal.StateSpace` (or any ``lti``/``dlti``).

    Parameters
    ----------
    system : scipy.signal.lti or scipy.signal.dlti
        Converted with ``system.to_ss()``.
    inputs, outputs : sequence of str, optional
        Signal names; default ``u1, ...`` and ``y1, ...``.

    Returns
    -------
    StateSpaceModel
    """
    from scipy import signal

    if not isinstance(system, (signal.lti, signal.dlti)):
        raise OptionError(f"system must be a scipy.signal LTI object; got {type(system).__name__}")
    ss = system.to_ss()
    D = np.atleast_2d(ss.D)
    p, m = D.shape
    return StateSpaceModel(
        A=ss.A,
        B=ss.B,
        C=ss.C,
        D=D,
        sample_time=_scipy_dt(system),
        inputs=names_tuple(inputs, "inputs", m, "u"),
        outputs=names_tuple(outputs, "outputs", p, "y"),
    )


def tf_from_scipy(
    system: Any, *, inputs: Any = None, outputs: Any = None
) -> TransferFunctionModel:
    """Transfer-function model from a :class:`scipy.signal.TransferFunction`.

    Parameters
    ----------
    system : scipy.signal.TransferFunction
        SISO, continuous or discrete. (scipy stores discrete transfer
        functions in descending powers of z, like :mod:`ident.lti.models`.)
    inputs, outputs : sequence of str, optional
        One name each; default ``u1`` and ``y1``.

    Returns
    -------
    TransferFunctionModel
    """
    from scipy import signal

    if not isinstance(system, signal.TransferFunction):
        raise OptionError(
            f"system must be a scipy.signal.TransferFunction; got {type(system).__name__}"
        )
    num = np.atleast_1d(np.squeeze(system.num))
    if num.ndim != 1:
        raise ModelError("only single-output scipy transfer functions can be converted")
    return TransferFunctionModel(
        num=[[num]],
        den=[[np.atleast_1d(system.den)]],
        sample_time=_scipy_dt(system),
        inputs=names_tuple(inputs, "inputs", 1, "u"),
        outputs=names_tuple(outputs, "outputs", 1, "y"),
    )


def from_scipy(
    system: Any, *, inputs: Any = None, outputs: Any = None
) -> StateSpaceModel | TransferFunctionModel:
    """Model from a :mod:`scipy.signal` LTI object, keeping its kind.

    A ``TransferFunction`` gives a :class:`TransferFunctionModel`
    (:func:`tf_from_scipy`); any other LTI object (``StateSpace``,
    ``ZerosPolesGain``) gives a :class:`StateSpaceModel`
    (:func:`ss_from_scipy`). Prefer those two when the result type matters.
    """
    from scipy import signal

    if isinstance(system, signal.TransferFunction):
        return tf_from_scipy(system, inputs=inputs, outputs=outputs)
    return ss_from_scipy(system, inputs=inputs, outputs=outputs)
