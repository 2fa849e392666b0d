"""Uncertainty of estimated poles, propagated from the parameter covariance.

An estimator that knows the covariance of its parameters also knows, to first
order, the covariance of every quantity computed from them. Here that quantity
is the position of each pole in the z-plane: the covariance of
``(Re z, Im z)``, which :func:`ident.assess.modes.mode_table` turns into a confidence
region, the ``uncertain_stability`` flag and standard deviations of natural
frequency and damping ratio, and which :func:`ident.assess.drift.compare_models` uses
to judge whether a frequency shift is significant.

Only ARX models carry a parameter covariance so far
(:attr:`ident.estimate.arx.ArxResult.covariance`); :func:`arx_pole_covariance` gives
their pole covariance in the order of ``model.poles()``.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from .._validate import as_matrix
from ..errors import OptionError
from ..lti.covariance import ParameterCovariance, theta_layout
from ..lti.models import StateSpaceModel

__all__ = [
    "REPEATED_ROOT_RTOL",
    "root_jacobian",
    "root_covariance",
    "arx_pole_covariance",
    "arx_parameter_covariance",
    "pole_covariance_to_list",
    "pole_covariance_from_list",
]

#: Roots closer than this fraction of ``max(1, |z|)`` to another root count as
#: repeated: their first-order covariance is undefined (reported as nan). The
#: same tolerance as the one :func:`ident.assess.modes.mode_table` merges repeated
#: poles with, so a pole the mode table shows as repeated never carries a
#: covariance.
REPEATED_ROOT_RTOL = 1e-5


def _monic_coefficients(a: Any) -> np.ndarray:
    """``[a_1, ..., a_na]`` from either ``[1, a_1, ..., a_na]`` or ``[a_1, ..., a_na]``."""
    arr = np.asarray(a, dtype=float)
    if arr.ndim != 1 or not np.all(np.isfinite(arr)):
        raise OptionError(
            f"coefficients must be a finite 1-D array; got shape {arr.shape}"
        )
    return arr


def root_jacobian(coefficients: Any) -> tuple[np.ndarray, np.ndarray]:
    """Roots of a monic polynomial and their derivatives with respect to its coefficients.

    Parameters
    ----------
    coefficients : array_like, shape (na,)
        ``[a_1, ..., a_na]`` of ``A(z) = z^na + a_1 z^(na-1) + ... + a_na``
        (the leading 1 is implied and must not be given).

    Returns
    -------
    roots : numpy.ndarray of complex, shape (na,)
        The roots, as :func:`numpy.roots` returns them.
    jacobian : numpy.ndarray of complex, shape (na, na)
        ``jacobian[r, k] = d z_r / d a_(k+1)``. Rows of repeated roots (closer
        than :data:`REPEATED_ROOT_RTOL` ``* max(1, |z|)`` to another root) are
        nan: a repeated root is not a differentiable function of the
        coefficients.

    Notes
    -----
    Differentiating ``A(z(a), a) = 0`` implicitly gives [1]_::

        dz_r / da_k = -z_r^(na-k) / A'(z_r),   A'(z_r) = prod_{s != r} (z_r - z_s)

    (the product form of ``A'`` at a root of a monic polynomial avoids
    cancellation). As two roots approach each other ``A'(z_r) -> 0`` and the
    derivative grows without bound.

    References
    ----------
    .. [1] J. H. Wilkinson, *Rounding Errors in Algebraic Processes*,
       Prentice-Hall, 1963, ch. 2 (sensitivity of the zeros of a polynomial
       to its coefficients).

    Examples
    --------
    >>> z, J = root_jacobian([-0.5])          # A(z) = z - 0.5
    >>> complex(z[0]).real, complex(J[0, 0]).real
    (0.5, -1.0)
    """
    a = _monic_coefficients(coefficients)
    na = a.size
    if na == 0:
        return np.zeros(0, dtype=complex), np.zeros((0, 0), dtype=complex)
    roots = np.roots(np.concatenate(([1.0], a))).astype(complex)
    jac = np.empty((na, na), dtype=complex)
    powers = np.arange(na - 1, -1, -1)  # z^(na-k) for k = 1..na
    for r, z in enumerate(roots):
        others = np.delete(roots, r)
        scale = max(1.0, abs(z))
        if others.size and np.min(np.abs(others - z)) <= REPEATED_ROOT_RTOL * scale:
            jac[r] = np.nan
            continue
        deriv = complex(np.prod(z - others)) if others.size else 1.0 + 0j
        jac[r] = -(z ** powers) / deriv
    return roots, jac


def root_covariance(coefficients: Any, covariance: Any) -> tuple[np.ndarray, np.ndarray]:
    """First-order covariance of ``(Re z, Im z)`` of each root of a monic polynomial.

    Parameters
    ----------
    coefficients : array_like, shape (na,)
        ``[a_1, ..., a_na]`` of ``A(z) = z^na + a_1 z^(na-1) + ... + a_na``.
    covariance : array_like, shape (na, na)
        Covariance of the estimated coefficients.

    Returns
    -------
    roots : numpy.ndarray of complex, shape (na,)
    root_cov : numpy.ndarray, shape (na, 2, 2)
        ``root_cov[r]`` is the covariance of ``(Re z_r, Im z_r)``; all nan for
        a repeated root (see :func:`root_jacobian`). For a real root the
        ``Im`` row and column are zero: real coefficients keep a simple real
        root on the real axis.

    Notes
    -----
    Gauss' approximation formula [1]_: for ``z = f(a)`` with real Jacobian
    ``J = [[Re dz/da], [Im dz/da]]`` (2 x na), ``Cov(Re z, Im z) ~= J Cov(a) J^T``.
    It holds when the perturbations are small against the distance to the
    nearest other root; a confidence region comparable to that distance is
    only indicative.

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, sec. 9.4 (variance of quantities computed from
       the estimate; Gauss' approximation formula).

    Examples
    --------
    >>> z, c = root_covariance([-0.5], [[0.01]])
    >>> float(c[0, 0, 0]), float(c[0, 1, 1])
    (0.01, 0.0)
    """
    a = _monic_coefficients(coefficients)
    na = a.size
    cov = as_matrix(covariance, "covariance", (na, na)) if na else np.zeros((0, 0))
    roots, jac = root_jacobian(a)
    out = np.empty((na, 2, 2))
    for r in range(na):
        if not np.all(np.isfinite(jac[r])):
            out[r] = np.nan
            continue
        J = np.vstack([jac[r].real, jac[r].imag])
        out[r] = J @ cov @ J.T
        if roots[r].imag == 0.0 and np.all(np.isfinite(out[r])):
            out[r, 1, :] = out[r, :, 1] = 0.0
    return roots, out


def arx_pole_covariance(result: Any, *, model: StateSpaceModel | None = None) -> np.ndarray:
    """Covariance of ``(Re z, Im z)`` of every pole of a fitted ARX model.

    Parameters
    ----------
    result : ident.estimate.arx.ArxResult
        A fitted ARX model with its parameter covariance.
    model : StateSpaceModel, optional
        A model with the same poles as ``result.model`` (e.g. the same model
        with names and operating point changed); its ``poles()`` order is used.
        Default ``result.model``.

    Returns
    -------
    numpy.ndarray, shape (n, 2, 2)
        Entry ``k`` belongs to ``model.poles()[k]``. Poles that are delay or
        input-lag states (at ``z = 0``, not roots of any ``A`` polynomial) get
        zero covariance: they are fixed by the structure, not estimated.
        Repeated roots get nan (see :func:`root_jacobian`);
        :func:`ident.assess.modes.mode_table` treats a nan block as "unknown".

    Raises
    ------
    ident.errors.OptionError
        ``result`` is not an ARX result, or ``model`` has other poles.

    Notes
    -----
    The realisation of :func:`ident.estimate.arx.arx_state_space` is block diagonal
    over outputs: block ``i`` has the characteristic polynomial
    ``z^(n_i - na) A_i(z)``. Each root of ``A_i`` carries the covariance that
    :func:`root_covariance` derives from output ``i``'s parameter covariance
    (its ``a_1..a_na`` block); the ``n_i - na`` extra roots are at ``z = 0``.
    The outputs are fitted separately, so no covariance between the poles of
    different outputs is stated (the mode table needs none). Roots and model
    poles are paired nearest first (the realisation is exact, so every pole has
    its root within round-off and nearest-first pairing is the minimum-distance
    assignment).

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, sec. 9.4 (Gauss' approximation formula).
    """
    from .arx import ArxResult

    if not isinstance(result, ArxResult):
        raise OptionError(f"result must be an ArxResult; got {type(result).__name__}")
    target = result.model if model is None else model
    if not isinstance(target, StateSpaceModel):
        raise OptionError(f"model must be a StateSpaceModel; got {type(target).__name__}")
    poles = target.poles()
    n = poles.size
    cand_z: list[complex] = []
    cand_c: list[np.ndarray] = []
    na = int(result.na)
    for i, a in enumerate(result.a):
        coeffs = np.asarray(a, dtype=float).ravel()[1:]
        c_full = np.asarray(result.covariance[i], dtype=float)
        roots, cov = root_covariance(coeffs, c_full[:na, :na])
        cand_z.extend(complex(z) for z in roots)
        cand_c.extend(cov)
    n_zero = n - len(cand_z)
    if n_zero < 0:
        raise OptionError(f"model has {n} poles, fewer than the {len(cand_z)} roots of the ARX A polynomials")
    cand_z.extend([0j] * n_zero)
    cand_c.extend([np.zeros((2, 2))] * n_zero)
    if n == 0:
        return np.zeros((0, 2, 2))
    cz = np.asarray(cand_z, dtype=complex)
    dist = np.abs(poles[:, None] - cz[None, :])
    rows, cols = _nearest_pairs(dist)
    # the realisation is exact: eigenvalues and polynomial roots agree to round-off,
    # except near repeated roots (split by ~sqrt(eps)), which carry nan anyway
    worst = float(np.max(dist[rows, cols]))
    if worst > 1e-6 * max(1.0, float(np.max(np.abs(poles)))) and not _near_repeated(poles):
        raise OptionError(
            f"model poles do not match the ARX polynomial roots (largest distance {worst:.3g}); "
            "give the model fitted with this result"
        )
    out = np.empty((n, 2, 2))
    for r, c in zip(rows, cols, strict=True):
        out[r] = cand_c[c]
    return out


def _near_repeated(poles: np.ndarray) -> bool:
    d = np.abs(poles[:, None] - poles[None, :])
    np.fill_diagonal(d, np.inf)
    return bool(np.any(d <= 1e-3 * np.maximum(1.0, np.abs(poles))[:, None]))


def pole_covariance_to_list(covariance: Any) -> list[list[list[float | None]]]:
    """JSON-safe form of a pole covariance: nested lists, nan written as ``None``.

    Parameters
    ----------
    covariance : array_like, shape (n, 2, 2)

    Returns
    -------
    list
        ``n`` lists of two rows of two numbers (``None`` where unknown).
    """
    cov = np.asarray(covariance, dtype=float)
    if cov.ndim != 3 or cov.shape[1:] != (2, 2):
        raise OptionError(f"covariance must have shape (n, 2, 2); got {cov.shape}")
    return [[[float(v) if math.isfinite(v) else None for v in row] for row in block] for block in cov]


def pole_covariance_from_list(raw: Any, n_poles: int) -> np.ndarray | None:
    """Inverse of :func:`pole_covariance_to_list`; ``None`` when ``raw`` does not fit.

    Parameters
    ----------
    raw : object
        Nested lists as stored in a model file's provenance (``None`` = unknown).
    n_poles : int
        Number of poles of the model the covariance belongs to.

    Returns
    -------
    numpy.ndarray of shape (n_poles, 2, 2), or None
        ``None`` when ``raw`` is missing, of the wrong shape, infinite, or
        unknown for every pole. A block with any unknown entry becomes all nan.
    """
    if raw is None:
        return None
    try:
        cov = np.array(
            [[[math.nan if v is None else float(v) for v in row] for row in block] for block in raw],
            dtype=float,
        )
    except (TypeError, ValueError):
        return None
    if cov.shape != (int(n_poles), 2, 2) or np.any(np.isinf(cov)):
        return None
    if cov.size == 0:
        return cov
    bad = np.any(np.isnan(cov), axis=(1, 2))
    if np.all(bad):
        return None
    cov[bad] = np.nan
    return cov


def _nearest_pairs(dist: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Pair rows and columns of a square distance matrix, nearest pair first."""
    n = dist.shape[0]
    order = np.argsort(dist, axis=None, kind="stable")
    row_free = np.ones(n, dtype=bool)
    col_free = np.ones(dist.shape[1], dtype=bool)
    rows, cols = [], []
    for flat in order:
        r, c = divmod(int(flat), dist.shape[1])
        if row_free[r] and col_free[c]:
            row_free[r] = col_free[c] = False
            rows.append(r)
            cols.append(c)
            if len(rows) == n:
                break
    rank = np.argsort(rows)
    return np.asarray(rows)[rank], np.asarray(cols)[rank]


def arx_parameter_covariance(result: Any) -> ParameterCovariance:
    """Covariance of the state-space parameters of an ARX model's realisation.

    Parameters
    ----------
    result : ident.estimate.arx.ArxResult
        A fitted ARX model with its parameter covariance.

    Returns
    -------
    ParameterCovariance
        Of ``theta`` of ``result.model`` (the observer form of
        :func:`ident.estimate.arx.arx_state_space`, noise gain included), method
        ``"arx"``.

    Notes
    -----
    In the observer form every entry of ``A, B, D, K`` is a fixed linear or
    bilinear function of ``a`` and ``b`` (``A[r, 0] = K[r] = -a_{r+1}``,
    ``B[r] = beta_{r+1} - a_{r+1} beta_0``, ``D = beta_0``), so the covariance
    maps through the exact Jacobian; the outputs are fitted separately, so
    their blocks are independent.
    """
    from .arx import ArxResult

    if not isinstance(result, ArxResult):
        raise OptionError(f"result must be an ArxResult; got {type(result).__name__}")
    model = result.model
    n, m, p = model.n_states, model.n_inputs, model.n_outputs
    lay = theta_layout(n, m, p)
    blocks, offset = [], 0
    for i in range(p):
        J, size = _arx_output_jacobian(result, i, offset, lay, (n, m, p))
        cov = np.asarray(result.covariance[i], dtype=float)
        w, V = np.linalg.eigh(0.5 * (cov + cov.T))
        blocks.append(J @ (V * np.sqrt(np.maximum(w, 0.0))[None, :]))
        offset += size
    return ParameterCovariance(np.hstack(blocks), "arx", n, m, p)


def _arx_output_jacobian(result: Any, i: int, offset: int, lay: dict, dims: tuple[int, int, int]):
    """Jacobian of ``theta`` with respect to output ``i``'s ARX parameters, and that output's state count."""
    n, m, p = dims
    na, nb, nk = int(result.na), result.nb, result.nk
    size = max([na] + [nk[j] + nb[j] - 1 for j in range(m) if nb[j]])
    alpha = np.zeros(size + 1)
    alpha[: na + 1] = np.asarray(result.a[i], dtype=float)
    beta0 = np.array([result.b[i][j][0] if nk[j] == 0 and nb[j] else 0.0 for j in range(m)])
    d = na + sum(nb)
    J = np.zeros((lay["K"].stop, d))

    def at(block: str, r: int, c: int, cols: int) -> int:
        return lay[block].start + r * cols + c

    for lag in range(1, na + 1):
        row = offset + lag - 1
        J[at("A", row, offset, n), lag - 1] = -1.0
        J[at("K", row, i, p), lag - 1] = -1.0
        for j in range(m):
            J[at("B", row, j, m), lag - 1] = -beta0[j]
    col = na
    for j in range(m):
        for t in range(nb[j]):
            lag = nk[j] + t
            if lag == 0:
                J[at("D", i, j, m), col] = 1.0
                for r in range(size):
                    J[at("B", offset + r, j, m), col] = -alpha[r + 1]
            else:
                J[at("B", offset + lag - 1, j, m), col] = 1.0
            col += 1
    return J, size
