"""Prediction-error refinement of discrete-time state-space models.

A subspace or ARX estimate is a good start but not the model the data support
best: under measurement noise its poles are biased, and nothing in it
minimises the error a user judges a model by. :func:`refine_state_space`
minimises, from such a start, either

- the **simulation error** ``y - G(q) u`` (output error, ``K = 0``): the
  consistent choice for open-loop data whatever the colour of the noise, or
- the **one-step prediction error** of the innovations form
  ``x[k+1] = A x + B u + K e``, ``y = C x + D u + e`` with ``A, B, C, D, K``
  estimated together: consistent and efficient when the noise model is right,
  and the consistent choice for data taken in closed loop ([1]_ sec. 13.4),

by damped Gauss-Newton steps (:func:`ident.estimate.gauss_newton.minimize`)
with analytic sensitivities (:mod:`ident.estimate.sensitivity`) in
data-driven local coordinates [2]_. Several experiments are combined, each
with its own estimated initial state; models may have several inputs and
outputs; the feedthrough ``D`` is estimated for the inputs that ask for it
and held otherwise. :func:`fit_noise_gain` estimates only ``K`` for a model
whose ``A, B, C, D`` are fixed (the one-step predictor of an output-error
model).

Criterion
---------
``V = (1/N) sum_t ||W e(t)||^2`` with ``W^T W`` the inverse of the error
covariance of the starting model, so outputs in different units count
alike (for one output ``V`` is the mean squared error over the starting
variance). Signals are scaled to unit RMS and the start is balanced (when
stable) before the search, which leaves the model unchanged but keeps the
Gauss-Newton matrix well conditioned.

Stability
---------
The predictor (``A`` for output error, ``A - K C`` otherwise) must stay
stable: a trial point with a predictor pole at or outside the unit circle is
refused like a point that raises the loss, so every accepted model has a
stable predictor and the loss never increases. When the best model lies on
that boundary (an integrator fitted by output error, a noise model with a zero
on the unit circle) the search stops just inside it and says so
(``stop_reason == "boundary"``). An output-error start with unstable poles is
first reflected into the unit circle (``z -> 1 / conj(z)``).

Long logs
---------
With more than ``working_samples`` estimation samples the search runs on up to
four evenly spread stretches of them (each with its own initial state) and is
then polished by at most ``polish_iterations`` steps on all the data; the loss
and the covariance reported are always those of all the estimation data.

Uncertainty
-----------
At the minimum, the covariance of the local coordinates is ``H^-1 S H^-1``
with ``H = J^T J`` and ``S`` the covariance of the gradient ``J^T e``, the
initial states treated as nuisance parameters. For an innovations model the
errors are white when the model is right, so ``S = sigma^2 H`` (Gauss'
approximation formula, [1]_ sec. 9.4): method ``"gauss"``. For an
output-error model the errors are the measurement noise, coloured in
general, so ``S`` is estimated from the autocovariances of the per-sample
gradient contributions with Bartlett weights (Newey-West [3]_, bandwidth by
Andrews' AR(1) rule [4]_): the asymptotic covariance of an output-error
estimate under coloured noise ([1]_ sec. 9.3), method ``"robust"``. The usual
caveats apply: the figures are first-order, assume the true system is in the
model set, and do not cover bias from unmodelled dynamics or nonlinearity.

References
----------
.. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
   Prentice Hall, 1999, ch. 7 (prediction-error methods), sec. 9.3-9.4
   (asymptotic covariance), sec. 10.2-10.3 (Gauss-Newton search) and
   sec. 13.4 (closed-loop data).
.. [2] T. McKelvey, A. Helmersson and T. Ribarits, "Data driven local
   coordinates for multivariable linear systems and their application to
   system identification", *Automatica* 40(9), 1629-1635, 2004.
.. [3] W. K. Newey and K. D. West, "A simple, positive semi-definite,
   heteroskedasticity and autocorrelation consistent covariance matrix",
   *Econometrica* 55(3), 703-708, 1987.
.. [4] D. W. K. Andrews, "Heteroskedasticity and autocorrelation consistent
   covariance matrix estimation", *Econometrica* 59(3), 817-858, 1991.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, fields, replace
from typing import Any, Literal

import numpy as np

from .._validate import int_in_range, one_of
from ..choices import NOISE_MODELS
from ..errors import IdentificationError, OptionError
from ..lti._linalg import one_blas_thread
from ..lti.covariance import ParameterCovariance, theta_layout
from ..lti.models import StateSpaceModel
from ..lti.truncation import stein_gramian
from .data import Experiment, as_experiments, working_stretches
from .gauss_newton import minimize
from .hac import long_run_covariance
from .sensitivity import STABLE_RADIUS, Point, PredictionProblem, pack_theta, unpack_theta

__all__ = [
    "NOISE_MODELS",
    "RefineOptions",
    "RefineResult",
    "refine_state_space",
    "fit_noise_gain",
]

#: Samples of each stretch used to fit its initial state before the search.
_X0_SAMPLES = 200


@dataclass(frozen=True, slots=True, eq=False, kw_only=True)
class RefineOptions:
    """What :func:`refine_state_space` minimises and how long it tries.

    Parameters
    ----------
    noise_model : {"output_error", "innovations"}
        ``"output_error"`` (default): minimise the simulation error, ``K = 0``.
        ``"innovations"``: estimate ``K`` too and minimise the one-step
        prediction error.
    feedthrough : bool or tuple of bool
        Estimate ``D`` (all inputs, or per input); default ``False``: ``D`` is
        held at zero (a strictly proper plant, the usual case for sampled
        data with a hold).
    max_iterations : int
        Largest number of accepted steps of the main search (default 50).
    step_tolerance : float
        Stop when a full Gauss-Newton step would move the parameters by less
        than this many of their standard deviations (default 0.01).
    working_samples : int
        Iterate on at most this many samples (default 40 000), then polish on all.
    polish_iterations : int
        Largest number of steps on all the data after a working stage (default 3).
    covariance : bool
        Compute the parameter covariance (default ``True``; a screening search
        that only compares losses can skip it).
    output_offsets : bool
        With output error, estimate a constant output offset per experiment
        alongside its initial state (default ``True``): the operating point
        subtracted from a finite record is not exactly an equilibrium of the
        plant, and a model without an offset fits the difference with a spurious
        slow mode.
    """

    noise_model: Literal["output_error", "innovations"] = "output_error"
    feedthrough: bool | tuple[bool, ...] = False
    max_iterations: int = 50
    step_tolerance: float = 0.01
    working_samples: int = 40_000
    polish_iterations: int = 3
    covariance: bool = True
    output_offsets: bool = True

    def __post_init__(self) -> None:
        one_of(self.noise_model, "noise_model", NOISE_MODELS)
        ft = self.feedthrough
        items = ft if isinstance(ft, (tuple, list)) else (ft,)
        if not all(isinstance(v, (bool, np.bool_)) for v in items):
            raise OptionError(f"feedthrough must be true or false (or one per input); got {ft!r}")
        object.__setattr__(self, "feedthrough",
                           tuple(bool(v) for v in ft) if isinstance(ft, (tuple, list)) else bool(ft))
        object.__setattr__(self, "max_iterations", int_in_range(self.max_iterations, "max_iterations", 0, 10_000))
        try:
            tol = float(self.step_tolerance)
        except (TypeError, ValueError):
            tol = float("nan")
        if not 0.0 < tol <= 1.0:
            raise OptionError(f"step_tolerance must be in (0, 1]; got {self.step_tolerance!r}")
        object.__setattr__(self, "step_tolerance", tol)
        object.__setattr__(self, "working_samples", int_in_range(self.working_samples, "working_samples", 100))
        object.__setattr__(self, "polish_iterations",
                           int_in_range(self.polish_iterations, "polish_iterations", 0, 1000))
        for name in ("covariance", "output_offsets"):
            value = getattr(self, name)
            if not isinstance(value, (bool, np.bool_)):
                raise OptionError(f"{name} must be true or false; got {value!r}")
            object.__setattr__(self, name, bool(value))

    def feedthrough_inputs(self, m: int) -> tuple[bool, ...]:
        """Per input, whether its column of ``D`` is estimated."""
        if isinstance(self.feedthrough, tuple):
            if len(self.feedthrough) != m:
                raise OptionError(f"feedthrough must list {m} value(s), one per input; got {len(self.feedthrough)}")
            return self.feedthrough
        return (self.feedthrough,) * m

    def to_dict(self) -> dict[str, Any]:
        """Return the options as a plain dict (for provenance records)."""
        return {f.name: getattr(self, f.name) for f in fields(self)}


@dataclass(frozen=True, slots=True, eq=False)
class RefineResult:
    """A refined model with its loss, search record and parameter covariance.

    Attributes
    ----------
    model : StateSpaceModel
        The refined model (``noise_gain`` set for an innovations model, ``None``
        for output error), names and units as the start.
    initial_states : tuple of numpy.ndarray
        Estimated initial state of each experiment, in ``model``'s coordinates.
    output_offsets : tuple of numpy.ndarray
        Estimated constant output offset (p,) of each experiment, in the
        outputs' units (zeros when not estimated): the model explains
        ``y - operating_point - offset``.
    loss, initial_loss : float
        The criterion ``(1/N) sum ||W e||^2`` on all the data at the end and at
        the start (see the module Notes).
    error_variance, initial_error_variance : numpy.ndarray, shape (p,)
        Mean squared error of each output on all the data, at the end and at the start.
    noise_covariance : numpy.ndarray, shape (p, p)
        Covariance of the errors at the end.
    covariance : ParameterCovariance or None
        Of ``theta = [vec A, vec B, vec C, vec D, vec K]`` of ``model``;
        ``None`` when the Gauss-Newton matrix is singular (parameters not
        identifiable from these data).
    n_parameters : int
        Free parameters (local coordinates), initial states not counted.
    n_samples : int
        Samples of all the data.
    iterations : int
        Accepted steps (working stage and polish together).
    stop_reason : str
        Why the last stage stopped (:data:`ident.estimate.gauss_newton.STOP_REASONS`).
    history : tuple of float
        ``V`` after each accepted step (working data, then all data).
    working_samples : int
        Samples the main search iterated on (``n_samples`` when all).
    options : RefineOptions
    """

    model: StateSpaceModel
    initial_states: tuple[np.ndarray, ...]
    output_offsets: tuple[np.ndarray, ...]
    loss: float
    initial_loss: float
    error_variance: np.ndarray
    initial_error_variance: np.ndarray
    noise_covariance: np.ndarray
    covariance: ParameterCovariance | None
    n_parameters: int
    n_samples: int
    iterations: int
    stop_reason: str
    history: tuple[float, ...]
    working_samples: int
    options: RefineOptions

    @property
    def converged(self) -> bool:
        """True when the search stopped at a local minimum (or at the stability boundary)."""
        return self.stop_reason in ("converged", "small_step", "boundary")


# --------------------------------------------------------------------------- the job


def refine_state_space(
    model: StateSpaceModel,
    data: Experiment | Sequence[Experiment],
    options: RefineOptions | None = None,
) -> RefineResult:
    """Refine a discrete-time state-space model by minimising its prediction error.

    Parameters
    ----------
    model : StateSpaceModel
        Starting model (discrete time), e.g. a subspace estimate. Its
        ``noise_gain`` starts an innovations refinement (zero when ``None``).
    data : Experiment or sequence of Experiment
        Input/output deviations from the operating point, ``(N, m)`` and
        ``(N, p)``; several experiments are combined without being joined.
    options : RefineOptions, optional
        Default ``RefineOptions()`` (output error, ``D`` held at zero).

    Returns
    -------
    RefineResult

    Raises
    ------
    OptionError
        Shapes that do not match the model, a continuous-time model, a model
        with noise states.
    IdentificationError
        An innovations start whose predictor ``A - K C`` is unstable.

    Examples
    --------
    >>> import numpy as np
    >>> from ident.lti.models import StateSpaceModel
    >>> from ident.lti.simulate import simulate
    >>> true = StateSpaceModel(A=[[0.9]], B=[[1.0]], C=[[0.5]], D=[[0.0]], sample_time=0.1)
    >>> u = np.random.default_rng(0).standard_normal((500, 1))
    >>> start = true.with_changes(A=[[0.7]])
    >>> res = refine_state_space(start, Experiment(u, simulate(true, u)))
    >>> round(float(res.model.poles()[0].real), 6)
    0.9
    """
    options = RefineOptions() if options is None else options
    if not isinstance(options, RefineOptions):
        raise OptionError(f"options must be RefineOptions; got {type(options).__name__}")
    experiments = _check_inputs(model, as_experiments(data))
    innovations = options.noise_model == "innovations"
    scaled = _Scaled.of(experiments)
    n, m, p = model.n_states, model.n_inputs, model.n_outputs
    feed = options.feedthrough_inputs(m)
    theta0 = _start_theta(model, scaled, innovations, feed)
    problem = PredictionProblem(scaled.parts, (n, m, p), _free_mask(n, m, p, feed, innovations),
                                innovations, np.eye(p), offsets=options.output_offsets)
    if not problem.admissible(theta0):
        raise IdentificationError(
            "the starting model's predictor A - K C is unstable; it cannot be refined in innovations form",
            hint="start from an output-error refinement, or from a model with a stabilising noise gain",
        )
    with one_blas_thread():
        return _search(model, problem, theta0, scaled, options, experiments)


def fit_noise_gain(
    model: StateSpaceModel,
    data: Experiment | Sequence[Experiment],
    options: RefineOptions | None = None,
) -> RefineResult:
    """Estimate the noise gain ``K`` of a model whose ``A, B, C, D`` are fixed.

    The one-step prediction error of the innovations form is minimised over
    ``K`` alone (from ``K = 0``, where the predictor is the simulation), so the
    input-output model is untouched and gains a one-step predictor: the
    usual second stage after an output-error fit when one-step prediction and
    residual whiteness are to be judged ([1]_ sec. 7.2 and 16.6).

    Parameters
    ----------
    model : StateSpaceModel
        The model (its ``noise_gain``, if any, is the start).
    data : Experiment or sequence of Experiment
        As for :func:`refine_state_space`.
    options : RefineOptions, optional
        Only the iteration settings are used.

    Returns
    -------
    RefineResult
        ``model`` with ``noise_gain`` set; ``covariance`` covers ``K`` only.

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed., 1999.
    """
    options = RefineOptions() if options is None else options
    experiments = _check_inputs(model, as_experiments(data))
    scaled = _Scaled.of(experiments)
    n, m, p = model.n_states, model.n_inputs, model.n_outputs
    su, sy = scaled.u_scale, scaled.y_scale
    K = np.zeros((n, p)) if model.noise_gain is None else model.noise_gain * sy[None, :]
    theta0 = pack_theta(model.A, model.B * su[None, :], model.C / sy[:, None],
                        model.D * su[None, :] / sy[:, None], K)
    lay = theta_layout(n, m, p)
    free = np.zeros(theta0.size, dtype=bool)
    free[lay["K"]] = True
    problem = PredictionProblem(scaled.parts, (n, m, p), free, True, np.eye(p), gauge=False)
    if not problem.admissible(theta0):
        raise IdentificationError("the model's predictor A - K C is unstable; give a stabilising noise gain")
    opts = RefineOptions(noise_model="innovations", max_iterations=options.max_iterations,
                         step_tolerance=options.step_tolerance, working_samples=options.working_samples,
                         polish_iterations=options.polish_iterations)
    with one_blas_thread():
        return _search(model, problem, theta0, scaled, opts, experiments)


def _check_inputs(model: StateSpaceModel, experiments: Sequence[Experiment]) -> Sequence[Experiment]:
    if not isinstance(model, StateSpaceModel):
        raise OptionError(f"model must be a StateSpaceModel; got {type(model).__name__}")
    if not model.is_discrete:
        raise OptionError("refinement needs a discrete-time model")
    if model.noise_states:
        raise OptionError("refinement of a model with noise states (a Box-Jenkins structure) is not supported here")
    e = experiments[0]
    if (e.n_inputs, e.n_outputs) != (model.n_inputs, model.n_outputs):
        raise OptionError(
            f"data have {e.n_inputs} inputs and {e.n_outputs} outputs; the model has "
            f"{model.n_inputs} and {model.n_outputs}"
        )
    return experiments


# --------------------------------------------------------------------------- steps


@dataclass(frozen=True, slots=True, eq=False)
class _Scaled:
    """Experiments with every signal scaled to unit RMS, and the scales."""

    parts: tuple[tuple[np.ndarray, np.ndarray], ...]
    u_scale: np.ndarray
    y_scale: np.ndarray

    @staticmethod
    def of(experiments: Sequence[Experiment]) -> _Scaled:
        su = _rms([e.u for e in experiments])
        sy = _rms([e.y for e in experiments])
        return _Scaled(_scale_parts(experiments, su, sy), su, sy)


def _scale_parts(experiments: Sequence[Experiment], su: np.ndarray, sy: np.ndarray):
    return tuple((np.ascontiguousarray(e.u / su), np.ascontiguousarray(e.y / sy)) for e in experiments)


def _rms(parts: Sequence[np.ndarray]) -> np.ndarray:
    total = sum(float(x.shape[0]) for x in parts)
    sq = sum(np.einsum("ij,ij->j", x, x) for x in parts)
    r = np.sqrt(sq / max(total, 1.0))
    return np.where(r > 0, r, 1.0)


def _free_mask(n: int, m: int, p: int, feed: Sequence[bool], innovations: bool) -> np.ndarray:
    lay = theta_layout(n, m, p)
    mask = np.zeros(lay["K"].stop, dtype=bool)
    for name in ("A", "B", "C"):
        mask[lay[name]] = True
    mask[lay["D"]] = np.tile(np.asarray(feed, dtype=bool), p)
    mask[lay["K"]] = innovations
    return mask


def _reflect(A: np.ndarray) -> np.ndarray:
    """Reflect every eigenvalue of ``A`` at or outside :data:`STABLE_RADIUS` to ``1 / conj(z)``."""
    if A.shape[0] == 0:
        return A
    lam, V = np.linalg.eig(A)
    mag = np.abs(lam)
    bad = mag >= STABLE_RADIUS
    if not bad.any():
        return A
    new = np.where(bad, lam / np.maximum(mag, 1e-300) ** 2, lam)
    new = np.where(np.abs(new) >= STABLE_RADIUS, new * (STABLE_RADIUS - 1e-6) / np.abs(new), new)
    return np.real(V @ np.diag(new) @ np.linalg.inv(V))


def _start_theta(model: StateSpaceModel, scaled: _Scaled, innovations: bool, feed) -> np.ndarray:
    """``theta`` of the start in scaled units, reflected (output error) and balanced when stable."""
    su, sy = scaled.u_scale, scaled.y_scale
    A = np.array(model.A, dtype=float)
    B = model.B * su[None, :]
    C = model.C / sy[:, None]
    D = model.D * su[None, :] / sy[:, None] * np.asarray(feed, dtype=float)[None, :]
    K = np.zeros((model.n_states, model.n_outputs))
    if innovations and model.noise_gain is not None:
        K = model.noise_gain * sy[None, :]
    if not innovations:
        A = _reflect(A)
    T = _balancing(A - K @ C, np.hstack([B, K]), C)
    if T is not None:
        Ti = np.linalg.inv(T)
        A, B, C, K = T @ A @ Ti, T @ B, C @ Ti, T @ K
    return pack_theta(A, B, C, D, K)


def _balancing(A: np.ndarray, B: np.ndarray, C: np.ndarray) -> np.ndarray | None:
    """Similarity ``T`` balancing the Gramians of stable ``(A, B, C)``; ``None`` when it cannot be done safely."""
    n = A.shape[0]
    if n == 0 or float(np.max(np.abs(np.linalg.eigvals(A)))) >= STABLE_RADIUS:
        return None
    Wc, Wo = stein_gramian(A, B @ B.T), stein_gramian(A.T, C.T @ C)
    if Wc is None or Wo is None:
        return None
    try:
        Lc = np.linalg.cholesky(Wc + 1e-12 * np.trace(Wc) / n * np.eye(n))
        Lo = np.linalg.cholesky(Wo + 1e-12 * np.trace(Wo) / n * np.eye(n))
    except np.linalg.LinAlgError:
        return None
    U, s, _ = np.linalg.svd(Lo.T @ Lc)
    if s[-1] <= 1e-10 * s[0]:
        return None
    T = np.diag(s ** -0.5) @ U.T @ Lo.T
    return T if np.linalg.cond(T) <= 1e8 else None


def _fit_x0(problem: PredictionProblem, theta: np.ndarray, u: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Least-squares nuisance vector (initial state, and output offsets) from the first samples of one experiment."""
    n, p, w = problem.n, problem.p, problem.nuisance
    if w == 0:
        return np.zeros(0)
    Ab, _, C, _ = problem.predictor(theta)
    count = min(u.shape[0], max(20 * w, _X0_SAMPLES))
    e = problem.errors(theta, np.zeros(w), u[:count], y[:count])
    obs = np.empty((count, p, w))
    obs[:, :, n:] = np.eye(p)[None, :, :] if w > n else 0.0
    M = C.copy()
    for k in range(count):
        obs[k, :, :n] = M
        M = M @ Ab
    W = problem.weight
    lhs = np.einsum("ab,tbn->tan", W, obs).reshape(-1, w)
    x0, *_ = np.linalg.lstsq(lhs, (e @ W.T).reshape(-1), rcond=None)
    return x0


