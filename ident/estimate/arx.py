"""ARX models by QR least squares, and the order/delay sweep.

A multi-output log is fitted as one multi-input single-output (MISO) ARX model
per output ``i``::

    y_i[k] + a_1 y_i[k-1] + ... + a_na y_i[k-na]
        = sum_j sum_{l=0}^{nb_j-1} b_{ij,l} u_j[k - nk_j - l] + e_i[k]

with the same orders ``na``, ``nb_j`` and delays ``nk_j`` for every output.

How the numbers are obtained
----------------------------
The regression rows of every experiment (rows never straddle two experiments)
are written, block by block, into one float64 buffer from
:func:`numpy.lib.stride_tricks.sliding_window_view` views of the signals, with
the targets ``y_i[k]`` as extra columns. Each block is stacked under the R
factor so far and re-factorised (:func:`numpy.linalg.qr`, R only), so memory
stays bounded on long logs and the data are touched once. Every quantity of
every candidate model then comes from this small R factor: a model whose
regressors are a subset ``S`` of the columns solves
``min ||R[:, t] - R[:, S] theta||`` by a second, tiny QR; its residual vector
in the R coordinates has the same inner products as the full residual, so
residual norms and cross-output residual covariances are exact. No normal
equations are formed anywhere. The accumulation and the subset solve live in
:mod:`ident.estimate.regression`, which the delay estimator shares.
"""

from __future__ import annotations

import itertools
import warnings
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field, fields

import numpy as np

from .._validate import int_in_range, names_tuple, positive_float
from ..errors import (
    IdentificationError,
    IllConditionedWarning,
    OptionError,
    UnstableModelWarning,
)
from ..lti._linalg import block_diag, column_norms, column_sums
from ..lti.models import StateSpaceModel, TransferFunctionModel
from ..lti.simulate import all_pole_filter, simulation_inputs
from .data import Experiment, as_experiments
from .delay import DelayEstimate, estimate_delay
from .order import CRITERIA, Criteria, best_index, information_criteria
from .regression import (
    RANK_TOL,
    RegressorBlock,
    accumulate_r,
    column_index,
    fill_rows,
    lag_blocks,
    largest_lag,
    rows_available,
    solve_subset,
)

__all__ = [
    "SELECTION_RULES",
    "ArxOptions",
    "ArxResult",
    "ArxCandidate",
    "ArxSweep",
    "fit_arx",
    "fit_arx_candidates",
    "iter_arx_candidates",
    "sweep_arx",
    "grid_search_arx",
    "shortlist",
    "arx_regressors",
    "arx_state_space",
]

#: Ways to pick the best row of an :class:`ArxSweep`: the information criteria,
#: and the simulation fit on validation data (only when validation data are given).
SELECTION_RULES = (*CRITERIA, "validation_fit")

#: Below this sine, the regression is ill conditioned (a warning in fit_arx).
_WARN_TOL = 1e-7
#: A loss below this fraction of the mean square output (per output, multiplied
#: over outputs) is a numerically exact fit; criteria use this floor instead,
#: so exact fits tie and the tie goes to the model with fewer parameters.
_EXACT_FIT_LOSS = 1e-20


# --------------------------------------------------------------------------- options


def _order(value: object, name: str) -> int:
    return int_in_range(value, name, 0)


def _order_spec(value: object, name: str) -> int | tuple[int, ...]:
    if isinstance(value, (list, tuple)):
        if not value:
            raise OptionError(f"{name} must be a non-negative integer or a non-empty list of them")
        return tuple(_order(v, f"{name}[{k}]") for k, v in enumerate(value))
    return _order(value, name)


@dataclass(frozen=True, slots=True, eq=False, kw_only=True)
class ArxOptions:
    """Structure of an ARX model (parameters only, nothing learned).

    Parameters
    ----------
    na : int, default 2
        Number of output lags ``a_1 .. a_na`` (poles per output); 0 gives an FIR model.
    nb : int or tuple of int, default 2
        Number of input coefficients per input; an int applies to every input.
        0 leaves an input out.
    nk : int or tuple of int or None, default None
        Input delay in samples per input (0 = direct feed-through). ``None``
        estimates it per input with :func:`ident.estimate.delay.estimate_delay` (the
        smallest delay over the outputs).
    """

    na: int = 2
    nb: int | tuple[int, ...] = 2
    nk: int | tuple[int, ...] | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "na", _order(self.na, "na"))
        object.__setattr__(self, "nb", _order_spec(self.nb, "nb"))
        if self.nk is not None:
            object.__setattr__(self, "nk", _order_spec(self.nk, "nk"))

    @classmethod
    def from_mapping(cls, mapping: Mapping[str, object]) -> ArxOptions:
        """Build options from a mapping such as a pipeline-file table.

        Raises
        ------
        OptionError
            For a key that is not an option (the message lists the valid keys)
            or a value that is not allowed.
        """
        valid = tuple(f.name for f in fields(cls))
        unknown = [str(k) for k in mapping if k not in valid]
        if unknown:
            raise OptionError(
                f"unknown ARX option(s) {', '.join(map(repr, unknown))}; valid keys: "
                f"{', '.join(valid)}"
            )
        return cls(**{str(k): v for k, v in mapping.items()})

    def resolve(self, n_inputs: int) -> tuple[tuple[int, ...], tuple[int, ...] | None]:
        """Return ``(nb, nk)`` as per-input tuples (``nk`` may stay ``None``)."""
        return (_per_input(self.nb, "nb", n_inputs),
                None if self.nk is None else _per_input(self.nk, "nk", n_inputs))


def _per_input(value: int | tuple[int, ...], name: str, m: int) -> tuple[int, ...]:
    if isinstance(value, tuple):
        if len(value) != m:
            raise OptionError(f"{name} must hold one value per input ({m}); got {len(value)}")
        return value
    return (int(value),) * m


# --------------------------------------------------------------------------- results


