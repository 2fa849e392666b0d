"""State-space realisations: canonical, modal, balanced and minimal forms.

A realisation changes the state coordinates (or removes states that do not
matter) without changing the input-output behaviour. Every function returns a
new :class:`~ident.lti.models.StateSpaceModel` with the same sample time, signal
names, units and operating point.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from scipy import linalg

from .._validate import as_matrix, one_of
from ..choices import REALIZATIONS
from ..errors import ModelError, OptionError
from .models import StateSpaceModel, TransferFunctionModel, require_state_space, signal_metadata
from .zeros import channel_polynomials, controllable_staircase

__all__ = [
    "REALIZATIONS",
    "Realization",
    "BalancedRealization",
    "realize",
    "similarity_transform",
    "modal_form",
    "balanced_realization",
    "minimal_realization",
    "controllable_form",
    "observable_form",
]

#: State-space forms understood by :func:`realize`.
Realization = Literal["controllable", "observable", "modal", "balanced"]

#: Largest condition number of the eigenvector basis accepted by :func:`modal_form`.
_MODAL_COND_LIMIT = 1e10


def canonical_matrices(num: np.ndarray, den: np.ndarray, form: str):
    """Canonical ``(A, B, C, D)`` of a SISO ``num/den`` (descending, den monic).

    ``form`` is ``"controllable"`` or ``"observable"`` (the dual); see
    :func:`controllable_form` for the layout. Used by both realisations and
    :func:`ident.lti.convert.tf_to_ss`.
    """
    den = np.asarray(den, dtype=float)
    den = den / den[0]
    n = den.size - 1
    num = np.asarray(num, dtype=float)
    b = np.zeros(n + 1)
    b[n + 1 - num.size :] = num
    d = b[0]
    cvec = b[1:] - d * den[1:]
    A = np.zeros((n, n))
    if n:
        A[0, :] = -den[1:]
        A[1:, :-1] = np.eye(n - 1)
    Bc = np.zeros((n, 1))
    if n:
        Bc[0, 0] = 1.0
    Cc = cvec.reshape(1, n)
    D = np.array([[d]])
    if form == "controllable":
        return A, Bc, Cc, D
    return A.T.copy(), Cc.T.copy(), Bc.T.copy(), D


def _siso_canonical(model: StateSpaceModel, form: str) -> StateSpaceModel:
    """Canonical form of a SISO model from its transfer function (as :func:`ident.lti.convert.ss_to_tf` gives it)."""
    require_state_space(model)
    if model.n_inputs != 1 or model.n_outputs != 1:
        raise ModelError(
            f"the {form} canonical form is defined here for one input and one output; "
            f"the model has {model.n_inputs} inputs and {model.n_outputs} outputs",
            hint="use the 'modal' or 'balanced' realisation for several inputs or outputs",
        )
    nums, dens = channel_polynomials(model)
    tf = TransferFunctionModel(
        num=nums, den=dens, sample_time=model.sample_time, **signal_metadata(model)
    )
    A, B, C, D = canonical_matrices(tf.num[0][0], tf.den[0][0], form)
    return StateSpaceModel(A=A, B=B, C=C, D=D, sample_time=model.sample_time, **signal_metadata(model))


def controllable_form(model: StateSpaceModel) -> StateSpaceModel:
    """Return the controllable canonical form of a single-input single-output model.

    Parameters
    ----------
    model : StateSpaceModel
        SISO model of order ``n``.

    Returns
    -------
    StateSpaceModel
        ``A`` with ``-a1 .. -an`` in its first row and ones on the
        subdiagonal, ``B = e1``, ``C = [b1 - b0 a1, ..., bn - b0 an]``,
        ``D = b0``, where ``G = (b0 z^n + ... + bn) / (z^n + a1 z^{n-1} + ... + an)``
        (the layout of :func:`scipy.signal.tf2ss`). The order stays ``n`` even
        if the model is not minimal.

    Raises
    ------
    ModelError
        When the model has more than one input or output.

    References
    ----------
    .. [1] K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall,
       2010, Section 9-2 (canonical forms).
    """
    return _siso_canonical(model, "controllable")


def observable_form(model: StateSpaceModel) -> StateSpaceModel:
    """Observable canonical form of a single-input single-output model.

    The dual of :func:`controllable_form`: ``A`` and ``C, B`` are the
    transposes of the controllable form's ``A`` and ``B, C``.

    Parameters
    ----------
    model : StateSpaceModel
        SISO model.

    Returns
    -------
    StateSpaceModel

    Raises
    ------
    ModelError
        When the model has more than one input or output.

    References
    ----------
    .. [1] K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall,
       2010, Section 9-2 (canonical forms).
    """
    return _siso_canonical(model, "observable")


def similarity_transform(model: StateSpaceModel, T: Any) -> StateSpaceModel:
    """Change of state coordinates ``x = T z``.

    Parameters
    ----------
    model : StateSpaceModel
        Model of order ``n``.
    T : array_like, shape (n, n)
        Invertible matrix.

    Returns
    -------
    StateSpaceModel
        ``A' = T^-1 A T``, ``B' = T^-1 B``, ``C' = C T``, ``D' = D`` and a
        noise gain ``K' = T^-1 K`` when the model has one.

    Raises
    ------
    OptionError
        When ``T`` has the wrong shape or is numerically singular.
    """
    require_state_space(model)
    n = model.n_states
    T = as_matrix(T, "T", (n, n))
    if n and np.linalg.cond(T) > 1 / np.finfo(float).eps:
        raise OptionError("T must be invertible; it is numerically singular")
    if n == 0:
        return model.with_changes()
    lu = linalg.lu_factor(T)
    changes = {
        "A": linalg.lu_solve(lu, model.A @ T),
        "B": linalg.lu_solve(lu, model.B),
        "C": model.C @ T,
    }
    if model.noise_gain is not None:
        changes["noise_gain"] = linalg.lu_solve(lu, model.noise_gain)
    return model.with_changes(**changes)


def modal_form(model: StateSpaceModel) -> StateSpaceModel:
    """Real modal (block-diagonal) form.

    Parameters
    ----------
    model : StateSpaceModel
        Model whose ``A`` is diagonalisable.

    Returns
    -------
    StateSpaceModel
        ``A`` block diagonal: a 1 x 1 block ``[lambda]`` per real pole and a
        2 x 2 block ``[[sigma, omega], [-omega, sigma]]`` per complex pair
        ``sigma +- j omega`` (``omega > 0``). Blocks are ordered by increasing
        pole magnitude. Real eigenvectors are scaled to unit length; for a
        complex pair the real and imaginary parts of the eigenvector are made
        orthogonal, which keeps the transformation well conditioned.

    Raises
    ------
    ModelError
        When the eigenvectors are nearly dependent (repeated poles with a
        Jordan block), where no well-conditioned modal form exists.
    """
    require_state_space(model)
    n = model.n_states
    if n == 0:
        return model.with_changes()
    lam, V = linalg.eig(model.A)
    order = np.lexsort((-lam.imag, np.abs(lam)))
    lam, V = lam[order], V[:, order]
    scale = max(1.0, float(np.max(np.abs(lam))))
    cols = []
    sizes = []
    used = np.zeros(n, dtype=bool)
    for k in range(n):
        if used[k]:
            continue
        used[k] = True
        if abs(lam[k].imag) <= 1e3 * np.finfo(float).eps * scale:
            v = V[:, k].real
            cols.append(v / np.linalg.norm(v))
            sizes.append(1)
            continue
        # pair this eigenvalue with its conjugate
        rest = np.where(~used)[0]
        if rest.size == 0:
            raise ModelError("complex eigenvalue without its conjugate; A is not real")
        partner = rest[np.argmin(np.abs(lam[rest] - np.conj(lam[k])))]
        used[partner] = True
        v = V[:, k] if lam[k].imag > 0 else V[:, partner]
        a, b = v.real, v.imag
        theta = 0.5 * np.arctan2(-2 * (a @ b), a @ a - b @ b)
        v = v * np.exp(1j * theta)
        a, b = v.real, v.imag
        norm = np.sqrt(a @ a + b @ b)
        cols.extend([a / norm, b / norm])
        sizes.append(2)
    T = np.column_stack(cols)
    cond = np.linalg.cond(T)
    if not np.isfinite(cond) or cond > _MODAL_COND_LIMIT:
        raise ModelError(
            "no well-conditioned modal form: the poles are repeated or nearly so "
            f"(eigenvector condition number {cond:.3g})",
            hint="use the 'balanced' realisation instead",
        )
    out = similarity_transform(model, T)
    # the off-block entries are rounding errors: set them to zero exactly
    A = np.array(out.A)
    mask = np.zeros((n, n), dtype=bool)
    k = 0
    for size in sizes:
        mask[k : k + size, k : k + size] = True
        k += size
    A[~mask] = 0.0
    return out.with_changes(A=A)


@dataclass(frozen=True, slots=True, eq=False)
class BalancedRealization:
    """A balanced realisation and its Hankel singular values.

    Attributes
    ----------
    model : StateSpaceModel
        The balanced model: its controllability and observability Gramians
        are both ``diag(hankel_singular_values)``.
    hankel_singular_values : numpy.ndarray, shape (n_min,)
        In decreasing order; ``n_min`` is the minimal order.
    """

    model: StateSpaceModel
    hankel_singular_values: np.ndarray


def _gramians(model: StateSpaceModel) -> tuple[np.ndarray, np.ndarray]:
    A, B, C = model.A, model.B, model.C
    if model.is_discrete:
        Wc = linalg.solve_discrete_lyapunov(A, B @ B.T)
        Wo = linalg.solve_discrete_lyapunov(A.T, C.T @ C)
    else:
        Wc = linalg.solve_continuous_lyapunov(A, -B @ B.T)
        Wo = linalg.solve_continuous_lyapunov(A.T, -C.T @ C)
    return (Wc + Wc.T) / 2, (Wo + Wo.T) / 2


def _psd_factor(W: np.ndarray) -> np.ndarray:
    """``L`` with ``W = L L^T`` for a symmetric positive semi-definite ``W``."""
    w, V = linalg.eigh(W)
    return V * np.sqrt(np.clip(w, 0.0, None))


def balanced_realization(model: StateSpaceModel) -> BalancedRealization:
    """Balanced realisation (equal, diagonal Gramians) of a stable model.

    Parameters
    ----------
    model : StateSpaceModel
        Stable model (poles in the open left half plane, or strictly inside
        the unit circle for a discrete model).

    Returns
    -------
    BalancedRealization
        The model is first reduced with :func:`minimal_realization`, and
        states whose Hankel singular value is below ``1e3 n eps`` times the
        largest (non-minimal to rounding) are truncated, so the result may
        have fewer states than ``model``.

    Raises
    ------
    ModelError
        When the model is not stable (the message names the pole).

    Notes
    -----
    The Gramians solve ``A Wc + Wc A^T + B B^T = 0`` and
    ``A^T Wo + Wo A + C^T C = 0`` (continuous) or ``A Wc A^T - Wc + B B^T = 0``
    and ``A^T Wo A - Wo + C^T C = 0`` (discrete). With ``Wc = Lc Lc^T``,
    ``Wo = Lo Lo^T`` and ``Lo^T Lc = U S V^T``, the square-root method [1]_
    uses ``T = Lc V S^{-1/2}``, ``T^-1 = S^{-1/2} U^T Lo^T``; the Hankel
    singular values are ``diag(S) = sqrt(eig(Wc Wo))``.

    References
    ----------
    .. [1] A. J. Laub, M. T. Heath, C. C. Paige and R. C. Ward, "Computation of
       system balancing transformations and other applications of simultaneous
       diagonalization algorithms", IEEE Trans. Automatic Control 32(2),
       115-122, 1987.
    .. [2] B. C. Moore, "Principal component analysis in linear systems:
       controllability, observability, and model reduction", IEEE Trans.
       Automatic Control 26(1), 17-32, 1981.
    """
    require_state_space(model)
    poles = model.poles()
    if model.is_discrete:
        bad = poles[np.abs(poles) >= 1.0]
        where = "on or outside the unit circle"
    else:
        bad = poles[poles.real >= 0.0]
        where = "in the closed right half plane"
    if bad.size:
        raise ModelError(
            f"a balanced realisation needs a stable model; pole {_fmt(bad[0])} is {where}",
            hint="use the 'modal' realisation for unstable or integrating models",
        )
    reduced = minimal_realization(model)
    n = reduced.n_states
    if n == 0:
        return BalancedRealization(model=reduced, hankel_singular_values=np.zeros(0))
    Wc, Wo = _gramians(reduced)
    Lc, Lo = _psd_factor(Wc), _psd_factor(Wo)
    U, s, Vt = linalg.svd(Lo.T @ Lc)
    # states whose Hankel singular value is at rounding level are non-minimal in
    # all but name: truncate them (error bound 2 * sum of the dropped values)
    keep = s > 1e3 * n * np.finfo(float).eps * s[0]
    U, s, V = U[:, keep], s[keep], Vt[keep].T
    root = 1.0 / np.sqrt(s)
    T = (Lc @ V) * root
    Tinv = (U.T @ Lo.T) * root[:, None]
    changes = {"A": Tinv @ reduced.A @ T, "B": Tinv @ reduced.B, "C": reduced.C @ T}
    return BalancedRealization(
        model=reduced.with_changes(**changes), hankel_singular_values=s.copy()
    )


def _fmt(z: complex) -> str:
    z = complex(z)
    if z.imag == 0:
        return f"{z.real:.6g}"
    return f"{z.real:.6g}{z.imag:+.6g}j"


def minimal_realization(model: StateSpaceModel, *, tol: float | None = None) -> StateSpaceModel:
    """Remove the states that are uncontrollable or unobservable.

    Parameters
    ----------
    model : StateSpaceModel
        Any model.
    tol : float, optional
        Relative rank tolerance: singular values at or below
        ``tol * max(1, ||A||, ||B||, ||C||)`` (norms after balancing) count as
        zero. Default ``1e3 * max(n, m, p) * eps``, which removes only what is
        non-minimal to rounding. Raise it (e.g. ``1e-8``) to also drop nearly
        cancelled modes.

    Returns
    -------
    StateSpaceModel
        Controllable and observable model with the same transfer function.
        The noise gain is dropped (it belongs to states that may be removed).

    Notes
    -----
    After a diagonal balancing of ``A`` (:func:`scipy.linalg.matrix_balance`),
    two orthogonal staircase reductions [1]_: the controllability staircase of
    ``(A, B)`` keeps the controllable part, then the one of ``(A^T, C^T)``
    keeps the observable part of that. Orthogonal transformations keep the
    reduction backward stable.

    References
    ----------
    .. [1] P. Van Dooren, "The generalized eigenstructure problem in linear
       system theory", IEEE Trans. Automatic Control 26(1), 111-129, 1981.
    """
    require_state_space(model)
    A, B, C = model.A, model.B, model.C
    n, m, p = model.n_states, model.n_inputs, model.n_outputs
    if n:
        # diagonal similarity balancing A first makes the rank decisions far more
        # reliable for badly scaled forms such as companion matrices
        _, (scale_vec, _) = linalg.matrix_balance(A, permute=False, separate=True)
        A = A * (1.0 / scale_vec)[:, None] * scale_vec[None, :]
        B = B / scale_vec[:, None]
        C = C * scale_vec[None, :]
    if tol is None:
        tol = 1e3 * max(n, m, p, 1) * np.finfo(float).eps
    elif isinstance(tol, bool) or not isinstance(tol, (int, float)) or not 0 <= tol < 1:
        raise OptionError(f"tol must be a number in [0, 1) or None; got {tol!r}")
    scale = max([1.0, *(float(np.linalg.norm(x, 2)) for x in (A, B, C) if x.size)])
    tol = tol * scale
    if n == 0:
        return model.with_changes(noise_gain=None)
    Q, nc = controllable_staircase(A, B, tol)
    Ac = (Q.T @ A @ Q)[:nc, :nc]
    Bc = (Q.T @ B)[:nc]
    Cc = (C @ Q)[:, :nc]
    Q2, no = controllable_staircase(Ac.T, Cc.T, tol)
    Am = (Q2.T @ Ac @ Q2)[:no, :no]
    Bm = (Q2.T @ Bc)[:no]
    Cm = (Cc @ Q2)[:, :no]
    return model.with_changes(A=Am, B=Bm, C=Cm, noise_gain=None)


def realize(model: StateSpaceModel, form: Realization) -> StateSpaceModel:
    """Return the model in one of the :data:`REALIZATIONS`.

    Parameters
    ----------
    model : StateSpaceModel
        The model.
    form : {"controllable", "observable", "modal", "balanced"}
        ``controllable``/``observable``: SISO canonical forms
        (:func:`controllable_form`, :func:`observable_form`); ``modal``:
        :func:`modal_form`; ``balanced``: the model of
        :func:`balanced_realization`.

    Returns
    -------
    StateSpaceModel
    """
    require_state_space(model)
    one_of(form, "form", REALIZATIONS)
    if form == "controllable":
        return controllable_form(model)
    if form == "observable":
        return observable_form(model)
    if form == "modal":
        return modal_form(model)
    return balanced_realization(model).model
