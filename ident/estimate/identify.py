"""The top-level identification job: candidates, selection, validation.

:func:`identify` prepares the data (:mod:`ident.estimate.preprocess`), checks that it can
support the models asked for, fits a family of candidate models and picks one
by its fit on the held-out validation data:

- **ARX**: a grid of structures ``na`` and ``nb`` in ``1 .. max_order`` with
  the input delays estimated from the data (:func:`ident.estimate.delay.estimate_delay`)
  and their neighbours ``nk - 1 .. nk + 1`` (or the given delay), one MISO
  ARX model per output, every structure ranked by AIC, BIC/MDL and FPE from
  one accumulated R factor; the best :data:`PER_CRITERION` structures by each
  criterion become candidates (:func:`ident.estimate.arx.grid_search_arx`). With a
  fixed order the one structure ``na = nb = order`` is the candidate;
- **subspace** candidates of ``n = 1 .. max_order`` states, all from one
  projection of the data (:func:`ident.estimate.subspace.project` then
  :func:`ident.estimate.subspace.model_of_order`).

Every candidate is simulated on the validation data from an initial state
fitted to its first samples (ARX candidates by their difference equations,
the others by :func:`ident.lti.simulate.simulate`), and scored by its fit percent
(:func:`ident.assess.diagnostics.fit_percent`), averaged over the outputs. The
candidate with the best mean fit wins; candidates within
:data:`TIE_TOLERANCE` percentage points of the best count as tied, and among
tied candidates the simpler one wins (fewer states, then fewer parameters).

The model returned is the selected candidate as estimated on the estimation
part; it is *not* re-estimated on all the data, so the validation figures it
carries are figures of exactly this model.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field, fields, replace
from typing import Any, Literal

import numpy as np

from .._validate import int_in_range, one_of, options_from_mapping
from ..assess.diagnostics import fit_percent
from ..choices import METHODS, WEIGHTINGS  # METHODS: "auto" tries both and keeps the best
from ..errors import (
    IdentificationError,
    IllConditionedWarning,
    OptionError,
    PoorExcitationWarning,
    UnstableModelWarning,
)
from ..lti._linalg import column_stds
from ..lti.models import StateSpaceModel
from ..lti.simulate import estimate_initial_state, simulate
from .data import Experiment
from .order import Criteria
from .preprocess import PreparedData, PreprocessOptions, prepare

__all__ = [
    "METHODS",
    "TIE_TOLERANCE",
    "PER_CRITERION",
    "IdentifyOptions",
    "Candidate",
    "Identification",
    "identify",
    "select_candidate",
    "excitation_order",
]

#: Two candidates whose mean validation fits differ by at most this many
#: percentage points are tied; the simpler one is chosen.
TIE_TOLERANCE = 0.5

#: Delay shifts tried around the estimated delays in an automatic ARX search
#: (all inputs shifted together; negative delays are clipped to 0).
_DELAY_SHIFTS = (-1, 0, 1)

#: Default of :attr:`IdentifyOptions.per_criterion`.
PER_CRITERION = 3

#: Largest order accepted for ``order`` and ``max_order``.
MAX_ORDER = 40

#: Estimation samples needed per estimated parameter (a rule of thumb: below
#: about ten samples per parameter the variance of the estimate dominates).
SAMPLES_PER_PARAMETER = 10

#: At most this many samples per experiment are used for the excitation and
#: collinearity checks (the checks are about the signal's content, not its length).
_CHECK_SAMPLES = 200_000

#: Two inputs whose correlation exceeds this in magnitude are collinear (error).
_COLLINEAR_LIMIT = 1.0 - 1e-9
#: ... and above this they are nearly collinear (warning).
_NEAR_COLLINEAR_LIMIT = 0.99


def _positive_int_or_none(value: Any, name: str, high: int) -> int | None:
    return None if value is None else int_in_range(value, name, 1, high)


@dataclass(frozen=True, slots=True, eq=False, kw_only=True)
class IdentifyOptions:
    """What :func:`identify` fits and how it chooses.

    Parameters
    ----------
    method : {"arx", "subspace", "auto"}
        Model family; ``"auto"`` (default) fits both and keeps the candidate
        with the best validation fit.
    order : int, optional
        Fixed model order; ``None`` (default) selects it. For subspace it is
        the number of states; for ARX ``na = nb = order`` (delays estimated
        unless ``delay`` is given).
    max_order : int
        Largest order tried when ``order`` is ``None`` (default 10): subspace
        orders ``1 .. max_order``; for ARX the grid ``na, nb`` in
        ``1 .. max_order`` with the delays estimated and their neighbours
        ``nk - 1 .. nk + 1`` (all inputs shifted together, at least 0), or
        the given ``delay`` alone.
    delay : int, optional
        Input delay ``nk`` in samples, the same for every input, for ARX;
        ``None`` (default) estimates the delays from the data.
    weighting : {"n4sid", "moesp", "cva"}
        Subspace weighting (default ``"n4sid"``).
    horizon : int, optional
        Subspace past/future horizon; ``None`` (default) lets
        :mod:`ident.estimate.subspace` choose it from the data and the order.
    stabilize : bool
        Reflect unstable subspace poles into the unit circle (default
        ``False``); when it happens the result says so.
    tie_tolerance : float
        Mean validation fits within this many percentage points of the best
        are tied (default :data:`TIE_TOLERANCE`, 0.5).
    per_criterion : int
        In an automatic ARX search, how many of the best grid structures by
        each of AIC, BIC/MDL and FPE go on to the validation stage (default
        :data:`PER_CRITERION`, 3), together with the BIC-best structure of
        every order (see :func:`ident.estimate.arx.shortlist`).
    preprocess : PreprocessOptions
        Operating point, detrending, decimation and hold-out.
    """

    method: Literal["arx", "subspace", "auto"] = "auto"
    order: int | None = None
    max_order: int = 10
    delay: int | None = None
    weighting: Literal["n4sid", "moesp", "cva"] = "n4sid"
    horizon: int | None = None
    stabilize: bool = False
    tie_tolerance: float = TIE_TOLERANCE
    per_criterion: int = PER_CRITERION
    preprocess: PreprocessOptions = field(default_factory=PreprocessOptions)

    def __post_init__(self) -> None:
        one_of(self.method, "method", METHODS)
        one_of(self.weighting, "weighting", WEIGHTINGS)
        object.__setattr__(self, "order", _positive_int_or_none(self.order, "order", MAX_ORDER))
        object.__setattr__(self, "max_order", int_in_range(self.max_order, "max_order", 1, MAX_ORDER))
        if self.delay is not None:
            object.__setattr__(self, "delay", int_in_range(self.delay, "delay", 0, 1000))
        object.__setattr__(self, "horizon", _positive_int_or_none(self.horizon, "horizon", 10_000))
        if not isinstance(self.stabilize, (bool, np.bool_)):
            raise OptionError(f"stabilize must be true or false; got {self.stabilize!r}")
        object.__setattr__(self, "stabilize", bool(self.stabilize))
        try:
            tol = float(self.tie_tolerance)
        except (TypeError, ValueError) as exc:
            raise OptionError(
                f"tie_tolerance must be a number >= 0; got {self.tie_tolerance!r}"
            ) from exc
        if not (tol >= 0 and math.isfinite(tol)):
            raise OptionError(f"tie_tolerance must be a number >= 0; got {self.tie_tolerance!r}")
        object.__setattr__(self, "tie_tolerance", tol)
        object.__setattr__(self, "per_criterion",
                           int_in_range(self.per_criterion, "per_criterion", 1, 100))
        if isinstance(self.preprocess, Mapping):
            object.__setattr__(self, "preprocess", PreprocessOptions(**self.preprocess))
        if not isinstance(self.preprocess, PreprocessOptions):
            raise OptionError(
                f"preprocess must be PreprocessOptions; got {type(self.preprocess).__name__}"
            )

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
            mapping["preprocess"] = PreprocessOptions.from_mapping(
                mapping["preprocess"], key_path=sub_path
            )
        return options_from_mapping(cls, mapping, key_path)

    def to_dict(self) -> dict[str, Any]:
        """Return the options as a plain nested dict (for provenance records)."""
        out = {f.name: getattr(self, f.name) for f in fields(self) if f.name != "preprocess"}
        out["preprocess"] = self.preprocess.to_dict()
        return out


@dataclass(frozen=True, slots=True, eq=False)
class Candidate:
    """One fitted candidate model and its scores.

    Attributes
    ----------
    method : {"arx", "subspace"}
        Model family.
    order : int
        ``max(na, nb)`` for ARX, the number of states for subspace.
    structure : dict
        ``{"na", "nb", "nk"}`` (lists per input for ``nb`` and ``nk``) for ARX,
        ``{"n", "weighting", "horizon"}`` for subspace.
    n_states : int
        States of the model in state-space form.
    n_parameters : int
        Estimated parameters, all outputs together. For subspace models the
        count of a canonical parametrisation, ``n (m + p) + m p``.
    validation_fit : numpy.ndarray, shape (p,)
        Fit percent per output on the held-out data (simulation from a fitted
        initial state); ``-inf`` when the simulation diverges.
    mean_fit : float
        Mean of ``validation_fit`` over the outputs (the selection score).
    criteria : Criteria or None
        AIC, BIC and FPE on the estimation data for ARX candidates (prediction
        errors; in an automatic search the values of the grid, on the rows all
        grid structures share, so they rank like the whole grid); ``None`` for
        subspace candidates, whose evidence is the singular values.
    selected : bool
        True for the chosen candidate.
    """

    method: str
    order: int
    structure: dict[str, Any]
    n_states: int
    n_parameters: int
    validation_fit: np.ndarray
    mean_fit: float
    criteria: Criteria | None
    selected: bool = False

    def as_dict(self) -> dict[str, Any]:
        """Return a JSON-friendly dict of the candidate."""
        return {
            "method": self.method,
            "order": self.order,
            "structure": self.structure,
            "n_states": self.n_states,
            "n_parameters": self.n_parameters,
            "validation_fit": [float(v) for v in self.validation_fit],
            "mean_fit": float(self.mean_fit),
            "criteria": None if self.criteria is None else self.criteria.as_dict(),
            "selected": self.selected,
        }


@dataclass(frozen=True, slots=True, eq=False)
class Identification:
    """The result of :func:`identify`.

    Attributes
    ----------
    model : StateSpaceModel
        The selected model, discrete time at the (decimated) sample time, with
        names, units and operating point set.
    method : {"arx", "subspace"}
        Family of the selected model.
    order : int
        Its order (``max(na, nb)`` for ARX, states for subspace).
    candidates : tuple of Candidate
        Every candidate validated, ARX first (in grid order: delay, na, nb),
        then subspace by increasing order; exactly one has ``selected=True``.
    validation_fit : numpy.ndarray, shape (p,)
        Fit percent per output of ``model`` on the held-out data.
    estimation_fit : numpy.ndarray, shape (p,)
        Fit percent per output of ``model`` on the estimation data.
    prepared : PreparedData
        The data as prepared, with its ranges in the original log.
    arx : object or None
        The ``ArxResult`` of the selected model when it is an ARX model.
    subspace : object or None
        The ``SubspaceResult`` of the selected model when it is a subspace model.
    singular_values : numpy.ndarray or None
        Singular values of the subspace projection (``None`` without subspace).
    suggested_order : int or None
        Order at the largest gap in ``singular_values``.
    subspace_factorization : dict or None
        How the subspace projection factorised the data: ``{"path": "gram" or
        "householder", "gram_condition": float}`` (``None`` without subspace).
    delay : object or None
        The ``DelayEstimate`` used for ARX (``None`` when the delay was given
        or no ARX model was fitted).
    warnings : tuple of str
        Warnings raised while identifying (also issued as Python warnings).
    notes : tuple of str
        Informational remarks (orders skipped and why, selection rule).
    options : IdentifyOptions
        The options used.
    best_by : dict
        Information criterion (``"aic"``, ``"bic"``, ``"fpe"``) -> index into
        ``candidates`` of the ARX candidate it prefers (smallest value, ties
        to fewer parameters); empty without ARX candidates.
    arx_sweep : ArxSweep or None
        The whole ARX grid with the criteria of every structure (automatic
        ARX search only).
    """

    model: StateSpaceModel
    method: str
    order: int
    candidates: tuple[Candidate, ...]
    validation_fit: np.ndarray
    estimation_fit: np.ndarray
    prepared: PreparedData
    arx: Any
    subspace: Any
    singular_values: np.ndarray | None
    suggested_order: int | None
    delay: Any
    warnings: tuple[str, ...]
    notes: tuple[str, ...]
    options: IdentifyOptions
    best_by: dict[str, int] = field(default_factory=dict)
    arx_sweep: Any = None
    subspace_factorization: dict[str, Any] | None = None

    @property
    def selected(self) -> Candidate:
        """The selected candidate."""
        return next(c for c in self.candidates if c.selected)


def select_candidate(candidates: Sequence[Candidate], *, tie_tolerance: float = TIE_TOLERANCE) -> int:
    """Index of the candidate to keep: best mean validation fit, ties to the simpler.

    Parameters
    ----------
    candidates : sequence of Candidate
        Scored candidates (``selected`` is ignored).
    tie_tolerance : float
        Candidates whose ``mean_fit`` is within this many percentage points of
        the best are tied.

    Returns
    -------
    int
        Position of the winner: among the tied candidates the one with the
        fewest states, then the fewest parameters, then the best fit, then the
        first in the sequence.

    Raises
    ------
    IdentificationError
        If no candidate has a finite validation fit (every one diverged).
    """
    if not candidates:
        raise OptionError("candidates must not be empty")
    fits = np.array([c.mean_fit for c in candidates], dtype=float)
    finite = np.isfinite(fits)
    if not finite.any():
        raise IdentificationError(
            "every candidate model diverged on the validation data",
            hint="check the data (drift, saturation) or fix a low --order",
        )
    best = np.max(fits[finite])
    tied = [k for k in range(len(candidates)) if finite[k] and fits[k] >= best - tie_tolerance]
    return min(
        tied,
        key=lambda k: (candidates[k].n_states, candidates[k].n_parameters, -fits[k], k),
    )


# --------------------------------------------------------------------------- checks


def excitation_order(u: Sequence[np.ndarray], max_lags: int) -> np.ndarray:
    """Order of persistent excitation of each input column, up to ``max_lags``.

    Parameters
    ----------
    u : sequence of numpy.ndarray, each (N_k, m)
        Input deviations of each experiment.
    max_lags : int
        Largest order tested.

    Returns
    -------
    numpy.ndarray of int, shape (m,)
        Per input, the largest order found by
        :func:`ident.estimate.excitation.persistent_excitation_order` in any one
        experiment (at most :data:`_CHECK_SAMPLES` samples of each are used).
    """
    from .excitation import persistent_excitation_order

    max_lags = int_in_range(max_lags, "max_lags", 1)
    m = u[0].shape[1]
    orders = np.zeros(m, dtype=int)
    for j in range(m):
        for part in u:
            col = part[:_CHECK_SAMPLES, j]
            if col.shape[0] >= 2:
                orders[j] = max(orders[j], persistent_excitation_order(col, max_order=max_lags))
    return orders


def _check_signals(prep: PreparedData) -> list[str]:
    """Errors for unusable signals; returns warning texts for doubtful ones."""
    m, p = prep.n_inputs, prep.n_outputs
    u_parts = [e.u[:_CHECK_SAMPLES] for e in prep.estimation]
    y_parts = [e.y[:_CHECK_SAMPLES] for e in prep.estimation]
    u = np.vstack(u_parts)
    y = np.vstack(y_parts)
    out: list[str] = []
    u_std = column_stds(u)
    y_std = column_stds(y)
    for j in range(m):
        if not u_std[j] > 1e-12 * max(1.0, float(np.max(np.abs(prep.operating_point.inputs[j])))):
            raise IdentificationError(
                f"input {prep.input_names[j]!r} is constant over the estimation part; "
                "it excites nothing",
                hint="choose an input column that varies, or a longer estimation part",
            )
    for i in range(p):
        if not y_std[i] > 1e-12 * max(1.0, float(np.max(np.abs(prep.operating_point.outputs[i])))):
            raise IdentificationError(
                f"output {prep.output_names[i]!r} is constant over the estimation part; "
                "there is nothing to model",
                hint="check the output column name",
            )
    # an output identical to an input (the same column given twice, or a loop-back)
    for i in range(p):
        for j in range(m):
            raw_y = y[:, i] + prep.operating_point.outputs[i]
            raw_u = u[:, j] + prep.operating_point.inputs[j]
            scale = max(float(np.max(np.abs(raw_u))), 1e-300)
            if np.max(np.abs(raw_y - raw_u)) <= 1e-12 * scale:
                raise IdentificationError(
                    f"output {prep.output_names[i]!r} is identical to input "
                    f"{prep.input_names[j]!r}",
                    hint="an output must be a measured response, not a copy of an input",
                )
    if m > 1:
        corr = np.corrcoef(u, rowvar=False)
        for a in range(m):
            for b in range(a + 1, m):
                r = abs(corr[a, b])
                name_a, name_b = prep.input_names[a], prep.input_names[b]
                if r > _COLLINEAR_LIMIT:
                    raise IdentificationError(
                        f"inputs {name_a!r} and {name_b!r} are collinear "
                        f"(correlation {corr[a, b]:+.9f}); their effects cannot be separated",
                        hint="drop one of them, or use a log where they move independently",
                    )
                if r > _NEAR_COLLINEAR_LIMIT:
                    out.append(
                        f"inputs {name_a!r} and {name_b!r} are nearly collinear (correlation "
                        f"{corr[a, b]:+.4f}); their separate effects are poorly determined"
                    )
        sv = np.linalg.svd(u / u_std, compute_uv=False)
        if sv[-1] <= 1e-7 * sv[0]:
            raise IdentificationError(
                f"the inputs {', '.join(map(repr, prep.input_names))} are linearly dependent; "
                "their effects cannot be separated",
                hint="drop an input that is a combination of the others",
            )
    return out


def _fixed_order_arx(prep: PreparedData, nk: Any, order: int, names: dict[str, Any]):
    """Yield ``(None, ArxResult or Exception)`` for the one fixed-order ARX candidate."""
    from .arx import ArxOptions, iter_arx_candidates

    try:
        yield None, next(iter_arx_candidates(
            prep.estimation, prep.sample_time, [ArxOptions(na=order, nb=order, nk=nk)], **names,
        ))
    except (IdentificationError, OptionError) as exc:
        yield None, exc


def _best_by(candidates: Sequence[Candidate]) -> dict[str, int]:
    """Criterion -> index of the ARX candidate it prefers."""
    from .order import CRITERIA, best_index

    arx = [k for k, c in enumerate(candidates) if c.criteria is not None]
    if not arx:
        return {}
    counts = [candidates[k].n_parameters for k in arx]
    return {name: arx[best_index([candidates[k].criteria.get(name) for k in arx], counts)]
            for name in CRITERIA}


def _samples_needed(order: int, m: int, p: int) -> int:
    """Estimation samples needed for order ``order`` (see SAMPLES_PER_PARAMETER)."""
    # the larger of an ARX model's parameters per output and a subspace model's
    # canonical parameter count, plus the lags lost at the start
    params = max(order * (1 + m), order * (m + p) + m * p)
    return SAMPLES_PER_PARAMETER * params + 2 * order


# --------------------------------------------------------------------------- scoring


def _free_run(model: StateSpaceModel, u: np.ndarray, x0: np.ndarray, arx: Any = None) -> np.ndarray:
    """Free-run output of a candidate: by its difference equations when it is ARX."""
    if arx is not None:
        return arx.simulate(u, x0)
    return simulate(model, u, x0)


def _validation_fit(model: StateSpaceModel, parts: Sequence[Experiment], arx: Any = None) -> np.ndarray:
    """Fit percent of a free-run simulation on ``parts`` (pooled), per output.

    ``arx`` is the candidate's ``ArxResult`` when it is an ARX model: it then
    runs as difference equations (:meth:`ident.estimate.arx.ArxResult.simulate`), the
    cheapest exact simulation; other models go through
    :func:`ident.lti.simulate.simulate`. The initial state is fitted to the first
    samples of each part in either case.
    """
    ys, yhats = [], []
    with np.errstate(all="ignore"):
        for part in parts:
            try:
                x0 = estimate_initial_state(model, part.u, part.y)
                y_hat = _free_run(model, part.u, x0, arx)
            except (np.linalg.LinAlgError, ValueError, FloatingPointError):
                return np.full(model.n_outputs, -np.inf)
            if not np.all(np.isfinite(y_hat)):
                return np.full(model.n_outputs, -np.inf)
            ys.append(part.y)
            yhats.append(y_hat)
        fit = fit_percent(np.vstack(ys), np.vstack(yhats))  # may overflow when diverging
    return np.where(np.isnan(fit), -np.inf, fit)


def _subspace_parameters(n: int, m: int, p: int) -> int:
    return n * (m + p) + m * p


def _mean(fit: np.ndarray) -> float:
    return float(np.mean(fit)) if np.all(np.isfinite(fit)) else -math.inf


# --------------------------------------------------------------------------- main job


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
) -> Identification:
    """Fit candidate ARX and/or subspace models and keep the best validated one.

    Parameters
    ----------
    segments : Experiment, (u, y) pair, or sequence of them
        Raw logged records (see :func:`ident.estimate.preprocess.prepare`).
    sample_time : float
        Sample time of the records, in s.
    options : IdentifyOptions, optional
        Method, order and preprocessing; default ``IdentifyOptions()``.
    input_names, output_names, input_units, output_units : sequence of str, optional
        Signal names and units, carried into the model.
    segment_starts : sequence of int, optional
        First sample of each record in the original log (for the ranges).
    progress : callable, optional
        Called as ``progress(step, fraction_done)`` between steps.

    Returns
    -------
    Identification
        The selected model, the table of candidates and the evidence.

    Raises
    ------
    IdentificationError
        The data cannot support the request: a constant input or output, an
        output identical to an input, collinear inputs, an input not
        persistently exciting of the order asked, an order too high for the
        number of estimation samples, or every candidate diverging.
    OptionError
        Bad options or data shapes.

    Warns
    -----
    PoorExcitationWarning
        An input excites fewer orders than asked for (the sweep is then capped).
    IllConditionedWarning
        Nearly collinear inputs.
    UnstableModelWarning
        The selected model has a pole outside the unit circle.

    Notes
    -----
    Identifiability of an ``n``-th order model needs an input persistently
    exciting of order ``2 n`` [1]_; a fixed order with excitation below ``n`` is
    an error, between ``n`` and ``2 n`` a warning. In a sweep the largest
    order is capped at half the excitation order, and at the largest order
    with :data:`SAMPLES_PER_PARAMETER` estimation samples per parameter.

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, sec. 13.2 (informative experiments) and
       sec. 16.4-16.6 (model structure selection and validation).
    """
    options = IdentifyOptions() if options is None else options
    if not isinstance(options, IdentifyOptions):
        raise OptionError(f"options must be IdentifyOptions; got {type(options).__name__}")
    report = progress if progress is not None else (lambda step, fraction: None)
    if options.preprocess.holdout <= 0:
        raise OptionError(
            "identify needs held-out validation data; holdout must be in (0, 1); got 0"
        )
    texts: list[str] = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            result = _identify(
                segments, sample_time, options, input_names, output_names, input_units,
                output_units, segment_starts, report,
            )
        finally:
            pending = list(caught)
    # re-issue outside the recording context, once each, so callers see them too
    seen: set[tuple[type, str]] = set()
    for w in pending:
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
    """What the candidate search has gathered so far; filled in step by step by :func:`_identify`.

    ``fitted`` holds, per candidate, ``(model, estimator result, warnings
    recorded while fitting it)``; ``step`` counts finished progress steps out
    of ``n_steps``.
    """

    report: Callable[[str, float], None]
    n_steps: int
    step: int = 0
    candidates: list[Candidate] = field(default_factory=list)
    fitted: list[Any] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    delay: Any = None
    arx_sweep: Any = None
    singular_values: np.ndarray | None = None
    suggested_order: int | None = None
    factorization: dict[str, Any] | None = None

    def progress(self, text: str) -> None:
        """Report ``text`` at the current step."""
        self.report(text, self.step / self.n_steps)

    def add(self, candidate: Candidate, model: StateSpaceModel, result: Any, caught: list) -> None:
        """Keep a scored candidate with its model, estimator result and recorded warnings."""
        self.candidates.append(candidate)
        self.fitted.append((model, result, caught))


def _identify(
    segments, sample_time, options, input_names, output_names, input_units, output_units,
    segment_starts, report,
) -> Identification:
    """Run the steps of :func:`identify` in order (the caller records the warnings).

    Prepare and check the data, choose the orders, gather the ARX and subspace
    candidates, then select one and assemble the result.
    """
    report("preparing data", 0.0)
    prep = _prepare_and_check(
        segments, sample_time, options.preprocess,
        input_names=input_names, output_names=output_names,
        input_units=input_units, output_units=output_units, segment_starts=segment_starts,
    )
    notes: list[str] = []
    orders = _supported_orders(prep, options, notes)
    search = _Search(report=report, n_steps=_progress_steps(options, orders), notes=notes)
    if options.method in ("arx", "auto"):
        _add_arx_candidates(prep, options, orders, search)
    if options.method in ("subspace", "auto"):
        _add_subspace_candidates(prep, options, orders, search)
    search.progress("selecting")
    return _select_and_assemble(prep, options, search)


# --------------------------------------------------------------------------- steps of the job


def _prepare_and_check(segments: Any, sample_time: float, options: PreprocessOptions,
                       **names_and_ranges: Any) -> PreparedData:
    """Prepare the data (:func:`prepare`), insist on validation samples and check the signals."""
    prep = prepare(segments, sample_time, options, **names_and_ranges)
    if not prep.validation:
        raise OptionError("the hold-out left no validation samples; raise holdout")
    for text in _check_signals(prep):
        _warn(text, IllConditionedWarning)
    return prep


def _supported_orders(prep: PreparedData, options: IdentifyOptions, notes: list[str]) -> list[int]:
    """Orders to try: the fixed order if the data support it, else ``1 ..`` the largest they support."""
    fixed = options.order
    top = fixed if fixed is not None else options.max_order
    pe = excitation_order([e.u for e in prep.estimation], max(2 * top, 2))
    weakest = int(np.argmin(pe))
    pe_min = int(pe[weakest])
    weak_name = prep.input_names[weakest]
    if fixed is not None:
        _check_fixed_order(prep, fixed, pe_min, weak_name)
        return [fixed]
    return _sweep_orders(prep, options.max_order, pe_min, weak_name, notes)


def _check_fixed_order(prep: PreparedData, fixed: int, pe_min: int, weak_name: str) -> None:
    """Refuse (or warn about) a fixed order the excitation or the sample count cannot support."""
    if pe_min < fixed:
        raise IdentificationError(
            f"input {weak_name!r} is persistently exciting of order {pe_min} only; "
            f"order {fixed} needs at least {fixed} (better {2 * fixed})",
            hint="lower --order, or use a log with a richer input (noise, chirp, PRBS)",
        )
    if pe_min < 2 * fixed:
        _warn(
            f"input {weak_name!r} is persistently exciting of order {pe_min}; an order-"
            f"{fixed} model needs {2 * fixed} to be reliably identifiable",
            PoorExcitationWarning,
        )
    n_est = prep.n_estimation_samples
    needed = _samples_needed(fixed, prep.n_inputs, prep.n_outputs)
    if n_est < needed:
        raise IdentificationError(
            f"order {fixed} is too high for {n_est} estimation samples "
            f"(needs at least {needed})",
            hint="lower --order or --holdout, or use a longer log",
        )


def _sweep_orders(prep: PreparedData, max_order: int, pe_min: int, weak_name: str,
                  notes: list[str]) -> list[int]:
    """Orders ``1 .. cap`` of a sweep, ``cap`` limited by the excitation and the sample count."""
    m, p = prep.n_inputs, prep.n_outputs
    n_est = prep.n_estimation_samples
    cap = max_order
    if pe_min < 2:
        raise IdentificationError(
            f"input {weak_name!r} is persistently exciting of order {pe_min} only; "
            "not even a first-order model is identifiable",
            hint="use a log with a richer input (noise, chirp, PRBS, several steps)",
        )
    if pe_min < 2 * cap:
        cap = pe_min // 2
        _warn(
            f"input {weak_name!r} is persistently exciting of order {pe_min} only; "
            f"orders above {cap} were not tried",
            PoorExcitationWarning,
        )
    while cap >= 1 and n_est < _samples_needed(cap, m, p):
        cap -= 1
    if cap < 1:
        raise IdentificationError(
            f"{n_est} estimation samples are too few for even a first-order model "
            f"(needs at least {_samples_needed(1, m, p)})",
            hint="use a longer log or a smaller --holdout",
        )
    if cap < max_order and pe_min >= 2 * max_order:
        notes.append(
            f"orders above {cap} were not tried: {n_est} estimation samples support "
            f"at most order {cap}"
        )
    return list(range(1, cap + 1))


def _progress_steps(options: IdentifyOptions, orders: Sequence[int]) -> int:
    """Count the progress steps of the whole job (an upper bound for an ARX grid)."""
    do_arx = options.method in ("arx", "auto")
    do_sub = options.method in ("subspace", "auto")
    n_arx = 3 * options.per_criterion + len(orders) if options.order is None else 1
    return (n_arx + 1 if do_arx else 0) + (len(orders) + 1 if do_sub else 0) + 1


def _signal_names(prep: PreparedData) -> dict[str, Any]:
    """Input and output names as keyword arguments for the estimators."""
    return {"input_names": prep.input_names, "output_names": prep.output_names}


# --------------------------------------------------------------------------- ARX candidates


def _add_arx_candidates(prep: PreparedData, options: IdentifyOptions, orders: Sequence[int],
                        search: _Search) -> None:
    """Fit the ARX structures (fixed, or the shortlist of a grid) and score each on validation data."""
    nk = _arx_delays(prep, options, search)
    steps = _arx_structures(prep, options, orders, nk, search)
    fitted_any = False
    while True:
        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                k_grid, res = next(steps)
        except StopIteration:
            break
        search.step += 1
        search.report("ARX candidates", min(search.step, search.n_steps - 1) / search.n_steps)
        if isinstance(res, Exception):
            if options.order is not None:
                raise res
            search.notes.append(f"ARX candidate skipped: {res}")
            continue
        fitted_any = True
        search.add(_arx_candidate(res, k_grid, prep.validation, search.arx_sweep), res.model, res, caught)
    if not fitted_any:
        raise IdentificationError(
            "no ARX candidate of the grid could be fitted",
            hint="fix a low --order or check the inputs",
        )


def _arx_delays(prep: PreparedData, options: IdentifyOptions, search: _Search) -> Any:
    """ARX input delays: the given one, or one per input estimated from the data (1 if that fails)."""
    if options.delay is not None:
        search.notes.append(f"ARX input delay fixed at {options.delay} samples")
        return options.delay
    from .delay import estimate_delay

    search.progress("estimating delays")
    try:
        search.delay = estimate_delay(prep.estimation, max_delay=20)
    except IdentificationError as exc:
        search.delay = None
        _warn(f"input delays could not be estimated ({exc}); ARX models assume a "
              "delay of 1 sample", PoorExcitationWarning)
        return 1
    delays = np.asarray(search.delay.delays, dtype=int).reshape(prep.n_outputs, prep.n_inputs)
    # one delay per input, shared by the outputs' MISO models: the smallest
    # seen from that input, so that no output loses its earliest response
    return tuple(int(v) for v in delays.min(axis=0))


def _arx_structures(prep: PreparedData, options: IdentifyOptions, orders: Sequence[int], nk: Any,
                    search: _Search) -> Iterator[tuple[int | None, Any]]:
    """``(grid row, ArxResult or Exception)`` per structure: the fixed one, or a grid's shortlist."""
    names = _signal_names(prep)
    if options.order is not None:
        return _fixed_order_arx(prep, nk, options.order, names)
    from .arx import grid_search_arx

    search.progress("ARX structure grid")
    nk_base = (nk,) * prep.n_inputs if isinstance(nk, int) else tuple(nk)
    shifts = (0,) if options.delay is not None else _DELAY_SHIFTS
    nk_grid = list(dict.fromkeys(
        tuple(max(0, v + d) for v in nk_base) for d in shifts
    ))
    search.arx_sweep, _, steps = grid_search_arx(
        prep.estimation, prep.sample_time, na_values=orders, nb_values=orders,
        nk_values=nk_grid, per_criterion=options.per_criterion, **names,
    )
    search.notes.append(
        f"ARX grid: na, nb in 1..{max(orders)}, nk in "
        + ", ".join(str(list(v)) for v in nk_grid)
        + f" ({len(search.arx_sweep.rows)} structures from one R factor); the best "
        f"{options.per_criterion} by each of AIC, BIC and FPE and the BIC-best of each order were validated"
    )
    return steps