def _weight(problem: PredictionProblem, point: Point) -> np.ndarray:
    """``W`` with ``W^T W`` the inverse error covariance at ``point`` (whitens the criterion)."""
    errs = problem.all_errors(point)
    cov = sum(e.T @ e for e in errs) / problem.n_samples
    p = cov.shape[0]
    cov = cov + 1e-12 * max(float(np.trace(cov)) / p, 1e-300) * np.eye(p)
    return np.linalg.inv(np.linalg.cholesky(cov))


def _search(model, problem: PredictionProblem, theta0, scaled: _Scaled, options: RefineOptions,
            experiments: Sequence[Experiment]) -> RefineResult:
    """Weighting, working stage on :func:`ident.estimate.data.working_stretches`, polish on all data, result."""
    x0 = [_fit_x0(problem, theta0, u, y) for u, y in problem.parts]
    problem = problem.with_weight(_weight(problem, Point(theta0, x0)))
    if problem.p > 1:  # a weighting of one output scales the least-squares problem only
        x0 = [_fit_x0(problem, theta0, u, y) for u, y in problem.parts]
    start = Point(theta0, x0)
    start_var = _error_variance(problem, start)
    start_loss = problem.loss(start) / problem.n_samples
    history: list[float] = []
    iterations = 0
    point = start
    working = working_stretches(experiments, options.working_samples)
    budget = options.max_iterations
    work_parts = problem.parts
    res = None
    if sum(e.n_samples for e in working) < problem.n_samples:
        work_parts = _scale_parts(working, scaled.u_scale, scaled.y_scale)
        work = problem.with_parts(work_parts)
        res = minimize(Point(theta0, [_fit_x0(work, theta0, u, y) for u, y in work_parts]),
                       work.loss, work.linearize, work.step, max_iterations=options.max_iterations,
                       gtol=options.step_tolerance**2 / (work.n_samples * work.p))
        history.extend(v / work.n_samples for v in res.history)
        iterations += res.iterations
        point = Point(res.point.theta, [_fit_x0(problem, res.point.theta, u, y) for u, y in problem.parts])
        budget = options.polish_iterations
    polished = budget > 0 or res is None
    if polished:
        # after a working stage the covariance of an output-error model comes from the working
        # stretches (see _covariance): no linearisation of all the data is needed after the last step
        final = minimize(point, problem.loss, problem.linearize, problem.step, max_iterations=budget,
                         gtol=options.step_tolerance**2 / (problem.n_samples * problem.p),
                         relinearize_last=res is None or options.noise_model == "innovations")
    else:  # no polish: the working estimate, its loss on all the data, its covariance from the working data
        final = replace(res, point=point, loss=problem.loss(point), history=(), iterations=0)
    history.extend(v / problem.n_samples for v in final.history)
    factor = _covariance(problem, final, work_parts, options, polished=polished) if options.covariance \
        else (None, "gauss")
    return _result(model, problem, final, scaled, options, (start_loss, start_var), history,
                   iterations + final.iterations, sum(u.shape[0] for u, _ in work_parts), factor)