@dataclass(frozen=True, slots=True, eq=False)
class ArxResult:
    """A fitted ARX model with its parameter statistics.

    Attributes
    ----------
    model : StateSpaceModel
        Discrete-time realisation (observer form per output, block diagonal
        over outputs, see :func:`arx_state_space`); ``operating_point`` is
        ``None`` (the caller sets it).
    options : ArxOptions
        The options asked for.
    na : int
        Output lags.
    nb, nk : tuple of int
        Input coefficients and delays (samples) per input, as used (``nk``
        resolved when it was estimated).
    a : tuple of numpy.ndarray
        Per output, ``[1, a_1, ..., a_na]``.
    b : tuple of tuple of numpy.ndarray
        ``b[i][j]``: coefficients of ``q^-nk_j .. q^-(nk_j+nb_j-1)`` from input
        ``j`` to output ``i``.
    parameters : tuple of numpy.ndarray
        Per output, ``[a_1..a_na, b_i1..., b_i2..., ...]``.
    std_errors : tuple of numpy.ndarray
        Standard errors of ``parameters`` (square roots of the covariance diagonal).
    covariance : tuple of numpy.ndarray
        Per output, ``sigma_i^2 (Phi_i^T Phi_i)^-1`` computed from the R factor.
    residual_variance : numpy.ndarray, shape (p,)
        ``sigma_i^2 = ||e_i||^2 / (N - d_i)`` (unbiased, as in OLS).
    loss : float
        ``V``: mean squared residual for one output, ``det((1/N) E^T E)`` for several.
    n_samples : int
        ``N``, number of regression rows used (all experiments together).
    n_parameters : int
        ``d``, parameters of all outputs together.
    criteria : Criteria
        AIC, BIC/MDL, FPE from ``loss``, ``d`` and ``N`` (a numerically exact
        fit uses the loss floor described in :func:`sweep_arx`).
    delay : DelayEstimate or None
        The evidence for the delays when ``nk`` was estimated; ``None`` when given.
    """

    model: StateSpaceModel
    options: ArxOptions
    na: int
    nb: tuple[int, ...]
    nk: tuple[int, ...]
    a: tuple[np.ndarray, ...]
    b: tuple[tuple[np.ndarray, ...], ...]
    parameters: tuple[np.ndarray, ...]
    std_errors: tuple[np.ndarray, ...]
    covariance: tuple[np.ndarray, ...]
    residual_variance: np.ndarray
    loss: float
    n_samples: int
    n_parameters: int
    criteria: Criteria
    delay: DelayEstimate | None = None

    def simulate(self, u: np.ndarray, x0: np.ndarray | None = None) -> np.ndarray:
        """Free-run output of the model driven by ``u``, by its difference equations.

        Parameters
        ----------
        u : array_like, shape (N, m)
            Input deviations from the operating point.
        x0 : array_like, shape (n,), optional
            Initial state in the coordinates of :attr:`model` (the observer
            form of :func:`arx_state_space`); zero by default.

        Returns
        -------
        numpy.ndarray, shape (N, p)
            The same as ``ident.lti.simulate.simulate(self.model, u, x0)`` up to
            rounding, computed from the difference equations in real
            arithmetic, ``O(N n)`` (a convolution and a banded triangular
            solve per output), which is the fastest way to score a candidate
            on a long log.
        """
        u, x0 = simulation_inputs(self.model, u, x0)
        return _arx_simulate(self.a, self.b, self.nk, u, x0)

    def transfer_function(self) -> TransferFunctionModel:
        """Return the p x m transfer-function matrix in descending powers of z.

        Channel ``(i, j)`` is ``z^-nk_j B_ij(z^-1) / A_i(z^-1)``, both multiplied
        by ``z^n_i`` with ``n_i = max(na, max_j(nk_j + nb_j - 1))`` so numerator
        and denominator are polynomials in z.
        """
        num, den = _tf_polynomials(self.a, self.b, self.nk)
        return TransferFunctionModel(num=num, den=den, sample_time=self.model.sample_time,
                                     inputs=self.model.inputs, outputs=self.model.outputs)


@dataclass(frozen=True, slots=True, eq=False)
class ArxCandidate:
    """One row of an ARX order/delay sweep.

    Attributes
    ----------
    na : int
    nb, nk : tuple of int
        Per input.
    loss : float
        ``V`` on the sweep's common rows (see :class:`ArxSweep`).
    n_parameters : int
    aic, bic, fpe : float
    validation_fit : numpy.ndarray or None
        Simulation fit percent per output on the validation data, with the
        initial state estimated; ``None`` without validation data. ``-inf``
        when the simulation diverges.
    rank_deficient : bool
        The regressors of this candidate are (numerically) linearly dependent;
        its parameters are the minimum-norm least-squares solution.
    """

    na: int
    nb: tuple[int, ...]
    nk: tuple[int, ...]
    loss: float
    n_parameters: int
    aic: float
    bic: float
    fpe: float
    validation_fit: np.ndarray | None = None
    rank_deficient: bool = False

    def options(self) -> ArxOptions:
        """Return the :class:`ArxOptions` of this candidate."""
        return ArxOptions(na=self.na, nb=self.nb, nk=self.nk)

    def as_dict(self) -> dict[str, object]:
        """Plain-Python record (for JSON output)."""
        return {
            "na": self.na, "nb": list(self.nb), "nk": list(self.nk), "loss": self.loss,
            "n_parameters": self.n_parameters, "aic": self.aic, "bic": self.bic,
            "fpe": self.fpe,
            "validation_fit": None if self.validation_fit is None
            else [float(v) for v in self.validation_fit],
            "rank_deficient": self.rank_deficient,
        }


@dataclass(frozen=True, slots=True, eq=False)
class ArxSweep:
    """Table of ARX candidates and the best one by each selection rule.

    Attributes
    ----------
    rows : tuple of ArxCandidate
        In the order ``nk`` (outer), ``na``, ``nb`` (inner).
    best : dict
        Selection rule (from :data:`SELECTION_RULES`) -> index into ``rows``.
        Criteria: smallest wins; ``"validation_fit"`` (present only with
        validation data): largest mean fit over outputs wins. Ties go to fewer
        parameters.
    n_samples : int
        Regression rows shared by every candidate (each experiment starts at
        the largest lag of the whole grid, so losses are comparable).
    delay : DelayEstimate or None
        The evidence for the delays when ``nk_values`` was ``None``.
    """

    rows: tuple[ArxCandidate, ...]
    best: dict[str, int] = field(default_factory=dict)
    n_samples: int = 0
    delay: DelayEstimate | None = None

    def best_options(self, rule: str = "bic") -> ArxOptions:
        """Options of the best candidate by ``rule``."""
        if rule not in self.best:
            raise OptionError(
                f"rule must be one of {', '.join(map(repr, self.best))}; got {rule!r}"
            )
        return self.rows[self.best[rule]].options()

    def as_records(self) -> list[dict[str, object]]:
        """Return the table as a list of plain dicts (for JSON output)."""
        return [row.as_dict() for row in self.rows]


# --------------------------------------------------------------------------- regressors