def _arx_candidate(res: Any, k_grid: int | None, validation: Sequence[Experiment], sweep: Any) -> Candidate:
    """Score an ``ArxResult`` on the validation data; in a grid, rank it by the grid's criteria."""
    model = res.model
    vfit = _validation_fit(model, validation, res)
    crit = res.criteria
    if sweep is not None:  # rank on the grid's common rows, like the whole grid
        row = sweep.rows[k_grid]
        crit = Criteria(aic=row.aic, bic=row.bic, fpe=row.fpe)
    return Candidate(
        method="arx",
        order=max(int(res.na), *(int(v) for v in res.nb)),
        structure={"na": int(res.na), "nb": [int(v) for v in res.nb],
                   "nk": [int(v) for v in res.nk]},
        n_states=model.n_states,
        n_parameters=int(res.n_parameters),
        validation_fit=vfit,
        mean_fit=_mean(vfit),
        criteria=crit,
    )


# --------------------------------------------------------------------------- subspace candidates


def _add_subspace_candidates(prep: PreparedData, options: IdentifyOptions, orders: Sequence[int],
                             search: _Search) -> None:
    """Project the data once, then build and score a model of every supported order."""
    from .subspace import SubspaceOptions, model_of_order

    projection, sub_orders = _subspace_projection(prep, options, orders, search)
    m, p = prep.n_inputs, prep.n_outputs
    for n in sub_orders:
        search.progress(f"subspace order {n}")
        search.step += 1
        sopts = SubspaceOptions(
            order=n, weighting=options.weighting, horizon=projection.horizon,
            max_order=projection.max_order, stabilize=options.stabilize,
        )
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            res = model_of_order(projection, prep.estimation, n, prep.sample_time,
                                 options=sopts, **_signal_names(prep))
        model = res.model
        vfit = _validation_fit(model, prep.validation)
        candidate = Candidate(
            method="subspace",
            order=n,
            structure={"n": n, "weighting": options.weighting,
                       "horizon": int(projection.horizon)},
            n_states=model.n_states,
            n_parameters=_subspace_parameters(n, m, p),
            validation_fit=vfit,
            mean_fit=_mean(vfit),
            criteria=None,
        )
        search.add(candidate, model, res, caught)


