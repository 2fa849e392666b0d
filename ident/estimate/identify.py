"""The top-level identification job: candidates, refinement, selection, validation.

:func:`identify` prepares the data (:mod:`ident.estimate.preprocess`), checks
the signals and finds the model the data support best, in four stages:

1. **Evidence.** Input delays are estimated (:func:`ident.estimate.delay.estimate_delay`);
   the delays tried always include 0 and 1 sample besides the estimate. How
   richly the inputs excite the plant is measured against the noise level and
   reported, never used to cut the search short: a weakly exciting input is a
   warning, and a fixed ``order`` is always fitted.
2. **Candidates** (:mod:`ident.estimate.candidates`): an ARX structure grid
   ranked by AIC, BIC and FPE, and subspace models of every order for the
   three weightings (N4SID, MOESP, CVA), a few horizons and the candidate input
   shifts, each scored by its free-run fit on the held-out data.
3. **Refinement** (:mod:`ident.estimate.refine`): the best few candidates
   (the best of each of the leading orders, and the best of every input
   shift) are refined by minimising the simulation error (output error) -- or,
   when asked or when the log looks closed-loop (:mod:`ident.estimate.closed_loop`),
   the one-step prediction error of the innovations form -- and scored again on
   the held-out data. Lower orders are then tried below the model the
   selection rule would keep: one state removed by balanced truncation, the
   result refined again, while it stays as accurate on the held-out data.
4. **Selection** (:mod:`ident.estimate.selection`): the best refined held-out
   fit, unless a simpler candidate is statistically as accurate on the held-out
   data and the estimation data do not support the extra parameters. The chosen
   model is polished on all the estimation data, gets a one-step predictor
   (the noise gain of its innovations form, :func:`ident.estimate.refine.fit_noise_gain`)
   and its parameter covariance, and is scored on all the held-out data.

With ``workers`` above 1 the independent jobs of stages 1-3 (the feedback test,
each subspace input shift and horizon, the ARX grid, each refinement) run in
forked worker processes (:mod:`ident.estimate.jobs`); the results are taken in
the order of the search, so the model does not depend on the number of workers.

The model returned is estimated on the estimation part only; it is not
re-estimated on the held-out data, so the validation figures it carries are
figures of exactly this model.

References
----------
.. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
   Prentice Hall, 1999, sec. 13.2 (informative experiments), ch. 7 and 10
   (prediction-error methods), sec. 16.4-16.6 (structure selection, validation).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field, fields, replace
from typing import Any, Literal

import numpy as np

from .._validate import int_in_range, one_of, options_from_mapping
from ..choices import METHODS, POLYNOMIAL_STRUCTURES, REFINEMENTS, WEIGHTINGS
from ..errors import (
    IdentificationError,
    IllConditionedWarning,
    OptionError,
    PoorExcitationWarning,
    UnstableModelWarning,
)
from ..lti._linalg import column_stds, one_blas_thread
from ..lti.covariance import ParameterCovariance, pole_covariance
from ..lti.input_delay import delayed_covariance, with_input_delays
from ..lti.models import StateSpaceModel
from .candidates import (
    Candidate,
    Fitted,
    Screen,
    arx_candidates,
    polynomial_candidates,
    state_space_parameters,
    subspace_group,
)
from .data import Experiment
from .jobs import MAX_WORKERS, Jobs
from .preprocess import PreparedData, PreprocessOptions, prepare
from .scoring import IN_SAMPLE_WINDOW, held_out_score, score_window, warmups_for
from .selection import Contender, SelectionRecord, select

__all__ = [
    "METHODS",
    "REFINEMENTS",
    "PER_CRITERION",
    "IdentifyOptions",
    "Candidate",
    "Identification",
    "identify",
    "excitation_order",
]

#: Default of :attr:`IdentifyOptions.per_criterion`.
PER_CRITERION = 3

#: Largest order accepted for ``order`` and ``max_order``.
MAX_ORDER = 40

#: Estimation samples needed per estimated parameter (below about ten samples
#: per parameter the variance of the estimate dominates).
SAMPLES_PER_PARAMETER = 10

#: At most this many samples per experiment are used for the signal checks.
_CHECK_SAMPLES = 200_000

#: Two inputs whose correlation exceeds this in magnitude are collinear (error).
_COLLINEAR_LIMIT = 1.0 - 1e-9
#: ... and above this they are nearly collinear (warning).
_NEAR_COLLINEAR_LIMIT = 0.99

#: Largest input delay (samples) the delay estimate looks for.
_MAX_DELAY = 20

#: Refinement of the candidates on the screening data: at most this many steps,
#: stopping when the remaining step is this many standard deviations (the chosen
#: one is polished to the refinement default on all the data).
_SCREEN_ITERATIONS = 10
_SCREEN_STEP_TOLERANCE = 0.1

#: Samples the screening refinements iterate on (at most); their losses and
#: scores are those of all the screening data.
_SCREEN_WORKING_SAMPLES = 10_000

#: Relative precision asked of the parameters when judging excitation against
#: the noise: an input direction counts when its eigenvalue exceeds
#: ``_PRECISION_FACTOR / (N * SNR)`` of the largest (clipped to [1e-12, 1e-2]).
_PRECISION_FACTOR = 100.0


def _positive_int_or_none(value: Any, name: str, high: int) -> int | None:
    return None if value is None else int_in_range(value, name, 1, high)


@dataclass(frozen=True, slots=True, eq=False, kw_only=True)
class IdentifyOptions:
    """What :func:`identify` fits and how it chooses.

    Parameters
    ----------
    method : {"arx", "subspace", "auto", "oe", "armax", "bj"}
        Model family; ``"auto"`` (default) fits both kinds of candidates and
        refines the best. ``"arx"`` keeps ARX least-squares models (no
        refinement); ``"subspace"`` starts only from subspace estimates;
        ``"oe"``, ``"armax"`` and ``"bj"`` fit that polynomial structure
        (:mod:`ident.estimate.polynomial`) with all its orders equal to the
        order tried and the estimated input delay.
    order : int, optional
        Fixed order; ``None`` (default) selects it. For subspace (and refined)
        models the number of states of the delay-free part; for ARX
        ``na = nb = order``. Always fitted, whatever the excitation (weak
        excitation is a warning).
    max_order : int
        Largest order tried when ``order`` is ``None`` (default 10).
    delay : int, optional
        Input delay in samples, the same for every input; ``None`` (default)
        tries the estimated delays, 0 and 1.
    weighting : {"n4sid", "moesp", "cva"} or None
        Subspace weighting; ``None`` (default) tries all three.
    horizon : int, optional
        Subspace past/future horizon; ``None`` (default) tries the default
        horizon for ``max_order`` and twice it.
    stabilize : bool
        Reflect unstable poles of direct subspace estimates into the unit circle
        (default ``False``). Refinement starts are reflected anyway.
    refinement : {"auto", "output_error", "innovations", "none"}
        What the refinement minimises (default ``"auto"``: the simulation
        error); ``"none"`` keeps the direct estimates.
    significance : float
        Level of the held-out test that decides whether a simpler candidate is
        as accurate as the best (default 0.05; see :mod:`ident.estimate.selection`).
    per_criterion : int
        In an ARX grid, how many structures each of AIC, BIC and FPE puts on
        the shortlist (default :data:`PER_CRITERION`, 3).
    refine_count : int
        How many of the best candidates (the best of each leading order) are
        refined (default 4), besides the best of every other input shift.
    screen_samples : int
        Largest number of estimation and of validation samples the candidates
        are fitted and scored on (default 10 000); longer logs are screened on
        evenly spread stretches, and the final model is polished and scored on
        all the data.
    preprocess : PreprocessOptions
        Operating point, detrending, decimation and hold-out.
    """

    method: Literal["arx", "subspace", "auto", "oe", "armax", "bj"] = "auto"
    order: int | None = None
    max_order: int = 10
    delay: int | None = None
    weighting: Literal["n4sid", "moesp", "cva"] | None = None
    horizon: int | None = None
    stabilize: bool = False
    refinement: Literal["auto", "output_error", "innovations", "none"] = "auto"
    significance: float = 0.05
    per_criterion: int = PER_CRITERION
    refine_count: int = 4
    screen_samples: int = 10_000
    preprocess: PreprocessOptions = field(default_factory=PreprocessOptions)

    def __post_init__(self) -> None:
        one_of(self.method, "method", METHODS)
        if self.weighting is not None:
            one_of(self.weighting, "weighting", WEIGHTINGS)
        one_of(self.refinement, "refinement", REFINEMENTS)
        object.__setattr__(self, "order", _positive_int_or_none(self.order, "order", MAX_ORDER))
        object.__setattr__(self, "max_order", int_in_range(self.max_order, "max_order", 1, MAX_ORDER))
        if self.delay is not None:
            object.__setattr__(self, "delay", int_in_range(self.delay, "delay", 0, 1000))
        object.__setattr__(self, "horizon", _positive_int_or_none(self.horizon, "horizon", 10_000))
        if not isinstance(self.stabilize, (bool, np.bool_)):
            raise OptionError(f"stabilize must be true or false; got {self.stabilize!r}")
        object.__setattr__(self, "stabilize", bool(self.stabilize))
        object.__setattr__(self, "significance", _probability(self.significance, "significance"))
        object.__setattr__(self, "per_criterion", int_in_range(self.per_criterion, "per_criterion", 1, 100))
        object.__setattr__(self, "refine_count", int_in_range(self.refine_count, "refine_count", 1, 40))
        object.__setattr__(self, "screen_samples", int_in_range(self.screen_samples, "screen_samples", 1000))
        if isinstance(self.preprocess, Mapping):
            object.__setattr__(self, "preprocess", PreprocessOptions(**self.preprocess))
        if not isinstance(self.preprocess, PreprocessOptions):
            raise OptionError(f"preprocess must be PreprocessOptions; got {type(self.preprocess).__name__}")

    @classmethod
    def from_mapping(cls, mapping: Mapping[str, Any], *, key_path: str = "") -> IdentifyOptions:
        """Build options from a mapping such as a parsed TOML table.

        A nested ``preprocess`` table becomes :class:`PreprocessOptions`.

        Raises
        ------
        PipelineError
            An unknown key, or a value that is not allowed.
        """
        if isinstance(mapping, Mapping) and "preprocess" in mapping:
            sub_path = f"{key_path}.preprocess" if key_path else "preprocess"
            mapping = dict(mapping)
            mapping["preprocess"] = PreprocessOptions.from_mapping(mapping["preprocess"], key_path=sub_path)
        return options_from_mapping(cls, mapping, key_path)

    def to_dict(self) -> dict[str, Any]:
        """Return the options as a plain nested dict (for provenance records)."""
        out = {f.name: getattr(self, f.name) for f in fields(self) if f.name != "preprocess"}
        out["preprocess"] = self.preprocess.to_dict()
        return out


def _probability(value: Any, name: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        v = math.nan
    if isinstance(value, bool) or not 0.0 < v < 1.0:
        raise OptionError(f"{name} must be a number in (0, 1); got {value!r}")
    return v


@dataclass(frozen=True, slots=True, eq=False)
class Identification:
    """The result of :func:`identify`.

    Attributes
    ----------
    model : StateSpaceModel
        The selected model, discrete time at the (decimated) sample time, with
        names, units, operating point, input delays (as states) and, when it
        has one, its one-step predictor (``noise_gain``).
    method : str
        Family of the selected model's start (``"arx"`` or ``"subspace"``).
    order : int
        Its order (``max(na, nb)`` for ARX, states of the delay-free part otherwise).
    candidates : tuple of Candidate
        Every candidate scored: direct estimates first, then refined ones;
        exactly one has ``selected=True``.
    validation_fit, estimation_fit : numpy.ndarray, shape (p,)
        Fit percent per output of ``model`` on all the held-out data and on
        all the estimation data (initial state fitted to a leading window that
        is not scored).
    prepared : PreparedData
        The data as prepared.
    arx : object or None
        The ``ArxResult`` when the selected model is a direct ARX estimate.
    refinement : RefineResult or None
        The final refinement (polish on all the estimation data) of the model.
    noise_model : str or None
        What the refinement minimised (``"output_error"`` or ``"innovations"``).
    covariance : ParameterCovariance or None
        Parameter covariance of ``model`` (``None`` when not available).
    pole_covariance : numpy.ndarray or None
        Covariance of ``(Re z, Im z)`` per pole of ``model`` (``model.poles()`` order).
    input_delay : tuple of int
        Pure input delays built into ``model`` (samples per input).
    selection : SelectionRecord or None
        Why the selected candidate won.
    singular_values, suggested_order, subspace_factorization
        Evidence of the first subspace projection (``None`` without subspace).
    delay : object or None
        The ``DelayEstimate`` (``None`` when the delay was given or not estimable).
    excitation : dict
        ``{"orders": per-input order of persistent excitation judged against the
        noise, "threshold": relative eigenvalue level used, "snr": signal-to-noise ratio}``.
    feedback : FeedbackEvidence or None
        The test for feedback from the outputs to the inputs (closed loop).
    warnings, notes : tuple of str
        Warnings raised (also issued as Python warnings) and remarks.
    options : IdentifyOptions
    best_by : dict
        Criterion -> index of the ARX candidate it prefers.
    arx_sweep : ArxSweep or None
        The whole ARX grid (automatic ARX search only).
    """

    model: StateSpaceModel
    method: str
    order: int
    candidates: tuple[Candidate, ...]
    validation_fit: np.ndarray
    estimation_fit: np.ndarray
    prepared: PreparedData
    arx: Any
    refinement: Any
    noise_model: str | None
    covariance: ParameterCovariance | None
    pole_covariance: np.ndarray | None
    input_delay: tuple[int, ...]
    selection: SelectionRecord | None
    singular_values: np.ndarray | None
    suggested_order: int | None
    subspace_factorization: dict[str, Any] | None
    delay: Any
    excitation: dict[str, Any]
    feedback: Any
    warnings: tuple[str, ...]
    notes: tuple[str, ...]
    options: IdentifyOptions
    best_by: dict[str, int] = field(default_factory=dict)
    arx_sweep: Any = None

    @property
    def selected(self) -> Candidate:
        """The selected candidate."""
        return next(c for c in self.candidates if c.selected)


# --------------------------------------------------------------------------- checks


def excitation_order(u: Sequence[np.ndarray], max_lags: int, rcond: float | None = None) -> np.ndarray:
    """Order of persistent excitation of each input column, up to ``max_lags``.

    Parameters
    ----------
    u : sequence of numpy.ndarray, each (N_k, m)
        Input deviations of each experiment.
    max_lags : int
        Largest order tested.
    rcond : float, optional
        Relative eigenvalue level (default that of
        :func:`ident.estimate.excitation.persistent_excitation_order`).

    Returns
    -------
    numpy.ndarray of int, shape (m,)
        Per input, the largest order found in any one experiment (at most
        200 000 samples of each are used).
    """
    from .excitation import DEFAULT_RCOND, persistent_excitation_order

    max_lags = int_in_range(max_lags, "max_lags", 1)
    level = DEFAULT_RCOND if rcond is None else float(rcond)
    m = u[0].shape[1]
    orders = np.zeros(m, dtype=int)
    for j in range(m):
        for part in u:
            col = part[:_CHECK_SAMPLES, j]
            if col.shape[0] >= 2:
                orders[j] = max(orders[j], persistent_excitation_order(col, max_order=max_lags, rcond=level))
    return orders


def _check_signals(prep: PreparedData) -> list[str]:
    """Errors for unusable signals; returns warning texts for doubtful ones."""
    u = np.vstack([e.u[:_CHECK_SAMPLES] for e in prep.estimation])
    y = np.vstack([e.y[:_CHECK_SAMPLES] for e in prep.estimation])
    _check_constant(prep, u, y)
    _check_copies(prep, u, y)
    return _check_collinear(prep, u) if prep.n_inputs > 1 else []


def _constant(std: float, level: float, deviations: np.ndarray) -> bool:
    """Tell whether a signal's variation is at round-off level: its std within 1e-12 of its own magnitude.

    Relative to the signal (its operating point or largest deviation), so a signal measured in
    small units (values near 1e-12) is not called constant for being small.
    """
    scale = max(abs(level), float(np.max(np.abs(deviations))) if deviations.size else 0.0)
    return not std > 1e-12 * scale


def _check_constant(prep: PreparedData, u: np.ndarray, y: np.ndarray) -> None:
    u_std, y_std = column_stds(u), column_stds(y)
    for j in range(prep.n_inputs):
        if _constant(u_std[j], float(prep.operating_point.inputs[j]), u[:, j]):
            raise IdentificationError(
                f"input {prep.input_names[j]!r} is constant over the estimation part; it excites nothing",
                hint="choose an input column that varies, or a longer estimation part",
            )
    for i in range(prep.n_outputs):
        if _constant(y_std[i], float(prep.operating_point.outputs[i]), y[:, i]):
            raise IdentificationError(
                f"output {prep.output_names[i]!r} is constant over the estimation part; there is nothing to model",
                hint="check the output column name",
            )


def _check_copies(prep: PreparedData, u: np.ndarray, y: np.ndarray) -> None:
    """Refuse an output identical to an input (the same column given twice, or a loop-back)."""
    for i in range(prep.n_outputs):
        for j in range(prep.n_inputs):
            raw_y = y[:, i] + prep.operating_point.outputs[i]
            raw_u = u[:, j] + prep.operating_point.inputs[j]
            scale = max(float(np.max(np.abs(raw_u))), 1e-300)
            if np.max(np.abs(raw_y - raw_u)) <= 1e-12 * scale:
                raise IdentificationError(
                    f"output {prep.output_names[i]!r} is identical to input {prep.input_names[j]!r}",
                    hint="an output must be a measured response, not a copy of an input",
                )


def _check_collinear(prep: PreparedData, u: np.ndarray) -> list[str]:
    out: list[str] = []
    corr = np.corrcoef(u, rowvar=False)
    m = prep.n_inputs
    for a in range(m):
        for b in range(a + 1, m):
            r = abs(corr[a, b])
            name_a, name_b = prep.input_names[a], prep.input_names[b]
            if r > _COLLINEAR_LIMIT:
                raise IdentificationError(
                    f"inputs {name_a!r} and {name_b!r} are collinear (correlation {corr[a, b]:+.9f}); "
                    "their effects cannot be separated",
                    hint="drop one of them, or use a log where they move independently",
                )
            if r > _NEAR_COLLINEAR_LIMIT:
                out.append(f"inputs {name_a!r} and {name_b!r} are nearly collinear (correlation "
                           f"{corr[a, b]:+.4f}); their separate effects are poorly determined")
    sv = np.linalg.svd(u / column_stds(u), compute_uv=False)
    if sv[-1] <= 1e-7 * sv[0]:
        raise IdentificationError(
            f"the inputs {', '.join(map(repr, prep.input_names))} are linearly dependent; "
            "their effects cannot be separated",
            hint="drop an input that is a combination of the others",
        )
    return out


def _samples_needed(order: int, m: int, p: int) -> int:
    """Estimation samples needed for order ``order`` (see :data:`SAMPLES_PER_PARAMETER`)."""
    params = max(order * (1 + m), order * (m + p) + m * p)
    return SAMPLES_PER_PARAMETER * params + 2 * order


# --------------------------------------------------------------------------- the job


def identify(
    segments: Any,
    sample_time: float,
    options: IdentifyOptions | None = None,
    *,
    input_names: Sequence[str] | None = None,
    output_names: Sequence[str] | None = None,
    input_units: Sequence[str] | None = None,
    output_units: Sequence[str] | None = None,
    segment_starts: Sequence[int] | None = None,
    progress: Callable[[str, float], None] | None = None,
    validation_segments: Any = None,
    validation_starts: Sequence[int] | None = None,
    references: Sequence[Any] | None = None,
    overwrite_data: bool = False,
    workers: int = 1,
) -> Identification:
    """Find the model the data support best: candidates, refinement, selection, validation.

    Parameters
    ----------
    segments : Experiment, (u, y) pair, or sequence of them
        Raw logged records (see :func:`ident.estimate.preprocess.prepare`).
    sample_time : float
        Sample time of the records in seconds.
    options : IdentifyOptions, optional
        Method, order and preprocessing; default ``IdentifyOptions()``.
    input_names, output_names, input_units, output_units : sequence of str, optional
        Signal names and units, carried into the model.
    segment_starts : sequence of int, optional
        First sample of each record in the original log (for the ranges).
    progress : callable, optional
        Called as ``progress(step, fraction_done)`` between steps.
    validation_segments : Experiment, (u, y) pair, or sequence of them, optional
        Separate validation records (another log): nothing is held out of
        ``segments``, and these are the held-out data, scored from an initial
        state fitted to a leading window that is not scored (see
        :func:`ident.estimate.preprocess.prepare`).
    validation_starts : sequence of int, optional
        First sample of each validation record in its own log.
    references : sequence of array_like, optional
        Per segment, the logged reference (set point) a controller acted on,
        shape ``(N_k, r)``: the plant is then fitted from the part of the input
        the reference explains (the two-stage method of
        :mod:`ident.estimate.closed_loop`), consistent under feedback. Not
        together with ``validation_segments`` (the reference is held out of
        the same log).
    overwrite_data : bool, default False
        Let the preprocessing subtract the operating point in place in the
        arrays of ``segments`` (writeable float64 ones, without detrending or
        decimation): they then hold the deviations, and the log is not copied
        (:func:`ident.estimate.preprocess.prepare`, ``overwrite``).
    workers : int, default 1
        Processes for the independent jobs of the search (the feedback test,
        the candidates, the screening refinements), forked from this one
        (:class:`ident.estimate.jobs.Jobs`; at most
        :data:`ident.estimate.jobs.MAX_WORKERS`; where processes cannot be
        forked the jobs run here). The result does not depend on it.
        :func:`ident.estimate.jobs.usable_cores` tells how many cores this
        process may use; keep 1 where runs are already spread over processes
        (a fleet).

    Returns
    -------
    Identification

    Raises
    ------
    IdentificationError
        The data cannot support the request: a constant input or output, an
        output identical to an input, collinear inputs, an order too high for
        the number of estimation samples, or every candidate diverging.
    OptionError
        Bad options or data shapes.

    Warns
    -----
    PoorExcitationWarning
        An input excites fewer orders than tried, judged against the noise level.
    IllConditionedWarning
        Nearly collinear inputs.
    UnstableModelWarning
        The selected model has a pole outside the unit circle.

    Notes
    -----
    See the module docstring for the stages and [1]_ for the methods.

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed., 1999.
    """
    options = IdentifyOptions() if options is None else options
    if not isinstance(options, IdentifyOptions):
        raise OptionError(f"options must be IdentifyOptions; got {type(options).__name__}")
    workers = int_in_range(workers, "workers", 1, MAX_WORKERS)
    report = progress if progress is not None else (lambda step, fraction: None)
    if options.preprocess.holdout <= 0 and validation_segments is None:
        raise OptionError("identify needs held-out validation data; holdout must be in (0, 1); got 0")
    if references is not None and validation_segments is not None:
        raise OptionError("references and separate validation records cannot be combined: the fit through the "
                          "reference holds out part of its own log; give one of them")
    names = {"input_names": input_names, "output_names": output_names, "input_units": input_units,
             "output_units": output_units, "segment_starts": segment_starts,
             "validation_data": validation_segments, "validation_starts": validation_starts,
             "overwrite": overwrite_data}
    with warnings.catch_warnings(record=True) as caught, one_blas_thread():
        warnings.simplefilter("always")
        try:
            result = _identify(segments, sample_time, options, names, report, references, workers)
        finally:
            pending = list(caught)
    texts: list[str] = []
    seen: set[tuple[type, str]] = set()
    for w in pending:  # re-issued outside the recording context, once each
        key = (w.category, str(w.message))
        if key in seen:
            continue
        seen.add(key)
        texts.append(str(w.message))
        warnings.warn(str(w.message), w.category, stacklevel=2)
    return replace(result, warnings=tuple(texts))


def _warn(text: str, category: type[Warning]) -> None:
    warnings.warn(text, category, stacklevel=3)


@dataclass(eq=False)
class _Search:
    """What the search has gathered so far (filled in step by step by :func:`_identify`)."""

    report: Callable[[str, float], None]
    raw: list[Fitted] = field(default_factory=list)
    refined: list[Fitted] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    delay: Any = None
    arx_sweep: Any = None
    subspace: dict = field(default_factory=dict)
    excitation: dict = field(default_factory=dict)
    noise_model: str | None = None
    forms: tuple[str, ...] = ()
    feedback: Any = None


@dataclass(frozen=True, slots=True, eq=False)
class _Run:
    """What every job of the search reads (inherited by forked workers, never pickled)."""

    prep: PreparedData
    fit_prep: PreparedData
    screen: Screen
    options: IdentifyOptions
    orders: list[int]
    delays: list[tuple[int, ...]]


def _identify(segments, sample_time, options: IdentifyOptions, names: dict, report,
              references: Sequence[Any] | None = None, workers: int = 1) -> Identification:
    """Run the stages of :func:`identify` in order (the caller records the warnings).

    The feedback test and the candidates, then the screening refinements, are
    independent jobs (:class:`ident.estimate.jobs.Jobs`): with several
    ``workers`` they run side by side, with the same results.
    """
    report("preparing data", 0.0)
    prep, refs = _prepare(segments, sample_time, options, names, references)
    search = _Search(report=report)
    report("estimating delays", 0.05)
    delays = _delay_vectors(prep, options, search)
    orders = _orders(prep, options, search)
    fit_prep = prep
    if refs is not None:  # the fit through the reference follows the feedback test
        search.feedback = _noted_feedback(_feedback(prep, refs, min(delays[0])), search)
        fit_prep = _through_reference(prep, refs, options, search, workers)
    _excitation_evidence(fit_prep, options, orders, search)
    refining = options.method in ("auto", "subspace") and options.refinement != "none"
    screen = Screen(fit_prep, options.screen_samples, max(orders) + max(max(v) for v in delays),
                    direct_in_sample=not refining)
    for shift in _input_shifts(delays):  # shifted copies made once, before workers inherit the screen
        screen.estimation_for(shift)
    with Jobs(workers, _Run(prep, fit_prep, screen, options, orders, delays)) as jobs:
        # submitted longest first (the workers take them in this order), collected in the order of the search
        subspace = _submit_subspace(jobs, options, orders, delays, prep.n_inputs, prep.n_outputs) \
            if options.method in ("subspace", "auto") else None
        arx = jobs.submit(_arx_job) if options.method in ("arx", "auto") else None
        feedback = jobs.submit(_feedback_job, min(delays[0])) if refs is None else None
        if options.method in POLYNOMIAL_STRUCTURES:
            report("polynomial candidates", 0.1)
            search.raw.extend(polynomial_candidates(fit_prep, screen, orders, delays[0], options.method))
        if feedback is not None:
            search.feedback = _noted_feedback(feedback.result(), search)
        if arx is not None:
            report("ARX candidates", 0.1)
            found, search.arx_sweep = arx.result()
            search.raw.extend(found)
        if subspace is not None:
            report("subspace candidates", 0.3)
            _add_subspace(subspace, search)
        pool = search.raw
        if refining:
            search.forms = _refinement_forms(options, search, refs is not None)
            _refine_best(options, screen, search, jobs)
            if options.order is None:
                _reduce_best(options, screen, search)
            pool = search.refined
    report("selecting", 0.85)
    pool, record = _select_form(pool, screen, options, search)
    return _assemble(prep, options, search, pool, record, screen)


def _input_shifts(delays: Sequence[tuple[int, ...]]) -> list[tuple[int, ...]]:
    """Input shifts of the candidates: ``nk - 1`` of every delay vector (ARX) and of no delay."""
    shifts = [tuple(max(v - 1, 0) for v in d) for d in delays]
    return list(dict.fromkeys([*shifts, (0,) * len(delays[0])]))


def _feedback_job(run: _Run, input_delay: int) -> Any:
    return _feedback(run.prep, None, input_delay)


def _arx_job(run: _Run) -> tuple[list[Fitted], Any]:
    return arx_candidates(run.fit_prep, run.screen, run.orders, run.delays,
                          per_criterion=run.options.per_criterion, fixed_order=run.options.order)


def _subspace_job(run: _Run, shift: tuple[int, ...], horizon: int | None) -> tuple[list[Fitted], dict]:
    options = run.options
    weightings = [options.weighting] if options.weighting is not None else list(WEIGHTINGS)
    return subspace_group(run.fit_prep, run.screen, run.orders, shift, horizon, weightings=weightings,
                          stabilize=options.stabilize, feedthrough=(True,) * run.fit_prep.n_inputs)


def _select_form(pool: list[Fitted], screen: Screen, options: IdentifyOptions, search: _Search):
    """Select within each refinement form; between forms, the noise model wins unless clearly worse.

    Losses of output-error and innovations models are not comparable, so each form
    is selected on its own; the innovations model (consistent under feedback) is
    kept unless the best output-error model simulates the held-out data
    significantly better than the best innovations model
    (:func:`ident.estimate.selection.equal_accuracy_pvalue`); the form's own
    selection then gives the model.
    """
    from .selection import equal_accuracy_pvalue

    forms = list(dict.fromkeys(f.candidate.noise_model for f in pool))
    picks = {}
    for form in forms:
        members = [f for f in pool if f.candidate.noise_model == form]
        picks[form] = (members, select([_contender(f) for f in members], screen.output_variance,
                                       significance=options.significance))
    if len(forms) == 1:
        return picks[forms[0]]
    (inn, rec_i), (oe, rec_o) = picks["innovations"], picks["output_error"]
    best_i, best_o = inn[rec_i.best_fit], oe[rec_o.best_fit]  # each form at its best
    scales = np.where(screen.output_variance > 0, screen.output_variance, 1.0)
    p = equal_accuracy_pvalue(best_i.score.errors, best_o.score.errors, scales) if best_i.score.errors else 0.0
    if p < options.significance:
        search.notes.append(
            "feedback was detected, but the output-error model simulates the held-out data significantly better "
            f"than the model with a noise model (one-sided test, p = {p:.2g}); it is kept, and its estimate may "
            "carry a bias from the feedback")
        return oe, rec_o
    search.notes.append("refined in innovations form (prediction error with a noise model), consistent under "
                        "feedback; the output-error refinement does not simulate the held-out data significantly "
                        f"better (p = {p:.2g})")
    return inn, rec_i


def _prepare(segments, sample_time, options: IdentifyOptions, names: dict, references):
    """Prepare the data (references travel as extra inputs through the same preprocessing, then split off)."""
    if references is None:
        prep = prepare(segments, sample_time, options.preprocess, **names)
        refs = None
    else:
        prep, refs = _prepare_with_references(segments, sample_time, options, names, references)
    if not prep.validation:
        raise OptionError("the hold-out left no validation samples; raise holdout")
    for text in _check_signals(prep):
        _warn(text, IllConditionedWarning)
    return prep, refs


def _prepare_with_references(segments, sample_time, options, names, references):
    from .preprocess import as_records

    records = as_records(segments)
    if len(references) != len(records):
        raise OptionError(f"references must hold one array per segment ({len(records)}); got {len(references)}")
    joined, m = [], records[0][0].shape[1]
    for (u, y), r in zip(records, references, strict=True):
        r = np.asarray(r, dtype=float).reshape(u.shape[0], -1)
        joined.append((np.hstack([u, r]), y))
    q = joined[0][0].shape[1] - m
    extra = dict(names)
    for key, prefix in (("input_names", "r"), ("input_units", "")):
        if extra.get(key) is not None:
            extra[key] = tuple(extra[key]) + tuple(f"{prefix}{k + 1}" if prefix else "" for k in range(q))
    both = prepare(joined, sample_time, options.preprocess, **extra)
    return _split_references(both, m), tuple(e.u[:, m:] for e in both.estimation)


def _split_references(prep: PreparedData, m: int) -> PreparedData:
    """Return the prepared data without the reference columns appended to the inputs."""
    from ..lti.models import OperatingPoint

    def cut(parts):
        return tuple(Experiment(e.u[:, :m], e.y) for e in parts)

    op = OperatingPoint(prep.operating_point.inputs[:m], prep.operating_point.outputs)
    trends = None if prep.trends is None else np.concatenate(
        [prep.trends[:, :, :m], prep.trends[:, :, prep.trends.shape[2] - prep.n_outputs:]], axis=2)
    return replace(prep, estimation=cut(prep.estimation), validation=cut(prep.validation), operating_point=op,
                   trends=trends, input_names=prep.input_names[:m], input_units=prep.input_units[:m])


def _feedback(prep: PreparedData, refs, input_delay: int) -> Any:
    """Feedback evidence on the estimation data (see :mod:`ident.estimate.closed_loop`); ``None`` when untestable."""
    from .closed_loop import feedback_evidence

    try:
        return feedback_evidence(prep.estimation, references=refs, input_delay=input_delay)
    except (OptionError, np.linalg.LinAlgError):
        return None


def _noted_feedback(evidence: Any, search: _Search) -> Any:
    """Return ``evidence``, with a note when the log looks closed-loop."""
    if evidence is not None and evidence.closed_loop:
        search.notes.append(
            f"the log looks closed-loop: past outputs predict the input (F = {evidence.f_statistic:.3g}, "
            f"p = {evidence.p_value:.2g}); an output-error fit would be biased by the feedback")
    return evidence


def _through_reference(prep: PreparedData, refs, options: IdentifyOptions, search: _Search,
                       workers: int = 1) -> PreparedData:
    """Stage 1 of the two-stage method: estimation inputs replaced by their part the reference explains.

    The input sensitivity ``S`` from reference to input is itself identified by
    this job (output error, consistent because the reference does not see the
    loop's disturbances) and simulated from rest on the reference.
    """
    from ..lti.simulate import simulate
    from .closed_loop import explained_share

    sub_options = replace(options, method="auto", order=None, refinement="output_error", delay=None,
                          max_order=min(options.max_order + 2, MAX_ORDER))
    records = [(r, e.u) for e, r in zip(prep.estimation, refs, strict=True)]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sens = identify(records, prep.sample_time, sub_options, workers=workers)
    op = sens.model.operating_point
    parts = []
    for (r, u), e in zip(records, prep.estimation, strict=True):
        u_r = simulate(sens.model, r - op.inputs[None, :]) + op.outputs[None, :]
        if explained_share(u, u_r) < 0.05:
            raise IdentificationError(
                f"the reference explains only {100 * explained_share(u, u_r):.1f} % of the input's variation: "
                "it cannot stand in for the input (is it the controller's set point?)",
                hint="check the --reference column, or fit without it (prediction error with a noise model)",
            )
        parts.append(Experiment(u_r, e.y))
    search.notes.append(
        "two-stage fit through the reference: the plant is estimated from the part of the input the "
        f"reference explains (an order-{sens.order} output-error model from reference to input, held-out fit "
        f"{float(np.mean(sens.validation_fit)):.1f} %), free of the loop's disturbances; held-out scores use "
        "the measured input")
    return replace(prep, estimation=tuple(parts))


def _refinement_forms(options: IdentifyOptions, search: _Search, through_reference: bool) -> tuple[str, ...]:
    """Decide what the refinement minimises: as asked, or by the evidence of feedback (``auto``).

    With feedback (and no reference to fit through) both forms are refined and
    :func:`_select_form` decides, preferring the noise model.
    """
    if options.refinement != "auto":
        return (options.refinement,)
    if search.feedback is not None and search.feedback.closed_loop and not through_reference:
        return ("innovations", "output_error")
    return ("output_error",)


# --------------------------------------------------------------------------- evidence


def _orders(prep: PreparedData, options: IdentifyOptions, search: _Search) -> list[int]:
    """Orders to try: the fixed order (if the data length allows it), else ``1 ..`` the largest it allows."""
    m, p = prep.n_inputs, prep.n_outputs
    n_est = prep.n_estimation_samples
    if options.order is not None:
        needed = _samples_needed(options.order, m, p)
        if n_est < needed:
            raise IdentificationError(
                f"order {options.order} is too high for {n_est} estimation samples (needs at least {needed})",
                hint="lower --order or --holdout, or use a longer log",
            )
        return [options.order]
    cap = options.max_order
    while cap >= 1 and n_est < _samples_needed(cap, m, p):
        cap -= 1
    if cap < 1:
        raise IdentificationError(
            f"{n_est} estimation samples are too few for even a first-order model "
            f"(needs at least {_samples_needed(1, m, p)})",
            hint="use a longer log or a smaller --holdout",
        )
    if cap < options.max_order:
        search.notes.append(f"orders above {cap} were not tried: {n_est} estimation samples support "
                            f"at most order {cap} ({SAMPLES_PER_PARAMETER} samples per parameter)")
    return list(range(1, cap + 1))


def _delay_vectors(prep: PreparedData, options: IdentifyOptions, search: _Search) -> list[tuple[int, ...]]:
    """Delay vectors to try: the given delay, else the estimate first, then 0, 1 and the estimate +-1."""
    m = prep.n_inputs
    if options.delay is not None:
        shortest = min(e.n_samples for e in (*prep.estimation, *prep.validation))
        if options.delay >= shortest // 4:
            raise IdentificationError(
                f"a delay of {options.delay} samples is too long for this log: its shortest estimation or "
                f"held-out part has {shortest} samples, and the delay's states need far fewer than that to be "
                "estimated and checked",
                hint="check the delay (in samples, not seconds), or use a longer log",
            )
        search.notes.append(f"input delay fixed at {options.delay} samples")
        return [(options.delay,) * m]
    from .delay import estimate_delay

    try:
        search.delay = estimate_delay(prep.estimation, max_delay=_MAX_DELAY)
    except (IdentificationError, OptionError) as exc:
        _warn(f"input delays could not be estimated ({exc}); delays of 0 and 1 sample are tried",
              PoorExcitationWarning)
        return [(1,) * m, (0,) * m]
    d = np.asarray(search.delay.delays, dtype=int).reshape(prep.n_outputs, m).min(axis=0)
    vectors = [tuple(int(v) for v in d), (0,) * m, (1,) * m,
               tuple(int(max(v - 1, 0)) for v in d), tuple(int(v + 1) for v in d)]
    return list(dict.fromkeys(vectors))


def _excitation_evidence(prep: PreparedData, options: IdentifyOptions, orders: Sequence[int],
                         search: _Search) -> None:
    """Judge persistent excitation against the noise level: a warning, never a cap."""
    snr = _signal_to_noise(search.delay)
    N = prep.n_estimation_samples
    level = float(np.clip(_PRECISION_FACTOR / (N * snr), 1e-12, 1e-2))
    top = max(orders)
    pe = excitation_order([e.u for e in prep.estimation], max(2 * top, 2), rcond=level)
    search.excitation = {"orders": [int(v) for v in pe], "threshold": level, "snr": snr}
    weakest = int(np.argmin(pe))
    if pe[weakest] < 2 * top:
        what = f"an order-{top} model" if options.order is not None else f"orders above {max(pe[weakest] // 2, 1)}"
        _warn(f"input {prep.input_names[weakest]!r} is persistently exciting of order {int(pe[weakest])} only "
              f"at this noise level; {what} may be poorly determined (every order was still tried)",
              PoorExcitationWarning)


def _signal_to_noise(delay: Any) -> float:
    """Output variance over the residual variance of the high-order ARX model of the delay estimate."""
    if delay is None or getattr(delay, "residual_variance", None) is None:
        return 100.0
    ratio = np.asarray(delay.output_variance, dtype=float) / np.maximum(np.asarray(delay.residual_variance), 1e-300)
    return float(max(np.min(ratio), 1.0))


# --------------------------------------------------------------------------- candidates


def _submit_subspace(jobs: Jobs, options: IdentifyOptions, orders, delays, m: int, p: int) -> list:
    """Submit one subspace job per input shift (of the estimated delay, and of none) and horizon.

    The jobs of the longer horizon (the larger projections) are submitted
    first; the list returned is in the order of the search (shift, then horizon).
    """
    from .subspace import default_horizon

    shifts = list(dict.fromkeys([tuple(max(v - 1, 0) for v in delays[0]), (0,) * m]))
    h0 = default_horizon(max(orders), p)
    horizons = list(dict.fromkeys([options.horizon] if options.horizon is not None else [None, 2 * h0]))
    groups = [(shift, h) for shift in shifts for h in horizons]
    longest_first = sorted(groups, key=lambda g: -(h0 if g[1] is None else g[1]))
    submitted = {g: jobs.submit(_subspace_job, *g) for g in longest_first}
    return [submitted[g] for g in groups]


def _add_subspace(submitted: Sequence[Any], search: _Search) -> None:
    """Collect the subspace jobs' candidates (and the first projection's evidence)."""
    for job in submitted:
        found, evidence = job.result()
        search.raw.extend(found)
        search.subspace = search.subspace or evidence
    if not any(f.candidate.method == "subspace" for f in search.raw):
        raise IdentificationError("no subspace candidate could be fitted (the log is too short for the horizon)",
                                  hint="lower --max-order or --horizon, or use a longer log")


def _refinement_starts(raw: Sequence[Fitted], count: int, output_variance: np.ndarray,
                       significance: float) -> list[Fitted]:
    """Pick the starts to refine: the best direct estimate, the simplest ones as accurate, the best of every shift.

    Per (order, shift) class the best-scoring estimate stands for the class.
    Besides the best class, the classes whose estimate is statistically as
    accurate on the held-out data (:func:`ident.estimate.selection.as_accurate_pvalue`)
    are refined simplest first, then the next best by fit, ``count`` in all;
    finally the best class of every input shift not yet represented.
    """
    from .selection import as_accurate_pvalue

    ranked = sorted((f for f in raw if np.isfinite(f.candidate.mean_fit)), key=lambda f: -f.candidate.mean_fit)
    if not ranked:
        return []
    best_per: dict[tuple, Fitted] = {}
    for f in ranked:
        best_per.setdefault((f.core.n_states, f.shift), f)
    classes = list(best_per.values())
    best = classes[0]
    scales = np.where(output_variance > 0, output_variance, 1.0)
    tied = [f for f in classes[1:] if f.score.errors and
            as_accurate_pvalue(f.score.errors, best.score.errors, scales) > significance]
    tied.sort(key=lambda f: (f.candidate.n_states, -f.candidate.mean_fit))
    starts = [best] + tied[: count - 1]
    starts += [f for f in classes if f not in starts][: max(count - len(starts), 0)]
    for shift in dict.fromkeys(f.shift for f in ranked):
        if not any(s.shift == shift for s in starts):
            starts.append(next(f for f in classes if f.shift == shift))
    return starts


def _refine_best(options: IdentifyOptions, screen: Screen, search: _Search, jobs: Jobs) -> None:
    """Refine the best few candidates on the screening data and score them again (one job each)."""
    starts = _refinement_starts(search.raw, options.refine_count, screen.output_variance, options.significance)
    submitted = [(start, jobs.submit(_refine_job, start, form)) for form in search.forms for start in starts]
    for k, (start, job) in enumerate(submitted):
        search.report(f"refining candidate {k + 1} of {len(submitted)}", 0.4 + 0.4 * k / max(len(submitted), 1))
        refined = job.result()
        if refined is None:
            continue
        origin = next(i for i, f in enumerate(search.raw) if f.candidate is start.candidate)
        refined.candidate = replace(refined.candidate,
                                    structure={**refined.candidate.structure, "refined_from": origin})
        search.refined.append(refined)
    if not search.refined:
        raise IdentificationError("no candidate could be refined", hint="try --refine none, or check the data")


def _refine_job(run: _Run, start: Fitted, form: str) -> Fitted | None:
    return _screening_refinement(start, form, run.screen)


def _screening_refinement(start: Fitted, form: str, screen: Screen, extra: dict | None = None) -> Fitted | None:
    """``start`` refined in ``form`` on the screening data and scored (``None`` when it cannot be refined).

    ``extra`` joins the candidate's structure record.
    """
    from .refine import RefineOptions

    opts = RefineOptions(noise_model=form, feedthrough=start.feedthrough,
                         working_samples=_SCREEN_WORKING_SAMPLES, polish_iterations=0, covariance=False,
                         max_iterations=_SCREEN_ITERATIONS, step_tolerance=_SCREEN_STEP_TOLERANCE)
    refined = _refine_one(start, screen.estimation_for(start.shift), opts)
    return None if refined is None else _refined(start, *refined, form, extra or {}, screen)


def _refined(start: Fitted, res, caught: list, form: str, extra: dict, screen: Screen) -> Fitted:
    """Build the scored candidate of a refinement result ``res`` begun from ``start``."""
    core = res.model
    m, p = core.n_inputs, core.n_outputs
    cand = replace(start.candidate, stage="refined", noise_model=form, order=core.n_states,
                   n_states=core.n_states + sum(start.shift),
                   structure={**start.candidate.structure, "feedthrough": list(start.feedthrough), **extra},
                   n_parameters=state_space_parameters(core.n_states, m, p, start.feedthrough,
                                                       form == "innovations"))
    fitted = Fitted(cand, core, start.shift, start.feedthrough, res, caught)
    screen.score(fitted)
    fitted.estimation_loss = screen.normalised_loss(res.error_variance)  # with its fitted states and offsets
    fitted.candidate = replace(cand, validation_fit=fitted.score.fit, mean_fit=fitted.score.mean_fit)
    return fitted


def _reduce_best(options: IdentifyOptions, screen: Screen, search: _Search) -> None:
    """Try lower orders below the chosen refined model of each form: balanced truncation, then refinement.

    Backward elimination on the held-out data: from the refined model the
    selection rule would choose, one state is removed by balanced truncation
    [1]_ and the truncated model is refined again; this goes on while the
    reduced model is statistically as accurate as the best
    (:func:`ident.estimate.selection.as_accurate_pvalue`), at most
    ``refine_count`` times per form. Subspace starts of a low order can
    be poor where a reduced refined model is not, and a spurious state (a
    noise-fitting pole) is removed this way.

    References
    ----------
    .. [1] B. C. Moore, "Principal component analysis in linear systems:
       controllability, observability, and model reduction", IEEE Trans.
       Automatic Control 26(1), 17-32, 1981.
    """
    from .selection import as_accurate_pvalue

    scales = np.where(screen.output_variance > 0, screen.output_variance, 1.0)
    for form in search.forms:
        members = [f for f in search.refined if f.candidate.noise_model == form and f.score.errors]
        if not members:
            continue
        record = select([_contender(f) for f in members], screen.output_variance, significance=options.significance)
        best, parent = members[record.best_fit], members[record.chosen]
        for _ in range(options.refine_count):
            start = _truncated(parent, form == "innovations")
            if start is None:
                break
            search.report(f"reducing to {start.core.n_states} states", 0.8)
            index = len(search.raw) + search.refined.index(parent)
            reduced = _screening_refinement(start, form, screen,
                                            {"refined_from": index, "reduced_from": parent.core.n_states})
            if reduced is None:
                break
            search.refined.append(reduced)
            if (not reduced.score.errors
                    or as_accurate_pvalue(reduced.score.errors, best.score.errors, scales) < options.significance):
                break
            parent = reduced


def _truncated(parent: Fitted, innovations: bool) -> Fitted | None:
    """``parent`` with one state fewer by balanced truncation (``None`` when it cannot be balanced).

    An innovations model is balanced with ``K`` as extra inputs, so the
    reduced noise gain comes from the same projection.
    """
    from ..errors import ModelError
    from ..lti.truncation import balanced_truncation

    core = parent.core
    n, m = core.n_states, core.n_inputs
    if n < 2:
        return None
    K = core.noise_gain if innovations and core.noise_gain is not None else np.zeros((n, 0))
    joined = StateSpaceModel(core.A, np.hstack([core.B, K]), core.C,
                             np.hstack([core.D, np.zeros((core.n_outputs, K.shape[1]))]), core.sample_time)
    try:
        small = balanced_truncation(joined, n - 1)
    except (ModelError, np.linalg.LinAlgError):
        return None
    model = StateSpaceModel(small.A, small.B[:, :m], small.C, core.D, core.sample_time,
                            noise_gain=small.B[:, m:] if K.shape[1] else None)
    return Fitted(parent.candidate, model, parent.shift, parent.feedthrough, None, [])


def _refine_one(start: Fitted, data, opts) -> tuple[Any, list] | None:
    """Refine one start (an innovations start with an unstable predictor is first refined by output error)."""
    from .refine import refine_state_space

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            if opts.noise_model == "innovations" and not _predictor_stable(start.core):
                first = refine_state_space(start.core, data, replace(opts, noise_model="output_error"))
                return refine_state_space(first.model, data, opts), list(caught)
            return refine_state_space(start.core, data, opts), list(caught)
        except (IdentificationError, OptionError, np.linalg.LinAlgError):
            return None


def _predictor_stable(model: StateSpaceModel) -> bool:
    K = model.noise_gain
    if K is None or model.n_states == 0:
        return False
    return float(np.max(np.abs(np.linalg.eigvals(model.A - K @ model.C)))) < 1.0


#: A pole this close to the unit circle (or outside it) counts as unstable in the selection: a
#: refinement that ends on its stability constraint has not estimated that pole, it was stopped
#: there, so such a model must be significantly better than every model inside to be chosen.
_MARGINAL_RADIUS = 1.0 - 1e-6


def _contender(f: Fitted) -> Contender:
    score = f.score
    return Contender(n_states=f.candidate.n_states, n_parameters=f.candidate.n_parameters,
                     held_out_errors=score.errors, held_out_fit=score.mean_fit,
                     estimation_loss=f.estimation_loss,
                     estimation_samples=sum(len(e) for e in f.estimation_errors),
                     estimation_errors=f.estimation_errors,
                     unstable=bool(f.core.n_states and np.max(np.abs(f.core.poles())) >= _MARGINAL_RADIUS),
                     redundant=_has_redundant_mode(f.core))


def _has_redundant_mode(model: StateSpaceModel) -> bool:
    """Tell whether a mode of ``model`` nearly cancels a zero (the ``near_cancellation`` flag)."""
    if model.n_states == 0:
        return False
    from ..assess.modes import mode_table

    try:
        table = mode_table(model)
    except (OptionError, IdentificationError, np.linalg.LinAlgError, ValueError):
        return False
    return any("near_cancellation" in mode.flags for mode in table.modes)


# --------------------------------------------------------------------------- the result


def _final_model(prep: PreparedData, options: IdentifyOptions, search: _Search, chosen: Fitted, screen: Screen,
                 *, steps: bool = True):
    """Polish the chosen model on all estimation data, give it a predictor; return (model, refinement, covariance).

    ``steps=False`` keeps the refined model as it is (initial states, noise
    gain and covariance on all the estimation data only).
    """
    from .refine import RefineOptions, fit_noise_gain, refine_state_space

    if chosen.candidate.method in POLYNOMIAL_STRUCTURES:  # refitted on all the estimation data
        from .polynomial import fit_polynomial

        search.report("fitting on all estimation data", 0.9)
        res = fit_polynomial(screen.estimation_for(chosen.shift, full=True), prep.sample_time,
                             chosen.result.options, input_names=prep.input_names, output_names=prep.output_names)
        return res.model, None, res.covariance
    if chosen.candidate.stage != "refined":
        if chosen.candidate.method == "arx":  # the ARX model in its own coordinates, with its covariance
            return chosen.result.model, None, _arx_covariance(chosen)
        return chosen.model, None, None
    data = screen.estimation_for(chosen.shift, full=True)
    search.noise_model = chosen.candidate.noise_model
    opts = RefineOptions(noise_model=search.noise_model, feedthrough=chosen.feedthrough, polish_iterations=int(steps),
                         **({} if steps else {"max_iterations": 0}))
    search.report("polishing on all estimation data", 0.9)
    res = refine_state_space(chosen.core, data, opts)
    core, cov = res.model, res.covariance
    if search.noise_model == "output_error":
        gain = fit_noise_gain(core, data, RefineOptions(working_samples=options.screen_samples,
                                                        polish_iterations=0, covariance=False))
        core = gain.model
    model = with_input_delays(core, chosen.shift)
    if cov is not None:
        cov = delayed_covariance(res.model, cov, chosen.shift)
        if cov.n_states != model.n_states:
            cov = None
    return model, res, cov


def _final_choice(prep: PreparedData, options: IdentifyOptions, search: _Search, pool: Sequence[Fitted],
                  record: SelectionRecord, screen: Screen):
    """Polish the chosen candidate, unless the polish drives a pole onto the unit circle.

    Candidates are screened with a few refinement steps on part of the data;
    the polish on all the estimation data can carry a mode the screened model
    held inside the unit circle onto the stability constraint (typically a
    lightly damped mode fitted to a disturbance). That model is not the one the
    held-out test judged, and a pole stopped on the constraint is not an
    estimate, so the screened model is kept as it is (its covariance computed
    on all the estimation data). Returns ``(record, (model, refinement, covariance))``.
    """
    chosen = pool[record.chosen]
    final = _final_model(prep, options, search, chosen, screen)
    if _pushed_onto_circle(chosen, final[0]):
        search.notes.append(
            "refining the chosen model further on all the estimation data drove a pole onto the unit circle; "
            "the model is kept as the held-out test judged it")
        final = _final_model(prep, options, search, chosen, screen, steps=False)
    return record, final


def _pushed_onto_circle(chosen: Fitted, model: StateSpaceModel) -> bool:
    """Tell whether ``model`` has a pole on or outside the unit circle that ``chosen`` had inside."""
    def radius(m: StateSpaceModel) -> float:
        return float(np.max(np.abs(m.poles()))) if m.n_states else 0.0

    return radius(chosen.core) < _MARGINAL_RADIUS <= radius(model)


def _arx_covariance(chosen: Fitted) -> ParameterCovariance | None:
    from .uncertainty import arx_parameter_covariance

    try:
        return arx_parameter_covariance(chosen.result)
    except OptionError:
        return None


def _assemble(prep: PreparedData, options: IdentifyOptions, search: _Search, pool: Sequence[Fitted],
              record: SelectionRecord, screen: Screen) -> Identification:
    """Build the final model and the result record."""
    record, (model, refinement, cov) = _final_choice(prep, options, search, pool, record, screen)
    chosen = pool[record.chosen]
    if chosen.candidate.stage == "estimated":
        for w in chosen.caught:  # only the selected candidate's own warnings matter
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    model = model.with_changes(inputs=prep.input_names, outputs=prep.output_names, input_units=prep.input_units,
                               output_units=prep.output_units, operating_point=prep.operating_point)
    raw_arx = chosen.candidate.method == "arx" and chosen.candidate.stage == "estimated"
    window = score_window(list(prep.validation) + list(prep.estimation), model.n_states)
    warm = warmups_for(prep.validation, prep.estimation, prep.validation_ranges, prep.estimation_ranges)
    validation = held_out_score(model, prep.validation, window, warmups=warm).fit
    estimation = held_out_score(model, prep.estimation, IN_SAMPLE_WINDOW, in_sample=True).fit
    _warn_if_unstable(model, chosen)
    everything = [*search.raw, *search.refined]
    index = everything.index(chosen)
    candidates = tuple(replace(f.candidate, selected=(k == index)) for k, f in enumerate(everything))
    search.notes.append("selected: " + record.reason)
    search.report("done", 1.0)
    pole_cov = pole_covariance(model, cov) if cov is not None else None
    return Identification(
        model=model, method=chosen.candidate.method, order=chosen.candidate.order, candidates=candidates,
        validation_fit=validation, estimation_fit=estimation, prepared=prep,
        arx=chosen.result if raw_arx else None,
        refinement=refinement, noise_model=search.noise_model if refinement is not None else None,
        covariance=cov, pole_covariance=pole_cov, input_delay=(0,) * prep.n_inputs if raw_arx else chosen.shift,
        selection=record, singular_values=search.subspace.get("singular_values"),
        suggested_order=search.subspace.get("suggested_order"),
        subspace_factorization=search.subspace.get("factorization"), delay=search.delay,
        excitation=search.excitation, feedback=search.feedback, warnings=(), notes=tuple(search.notes),
        options=options,
        best_by=_best_by(candidates), arx_sweep=search.arx_sweep,
    )


def _best_by(candidates: Sequence[Candidate]) -> dict[str, int]:
    """Criterion -> index of the ARX candidate it prefers."""
    from .order import CRITERIA, best_index

    arx = [k for k, c in enumerate(candidates) if c.criteria is not None]
    if not arx:
        return {}
    counts = [candidates[k].n_parameters for k in arx]
    return {name: arx[best_index([candidates[k].criteria.get(name) for k in arx], counts)] for name in CRITERIA}


def _warn_if_unstable(model: StateSpaceModel, chosen: Fitted) -> None:
    """Warn about unstable poles of the selected model unless its estimator already did."""
    poles = model.poles()
    unstable = poles[np.abs(poles) > 1.0 + 1e-9]
    already = chosen.candidate.stage == "estimated" and any(
        issubclass(w.category, UnstableModelWarning) for w in chosen.caught)
    if unstable.size and not already:
        _warn(f"the selected model has {unstable.size} unstable pole(s): "
              + ", ".join(f"{z:.4g}" for z in unstable) + "; the held-out data support them over every stable "
              "candidate", UnstableModelWarning)