def _covariance(problem: PredictionProblem, final, work_parts, options: RefineOptions, *, polished: bool):
    """Parameter covariance factor at the final point (see the module Notes).

    A robust (output-error) covariance needs the per-sample gradient terms; on a
    long log they are formed on the working stretches only. When the estimate
    was polished on all the data the covariance found there is scaled by
    ``N_working / N_all`` (the information grows with the number of samples of a
    stationary record); an estimate from the working stretches alone keeps the
    working covariance.
    """
    innovations = options.noise_model == "innovations"
    if work_parts is problem.parts or (innovations and polished):
        return _covariance_factor(problem, final.point, final.linearization, final.loss, innovations)
    work = problem.with_parts(work_parts)
    theta = final.point.theta
    point = Point(theta, [_fit_x0(work, theta, u, y) for u, y in work_parts])
    lin = work.linearize(point)
    factor, method = _covariance_factor(work, point, lin, lin.loss, innovations)
    if factor is None or not polished:
        return factor, method
    return factor * np.sqrt(work.n_samples / problem.n_samples), method


def _error_variance(problem: PredictionProblem, point: Point) -> np.ndarray:
    return sum(np.einsum("ij,ij->j", e, e) for e in problem.all_errors(point)) / problem.n_samples


def _result(model, problem, final, scaled: _Scaled, options, start, history, iterations, n_work,
            factor_method) -> RefineResult:
    n, m, p = model.n_states, model.n_inputs, model.n_outputs
    A, B, C, D, K = unpack_theta(final.point.theta, n, m, p)
    su, sy = scaled.u_scale, scaled.y_scale
    innovations = options.noise_model == "innovations"
    refined = model.with_changes(
        A=A, B=B / su[None, :], C=C * sy[:, None], D=D * sy[:, None] / su[None, :],
        noise_gain=(K / sy[None, :]) if innovations else None,
    )
    cov_e = sum(e.T @ e for e in problem.all_errors(final.point)) / problem.n_samples
    factor, method = factor_method
    covariance = None
    if factor is not None:
        covariance = ParameterCovariance(_theta_unscaling(n, m, p, su, sy)[:, None] * factor, method, n, m, p)
    return RefineResult(
        model=refined,
        initial_states=tuple(np.array(x[:n]) for x in final.point.x0),
        output_offsets=tuple(np.array(x[n:]) * sy if problem.offsets else np.zeros(p) for x in final.point.x0),
        loss=final.loss / problem.n_samples,
        initial_loss=start[0],
        error_variance=np.diag(cov_e) * sy**2,
        initial_error_variance=start[1] * sy**2,
        noise_covariance=sy[:, None] * cov_e * sy[None, :],
        covariance=covariance,
        n_parameters=int(final.linearization.context.shape[1]),
        n_samples=problem.n_samples,
        iterations=iterations,
        stop_reason=final.stop_reason,
        history=tuple(history),
        working_samples=n_work,
        options=options,
    )