def _subspace_projection(prep: PreparedData, options: IdentifyOptions, orders: Sequence[int],
                         search: _Search) -> tuple[Any, list[int]]:
    """Project the estimation data once; return the projection and the orders it supports."""
    from .subspace import project, suggest_order

    search.progress("subspace projection")
    search.step += 1
    projection = project(
        prep.estimation, horizon=options.horizon, weighting=options.weighting,
        max_order=max(orders),
    )
    search.singular_values = np.asarray(projection.singular_values, dtype=float)
    search.suggested_order = int(suggest_order(projection).order)
    search.factorization = {"path": projection.factorization,
                            "gram_condition": float(projection.gram_condition)}
    n_supported = int(projection.max_order)
    sub_orders = [n for n in orders if n <= n_supported]
    if len(sub_orders) < len(orders):
        if not sub_orders:
            raise IdentificationError(
                f"subspace order {orders[0]} exceeds what horizon "
                f"{projection.horizon} supports ({n_supported})",
                hint="give a larger horizon or a lower order",
            )
        search.notes.append(
            f"subspace orders above {n_supported} need a longer horizon and were skipped"
        )
    return projection, sub_orders


# --------------------------------------------------------------------------- selection


def _select_and_assemble(prep: PreparedData, options: IdentifyOptions, search: _Search) -> Identification:
    """Pick the winner (:func:`select_candidate`), give it names and operating point, and build the result."""
    chosen = select_candidate(search.candidates, tie_tolerance=options.tie_tolerance)
    candidates = [replace(c, selected=(k == chosen)) for k, c in enumerate(search.candidates)]
    best = candidates[chosen]
    model, raw, candidate_warnings = search.fitted[chosen]
    for w in candidate_warnings:  # only the selected candidate's own warnings matter
        warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    model = model.with_changes(
        inputs=prep.input_names,
        outputs=prep.output_names,
        input_units=prep.input_units,
        output_units=prep.output_units,
        operating_point=prep.operating_point,
    )
    estimation_fit = _validation_fit(model, prep.estimation,
                                     raw if best.method == "arx" else None)
    if best.method == "subspace" and raw.stabilized:
        search.notes.append("unstable subspace poles were reflected into the unit circle "
                            "(stabilize=True)")
    _warn_if_unstable(model, candidate_warnings)
    search.notes.append(
        f"selected by mean validation fit; fits within {options.tie_tolerance:g} points of "
        "the best count as tied and the simplest tied model wins (fewer states, then fewer "
        "parameters); the model is not re-estimated on the validation data"
    )
    search.report("done", 1.0)
    return Identification(
        model=model,
        method=best.method,
        order=best.order,
        candidates=tuple(candidates),
        validation_fit=best.validation_fit,
        estimation_fit=estimation_fit,
        prepared=prep,
        arx=raw if best.method == "arx" else None,
        subspace=raw if best.method == "subspace" else None,
        singular_values=search.singular_values,
        suggested_order=search.suggested_order,
        delay=search.delay,
        warnings=(),
        notes=tuple(search.notes),
        options=options,
        best_by=_best_by(candidates),
        arx_sweep=search.arx_sweep,
        subspace_factorization=search.factorization,
    )


def _warn_if_unstable(model: StateSpaceModel, candidate_warnings: Sequence[warnings.WarningMessage]) -> None:
    """Warn about unstable poles of the selected model unless its estimator already did."""
    unstable = model.poles()[np.abs(model.poles()) > 1.0 + 1e-9]
    if unstable.size and not any(
        issubclass(w.category, UnstableModelWarning) for w in candidate_warnings
    ):
        _warn(
            f"the selected model has {unstable.size} unstable pole(s): "
            + ", ".join(f"{z:.4g}" for z in unstable),
            UnstableModelWarning,
        )