def arx_regressors(data: Experiment | Sequence[Experiment], na: int, nb: Sequence[int],
                   nk: Sequence[int], output: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Build the explicit ARX regression ``y_i = Phi theta + e`` of one output.

    Mainly for checks and teaching: the estimators never form this matrix in
    full. Rows of different experiments are stacked, each experiment starting
    at its own sample ``L = max(na, max_j(nk_j + nb_j - 1))``.

    Parameters
    ----------
    data : Experiment or sequence of Experiment
    na : int
    nb, nk : sequence of int
        One per input.
    output : int
        Output index ``i``.

    Returns
    -------
    Phi : numpy.ndarray, shape (rows, na + sum(nb))
        Columns ``-y_i[k-1] .. -y_i[k-na]``, then for each input ``j``
        ``u_j[k-nk_j] .. u_j[k-nk_j-nb_j+1]`` (the parameter order of
        :attr:`ArxResult.parameters`).
    target : numpy.ndarray, shape (rows,)
        ``y_i[k]``.
    """
    exps = as_experiments(data)
    m, p = exps[0].n_inputs, exps[0].n_outputs
    na = _order(na, "na")
    nb_t = _per_input(tuple(_order(v, "nb") for v in nb), "nb", m)
    nk_t = _per_input(tuple(_order(v, "nk") for v in nk), "nk", m)
    output = int_in_range(output, "output", 0, p - 1)
    blocks = lag_blocks(na, nb_t, nk_t, [output], u_first=False)
    L = largest_lag(na, nb_t, nk_t)
    parts = []
    for exp in exps:
        if exp.n_samples <= L:
            continue
        out = np.empty((exp.n_samples - L, sum(b.width for b in blocks)))
        fill_rows(out, exp, blocks, L, L, exp.n_samples)
        parts.append(out)
    if not parts:
        raise OptionError(f"no experiment is longer than the largest lag {L}")
    full = np.concatenate(parts)
    return full[:, :-1], full[:, -1]


# --------------------------------------------------------------------------- solving


def _column_label(key: tuple[str, int, int], in_names: Sequence[str],
                  out_names: Sequence[str]) -> str:
    kind, ch, lag = key
    if kind == "u":
        return f"input {in_names[ch]!r} at lag {lag}"
    return f"output {out_names[ch]!r} at lag {lag}"


def _loss_and_floor(residuals: np.ndarray, target_norms2: np.ndarray, n: int) -> tuple[float, float]:
    V = residuals.T @ residuals / n
    loss = float(max(np.linalg.det(V), 0.0)) if V.shape[0] > 1 else float(V[0, 0])
    floor = float(np.prod(_EXACT_FIT_LOSS * np.maximum(target_norms2 / n, np.finfo(float).tiny)))
    return loss, floor


def _coefficients(theta_by_output: Sequence[np.ndarray], na: int, nb: Sequence[int]):
    a_all, b_all = [], []
    for theta in theta_by_output:
        a_all.append(np.concatenate(([1.0], theta[:na])))
        pos = na
        row = []
        for nbj in nb:
            row.append(theta[pos:pos + nbj].copy())
            pos += nbj
        b_all.append(tuple(row))
    return tuple(a_all), tuple(b_all)


# --------------------------------------------------------------------------- realisation


def _tf_polynomials(a, b, nk):
    num, den = [], []
    for ai, bi in zip(a, b, strict=True):
        na = ai.size - 1
        n = max([na] + [nk[j] + bi[j].size - 1 for j in range(len(bi)) if bi[j].size])
        d = np.zeros(n + 1)
        d[:na + 1] = ai
        den.append(tuple(d for _ in bi))
        row = []
        for j, bij in enumerate(bi):
            c = np.zeros(n + 1)
            c[nk[j]:nk[j] + bij.size] = bij
            row.append(c)
        num.append(tuple(row))
    return num, den


def arx_state_space(a: Sequence[np.ndarray], b: Sequence[Sequence[np.ndarray]],
                    nk: Sequence[int], sample_time: float, *,
                    input_names: Sequence[str] | None = None,
                    output_names: Sequence[str] | None = None) -> StateSpaceModel:
    """Exact state-space realisation of a (MIMO) ARX model.

    Parameters
    ----------
    a : sequence of array_like
        Per output, ``[1, a_1, ..., a_na]``.
    b : sequence of sequence of array_like
        ``b[i][j]``: coefficients of ``q^-nk_j ... q^-(nk_j+nb_j-1)``.
    nk : sequence of int
        Delay per input (samples).
    sample_time : float
        Seconds.
    input_names, output_names : sequence of str, optional

    Returns
    -------
    StateSpaceModel
        Output ``i`` gets ``n_i = max(na, max_j(nk_j + nb_j - 1))`` states in
        observer canonical form; the blocks are stacked block-diagonally.
        ``noise_gain`` holds the ARX one-step predictor (see Notes).

    Notes
    -----
    Write output ``i`` as ``y[k] = sum_{l=1}^{n} (-a_l y[k-l] + beta_l^T u[k-l])
    + beta_0^T u[k]`` with ``beta_l[j] = b_{ij, l-nk_j}`` (zero outside the
    coefficient range) and ``a_l = 0`` for ``l > na``. The observer form
    ([1]_, sec. 6.3) is::

        A = [[-a_1, 1, 0, ..., 0], [-a_2, 0, 1, ..., 0], ..., [-a_n, 0, ..., 0]]
        B[l-1] = beta_l - a_l beta_0,   C = [1, 0, ..., 0],   D = beta_0

    It is observable; it is minimal for one output when ``A_i`` and the
    numerators have no common root. With several outputs the blocks are
    independent, so poles shared by the outputs appear once per output.

    The noise of an ARX model is ``e / A(q)``: in the same coordinates its
    innovations form has ``K = [-a_1, ..., -a_n]^T`` in output ``i``'s column
    and block ([1]_, sec. 6.3 with ``C(q) = 1``), so ``A - K C`` is nilpotent
    and the predictor ``x[k+1] = (A - K C) x + (B - K D) u + K y``,
    ``yhat = C x + D u`` is the ARX one-step predictor
    ``yhat[k] = -sum a_l y[k-l] + sum beta_l^T u[k-l]`` exactly.

    References
    ----------
    .. [1] G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of
       Dynamic Systems*, 3rd ed., Addison-Wesley, 1998, sec. 4.3 and 6.3
       (canonical forms of difference equations).
    """
    sample_time = positive_float(sample_time, "sample_time")
    p, m = len(a), len(nk)
    blocks_A, blocks_B, blocks_C, blocks_K, D = [], [], [], [], np.zeros((p, m))
    for i in range(p):
        ai = np.asarray(a[i], dtype=float)
        na = ai.size - 1
        bi = [np.asarray(b[i][j], dtype=float).ravel() for j in range(m)]
        n = max([na] + [nk[j] + bi[j].size - 1 for j in range(m) if bi[j].size])
        alpha = np.zeros(n + 1)
        alpha[:na + 1] = ai
        beta = np.zeros((n + 1, m))
        for j in range(m):
            beta[nk[j]:nk[j] + bi[j].size, j] = bi[j]
        Ai = np.zeros((n, n))
        if n:
            Ai[:, 0] = -alpha[1:]
            Ai[:-1, 1:] = np.eye(n - 1)
        blocks_A.append(Ai)
        blocks_B.append(beta[1:] - np.outer(alpha[1:], beta[0]))
        Ci = np.zeros((1, n))
        if n:
            Ci[0, 0] = 1.0
        blocks_C.append(Ci)
        Ki = np.zeros((n, p))
        Ki[:, i] = -alpha[1:]
        blocks_K.append(Ki)
        D[i] = beta[0]
    A = block_diag(blocks_A) if sum(x.shape[0] for x in blocks_A) else np.zeros((0, 0))
    B = np.vstack(blocks_B) if blocks_B else np.zeros((0, m))
    C = block_diag(blocks_C)
    C = C.reshape(p, A.shape[0])
    K = np.vstack(blocks_K) if blocks_K else np.zeros((0, p))
    return StateSpaceModel(A=A, B=B, C=C, D=D, sample_time=sample_time,
                           inputs=input_names, outputs=output_names, noise_gain=K)


# --------------------------------------------------------------------------- fit


def _check_outputs_are_not_inputs(experiments: Sequence[Experiment], in_names: Sequence[str],
                                  out_names: Sequence[str]) -> None:
    """Raise when an output is an input up to scale and offset (|correlation| ~ 1)."""
    n = sum(e.n_samples for e in experiments)
    mu = sum(column_sums(e.u) for e in experiments) / n
    my = sum(column_sums(e.y) for e in experiments) / n
    cross = sum((e.y - my).T @ (e.u - mu) for e in experiments)  # (p, m)
    un = np.sqrt(sum(column_norms(e.u - mu) ** 2 for e in experiments))
    yn = np.sqrt(sum(column_norms(e.y - my) ** 2 for e in experiments))
    for i in range(yn.size):
        for j in range(un.size):
            if un[j] > 0 and yn[i] > 0 and abs(cross[i, j]) >= (1 - 1e-10) * un[j] * yn[i]:
                raise IdentificationError(
                    f"output {out_names[i]!r} equals input {in_names[j]!r} up to scale and "
                    f"offset (correlation 1); there is no dynamics to identify",
                    hint="check the --input/--output column choice",
                )


def fit_arx(data: Experiment | Sequence[Experiment], sample_time: float,
            options: ArxOptions | None = None, *,
            input_names: Sequence[str] | None = None,
            output_names: Sequence[str] | None = None) -> ArxResult:
    """Least-squares ARX model, one MISO model per output.

    Parameters
    ----------
    data : Experiment or sequence of Experiment
        Input and output deviations from the operating point. Several
        experiments are fitted together; no regression row spans two.
    sample_time : float
        Sample time in seconds.
    options : ArxOptions, optional
        Orders and delays; default ``ArxOptions()`` (na=2, nb=2, nk estimated).
    input_names, output_names : sequence of str, optional
        Signal names for the model and for messages; default ``u1..``, ``y1..``.

    Returns
    -------
    ArxResult

    Raises
    ------
    OptionError
        Bad options, or an order too high for the number of samples.
    IdentificationError
        The regressors are linearly dependent: collinear inputs, an input that
        is not persistently exciting for ``nb``, or an over-parametrised model
        (the message names the regressor column).

    Warns
    -----
    IllConditionedWarning
        The regressors are nearly dependent (sine of the angle between a column
        and the earlier ones below 1e-7); the estimates are unreliable.

    Notes
    -----
    Parameters come from QR least squares on the accumulated R factor (see the
    module notes); ``cov(theta_i) = sigma_i^2 (R_i^T R_i)^-1`` with ``R_i`` the
    R factor of output ``i``'s regressors, so standard errors equal those of
    ordinary least squares on the explicit regression. For ``nk = None`` the
    delays come from :func:`ident.estimate.delay.estimate_delay`.

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, sec. 4.2 (ARX structure) and sec. 7.3 (linear
       regression, least squares), sec. 9.3 (covariance of the estimate).

    Examples
    --------
    >>> import numpy as np
    >>> from scipy import signal
    >>> u = np.random.default_rng(0).standard_normal(400)
    >>> y = signal.lfilter([0.0, 0.5], [1.0, -0.8], u)
    >>> res = fit_arx(Experiment(u, y), 0.1, ArxOptions(na=1, nb=1, nk=1))
    >>> np.round(res.a[0], 6).tolist(), np.round(res.b[0][0], 6).tolist()
    ([1.0, -0.8], [0.5])
    """
    experiments = as_experiments(data)
    sample_time = positive_float(sample_time, "sample_time")
    if options is None:
        options = ArxOptions()
    if not isinstance(options, ArxOptions):
        raise OptionError(f"options must be ArxOptions; got {type(options).__name__}")
    (result,) = fit_arx_candidates(experiments, sample_time, (options,),
                                   input_names=input_names, output_names=output_names)
    return result


def fit_arx_candidates(data: Experiment | Sequence[Experiment], sample_time: float,
                       structures: Sequence[ArxOptions], *,
                       input_names: Sequence[str] | None = None,
                       output_names: Sequence[str] | None = None) -> tuple[ArxResult, ...]:
    """Fit several ARX structures to the same data from one pass over the data.

    Parameters
    ----------
    data : Experiment or sequence of Experiment
        Input and output deviations from the operating point.
    sample_time : float
        Sample time in seconds.
    structures : sequence of ArxOptions
        The candidate structures. Those with ``nk=None`` share one delay
        estimate (:func:`ident.estimate.delay.estimate_delay`, the smallest delay over
        the outputs, as in :func:`fit_arx`).
    input_names, output_names : sequence of str, optional
        Signal names for the models and for messages.

    Returns
    -------
    tuple of ArxResult
        One per structure, in order; each equal (up to rounding) to
        :func:`fit_arx` of that structure alone: same regression rows,
        parameters, covariance, standard errors, loss and criteria.

    Raises
    ------
    OptionError, IdentificationError
        As :func:`fit_arx`, for the first structure that cannot be fitted.

    Warns
    -----
    IllConditionedWarning, UnstableModelWarning
        As :func:`fit_arx`, per structure.

    See Also
    --------
    iter_arx_candidates : the same, one candidate at a time.

    Notes
    -----
    The regressor columns of every structure (with its targets) are a subset
    of one union matrix: input lags ``min(nk_j) .. max(nk_j + nb_j - 1)`` of
    every input, output lags ``1 .. max(na)`` and the targets. That matrix is
    factorised once, block by block, into a small R factor over the rows from
    the largest lag ``L`` of all structures on. A structure with a smaller
    largest lag ``L_s`` also owns the rows ``L_s .. L - 1`` of each
    experiment: its own columns of the union R are stacked with those few rows
    and re-factorised, which gives the R factor of exactly its own regression
    (a QR factor is determined by the Gram matrix of the rows, up to row
    signs). Every quantity of :func:`fit_arx` then follows from that small
    factor, so a sweep over orders costs one pass over the data plus work
    independent of the log length.

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, sec. 10.1 (QR solution of linear regressions) and
       sec. 16.4 (choice of model structure).
    """
    return tuple(iter_arx_candidates(data, sample_time, structures,
                                     input_names=input_names, output_names=output_names))


def iter_arx_candidates(data: Experiment | Sequence[Experiment], sample_time: float,
                        structures: Sequence[ArxOptions], *,
                        input_names: Sequence[str] | None = None,
                        output_names: Sequence[str] | None = None) -> Iterator[ArxResult]:
    """Fit several ARX structures from one pass over the data, one result at a time.

    Arguments are validated (and a shared delay estimated) at the call; the
    data are factorised when the first result is asked for, and each further
    step solves one structure from the small factor. A structure that cannot
    be fitted raises its :class:`OptionError` or :class:`IdentificationError`
    at its own step, which ends the iteration; the warnings of a structure are
    issued during its step, so a caller can record them per candidate.

    Parameters and results are those of :func:`fit_arx_candidates`.

    Returns
    -------
    iterator of ArxResult
    """
    experiments = as_experiments(data)
    sample_time = positive_float(sample_time, "sample_time")
    if isinstance(structures, ArxOptions):
        structures = (structures,)
    try:
        structures = tuple(structures)
    except TypeError:
        raise OptionError(
            f"structures must be a sequence of ArxOptions; got {type(structures).__name__}"
        ) from None
    if not structures:
        raise OptionError("structures must hold at least one ArxOptions; got none")
    for k, item in enumerate(structures):
        if not isinstance(item, ArxOptions):
            raise OptionError(f"structures[{k}] must be ArxOptions; got {type(item).__name__}")
    m, p = experiments[0].n_inputs, experiments[0].n_outputs
    in_names = names_tuple(input_names, "input_names", m, "u")
    out_names = names_tuple(output_names, "output_names", p, "y")
    resolved = [opt.resolve(m) for opt in structures]
    _check_outputs_are_not_inputs(experiments, in_names, out_names)
    delay = None
    estimated_nk = None
    if any(nk is None for _, nk in resolved):
        delay = estimate_delay(experiments)
        estimated_nk = tuple(int(v) for v in delay.delays.min(axis=0))
    plans = []
    for opt, (nb, nk) in zip(structures, resolved, strict=True):
        plans.append(_plan(experiments, opt, nb, estimated_nk if nk is None else nk,
                           None if nk is not None else delay))
    return _candidates(experiments, sample_time, plans, p, in_names, out_names)


@dataclass(frozen=True, slots=True, eq=False)
class _Plan:
    """One structure to fit: resolved orders, its largest lag, and why it cannot be fitted."""

    options: ArxOptions
    na: int
    nb: tuple[int, ...]
    nk: tuple[int, ...]
    max_lag: int
    delay: DelayEstimate | None
    error: OptionError | None


def _plan(experiments: Sequence[Experiment], options: ArxOptions, nb: tuple[int, ...],
          nk: tuple[int, ...], delay: DelayEstimate | None) -> _Plan:
    na = options.na
    d_out = na + sum(nb)
    label = _label(na, nb, nk)
    L = largest_lag(na, nb, nk)
    error = None
    if d_out == 0:
        error = OptionError(f"{label} has no parameters; set na > 0 or some nb > 0")
    else:
        n_rows = rows_available(experiments, L)
        if n_rows <= d_out:
            total = sum(e.n_samples for e in experiments)
            error = OptionError(
                f"{label} has {d_out} parameters per output but the data give only {n_rows} "
                f"regression rows ({total} samples minus the largest lag {L} per experiment); "
                f"need more than {d_out}",
                hint="lower na/nb/nk or use a longer log",
            )
    return _Plan(options, na, nb, nk, L, delay, error)


def _label(na: int, nb: Sequence[int], nk: Sequence[int]) -> str:
    return f"ARX(na={na}, nb={list(nb)}, nk={list(nk)})"


def _union_blocks(plans: Sequence[_Plan], m: int, p: int) -> tuple[list[RegressorBlock], int]:
    """Blocks holding every column of every plan (inputs, outputs, targets); the largest lag."""
    blocks = []
    for j in range(m):
        used = [pl for pl in plans if pl.nb[j] > 0]
        if used:
            blocks.append(RegressorBlock("u", j, min(pl.nk[j] for pl in used),
                                 max(pl.nk[j] + pl.nb[j] - 1 for pl in used)))
    na_max = max(pl.na for pl in plans)
    if na_max > 0:
        blocks += [RegressorBlock("y", i, 1, na_max) for i in range(p)]
    blocks += [RegressorBlock("t", i, 0, 0) for i in range(p)]
    return blocks, max(pl.max_lag for pl in plans)


def _candidates(experiments, sample_time, plans, p, in_names, out_names) -> Iterator[ArxResult]:
    union = None
    for k, plan in enumerate(plans):
        if plan.error is not None:
            raise plan.error
        if union is None:
            # the plans up to the first one that cannot be fitted (iteration stops there)
            reach = next((q for q in range(k, len(plans)) if plans[q].error is not None),
                         len(plans))
            blocks, L = _union_blocks(plans[k:reach], experiments[0].n_inputs, p)
            index = column_index(blocks)
            R, n_rows = accumulate_r(experiments, blocks, L)
            union = (R, index, n_rows, L)
        R_s, index_s, rows_s = _restrict(union, experiments, plan, p)
        yield _result_from_r(R_s, index_s, rows_s, plan, sample_time, in_names, out_names)


def _restrict(union, experiments: Sequence[Experiment], plan: _Plan,
              p: int) -> tuple[np.ndarray, dict[tuple[str, int, int], int], int]:
    """R factor of one plan's own regression (its columns, from its own largest lag on)."""
    R, index, n_rows, L = union
    blocks = lag_blocks(plan.na, plan.nb, plan.nk, range(p), u_first=True)
    own = column_index(blocks)
    cols = [index[key] for key in sorted(own, key=own.__getitem__)]
    extra = []
    for exp in experiments:
        k1 = min(exp.n_samples, L)
        if k1 > plan.max_lag:  # rows this plan has but the union does not
            rows = np.empty((k1 - plan.max_lag, len(cols)))
            fill_rows(rows, exp, blocks, plan.max_lag, plan.max_lag, k1)
            extra.append(rows)
    if not extra and cols == list(range(R.shape[1])):
        return R, own, n_rows
    Z = np.vstack([R[:, cols], *extra])
    r = np.linalg.qr(Z, mode="r")
    c = len(cols)
    R_s = np.zeros((c, c))
    k = min(c, Z.shape[0])
    R_s[:k] = np.triu(r[:k, :c])
    return R_s, own, n_rows + sum(x.shape[0] for x in extra)


def _result_from_r(R: np.ndarray, index: dict[tuple[str, int, int], int], n_rows: int,
                   plan: _Plan, sample_time: float, in_names: Sequence[str],
                   out_names: Sequence[str]) -> ArxResult:
    """Every quantity of an ARX fit from the R factor of its regression (with targets)."""
    na, nb, nk = plan.na, plan.nb, plan.nk
    m, p = len(nb), len(out_names)
    d_out = na + sum(nb)
    label = _label(na, nb, nk)
    thetas, covs, ses, resid, s2 = [], [], [], [], np.empty(p)
    worst: tuple[float, str] | None = None
    for i in range(p):
        ukeys = [("u", j, lag) for j in range(m) for lag in range(nk[j], nk[j] + nb[j])]
        ykeys = [("y", i, lag) for lag in range(1, na + 1)]
        keys = ukeys + ykeys  # factorisation order: inputs first (names the culprit)
        sol = solve_subset(R, [index[k] for k in keys], index[("t", i, 0)])
        bad = int(np.argmin(sol.sines))
        if sol.rinv is None:
            culprit = keys[bad]
            what = _column_label(culprit, in_names, out_names)
            if culprit[0] == "u":
                reason = ("collinear inputs, or the input is not persistently exciting "
                          f"for nb={nb[culprit[1]]}")
                hint = f"check input {in_names[culprit[1]]!r} (drop it, excite it, or lower nb)"
            else:
                reason = "the model is over-parametrised for these data (e.g. noise-free data)"
                hint = "lower na and nb"
            raise IdentificationError(
                f"{label} for output {out_names[i]!r}: regressor {what} is a linear "
                f"combination of the earlier ones (sine of angle {sol.sines[bad]:.1e} < "
                f"{RANK_TOL:g}): {reason}",
                hint=hint,
            )
        if sol.sines[bad] < _WARN_TOL and (worst is None or sol.sines[bad] < worst[0]):
            worst = (float(sol.sines[bad]), _column_label(keys[bad], in_names, out_names))
        # back to parameter order: a (from -y columns), then b per input
        perm = np.r_[np.arange(len(ukeys), len(keys)), np.arange(len(ukeys))]
        theta = sol.theta[perm]
        rss = float(sol.residual @ sol.residual)
        s2[i] = rss / (n_rows - d_out)
        cov = s2[i] * (sol.rinv @ sol.rinv.T)[np.ix_(perm, perm)]
        thetas.append(theta)
        covs.append(cov)
        ses.append(np.sqrt(np.diag(cov)))
        resid.append(sol.residual)
    if worst is not None:
        warnings.warn(
            f"{label}: the regression is ill conditioned at {worst[1]} (sine of angle "
            f"{worst[0]:.1e}); parameters and standard errors are unreliable",
            IllConditionedWarning, stacklevel=4,
        )
    E = np.column_stack(resid)
    tnorm2 = np.array([np.sum(R[:, index[("t", i, 0)]] ** 2) for i in range(p)])
    loss, floor = _loss_and_floor(E, tnorm2, n_rows)
    n_par = p * d_out
    criteria = information_criteria(max(loss, floor), n_par, n_rows)
    a, b = _coefficients(thetas, na, nb)
    for i, ai in enumerate(a):
        radius = float(np.max(np.abs(np.roots(ai)))) if ai.size > 1 else 0.0
        if radius > 1.0:
            warnings.warn(
                f"{label}: the model of output {out_names[i]!r} is unstable (pole of "
                f"magnitude {radius:.4g} > 1)", UnstableModelWarning, stacklevel=4,
            )
    model = arx_state_space(a, b, nk, sample_time, input_names=in_names, output_names=out_names)
    for arr in (*thetas, *covs, *ses, s2, *a, *(x for row in b for x in row)):
        arr.flags.writeable = False
    return ArxResult(
        model=model, options=plan.options, na=na, nb=nb, nk=nk, a=a, b=b,
        parameters=tuple(thetas), std_errors=tuple(ses), covariance=tuple(covs),
        residual_variance=s2, loss=loss, n_samples=n_rows, n_parameters=n_par,
        criteria=criteria, delay=plan.delay,
    )


def _arx_simulate(a: Sequence[np.ndarray], b: Sequence[Sequence[np.ndarray]],
                  nk: Sequence[int], u: np.ndarray, x0: np.ndarray) -> np.ndarray:
    """Free-run output of an ARX model from the state ``x0`` of :func:`arx_state_space`.

    Output ``i`` with ``n`` states obeys ``A_i(q) y[k] = r[k]`` with
    ``r[k] = sum_j B_ij(q) q^-nk_j u_j[k] + x0_i[k]`` (``x0_i[k] = 0`` for
    ``k >= n``): the observer-form state is the transposed direct form II state
    of the difference equation, whose ``k``-th entry enters equation ``k``.
    ``r`` is a convolution (:func:`numpy.convolve`); the recursion in ``A_i``
    is a unit lower-triangular banded Toeplitz solve (LAPACK ``tbtrs``), done
    block by block.
    """
    N, m = u.shape
    y = np.empty((N, len(a)))
    offset = 0
    for i, (ai, bi) in enumerate(zip(a, b, strict=True)):
        na = ai.size - 1
        n = max([na] + [nk[j] + bi[j].size - 1 for j in range(m) if bi[j].size])
        r = np.zeros(N)
        for j in range(m):
            if bi[j].size:
                beta = np.zeros(n + 1)
                beta[nk[j]:nk[j] + bi[j].size] = bi[j]
                r += np.convolve(u[:, j], beta)[:N]
        k = min(n, N)
        r[:k] += x0[offset:offset + k]
        offset += n
        y[:, i] = all_pole_filter(np.asarray(ai, dtype=float), r)
    return y


# --------------------------------------------------------------------------- sweep


def _delay_vectors(nk_values: Sequence[object], m: int) -> tuple[tuple[int, ...], ...]:
    """Distinct per-input delay vectors from ``nk_values`` (ints or per-input sequences)."""
    items = list(nk_values)
    if not items:
        raise OptionError("nk_values must hold at least one delay (an int or one per input)")
    return tuple(dict.fromkeys(
        _per_input(_order_spec(list(v) if isinstance(v, (list, tuple)) else v,
                               f"nk_values[{k}]"), "nk_values entry", m)
        for k, v in enumerate(items)
    ))


def _values(values: Sequence[object], name: str) -> tuple[int, ...]:
    vals = tuple(_order(v, f"{name}[{k}]") for k, v in enumerate(values))
    if not vals:
        raise OptionError(f"{name} must hold at least one value")
    return tuple(sorted(set(vals)))


def _validation_fit(a, b, nk, model: StateSpaceModel,
                    validation: Sequence[Experiment]) -> np.ndarray:
    from ..assess.diagnostics import fit_percent
    from ..lti.simulate import estimate_initial_state

    ys, yhats = [], []
    diverged = np.full(validation[0].n_outputs, -np.inf)
    with np.errstate(all="ignore"):
        for exp in validation:
            try:
                x0 = estimate_initial_state(model, exp.u, exp.y)
                yhat = _arx_simulate(a, b, nk, exp.u, x0)
            except ValueError:  # non-finite values from a diverging (unstable) simulation
                return diverged
            if not np.all(np.isfinite(yhat)):
                return diverged
            ys.append(exp.y)
            yhats.append(yhat)
    return fit_percent(np.concatenate(ys), np.concatenate(yhats))


def sweep_arx(data: Experiment | Sequence[Experiment], sample_time: float, *,
              na_values: Sequence[int] = (1, 2, 3, 4),
              nb_values: Sequence[int] = (1, 2, 3, 4),
              nk_values: Sequence[int] | Sequence[Sequence[int]] | None = None,
              validation: Experiment | Sequence[Experiment] | None = None,
              input_names: Sequence[str] | None = None,
              output_names: Sequence[str] | None = None) -> ArxSweep:
    """Fit every ARX structure of a grid from one factorisation and rank them.

    Parameters
    ----------
    data : Experiment or sequence of Experiment
        Estimation data (deviations from the operating point).
    sample_time : float
        Seconds.
    na_values : sequence of int, default (1, 2, 3, 4)
        Output-lag orders to try.
    nb_values : sequence of int, default (1, 2, 3, 4)
        Input orders to try (the same ``nb`` for every input).
    nk_values : sequence of int, or sequence of sequence of int, optional
        Delays to try: ints apply the same delay to every input; a sequence of
        per-input tuples lists delay vectors explicitly. ``None`` (default)
        uses the delays from :func:`ident.estimate.delay.estimate_delay` only.
    validation : Experiment or sequence of Experiment, optional
        Held-out data; each candidate is simulated on it (initial state
        estimated by :func:`ident.lti.simulate.estimate_initial_state`) and its fit
        percent recorded.
    input_names, output_names : sequence of str, optional
        Signal names used in messages.

    Returns
    -------
    ArxSweep

    Raises
    ------
    OptionError
        Empty grids, or a grid whose largest model is too big for the data.
    IdentificationError
        An output equals an input (up to scale and offset).

    Notes
    -----
    What is shared: the regressor columns of every candidate, for every
    output and every delay, are a subset of one union matrix (output lags
    ``1..max(na)`` of every output, input lags ``min(nk)..max(nk + nb) - 1``
    of every input, and the targets). That matrix is factorised once, block by
    block, into a small R factor; each candidate and output then costs one QR
    of a matrix with ``c`` rows (``c`` = union column count), independent of
    the log length. Residual vectors in the R coordinates give exact residual
    sums of squares and cross-output covariances, hence the loss
    ``V = det((1/N) E^T E)``. All candidates use the same rows (each
    experiment from the largest lag of the grid on), so the losses are
    comparable; a single :func:`fit_arx` with the chosen structure may use a
    few more rows and give slightly different numbers.

    Losses below ``1e-20`` times the mean square output (per output) are
    numerically exact fits; the criteria use that floor, so among exact fits
    the one with fewest parameters wins.

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, sec. 10.1 (QR solution of linear regressions) and
       sec. 16.4 (choice of model structure).
    """
    experiments = as_experiments(data)
    sample_time = positive_float(sample_time, "sample_time")
    m, p = experiments[0].n_inputs, experiments[0].n_outputs
    na_vals = _values(na_values, "na_values")
    nb_vals = _values(nb_values, "nb_values")
    _check_outputs_are_not_inputs(experiments,
                                  names_tuple(input_names, "input_names", m, "u"),
                                  names_tuple(output_names, "output_names", p, "y"))
    delay = None
    if nk_values is None:
        delay = estimate_delay(experiments)
        nk_vecs = (tuple(int(v) for v in delay.delays.min(axis=0)),)
    else:
        nk_vecs = _delay_vectors(nk_values, m)
    val_exps = None if validation is None else as_experiments(validation)
    if val_exps is not None and (val_exps[0].n_inputs, val_exps[0].n_outputs) != (m, p):
        raise OptionError(
            f"validation data have {val_exps[0].n_inputs} inputs and {val_exps[0].n_outputs} "
            f"outputs; estimation data have {m} and {p}"
        )

    sweep, _ = _grid(experiments, sample_time, na_vals, nb_vals, nk_vecs, val_exps, delay)
    return sweep


def shortlist(sweep: ArxSweep, per_criterion: int = 3) -> tuple[int, ...]:
    """Rows of a sweep worth validating: the best few by each criterion, and the best of each order.

    On long logs every information criterion tends to favour the largest
    structures of the grid, so the shortlist also holds, for every order
    ``max(na, nb)`` in the grid, the row that BIC prefers among those of that
    order: the validation stage can then find a simpler model that does as well
    (ties go to the simpler model there).

    Parameters
    ----------
    sweep : ArxSweep
    per_criterion : int, default 3
        How many rows each of AIC, BIC/MDL and FPE contributes (its best
        ``per_criterion``, smallest value first, ties to fewer parameters).
        Rank-deficient rows are skipped.

    Returns
    -------
    tuple of int
        Row indices into ``sweep.rows``, without repeats, in row order.
    """
    per_criterion = int_in_range(per_criterion, "per_criterion", 1)
    usable = [k for k, r in enumerate(sweep.rows) if not r.rank_deficient]
    picked: set[int] = set()
    for name in CRITERIA:
        ranked = sorted(usable, key=lambda k: (getattr(sweep.rows[k], name),
                                               sweep.rows[k].n_parameters, k))
        picked.update(ranked[:per_criterion])
    best_of_order: dict[int, int] = {}
    for k in usable:
        row = sweep.rows[k]
        order = max(row.na, max(row.nb, default=0))
        j = best_of_order.get(order)
        if j is None or (row.bic, row.n_parameters, k) < (sweep.rows[j].bic, sweep.rows[j].n_parameters, j):
            best_of_order[order] = k
    picked.update(best_of_order.values())
    return tuple(sorted(picked))


def grid_search_arx(data: Experiment | Sequence[Experiment], sample_time: float, *,
                    na_values: Sequence[int], nb_values: Sequence[int],
                    nk_values: Sequence[Sequence[int]], per_criterion: int = 3,
                    input_names: Sequence[str] | None = None,
                    output_names: Sequence[str] | None = None,
                    ) -> tuple[ArxSweep, tuple[int, ...], Iterator[tuple[int, ArxResult | Exception]]]:
    """Rank a grid of ARX structures by AIC, BIC/MDL and FPE, then fit the best few.

    Parameters
    ----------
    data : Experiment or sequence of Experiment
        Estimation data (deviations from the operating point).
    sample_time : float
        Seconds.
    na_values, nb_values : sequence of int
        Output-lag and input orders of the grid (the same ``nb`` for every input).
    nk_values : sequence of sequence of int
        Delay vectors of the grid, one entry per input each.
    per_criterion : int, default 3
        Rows each criterion contributes to the shortlist (see :func:`shortlist`).
    input_names, output_names : sequence of str, optional
        Signal names for the models and for messages.

    Returns
    -------
    sweep : ArxSweep
        Every grid point with its loss and criteria (on the grid's common rows).
    picks : tuple of int
        The shortlisted rows of ``sweep``.
    results : iterator of (int, ArxResult or Exception)
        For each pick, in order, its full fit (as :func:`fit_arx` of that
        structure alone), or the :class:`IdentificationError` /
        :class:`OptionError` that structure raised. Warnings of a structure
        are issued during its step.

    Notes
    -----
    One R factor of the union regressor matrix serves everything: the
    criteria of every grid point (a tiny QR per point and output, as in
    :func:`sweep_arx`) and the full fits of the shortlisted points (as in
    :func:`fit_arx_candidates`). The data are read once.

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, sec. 16.4 (choice of model structure).
    """
    experiments = as_experiments(data)
    sample_time = positive_float(sample_time, "sample_time")
    m, p = experiments[0].n_inputs, experiments[0].n_outputs
    in_names = names_tuple(input_names, "input_names", m, "u")
    out_names = names_tuple(output_names, "output_names", p, "y")
    na_vals = _values(na_values, "na_values")
    nb_vals = _values(nb_values, "nb_values")
    nk_vecs = _delay_vectors(nk_values, m)
    _check_outputs_are_not_inputs(experiments, in_names, out_names)
    sweep, union = _grid(experiments, sample_time, na_vals, nb_vals, nk_vecs, None, None)
    picks = shortlist(sweep, per_criterion)

    def results() -> Iterator[tuple[int, ArxResult | Exception]]:
        for k in picks:
            row = sweep.rows[k]
            opts = row.options()
            plan = _plan(experiments, opts, row.nb, row.nk, None)
            if plan.error is not None:
                yield k, plan.error
                continue
            try:
                R_s, index_s, rows_s = _restrict(union, experiments, plan, p)
                yield k, _result_from_r(R_s, index_s, rows_s, plan, sample_time,
                                        in_names, out_names)
            except (IdentificationError, OptionError) as exc:
                yield k, exc

    return sweep, picks, results()


def _grid(experiments: Sequence[Experiment], sample_time: float, na_vals: tuple[int, ...],
          nb_vals: tuple[int, ...], nk_vecs: tuple[tuple[int, ...], ...],
          val_exps: Sequence[Experiment] | None, delay: DelayEstimate | None):
    """Criteria of every grid point from one R factor; the sweep and that union factor."""
    m, p = experiments[0].n_inputs, experiments[0].n_outputs
    lo = [min(v[j] for v in nk_vecs) for j in range(m)]
    hi = [max(v[j] for v in nk_vecs) + max(nb_vals) - 1 for j in range(m)]
    na_max = max(na_vals)
    blocks = [RegressorBlock("u", j, lo[j], hi[j]) for j in range(m) if hi[j] >= lo[j]]
    if na_max > 0:
        blocks += [RegressorBlock("y", i, 1, na_max) for i in range(p)]
    blocks += [RegressorBlock("t", i, 0, 0) for i in range(p)]
    index = column_index(blocks)
    L = max([na_max] + hi)
    d_max = na_max + m * max(nb_vals)
    n_rows = rows_available(experiments, L)
    if n_rows <= d_max:
        raise OptionError(
            f"the largest candidate has {d_max} parameters per output but the data give only "
            f"{n_rows} regression rows (samples minus the largest lag {L} per experiment)",
            hint="shrink na_values/nb_values/nk_values or use a longer log",
        )
    R, n_rows = accumulate_r(experiments, blocks, L)
    tnorm2 = np.array([np.sum(R[:, index[("t", i, 0)]] ** 2) for i in range(p)])

    rows: list[ArxCandidate] = []
    for nk, na, nb1 in itertools.product(nk_vecs, na_vals, nb_vals):
        nb = (nb1,) * m
        d_out = na + m * nb1
        if d_out == 0:
            continue
        thetas, resid, deficient = [], [], False
        for i in range(p):
            ukeys = [("u", j, lag) for j in range(m) for lag in range(nk[j], nk[j] + nb1)]
            ykeys = [("y", i, lag) for lag in range(1, na + 1)]
            sol = solve_subset(R, [index[k] for k in ukeys + ykeys], index[("t", i, 0)],
                                covariance=False)
            deficient |= sol.rinv is None
            perm = np.r_[np.arange(len(ukeys), len(ukeys) + len(ykeys)), np.arange(len(ukeys))]
            thetas.append(sol.theta[perm])
            resid.append(sol.residual)
        loss, floor = _loss_and_floor(np.column_stack(resid), tnorm2, n_rows)
        crit = information_criteria(max(loss, floor), p * d_out, n_rows)
        vfit = None
        if val_exps is not None:
            a, b = _coefficients(thetas, na, nb)
            model = arx_state_space(a, b, nk, sample_time)
            vfit = _validation_fit(a, b, nk, model, val_exps)
            vfit.flags.writeable = False
        rows.append(ArxCandidate(na=na, nb=nb, nk=nk, loss=loss, n_parameters=p * d_out,
                                 aic=crit.aic, bic=crit.bic, fpe=crit.fpe,
                                 validation_fit=vfit, rank_deficient=deficient))
    if not rows:
        raise OptionError("the grid holds no model with parameters (all na and nb are 0)")
    counts = [r.n_parameters for r in rows]
    best = {name: best_index([getattr(r, name) for r in rows], counts) for name in CRITERIA}
    if val_exps is not None:
        best["validation_fit"] = best_index([float(np.mean(r.validation_fit)) for r in rows],
                                            counts, larger_is_better=True)
    union = (R, index, n_rows, L)
    return ArxSweep(rows=tuple(rows), best=best, n_samples=n_rows, delay=delay), union