def _theta_unscaling(n: int, m: int, p: int, su: np.ndarray, sy: np.ndarray) -> np.ndarray:
    """Per-entry factor from scaled to physical ``theta`` (the scaling is diagonal)."""
    lay = theta_layout(n, m, p)
    out = np.ones(lay["K"].stop)
    out[lay["B"]] = np.tile(1.0 / su, n)
    out[lay["C"]] = np.repeat(sy, n)
    out[lay["D"]] = (sy[:, None] / su[None, :]).ravel()
    out[lay["K"]] = np.tile(1.0 / sy, n)
    return out


# --------------------------------------------------------------------------- covariance


def _covariance_factor(problem: PredictionProblem, point: Point, lin, loss: float,
                       innovations: bool) -> tuple[np.ndarray | None, str]:
    """Return ``L`` with ``cov(theta) = L L^T`` (scaled units) at a minimum; see the module Notes."""
    Q = lin.context
    d = Q.shape[1]
    R = lin.R
    if d == 0:
        return np.zeros((Q.shape[0], 0)), "gauss"
    diag = np.abs(np.diag(R))
    if diag.size == 0 or np.min(diag) <= 1e-12 * np.max(diag):
        return None, "gauss"
    Rinv = np.linalg.inv(R)  # H^-1 = Rinv Rinv^T, initial states included
    if innovations:
        dof = max(problem.n_samples * problem.p - R.shape[0], 1)
        return Q @ (np.sqrt(loss / dof) * Rinv[:d]), "gauss"
    S = _gradient_covariance(problem, point, Q)
    P = Rinv[:d] @ Rinv.T @ S @ Rinv @ Rinv[:d].T
    P = 0.5 * (P + P.T)
    w, V = np.linalg.eigh(P)
    return Q @ (V * np.sqrt(np.maximum(w, 0.0))[None, :]), "robust"


def _gradient_covariance(problem: PredictionProblem, point: Point, Q: np.ndarray) -> np.ndarray:
    """Newey-West estimate of ``cov(J^T W^T W e)`` (Bartlett weights, Andrews' bandwidth)."""
    d, n = Q.shape[1], problem.nuisance
    width = d + n * len(problem.parts)
    W = problem.weight
    per_exp = [np.zeros((u.shape[0], width)) for u, _ in problem.parts]
    for k, (t0, J, Jx, e) in problem.jacobian_chunks(point, Q):
        ew = e @ W.T
        g = per_exp[k]
        T = e.shape[0]
        g[t0:t0 + T, :d] = np.einsum("tak,ta->tk", np.einsum("ab,tbk->tak", W, J), ew)
        g[t0:t0 + T, d + k * n:d + (k + 1) * n] = np.einsum("tak,ta->tk", np.einsum("ab,tbk->tak", W, Jx), ew)
    return long_run_covariance(per_exp)


