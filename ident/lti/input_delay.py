"""Pure input delays as states, and the matching change of a parameter covariance.

A plant that answers input ``j`` only ``d_j`` samples later is the delay-free
model driven by ``u_j(t - d_j)``. :func:`with_input_delays` builds that model
in state space: each delayed input gets a shift register of ``d_j`` states
(poles at ``z = 0``) whose last state drives the original model's ``B`` and
``D`` columns ([1]_, sec. 4.3.4, delays as states).

References
----------
.. [1] G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of
   Dynamic Systems*, 3rd ed., Addison-Wesley, 1998.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..errors import OptionError
from .covariance import ParameterCovariance, theta_layout
from .models import StateSpaceModel

__all__ = ["with_input_delays", "delayed_covariance"]


def _delays(delays: Sequence[int], m: int) -> tuple[int, ...]:
    out = tuple(int(v) for v in delays)
    if len(out) != m or any(v < 0 for v in out):
        raise OptionError(f"delays must hold {m} non-negative sample counts, one per input; got {list(delays)!r}")
    return out


def with_input_delays(model: StateSpaceModel, delays: Sequence[int]) -> StateSpaceModel:
    """Return the model driven by ``u_j(t - delays[j])``, the delays as shift-register states.

    Parameters
    ----------
    model : StateSpaceModel
        Discrete-time model of the delay-free plant (noise states are kept last).
    delays : sequence of int
        Samples of pure delay per input.

    Returns
    -------
    StateSpaceModel
        ``n + sum(delays)`` states: the plant states, then per delayed input
        its register (newest sample first), then any noise states. ``noise_gain``
        rows of the register states are zero.

    Examples
    --------
    >>> m = StateSpaceModel(A=[[0.5]], B=[[1.0]], C=[[1.0]], D=[[0.0]], sample_time=1.0)
    >>> from ident.lti.simulate import simulate
    >>> simulate(with_input_delays(m, [2]), [[1.0], [0.0], [0.0], [0.0]]).ravel().tolist()
    [0.0, 0.0, 0.0, 1.0]
    """
    if not model.is_discrete:
        raise OptionError("input delays in samples need a discrete-time model")
    d = _delays(delays, model.n_inputs)
    if sum(d) == 0:
        return model
    A, B, C, D, K = _augmented(model, d)
    return model.with_changes(A=A, B=B, C=C, D=D, noise_gain=K)


def _positions(model: StateSpaceModel, d: tuple[int, ...]) -> tuple[int, list[tuple[int, int]]]:
    """Plant state count and, per input, the (first, last) register state index (-1, -1 if none)."""
    k = model.n_plant_states
    spans, pos = [], k
    for dj in d:
        spans.append((pos, pos + dj - 1) if dj else (-1, -1))
        pos += dj
    return k, spans


def _augmented(model: StateSpaceModel, d: tuple[int, ...]):
    n, m, p = model.n_states, model.n_inputs, model.n_outputs
    k, spans = _positions(model, d)
    total = sum(d)
    N = n + total
    A = np.zeros((N, N))
    B = np.zeros((N, m))
    C = np.zeros((p, N))
    D = np.zeros((p, m))
    A[np.ix_(range(k), range(k))] = model.A[:k, :k]
    A[k + total:, k + total:] = model.A[k:, k:]
    C[:, :k] = model.C[:, :k]
    C[:, k + total:] = model.C[:, k:]
    for j, (first, last) in enumerate(spans):
        if first < 0:
            B[:k, j] = model.B[:k, j]
            D[:, j] = model.D[:, j]
            continue
        B[first, j] = 1.0
        for s in range(first + 1, last + 1):
            A[s, s - 1] = 1.0
        A[:k, last] = model.B[:k, j]
        C[:, last] = model.D[:, j]
    K = None
    if model.noise_gain is not None:
        K = np.zeros((N, p))
        K[:k] = model.noise_gain[:k]
        K[k + total:] = model.noise_gain[k:]
    return A, B, C, D, K


def delayed_covariance(model: StateSpaceModel, covariance: ParameterCovariance,
                       delays: Sequence[int]) -> ParameterCovariance:
    """Carry a parameter covariance of ``model`` over to ``with_input_delays(model, delays)``.

    Every entry of the delayed model's ``A, B, C, D, K`` is either an entry of
    the original model's matrices or a fixed 0 or 1 of a register; the factor
    rows move with the entries they describe and the fixed entries get zero rows.
    """
    d = _delays(delays, model.n_inputs)
    if sum(d) == 0:
        return covariance
    n, m, p = model.n_states, model.n_inputs, model.n_outputs
    k, spans = _positions(model, d)
    total = sum(d)
    N = n + total
    src, dst = theta_layout(n, m, p), theta_layout(N, m, p)
    L = covariance.factor
    out = np.zeros((dst["K"].stop, L.shape[1]))
    new = [r if r < k else r + total for r in range(n)]  # old state index -> new state index

    def put(block_src, block_dst, rows_src, cols_src, rows_dst, cols_dst, shape_src, shape_dst):
        i_src = src[block_src].start + rows_src * shape_src[1] + cols_src
        i_dst = dst[block_dst].start + rows_dst * shape_dst[1] + cols_dst
        out[i_dst] = L[i_src]

    for r in range(n):
        for c in range(n):
            put("A", "A", r, c, new[r], new[c], (n, n), (N, N))
        for i in range(p):
            put("C", "C", i, r, i, new[r], (p, n), (p, N))
        for i in range(p):
            put("K", "K", r, i, new[r], i, (n, p), (N, p))
    for j, (first, last) in enumerate(spans):
        for r in range(n):
            if first < 0:
                put("B", "B", r, j, new[r], j, (n, m), (N, m))
            else:
                put("B", "A", r, j, new[r], last, (n, m), (N, N))
        for i in range(p):
            if first < 0:
                put("D", "D", i, j, i, j, (p, m), (p, m))
            else:
                put("D", "C", i, j, i, last, (p, m), (p, N))
    return ParameterCovariance(out, covariance.method, N, m, p)
