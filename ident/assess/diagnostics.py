"""Model validation: honest fit figures, residual analysis, spectra and verdicts.

:func:`validate_model` answers "does this model explain data it has not seen?"
on a log of input and output deviations from the model's operating point:

* **fit percent**, labelled by how the model's state at the start was found:
  *from rest* (zero initial state, every sample scored), *initial state
  estimated* (fitted to a leading window, and those samples are **not**
  scored), and, when the caller has the data before the record, *continued*
  (the model run through them; every sample scored), with one sentence on
  which to believe; the fit of the k-step-ahead prediction beside it, and a
  remark when the one-step prediction is worse than the simulation (a wrong
  noise model);
* **whiteness** of the one-step prediction residuals: autocorrelation over a
  lag span set by the model's slowest settling time, with a band that a white
  sequence stays inside at every lag with the stated probability; the
  Ljung-Box statistic; the cumulative periodogram with its Kolmogorov-Smirnov
  band (:mod:`ident.assess.residuals`);
* **independence from the inputs**, by cross-correlating the residual with the
  *prewhitened* input (an autoregressive model of each input, fitted by least
  squares, filters input and residual alike): positive lags, input dynamics
  the model misses; negative lags, feedback. The table, the figure and the
  verdict read the same numbers;
* **normality** of the residuals (Jarque-Bera; reported, never gated);
* **the frequency response** against a nonparametric estimate with its
  confidence region, judged only where the data are informative, or "cannot
  judge" (:mod:`ident.assess.spectral`);
* **level dependence** of the residuals on an input's or the model output's
  level (a possible nonlinearity);
* **one piece of advice about the order** from all the evidence together
  (:mod:`ident.assess.advice`), and the gap between in-sample and held-out fit
  when the in-sample fit is known;
* one plain-language :class:`Verdict` per finding, with the likely cause;
  ``passed`` is ``None`` where the data cannot decide.

Every threshold behind a verdict is a module constant here or in the modules
named above.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, fields
from typing import Any, Literal

import numpy as np

from .._json import json_ready
from .._validate import as_signal, fraction, int_in_range, one_of, positive_float
from ..errors import ModelError, OptionError, UnstableModelWarning
from ..lti._linalg import column_norms, column_sums
from ..lti.covariance import ParameterCovariance
from ..lti.models import StateSpaceModel
from ..lti.simulate import estimate_initial_state, simulate, simulate_states
from .advice import FitGap, OrderAdvice, fit_gap, order_advice
from .residuals import (
    CumulativePeriodogram,
    InputWhitener,
    LagSpan,
    LevelDependence,
    cumulative_periodogram,
    fit_input_whitener,
    lag_span,
    level_dependence,
    simultaneous_band,
)
from .spectral import (
    COHERENCE_LOW,
    MISMATCH_CONFIDENCE,
    FrequencyBand,
    LineResponse,
    SpectralComparison,
    spectral_comparison,
)

__all__ = [
    "INITIAL_STATE_MODES",
    "FIT_KINDS",
    "VERDICT_TESTS",
    "DATA_TESTS",
    "CAUSES",
    "DEFAULT_FIT_WARNING",
    "CheckOptions",
    "FitFigure",
    "Correlation",
    "WhitenessResult",
    "NormalityResult",
    "FrequencyBand",
    "LineResponse",
    "SpectralComparison",
    "Verdict",
    "ValidationReport",
    "fit_percent",
    "predict",
    "correlation",
    "cross_correlation",
    "whiteness",
    "spectral_comparison",
    "score_window",
    "validate_model",
    "report_to_dict",
]

#: How the initial state of simulation and prediction is chosen.
INITIAL_STATE_MODES = ("estimate", "zero")
#: Kinds of fit figure, in the order they are believed (the first one present wins).
FIT_KINDS = ("continued", "initial_state", "from_rest")
#: Names of the tests a :class:`Verdict` can report on.
VERDICT_TESTS = (
    "fit_level",
    "min_fit",
    "fit_gap",
    "prediction",
    "whiteness",
    "input_independence",
    "feedback",
    "nonlinearity",
    "coherence",
    "frequency_response",
    "order",
)
#: Tests whose failure speaks about the data or the process (how it was taken, what it
#: is) rather than about the model.
DATA_TESTS = ("feedback", "coherence", "nonlinearity")
#: Short codes of the likely causes a failed verdict names.
CAUSES = (
    "poor_fit",
    "noise_model",
    "input_dynamics",
    "delay",
    "order",
    "feedback",
    "low_coherence",
    "model_mismatch",
    "overfit",
    "suspicious_split",
    "nonlinearity",
)

# --- rules (explicit, in one place) --------------------------------------------------------
#: Default of :attr:`CheckOptions.fit_warning`: below this held-out fit (percent) the
#: headline calls the model poor.
DEFAULT_FIT_WARNING = 50.0
#: The one-step prediction is called worse than the simulation when its fit is lower by
#: more than this many percentage points.
PREDICTION_MARGIN = 1.0
#: A delay verdict needs the shifted model impulse response to cut the misfit to the
#: data's FIR estimate to below this fraction of the unshifted misfit.
DELAY_SHIFT_GAIN = 0.5
#: Largest delay shift (samples) examined for the delay verdict.
MAX_DELAY_SHIFT = 10
#: Samples used for the FIR estimate behind the delay verdict (leading part of the log).
FIR_MAX_SAMPLES = 50_000
#: Relative tolerance when comparing the log's sample time with the model's.
SAMPLE_TIME_RTOL = 1e-3
#: The log must hold at least this many samples per residual lag examined.
MIN_SAMPLES_PER_LAG = 4
#: Fewest samples validated on.
MIN_SAMPLES = 32
#: The level test uses at most this many samples, after removing an FIR fit of at most
#: this many taps per input (what any linear model could explain).
LEVEL_MAX_SAMPLES = 20_000
LEVEL_FIR_TAPS = 100
#: Bartlett's variance factor of a cross-correlation is taken as at least this (a factor
#: near zero, from sequences with nearly disjoint spectra, is poorly estimated).
MIN_BARTLETT_SPREAD = 0.05


def _set(obj: Any, name: str, value: Any) -> None:
    object.__setattr__(obj, name, value)


def _readonly(x: Any, dtype: Any = float) -> np.ndarray:
    arr = np.array(x, dtype=dtype, copy=True)
    arr.flags.writeable = False
    return arr


def _percent_or_none(value: Any, name: str) -> float | None:
    if value is None:
        return None
    is_number = isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, (bool, np.bool_))
    number = float(value) if is_number else math.nan
    if not math.isfinite(number) or number > 100:
        raise OptionError(f"{name} must be a number of at most 100 (%); got {value!r}")
    return number


# --------------------------------------------------------------------------------------------
# options and results
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, slots=True, eq=False, kw_only=True)
class CheckOptions:
    """Settings of :func:`validate_model`.

    Parameters
    ----------
    prediction_steps : int, default 1
        ``k`` of the k-step-ahead prediction whose fit is reported. The predictor
        uses the model's innovation gain (``noise_gain``) when it has one;
        without it every k-step predictor equals the free-run simulation.
    max_lag : int or None, default None
        Largest lag of the residual auto- and cross-correlations and of the
        Ljung-Box test; ``None`` takes the model's slowest settling time
        (:func:`ident.assess.residuals.lag_span`).
    confidence : float, default 0.95
        Probability that a white residual stays inside the correlation band at
        *every* lag shown (a simultaneous band), inside the cumulative
        periodogram's band, and that the true frequency response lies inside
        the estimate's confidence region.
    initial_state : {"estimate", "zero"}, default "estimate"
        Estimate the initial state from a leading window (not scored), or start
        from zero (then only the from-rest figure is given).
    spectral_segment : int or None, default None
        Welch segment length in samples; ``None`` chooses it from the resolution
        the excited band and the model's modes need.
    min_fit : float or None, default None
        Gate: every output's held-out fit percent must reach this value.
    require_white : bool, default False
        Gate: every output's residual autocorrelation must stay inside its band.
    fit_warning : float or None, default 50
        Without any gate, an output whose held-out fit is below this percent
        still makes the headline call the model poor; ``None`` turns it off.
    """

    prediction_steps: int = 1
    max_lag: int | None = None
    confidence: float = 0.95
    initial_state: Literal["estimate", "zero"] = "estimate"
    spectral_segment: int | None = None
    min_fit: float | None = None
    require_white: bool = False
    fit_warning: float | None = DEFAULT_FIT_WARNING

    def __post_init__(self) -> None:
        _set(self, "prediction_steps", int_in_range(self.prediction_steps, "prediction_steps", 1))
        if self.max_lag is not None:
            _set(self, "max_lag", int_in_range(self.max_lag, "max_lag", 1))
        _set(self, "confidence", fraction(self.confidence, "confidence"))
        one_of(self.initial_state, "initial_state", INITIAL_STATE_MODES)
        if self.spectral_segment is not None:
            _set(self, "spectral_segment",
                 int_in_range(self.spectral_segment, "spectral_segment", 8))
        _set(self, "min_fit", _percent_or_none(self.min_fit, "min_fit"))
        _set(self, "fit_warning", _percent_or_none(self.fit_warning, "fit_warning"))
        if not isinstance(self.require_white, bool):
            raise OptionError(f"require_white must be true or false; got {self.require_white!r}")

    @classmethod
    def from_mapping(cls, mapping: Mapping[str, Any]) -> CheckOptions:
        """Build options from a mapping (a pipeline file table); unknown keys are refused.

        ``fit_warning = false`` turns the warning level off (TOML has no null).
        """
        if not isinstance(mapping, Mapping):
            raise OptionError(f"check options must be a table; got {type(mapping).__name__}")
        valid = [f.name for f in fields(cls)]
        unknown = sorted(set(mapping) - set(valid))
        if unknown:
            raise OptionError(
                f"unknown check option(s) {', '.join(map(repr, unknown))}; "
                f"valid: {', '.join(valid)}"
            )
        values = dict(mapping)
        if values.get("fit_warning") is False:  # a TOML table has no null: false turns the warning off
            values["fit_warning"] = None
        return cls(**values)

    @property
    def z_value(self) -> float:
        """Two-sided normal quantile of :attr:`confidence` (1.96 for 0.95)."""
        from scipy import stats

        return float(stats.norm.ppf(0.5 + self.confidence / 2.0))


@dataclass(frozen=True, slots=True, eq=False)
class FitFigure:
    """One fit figure of the simulation, labelled by how the initial state was found.

    Attributes
    ----------
    kind : {"continued", "initial_state", "from_rest"}
        ``continued``: the model was run through the data before the record
        and carried its state in; ``initial_state``: the state was fitted to
        the first ``first_scored`` samples, which are not scored;
        ``from_rest``: zero initial state.
    fit : numpy.ndarray, shape (p,)
        Fit percent per output over the scored samples.
    first_scored : int
        First sample scored.
    label : str
        How the report names it.
    """

    kind: str
    fit: np.ndarray
    first_scored: int
    label: str

    def __post_init__(self) -> None:
        one_of(self.kind, "kind", FIT_KINDS)
        _set(self, "fit", _readonly(self.fit))
        _set(self, "first_scored", int(self.first_scored))


def _fit_label(kind: str, first_scored: int, sample_time: float) -> str:
    if kind == "continued":
        return "continued from the data before"
    if kind == "initial_state":
        return (f"initial state estimated (first {first_scored} samples, {first_scored * sample_time:.4g} s, "
                "not scored)")
    return "from rest"


def score_window(n_samples: int, n_states: int) -> int:
    """Leading samples that fit the initial state and are not scored: ``max(10 n, 50)``, at most ``N / 4``.

    The same rule as the held-out scores of the identification
    (:func:`ident.estimate.scoring.score_window`).
    """
    return int(max(1, min(max(10 * n_states, 50), n_samples // 4)))


@dataclass(frozen=True, slots=True, eq=False)
class Correlation:
    """A normalised auto- or cross-correlation with its confidence band.

    Parameters
    ----------
    lags : numpy.ndarray of int
        Lags in samples.
    values : numpy.ndarray
        Correlation coefficient at each lag.
    band : float
        Half width of the band a white sequence stays inside: ``z / sqrt(N)``
        at each lag, or over all lags together when ``simultaneous``.
    significant_lags : tuple of int
        Lags whose value lies outside the band (lag 0 of an autocorrelation,
        which is 1 by definition, is never listed).
    confidence : float or None
        Level of the band.
    simultaneous : bool
        The band holds at every lag together (Bonferroni over the lags).
    spread : float
        Factor the band was scaled by for the colour left in the two
        sequences (Bartlett's formula; 1 for white sequences).
    family : int
        Correlations the simultaneous band covers together (this one included).
    judged_lags : int or None
        Lags the simultaneous band covers (default: ``lags.size * family``;
        kept when a part of the lags is shown).
    """

    lags: np.ndarray
    values: np.ndarray
    band: float
    significant_lags: tuple[int, ...]
    confidence: float | None = None
    simultaneous: bool = False
    spread: float = 1.0
    family: int = 1
    judged_lags: int | None = None

    def __post_init__(self) -> None:
        _set(self, "lags", _readonly(self.lags, int))
        _set(self, "values", _readonly(self.values))
        _set(self, "band", float(self.band))
        _set(self, "significant_lags", tuple(int(k) for k in self.significant_lags))

    def outside(self, lags: np.ndarray | None = None) -> tuple[int, ...]:
        """Return the significant lags among ``lags`` (default: all)."""
        if lags is None:
            return self.significant_lags
        wanted = {int(k) for k in np.asarray(lags).ravel()}
        return tuple(k for k in self.significant_lags if k in wanted)

    def fails(self, lags: np.ndarray | None = None) -> bool:
        """Tell whether any of the given lags (default: all) lies outside the band.

        With a simultaneous band this is the test at the band's level; the
        table of lags outside, the figure and the verdicts all use it.
        """
        return bool(self.outside(lags))

    def peak(self, lags: np.ndarray | None = None) -> tuple[int, float]:
        """Lag and value of the largest ``|value|`` among the given lags."""
        mask = np.ones(self.lags.size, bool) if lags is None else np.isin(self.lags, lags)
        idx = np.flatnonzero(mask)
        k = idx[int(np.argmax(np.abs(self.values[idx])))]
        return int(self.lags[k]), float(self.values[k])

    @property
    def band_text(self) -> str:
        """The band and its level in words, e.g. ``95 % simultaneous band over 41 lags, +-0.031``."""
        level = f"{100 * self.confidence:g} % " if self.confidence is not None else ""
        count = self.judged_lags if self.judged_lags is not None else self.lags.size * self.family
        kind = f"simultaneous band over {count} lags" if self.simultaneous else "band at each lag"
        colour = f" (x{self.spread:.2f} for the colour left, Bartlett)" if abs(self.spread - 1.0) > 0.1 else ""
        return f"{level}{kind}, +-{self.band:.3g}{colour}"


@dataclass(frozen=True, slots=True, eq=False)
class WhitenessResult:
    """Whiteness of one output's residuals.

    Parameters
    ----------
    output : str
        Output name.
    autocorrelation : Correlation
        Lags 0 .. max_lag, with a simultaneous band.
    ljung_box_statistic, ljung_box_pvalue : float
        Ljung-Box Q over lags 1 .. max_lag and its chi-square p-value (reported).
    white : bool
        No lag of the autocorrelation lies outside its band.
    periodogram : CumulativePeriodogram or None
        Bartlett's cumulative periodogram with its Kolmogorov-Smirnov band
        (reported beside the autocorrelation; ``None`` when not computed).
    """

    output: str
    autocorrelation: Correlation
    ljung_box_statistic: float
    ljung_box_pvalue: float
    white: bool
    periodogram: CumulativePeriodogram | None = None


@dataclass(frozen=True, slots=True, eq=False)
class NormalityResult:
    """Jarque-Bera test of the residuals, per output (reported, never gated)."""

    statistic: np.ndarray
    pvalue: np.ndarray
    skewness: np.ndarray
    kurtosis: np.ndarray


@dataclass(frozen=True, slots=True, eq=False)
class Verdict:
    """Outcome of one validation test in plain words.

    Parameters
    ----------
    test : str
        One of :data:`VERDICT_TESTS`.
    passed : bool or None
        Whether the test passed; ``None`` when the data cannot decide ("cannot
        judge").
    message : str
        One or two sentences: what was found and its likely cause.
    output, input : str or None
        Signals the verdict is about, when it is about particular ones.
    cause : str or None
        Short code of the likely cause (one of :data:`CAUSES`) when failed.
    """

    test: str
    passed: bool | None
    message: str
    output: str | None = None
    input: str | None = None
    cause: str | None = None

    @property
    def outcome(self) -> str:
        """``"pass"``, ``"fail"``, ``"note"`` (a failed data test) or ``"cannot_judge"``."""
        if self.passed is None:
            return "cannot_judge"
        if self.passed:
            return "pass"
        return "note" if self.test in DATA_TESTS else "fail"


@dataclass(frozen=True, slots=True, eq=False)
class ValidationReport:
    """Everything :func:`validate_model` found.

    Parameters
    ----------
    simulation_fit : numpy.ndarray, shape (p,)
        The fit figure to believe (the first of :data:`FIT_KINDS` present in
        ``fits``); gates and headlines use it.
    prediction_fit : numpy.ndarray, shape (p,)
        Fit percent of the ``prediction_steps``-ahead prediction per output,
        over the samples after the initial-state window.
    prediction_steps : int
    residuals : numpy.ndarray, shape (N, p)
        One-step prediction errors (the simulation error when the model has no
        innovation gain); the residual tests use them from ``scored_from`` on.
    whiteness : tuple of WhitenessResult
        One per output.
    cross_correlation : tuple of tuple of Correlation
        ``[i][j]``: residual of output ``i`` against prewhitened input ``j``,
        lags ``-max_lag .. max_lag`` (positive lag: input leads the residual).
    normality : NormalityResult
    spectral : SpectralComparison
    verdicts : tuple of Verdict
    n_samples : int
    initial_state : str
        How the initial state was chosen (one of :data:`INITIAL_STATE_MODES`).
    x0 : numpy.ndarray, shape (n,)
        Initial state of the simulation.
    simulated, predicted : numpy.ndarray, shape (N, p)
        Free-run simulation (from ``x0``) and k-step prediction (deviations).
    measured : numpy.ndarray, shape (N, p)
        The measured output deviations.
    inputs, outputs : tuple of str
        Signal names (from the model).
    sample_time : float
    options : CheckOptions
    fits : tuple of FitFigure
        Every fit figure, in :data:`FIT_KINDS` order.
    fit_note : str
        Which figure to believe, in one sentence.
    scored_from : int
        First sample of the prediction fit and the residual tests.
    lag_span : LagSpan
        The lags examined and why.
    whiteners : tuple of InputWhitener
        The prewhitening filter of each input.
    levels : tuple of LevelDependence
        Per output, the strongest level dependence of the residuals.
    gaps : tuple of FitGap
        In-sample against held-out fit (empty without an in-sample fit).
    advice : OrderAdvice
        The one piece of advice about the order.
    feedback_correlation : tuple of tuple of Correlation
        ``[i][j]``: the residual of output ``i`` less its least-squares FIR fit
        on past prewhitened input ``j``, against that input; its negative lags
        are the feedback test (input dynamics the model misses cannot pass for
        feedback there).
    """

    simulation_fit: np.ndarray
    prediction_fit: np.ndarray
    prediction_steps: int
    residuals: np.ndarray
    whiteness: tuple[WhitenessResult, ...]
    cross_correlation: tuple[tuple[Correlation, ...], ...]
    normality: NormalityResult
    spectral: SpectralComparison
    verdicts: tuple[Verdict, ...]
    n_samples: int
    initial_state: str
    x0: np.ndarray
    simulated: np.ndarray
    predicted: np.ndarray
    measured: np.ndarray
    inputs: tuple[str, ...]
    outputs: tuple[str, ...]
    sample_time: float
    options: CheckOptions
    fits: tuple[FitFigure, ...] = ()
    fit_note: str = ""
    scored_from: int = 0
    lag_span: LagSpan | None = None
    whiteners: tuple[InputWhitener, ...] = ()
    levels: tuple[LevelDependence, ...] = ()
    gaps: tuple[FitGap, ...] = ()
    advice: OrderAdvice | None = None
    feedback_correlation: tuple[tuple[Correlation, ...], ...] = ()

    @property
    def gate_failures(self) -> tuple[Verdict, ...]:
        """Failed verdicts of the gated tests (``min_fit``; ``whiteness`` when required)."""
        gated = {"min_fit"} | ({"whiteness"} if self.options.require_white else set())
        return tuple(v for v in self.verdicts if v.test in gated and v.passed is False)

    @property
    def passed(self) -> bool:
        """True when no gate failed (the verdicts of ungated tests do not count)."""
        return not self.gate_failures

    @property
    def gated(self) -> bool:
        """True when a gate (``min_fit`` or ``require_white``) was set."""
        return self.options.min_fit is not None or self.options.require_white

    def fit_of(self, kind: str) -> FitFigure | None:
        """Return the fit figure of one kind, or ``None``."""
        return next((f for f in self.fits if f.kind == kind), None)

    @property
    def poor_outputs(self) -> tuple[str, ...]:
        """Outputs whose believed fit is below :attr:`CheckOptions.fit_warning`."""
        level = self.options.fit_warning
        if level is None:
            return ()
        return tuple(o for o, v in zip(self.outputs, self.simulation_fit, strict=True)
                     if not (np.isfinite(v) and v >= level))

    @property
    def headline(self) -> str:
        """One line: the gates' result with the fit per output beside it, and a warning when the model is poor."""
        fits = ", ".join(f"{o} {_pct_text(v)}" for o, v in zip(self.outputs, self.simulation_fit, strict=True))
        if self.gate_failures:
            head = "FAILED " + ", ".join(sorted({v.test for v in self.gate_failures}))
        elif self.gated:
            head = "PASSED"
        else:
            head = "no gate set"
        text = f"{head}; held-out fit {fits}"
        if self.poor_outputs:
            text = (f"POOR MODEL: {', '.join(self.poor_outputs)} below the warning level of "
                    f"{self.options.fit_warning:g} % ({head}); held-out fit {fits}")
        return text


def _pct_text(value: float) -> str:
    return f"{value:.1f} %" if np.isfinite(value) else "diverged"


# --------------------------------------------------------------------------------------------
# prediction
# --------------------------------------------------------------------------------------------


def _check_model(model: Any) -> StateSpaceModel:
    if not isinstance(model, StateSpaceModel):
        raise OptionError(f"model must be a StateSpaceModel; got {type(model).__name__}")
    if not model.is_discrete:
        raise ModelError("validation needs a discrete-time model; discretise it first")
    return model


def _check_data(model: StateSpaceModel, u: Any, y: Any) -> tuple[np.ndarray, np.ndarray]:
    u = as_signal(u, "u", ndim=2)
    y = as_signal(y, "y", ndim=2)
    if u.shape[1] != model.n_inputs:
        raise OptionError(
            f"u must have {model.n_inputs} column(s) to match the model's inputs; got {u.shape[1]}"
        )
    if y.shape[1] != model.n_outputs:
        raise OptionError(
            f"y must have {model.n_outputs} column(s) to match the model's outputs; got {y.shape[1]}"
        )
    if u.shape[0] != y.shape[0]:
        raise OptionError(
            f"u and y must have the same number of samples; got {u.shape[0]} and {y.shape[0]}"
        )
    return u, y


def _predictor(model: StateSpaceModel) -> StateSpaceModel:
    """One-step predictor as a model driven by ``[u, y]`` with output ``yhat[k|k-1]``."""
    A, B, C, D, K = model.A, model.B, model.C, model.D, model.noise_gain
    p = model.n_outputs
    return StateSpaceModel(
        A=A - K @ C,
        B=np.hstack([B - K @ D, K]),
        C=C,
        D=np.hstack([D, np.zeros((p, p))]),
        sample_time=model.sample_time,
    )


def predict(
    model: StateSpaceModel,
    u: np.ndarray,
    y: np.ndarray,
    steps: int,
    x0: np.ndarray | None = None,
) -> np.ndarray:
    """k-step-ahead output prediction ``yhat[t | t-k]`` of a discrete-time model.

    Parameters
    ----------
    model : StateSpaceModel
        Discrete-time model; its ``noise_gain`` ``K`` (innovation form) is used
        when set.
    u : array_like, shape (N, m)
        Input deviations; future inputs are taken as known.
    y : array_like, shape (N, p)
        Measured output deviations.
    steps : int
        Prediction horizon ``k >= 1``.
    x0 : array_like, shape (n,), optional
        Predicted state ``xhat[0 | -1]``; zero by default.

    Returns
    -------
    numpy.ndarray, shape (N, p)
        ``yhat[t | t-k]``. Samples ``t < k`` are predicted from ``x0`` alone.

    Notes
    -----
    With the innovation form ``x[t+1] = A x + B u + K e``, ``y = C x + D u + e``,
    the one-step predictor is the Kalman predictor::

        xhat[t+1|t] = (A - K C) xhat[t|t-1] + (B - K D) u[t] + K y[t],

    and the k-step prediction propagates ``xhat[t-k+1 | t-k]`` through the
    noise-free model for ``k - 1`` steps. With ``K = None`` the one-step
    predictor, and hence every k-step predictor, is the free-run simulation.

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, sec. 3.2 and 4.3 (predictors of state-space models).
    """
    model = _check_model(model)
    u, y = _check_data(model, u, y)
    steps = int_in_range(steps, "steps", 1)
    n = model.n_states
    x0 = np.zeros(n) if x0 is None else np.asarray(x0, dtype=float).ravel()
    if x0.shape != (n,):
        raise OptionError(f"x0 must have {n} entries; got {x0.size}")
    if model.noise_gain is None:
        return simulate(model, u, x0)
    pred = _predictor(model)
    _warn_if_unstable(pred, "the one-step predictor (A - K C)")
    p1 = simulate_states(pred, np.hstack([u, y]), x0)  # xhat[t | t-1]
    if steps == 1 or n == 0:
        xk = p1
    else:
        # xhat[t|t-k] = xs[t] + A^(k-1) (p1[s] - xs[s]), s = max(t-k+1, 0),
        # where xs is the noise-free state from zero (superposition).
        xs = simulate_states(model, u)
        N = u.shape[0]
        xk = np.empty_like(p1)
        head = min(steps - 1, N)
        # t < k-1: only x0 is known; the free run from x0 is xs + A^t x0.
        M = np.eye(n)
        for t in range(head):
            xk[t] = xs[t] + M @ x0
            M = model.A @ M
        if N > head:
            Ak = np.linalg.matrix_power(model.A, steps - 1)
            diff = p1[: N - head] - xs[: N - head]
            xk[head:] = xs[head:] + diff @ Ak.T
    return xk @ model.C.T + u @ model.D.T


def _warn_if_unstable(model: StateSpaceModel, what: str) -> None:
    if model.n_states and np.max(np.abs(model.poles())) >= 1.0:
        warnings.warn(
            f"{what} has a pole on or outside the unit circle; predictions may diverge",
            UnstableModelWarning,
            stacklevel=3,
        )



# --------------------------------------------------------------------------------------------
# correlations and whiteness
# --------------------------------------------------------------------------------------------


def _xcov(a: np.ndarray, b: np.ndarray, max_lag: int) -> np.ndarray:
    """``sum_t a[t+k] b[t] / N`` for k = -max_lag .. max_lag (a, b demeaned)."""
    N = a.size
    nfft = 1 << int(np.ceil(np.log2(2 * N - 1)))
    fa = np.fft.rfft(a, nfft)
    fb = np.fft.rfft(b, nfft)
    full = np.fft.irfft(fa * np.conj(fb), nfft)  # full[k] = sum_t a[t+k] b[t] (circular)
    pos = full[: max_lag + 1]
    neg = full[nfft - max_lag:] if max_lag else full[:0]
    return np.concatenate([neg, pos]) / N




def _band(n_samples: int, confidence: float) -> float:
    from scipy import stats

    return float(stats.norm.ppf(0.5 + confidence / 2.0) / np.sqrt(n_samples))


def correlation(x: np.ndarray, max_lag: int, confidence: float = 0.95, *,
                simultaneous: bool = False, family: int = 1) -> Correlation:
    """Normalised autocorrelation of a sequence for lags 0 .. max_lag.

    Parameters
    ----------
    x : array_like, shape (N,)
        The sequence (demeaned here).
    max_lag : int
        Largest lag.
    confidence : float, default 0.95
        Level of the band.
    simultaneous : bool, default False
        ``False``: the band ``+-z/sqrt(N)`` holds at each lag; ``True``: a
        white sequence stays inside it at all lags 1 .. max_lag together
        (:func:`ident.assess.residuals.simultaneous_band`).
    family : int, default 1
        With ``simultaneous``, the number of such correlations judged together
        (one per output): the band covers all their lags.

    Returns
    -------
    Correlation
        ``r(k) = sum_t x[t+k] x[t] / sum_t x[t]^2`` (the biased estimate, as in
        :func:`statsmodels.tsa.stattools.acf`).

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, sec. 16.6 (residual analysis).
    """
    x = as_signal(x, "x", ndim=1)
    max_lag = int_in_range(max_lag, "max_lag", 0, max(x.size - 1, 0))
    confidence = fraction(confidence, "confidence")
    xc = x - x.mean()
    c = _xcov(xc, xc, max_lag)[max_lag:]
    values = c / c[0] if c[0] > 0 else np.zeros_like(c)
    family = int_in_range(family, "family", 1)
    band = (simultaneous_band(x.size, max(max_lag, 1) * family, confidence) if simultaneous
            else _band(x.size, confidence))
    lags = np.arange(max_lag + 1)
    sig = tuple(int(k) for k in lags[1:][np.abs(values[1:]) > band])
    return Correlation(lags, values, band, sig, confidence, bool(simultaneous), 1.0, family)


def cross_correlation(
    e: np.ndarray, u: np.ndarray, max_lag: int, confidence: float = 0.95, *, simultaneous: bool = False,
    bartlett: bool = False, family: int = 1,
) -> Correlation:
    """Normalised cross-correlation of a residual with an input, lags -max_lag .. max_lag.

    Parameters
    ----------
    e : array_like, shape (N,)
        Residual.
    u : array_like, shape (N,)
        Input (prewhitened by the caller when it is coloured, see Notes).
    max_lag : int
        Largest lag.
    confidence : float, default 0.95
        Level of the band.
    simultaneous : bool, default False
        The band holds at all ``2 max_lag + 1`` lags together.
    family : int, default 1
        With ``simultaneous``, the number of such correlations judged together
        (one per output and input): the band covers all their lags.
    bartlett : bool, default False
        Scale the band for the colour left in ``e`` and ``u`` by Bartlett's
        formula (see Notes).

    Returns
    -------
    Correlation
        ``r(k) = sum_t e[t+k] u[t] / (N std(e) std(u))``: at a positive lag the
        input leads the residual (missed input dynamics), at a negative lag the
        residual leads the input (feedback).

    Notes
    -----
    For independent sequences the variance of ``r(k)`` is ``P / N`` with
    ``P = sum_j r_e(j) r_u(j)`` (Bartlett's formula; Ljung [1]_ eq. 16.69), which
    is ``1 / N`` when either is white. :func:`validate_model` prewhitens the
    input (:func:`ident.assess.residuals.fit_input_whitener`) so that ``P`` is
    near 1, and with ``bartlett`` scales the band by ``sqrt(P)`` (``P`` at
    least :data:`MIN_BARTLETT_SPREAD`) for what the whitening leaves, as it
    must for a band-limited input that no autoregressive model can whiten.

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, sec. 16.6.
    """
    e = as_signal(e, "e", ndim=1)
    u = as_signal(u, "u", ndim=1)
    if e.size != u.size:
        raise OptionError(f"e and u must have the same length; got {e.size} and {u.size}")
    max_lag = int_in_range(max_lag, "max_lag", 0, max(e.size - 1, 0))
    confidence = fraction(confidence, "confidence")
    ec = e - e.mean()
    uc = u - u.mean()
    scale = np.std(ec) * np.std(uc)
    c = _xcov(ec, uc, max_lag)
    values = c / scale if scale > 0 else np.zeros_like(c)
    family = int_in_range(family, "family", 1)
    band = (simultaneous_band(e.size, (2 * max_lag + 1) * family, confidence) if simultaneous
            else _band(e.size, confidence))
    spread = 1.0
    if bartlett and scale > 0:
        ra = _xcov(ec, ec, max_lag)[max_lag:]
        rb = _xcov(uc, uc, max_lag)[max_lag:]
        P = float(ra[0] * rb[0] + 2.0 * np.sum(ra[1:] * rb[1:])) / float(ra[0] * rb[0])
        spread = math.sqrt(max(P, MIN_BARTLETT_SPREAD))
        band *= spread
    lags = np.arange(-max_lag, max_lag + 1)
    sig = tuple(int(k) for k in lags[np.abs(values) > band])
    return Correlation(lags, values, band, sig, confidence, bool(simultaneous), spread, family)


def whiteness(
    residual: np.ndarray, max_lag: int, confidence: float = 0.95, output: str = "y1", *,
    sample_time: float | None = None, family: int = 1,
) -> WhitenessResult:
    """Autocorrelation with a simultaneous band, Ljung-Box test and cumulative periodogram of one residual.

    Parameters
    ----------
    residual : array_like, shape (N,)
    max_lag : int
        Largest lag of the autocorrelation and of the Ljung-Box sum.
    confidence : float, default 0.95
        The residual counts as white when its autocorrelation stays inside the
        band a white sequence stays inside at every lag 1 .. max_lag with this
        probability.
    output : str
        Output name kept in the result.
    sample_time : float, optional
        Sample time, s; when given, the cumulative periodogram is added.
    family : int, default 1
        Residual sequences judged together (one per output); the band covers
        the lags of all of them.

    Returns
    -------
    WhitenessResult

    Notes
    -----
    ``Q = N (N + 2) sum_{k=1}^{L} r_k^2 / (N - k)``, chi-square with ``L``
    degrees of freedom for a white sequence [1]_; equal to
    :func:`statsmodels.stats.diagnostic.acorr_ljungbox` (which uses a direct,
    quadratic-time autocorrelation; the FFT one here suits long logs). It is
    reported; the verdict is the band, so the figure, the table and the
    verdict say the same.

    References
    ----------
    .. [1] G. M. Ljung and G. E. P. Box, "On a measure of lack of fit in time
       series models", *Biometrika* 65(2), 297-303, 1978.
    """
    acf = correlation(residual, max_lag, confidence, simultaneous=True, family=family)
    x = as_signal(residual, "residual", ndim=1)
    if np.ptp(x) == 0:
        q, pval = 0.0, 1.0
    else:
        N = x.size
        r = acf.values[1:]
        q = float(N * (N + 2) * np.sum(r**2 / (N - np.arange(1, max_lag + 1))))
        from scipy import stats

        pval = float(stats.chi2.sf(q, max_lag))
    periodogram = None
    if sample_time is not None and x.size >= 5 and np.ptp(x) > 0:
        periodogram = cumulative_periodogram(x, sample_time, confidence)
    return WhitenessResult(str(output), acf, q, pval, not acf.significant_lags, periodogram)


# --------------------------------------------------------------------------------------------
# delay diagnosis
# --------------------------------------------------------------------------------------------


def _markov(model: StateSpaceModel, count: int) -> np.ndarray:
    """Impulse response h[k], k = 0 .. count-1, shape (count, p, m)."""
    out = np.empty((count, model.n_outputs, model.n_inputs))
    out[0] = model.D
    M = model.B.copy()
    for k in range(1, count):
        out[k] = model.C @ M if model.n_states else 0.0
        M = model.A @ M
    return out


def _fir_estimate(u: np.ndarray, y: np.ndarray, length: int) -> np.ndarray:
    """Least-squares FIR ``y[t] = sum_k b[k] u[t-k]``, shape (length, p, m)."""
    N = min(u.shape[0], FIR_MAX_SAMPLES)
    m = u.shape[1]
    uu = u[:N] - u[:N].mean(axis=0)
    yy = y[:N] - y[:N].mean(axis=0)
    rows = N - length + 1
    Phi = np.empty((rows, length * m))
    for k in range(length):
        Phi[:, k * m:(k + 1) * m] = uu[length - 1 - k: N - k]
    from scipy import linalg

    theta, *_ = linalg.lstsq(Phi, yy[length - 1:], lapack_driver="gelsy")
    return theta.reshape(length, m, -1).transpose(0, 2, 1)


def _delay_shift(h: np.ndarray, b: np.ndarray, max_shift: int) -> int:
    """Shift s minimising ``||b[k] - h[k - s]||`` if it beats s = 0 clearly, else 0."""
    L = b.size

    def err(s: int) -> float:
        idx = np.arange(L) - s
        hs = np.where((idx >= 0) & (idx < h.size), h[np.clip(idx, 0, h.size - 1)], 0.0)
        return float(np.linalg.norm(b - hs))

    base = err(0)
    best_s, best = 0, base
    for s in range(-max_shift, max_shift + 1):
        if s and (e := err(s)) < best:
            best_s, best = s, e
    return best_s if best < DELAY_SHIFT_GAIN * base else 0




# --------------------------------------------------------------------------------------------
# the whole check
# --------------------------------------------------------------------------------------------


def _lags_text(lags: tuple[int, ...], limit: int = 6) -> str:
    shown = ", ".join(str(k) for k in lags[:limit])
    return shown + (", ..." if len(lags) > limit else "")


def validate_model(
    model: StateSpaceModel,
    u: np.ndarray,
    y: np.ndarray,
    sample_time: float,
    options: CheckOptions | None = None,
    *,
    continued: FitFigure | None = None,
    in_sample_fit: Sequence[float] | None = None,
    lines: LineResponse | None = None,
    singular_values: Sequence[float] | None = None,
    zero_phase_filtered: bool = False,
    covariance: ParameterCovariance | None = None,
) -> ValidationReport:
    """Validate a discrete-time model on input/output data it was not fitted on.

    Parameters
    ----------
    model : StateSpaceModel
        Discrete-time model.
    u : array_like, shape (N, m)
        Input deviations from the model's operating point (the caller
        subtracts ``model.operating_point``).
    y : array_like, shape (N, p)
        Output deviations from the operating point.
    sample_time : float
        Sample time of the data, s; must match the model's within
        :data:`SAMPLE_TIME_RTOL`.
    options : CheckOptions, optional
        Settings; defaults as documented there.
    continued : FitFigure, optional
        The fit of the model continued from the data before this record
        (kind ``"continued"``; the caller has those data, e.g. with
        :func:`ident.estimate.scoring.held_out_score` and a warm-up). When
        given, it is the figure to believe.
    in_sample_fit : sequence of float, optional
        The model's fit on its estimation data, per output; compared with the
        fit here (:func:`ident.assess.advice.fit_gap`).
    lines : LineResponse, optional
        Frequency response measured at the excited lines of a periodic input;
        the frequency-response verdict uses it instead of the Welch estimate.
    singular_values : sequence of float, optional
        Subspace singular values of the estimation data (evidence for the
        order advice).
    zero_phase_filtered : bool
        The data passed a zero-phase (non-causal) anti-alias filter when they
        were decimated or resampled; a feedback verdict then says that the
        filter, too, lets the next input samples into each sample.
    covariance : ParameterCovariance, optional
        The model's parameter covariance (from its estimation); the
        frequency-response verdict then allows for the model's own confidence
        region (:func:`ident.assess.spectral.spectral_comparison`).

    Returns
    -------
    ValidationReport

    Raises
    ------
    OptionError
        Shapes or options are wrong, the data are too short for ``max_lag``, or
        the sample times differ.
    ModelError
        The model is continuous-time.

    Notes
    -----
    Fit percent is ``100 (1 - ||y - yhat|| / ||y - mean(y)||)`` over the scored
    samples. The residual tests use the one-step prediction errors after the
    initial-state window; with a correct model they are white and independent
    of past inputs [1]_.

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, sec. 16.6 (residual analysis).
    """
    model = _check_model(model)
    u, y = _check_data(model, u, y)
    sample_time = positive_float(sample_time, "sample_time")
    options = CheckOptions() if options is None else options
    if not isinstance(options, CheckOptions):
        raise OptionError(f"options must be CheckOptions; got {type(options).__name__}")
    _check_validation_data(model, u.shape[0], sample_time, options)
    run = _run_model(model, u, y, options, _checked_continued(continued, model.n_outputs))
    span = _span(model, u.shape[0] - run.start, options)
    tests = _residual_tests(model, u[run.start:], run.resid[run.start:], span.lags, options)
    spectral = spectral_comparison(model, u, y, segment=options.spectral_segment, confidence=options.confidence,
                                   simulated=run.y_sim, lines=lines, covariance=covariance)
    levels = _levels(model, u[run.start:], run.resid[run.start:], run.y_sim[run.start:], span.lags)
    believed = run.fits[0].fit
    gaps = () if in_sample_fit is None else fit_gap(model.outputs, _in_sample(in_sample_fit, model), believed)
    verdicts, advice = _verdicts(model, u[run.start:], y[run.start:], options, run, tests, spectral, levels,
                                 gaps, singular_values)
    if zero_phase_filtered:
        verdicts = [_filtered_feedback(v, model) for v in verdicts]
    return ValidationReport(
        simulation_fit=_readonly(believed), prediction_fit=_readonly(run.pred_fit),
        prediction_steps=options.prediction_steps, residuals=_readonly(run.resid), whiteness=tests.white,
        cross_correlation=tests.xcorr, feedback_correlation=tests.feedback,
        normality=_normality(run.resid[run.start:]), spectral=spectral,
        verdicts=tuple(verdicts), n_samples=u.shape[0], initial_state=options.initial_state,
        x0=_readonly(run.x0), simulated=_readonly(run.y_sim), predicted=_readonly(run.y_pred),
        measured=_readonly(y), inputs=model.inputs, outputs=model.outputs, sample_time=sample_time,
        options=options, fits=run.fits, fit_note=_fit_note(run.fits, span), scored_from=run.start,
        lag_span=span, whiteners=tests.whiteners, levels=levels, gaps=gaps, advice=advice,
    )


def _checked_continued(continued: FitFigure | None, p: int) -> FitFigure | None:
    if continued is None:
        return None
    if not isinstance(continued, FitFigure) or continued.kind != "continued":
        raise OptionError("continued must be a FitFigure of kind 'continued'")
    if continued.fit.shape != (p,):
        raise OptionError(f"continued.fit must hold {p} value(s); got {continued.fit.size}")
    return continued


def _in_sample(values: Sequence[float], model: StateSpaceModel) -> np.ndarray:
    arr = np.asarray(values, dtype=float).ravel()
    if arr.size != model.n_outputs:
        raise OptionError(f"in_sample_fit must hold {model.n_outputs} value(s); got {arr.size}")
    return arr


def _check_validation_data(model: StateSpaceModel, N: int, sample_time: float, options: CheckOptions) -> None:
    """Refuse data at another sample time than the model's, or too short for the lags and segment asked."""
    if abs(sample_time - model.sample_time) > SAMPLE_TIME_RTOL * model.sample_time:
        raise OptionError(
            f"the data's sample time {sample_time:g} s differs from the model's "
            f"{model.sample_time:g} s",
            hint="resample the log or use a model identified at this rate",
        )
    window = score_window(N, model.n_states)
    if options.initial_state == "estimate" and window * model.n_outputs <= model.n_states:
        raise OptionError(
            f"the initial state of this {model.n_states}-state model cannot be estimated on {N} samples: their "
            f"initial-state window of {window} samples gives {window * model.n_outputs} equations for "
            f"{model.n_states} unknowns (a fit figure would be meaningless)",
            hint="validate on a longer record (at least 4 samples per state)",
        )
    L = options.max_lag
    need = MIN_SAMPLES if L is None else max(MIN_SAMPLES, MIN_SAMPLES_PER_LAG * L)
    usable = N - (window if options.initial_state == "estimate" else 0)
    if usable < need:
        what = f" for max_lag {L}" if L is not None else ""
        raise OptionError(f"validation needs at least {need} samples after the initial-state window{what}; "
                          f"got {usable} of {N}")
    seg = options.spectral_segment
    if seg is not None and seg > N:
        raise OptionError(f"spectral_segment must be at most the {N} samples; got {seg}")


@dataclass(frozen=True, slots=True, eq=False)
class _Run:
    """The model run on the data: initial state, simulation, fit figures, prediction, residuals."""

    x0: np.ndarray
    start: int
    y_sim: np.ndarray
    fits: tuple[FitFigure, ...]
    y_pred: np.ndarray
    pred_fit: np.ndarray
    resid: np.ndarray


def _run_model(model: StateSpaceModel, u: np.ndarray, y: np.ndarray, options: CheckOptions,
               continued: FitFigure | None) -> _Run:
    """Simulate from rest and from an estimated initial state; predict; collect the fit figures.

    The initial state is fitted to the first :func:`score_window` samples,
    which are left out of its fit figure, of the prediction fit and of the
    residual tests.
    """
    n, N, T = model.n_states, u.shape[0], model.sample_time
    estimate = options.initial_state == "estimate" and n > 0
    start = score_window(N, n) if estimate else 0
    x0 = estimate_initial_state(model, u, y, n_samples=start) if estimate else np.zeros(n)
    y_sim = simulate(model, u, x0)
    fits = [continued] if continued is not None else []
    if estimate:
        fits.append(FitFigure("initial_state", fit_percent(y[start:], y_sim[start:]), start,
                              _fit_label("initial_state", start, T)))
    y_rest = simulate(model, u) if estimate else y_sim
    fits.append(FitFigure("from_rest", fit_percent(y, y_rest), 0, _fit_label("from_rest", 0, T)))
    if model.noise_gain is not None and estimate:
        xp0 = estimate_initial_state(_predictor(model), np.hstack([u, y]), y, n_samples=start)
    else:
        xp0 = x0
    y_pred = predict(model, u, y, options.prediction_steps, xp0)
    pred_fit = fit_percent(y[start:], y_pred[start:])
    y_one = y_pred if options.prediction_steps == 1 else predict(model, u, y, 1, xp0)
    return _Run(x0, start, y_sim, tuple(fits), y_pred, pred_fit, y - y_one)


def _fit_note(fits: Sequence[FitFigure], span: LagSpan) -> str:
    """Which fit figure to believe, in one sentence."""
    kinds = [f.kind for f in fits]
    if "continued" in kinds:
        return ("believe 'continued from the data before': the model ran through the data before this "
                "record, so its state at the start is its own and every sample is scored; 'initial state "
                "estimated' fits the start to this record, 'from rest' assumes the plant began at rest at the "
                "operating point")
    if "initial_state" not in kinds:
        return ("only 'from rest' is given (initial state not estimated): it is right when the record began "
                "at rest at the operating point")
    est, rest = fits[kinds.index("initial_state")].fit, fits[kinds.index("from_rest")].fit
    if np.all(np.isfinite(est)) and np.all(np.isfinite(rest)) and np.all(np.abs(est - rest) < 2.0):
        return ("the start hardly matters here: 'from rest' and 'initial state estimated' agree within "
                "2 points")
    settle = (f" (the model settles in about {span.settling_time_s:.4g} s)"
              if span.settling_time_s is not None else "")
    return ("believe 'initial state estimated' unless the record began at rest at the operating point; "
            "'from rest' differs because the model starts from another state than the plant, and the "
            f"difference fades as the model settles{settle}")


def _span(model: StateSpaceModel, n_samples: int, options: CheckOptions) -> LagSpan:
    auto = lag_span(model, n_samples, min_samples_per_lag=MIN_SAMPLES_PER_LAG)
    if options.max_lag is None:
        return auto
    return LagSpan(options.max_lag, auto.settling_time_s, auto.slowest_time_constant_s, "max_lag given")


@dataclass(frozen=True, slots=True, eq=False)
class _Tests:
    white: tuple[WhitenessResult, ...]
    xcorr: tuple[tuple[Correlation, ...], ...]
    whiteners: tuple[InputWhitener, ...]
    feedback: tuple[tuple[Correlation, ...], ...]


def _residual_tests(model: StateSpaceModel, u: np.ndarray, resid: np.ndarray, L: int,
                    options: CheckOptions) -> _Tests:
    """Whiteness per output; cross-correlation of every residual with every prewhitened input.

    The bands are simultaneous over every lag of every output (whiteness) and of
    every output-input pair (cross-correlation), so a right model on open-loop
    data raises each kind of alarm in at most about ``1 - confidence`` of logs.
    """
    conf, T = options.confidence, model.sample_time
    p, m = model.n_outputs, model.n_inputs
    white = tuple(whiteness(resid[:, i], L, conf, output=model.outputs[i], sample_time=T, family=p)
                  for i in range(p))
    whiteners = tuple(fit_input_whitener(u[:, j]) for j in range(m))
    xcorr, feedback = [], []
    for i in range(p):
        row, fb_row = [], []
        for j, w in enumerate(whiteners):
            e_f, u_f = w.apply(resid[:, i]), w.apply(u[:, j])
            kw = {"simultaneous": True, "bartlett": True, "family": p * m}
            row.append(cross_correlation(e_f, u_f, L, conf, **kw))
            fb_row.append(cross_correlation(_less_past_input(e_f, u_f, L), u_f, L, conf, **kw))
        xcorr.append(tuple(row))
        feedback.append(tuple(fb_row))
    return _Tests(white, tuple(xcorr), whiteners, tuple(feedback))


def _less_past_input(e: np.ndarray, u: np.ndarray, L: int) -> np.ndarray:
    """Remove from ``e`` its least-squares FIR fit on ``u`` at lags 0 .. L (fitted on the leading samples).

    A model that misses input dynamics leaves a residual that follows past
    inputs; through the colour left in the input that part also correlates
    with later inputs and would pass for feedback. Feedback shows in what is
    left: a later input reacting to the residual itself.
    """
    n = min(e.size, FIR_MAX_SAMPLES)
    if n <= 4 * (L + 1):
        return e
    uu = u - u.mean()
    phi = np.empty((n - L, L + 1))
    for k in range(L + 1):
        phi[:, k] = uu[L - k: n - k]
    h, *_ = np.linalg.lstsq(phi, e[L:n] - e[L:n].mean(), rcond=None)
    return e - np.convolve(uu, h)[: e.size]


def _levels(model: StateSpaceModel, u: np.ndarray, error: np.ndarray, y_sim: np.ndarray, lags: int) -> tuple:
    """Find, per output, the strongest dependence of the residual on an input's or the model output's level.

    The one-step prediction errors of a right model are independent of the
    inputs, hence of every input level and of the model's simulated output
    (a function of the inputs only); their mean and spread are the same in
    every level bin. What a linear FIR filter of the inputs explains (input
    dynamics the model misses, a wrong delay) is removed first, so only a
    dependence no linear model can give is left (on at most
    :data:`LEVEL_MAX_SAMPLES` leading samples).
    """
    count = min(u.shape[0], LEVEL_MAX_SAMPLES)
    rest, first = _without_linear_input_part(u[:count], error[:count], min(lags + 1, LEVEL_FIR_TAPS))
    u, y_sim = u[first:count], y_sim[first:count]
    out = []
    for i, name in enumerate(model.outputs):
        found = [level_dependence(rest[:, i], u[:, j], output=name, level_signal=model.inputs[j])
                 for j in range(model.n_inputs) if np.ptp(u[:, j]) > 0]
        if np.ptp(y_sim[:, i]) > 0:
            found.append(level_dependence(rest[:, i], y_sim[:, i], output=name,
                                          level_signal=f"the model's {name}"))
        if found:
            out.append(max(found, key=lambda d: (d.depends, d.share, d.spread_ratio)))
    return tuple(out)


def _without_linear_input_part(u: np.ndarray, e: np.ndarray, taps: int) -> tuple[np.ndarray, int]:
    """Return ``e`` less its least-squares FIR fit on the current and ``taps - 1`` past inputs, and its first sample.

    The first ``taps - 1`` samples (without a full regressor) are dropped; a
    record too short for the fit is returned whole.
    """
    n, m = u.shape
    if n <= 4 * taps * m:
        return e, 0
    uu = u - u.mean(axis=0)
    phi = np.empty((n - taps + 1, taps * m))
    for k in range(taps):
        phi[:, k * m:(k + 1) * m] = uu[taps - 1 - k: n - k]
    theta, *_ = np.linalg.lstsq(phi, e[taps - 1:], rcond=None)
    return e[taps - 1:] - phi @ theta, taps - 1


def _normality(resid: np.ndarray) -> NormalityResult:
    """Jarque-Bera test of the residuals of each output (statsmodels)."""
    from statsmodels.stats.stattools import jarque_bera

    jb, jb_p, skew, kurt = jarque_bera(resid, axis=0)
    return NormalityResult(
        _readonly(np.atleast_1d(jb)), _readonly(np.atleast_1d(jb_p)),
        _readonly(np.atleast_1d(skew)), _readonly(np.atleast_1d(kurt)),
    )


# --------------------------------------------------------------------------------------------
# verdicts
# --------------------------------------------------------------------------------------------


def _verdicts(model: StateSpaceModel, u: np.ndarray, y: np.ndarray, options: CheckOptions, run: _Run,
              tests: _Tests, spectral: SpectralComparison, levels: Sequence[LevelDependence],
              gaps: Sequence[FitGap], singular_values: Sequence[float] | None) -> tuple[list[Verdict], OrderAdvice]:
    """All verdicts in report order, and the order advice (the last verdict)."""
    believed = run.fits[0]
    out = _fit_level_verdicts(model.outputs, believed, options)
    out += _fit_verdicts(model.outputs, believed, options)
    out += _gap_verdicts(gaps)
    out += _prediction_verdicts(model, believed.fit, run.pred_fit, options.prediction_steps)
    correlation_verdicts, input_bad, missed = _correlation_verdicts(model, u, y, tests)
    out += _whiteness_verdicts(model, tests.white, input_bad)
    out += correlation_verdicts
    out += _level_verdicts(levels)
    out += _spectral_verdicts(spectral)
    advice = _order_advice(model, missed, gaps, singular_values)
    out.append(_order_verdict(advice))
    return out, advice


def _fit_level_verdicts(outs: tuple[str, ...], fit: FitFigure, options: CheckOptions) -> list[Verdict]:
    """Apply the default warning level: one verdict per output below it (or one saying all reach it)."""
    level = options.fit_warning
    if level is None:
        return []
    low = [(o, v) for o, v in zip(outs, fit.fit, strict=True) if not (np.isfinite(v) and v >= level)]
    if not low:
        return [Verdict("fit_level", True, f"every output's fit ({fit.label}) reaches the warning level of "
                                           f"{level:g} %")]
    return [Verdict("fit_level", False,
                    f"the model is poor for {o}: fit {_pct_text(v)} ({fit.label}) is below the warning level of "
                    f"{level:g} %; do not use it for controller design before the cause is found", o, None,
                    "poor_fit") for o, v in low]


def _fit_verdicts(outs: tuple[str, ...], fit: FitFigure, options: CheckOptions) -> list[Verdict]:
    """``min_fit`` verdicts, one per output, when a minimum fit was asked for."""
    out: list[Verdict] = []
    if options.min_fit is not None:
        for i in range(len(outs)):
            ok = bool(np.isfinite(fit.fit[i]) and fit.fit[i] >= options.min_fit)
            text = (f"simulation fit of {outs[i]} is {_pct_text(fit.fit[i])}, "
                    f"{'meeting' if ok else 'below'} the required {options.min_fit:g} % ({fit.label})")
            if not ok:
                text += "; the model does not reproduce this log well enough; see the other verdicts for the cause"
            out.append(Verdict("min_fit", ok, text, outs[i], None, None if ok else "poor_fit"))
    return out


def _gap_verdicts(gaps: Sequence[FitGap]) -> list[Verdict]:
    out = []
    for g in gaps:
        if g.kind == "held_out_lower":
            out.append(Verdict("fit_gap", False, g.message, g.output, None, "overfit"))
        elif g.kind == "held_out_higher":
            out.append(Verdict("fit_gap", False, g.message, g.output, None, "suspicious_split"))
        else:
            out.append(Verdict("fit_gap", True, g.message, g.output))
    return out


def _prediction_verdicts(model: StateSpaceModel, sim_fit: np.ndarray, pred_fit: np.ndarray,
                         steps: int) -> list[Verdict]:
    """One-step prediction worse than the simulation: the noise model is wrong (only with a noise model)."""
    if model.noise_gain is None or steps != 1:
        return []
    out = []
    for i, name in enumerate(model.outputs):
        a, b = float(sim_fit[i]), float(pred_fit[i])
        if np.isfinite(a) and (not np.isfinite(b) or b < a - PREDICTION_MARGIN):
            out.append(Verdict(
                "prediction", False,
                f"the one-step prediction of {name} ({_pct_text(b)}) is worse than the simulation "
                f"({_pct_text(a)}): the noise model is wrong (its predictor amplifies the noise instead of "
                "using it); refit the noise model, or rely on the simulation", name, None, "noise_model"))
        else:
            out.append(Verdict("prediction", True,
                               f"the one-step prediction of {name} ({_pct_text(b)}) is at least as good as the "
                               f"simulation ({_pct_text(a)})", name))
    return out


def _correlation_verdicts(model: StateSpaceModel, u: np.ndarray, y: np.ndarray,
                          tests: _Tests) -> tuple[list[Verdict], np.ndarray, list[str]]:
    """Input independence (positive lags) and feedback (negative lags) per channel.

    Also returns, per output and input, whether the residuals depend on the
    input (the whiteness verdicts point at it), and the channels where that is
    not a delay (evidence for the order advice).
    """
    ins, outs = model.inputs, model.outputs
    p, m = model.n_outputs, model.n_inputs
    L = int(tests.xcorr[0][0].lags.max()) if p and m else 0
    pos, neg = np.arange(0, L + 1), np.arange(-L, 0)
    input_bad = np.zeros((p, m), bool)
    responses: dict[str, np.ndarray] = {}  # FIR estimate and Markov parameters, made on the first failure
    out: list[Verdict] = []
    missed: list[str] = []
    for i in range(p):
        for j in range(m):
            c = tests.xcorr[i][j]
            order = tests.whiteners[j].order
            if c.fails(pos):
                input_bad[i, j] = True
                verdict = _input_dependence_verdict(model, u, y, L, c.peak(pos), c.band, i, j, responses)
                out.append(verdict)
                if verdict.cause != "delay":
                    missed.append(f"{ins[j]} -> {outs[i]}")
            else:
                out.append(Verdict("input_independence", True,
                                   f"residuals of {outs[i]} are independent of past {ins[j]} (lags 0..{L}, "
                                   f"{c.band_text}{_prewhitened(order)})", outs[i], ins[j]))
            out.append(_feedback_verdict(tests.feedback[i][j], neg, ins[j], outs[i], order))
    return out, input_bad, missed


def _filtered_feedback(v: Verdict, model: StateSpaceModel) -> Verdict:
    """Name the zero-phase anti-alias filter beside feedback as a cause of a residual leading its input."""
    if v.test != "feedback" or v.passed:
        return v
    head = v.message.split(": ", 1)[0]
    return Verdict(v.test, v.passed, f"{head}: either {v.input} reacts to {v.output} (the log was taken with "
                   "feedback; open-loop estimates can be biased), or the zero-phase anti-alias filter the data "
                   "passed when they were decimated or resampled let the next input samples into every sample "
                   "(feedback also shows at lags beyond the filter's reach)", v.output, v.input, v.cause)


def _prewhitened(order: int) -> str:
    return f"; input prewhitened by an AR({order}) model" if order else ""


def _feedback_verdict(c: Correlation, neg: np.ndarray, iname: str, oname: str, order: int) -> Verdict:
    if not c.fails(neg):
        return Verdict("feedback", True,
                       f"no sign of feedback from {oname} to {iname} (lags -{neg.size}..-1 of the residual less what "
                       f"past {iname} explains inside the {c.band_text}{_prewhitened(order)})", oname, iname)
    lag, val = c.peak(neg)
    lags = _lags_text(tuple(sorted(c.outside(neg), reverse=True)))
    return Verdict(
        "feedback", False,
        f"residuals of {oname}, less what past {iname} explains, are correlated with later values of {iname} "
        f"(lags {lags} outside the {c.band_text}; largest r = {val:+.3f} at lag {lag}{_prewhitened(order)}): "
        f"{iname} appears to react "
        f"to {oname}, i.e. the log was taken with feedback; open-loop estimates can be biased",
        oname, iname, "feedback",
    )


def _input_dependence_verdict(model: StateSpaceModel, u: np.ndarray, y: np.ndarray, L: int,
                              peak: tuple[int, float], band: float, i: int, j: int,
                              responses: dict[str, np.ndarray]) -> Verdict:
    """Failed input independence of output ``i`` on input ``j``: a wrong delay, or missed input dynamics.

    The measured FIR response and the model's Markov parameters are computed
    once, into ``responses``, and compared for a delay shift. Whether missed
    dynamics mean a different order is left to the order advice.
    """
    ins, outs = model.inputs, model.outputs
    lag, val = peak
    if not responses:
        responses["fir"] = _fir_estimate(u, y, L + 1)
        responses["markov"] = _markov(model, L + 1 + MAX_DELAY_SHIFT)
    fir, markov = responses["fir"], responses["markov"]
    shift = _delay_shift(markov[:, i, j], fir[:, i, j], min(MAX_DELAY_SHIFT, L // 2))
    head = (f"residuals of {outs[i]} are correlated with past {ins[j]} (largest r = {val:+.3f} at lag {lag}, "
            f"outside the band +-{band:.3f})")
    if shift:
        word = "later" if shift > 0 else "earlier"
        return Verdict("input_independence", False,
                       f"{head}: the measured response to {ins[j]} arrives {abs(shift)} sample(s) {word} than "
                       "the model's; the input delay looks wrong", outs[i], ins[j], "delay")
    return Verdict("input_independence", False,
                   f"{head}: the model misses part of how {ins[j]} drives {outs[i]} (see the order advice)",
                   outs[i], ins[j], "input_dynamics")


def _whiteness_verdicts(model: StateSpaceModel, white: tuple[WhitenessResult, ...],
                        input_bad: np.ndarray) -> list[Verdict]:
    """Residual whiteness per output, with the likely cause when it fails."""
    outs = model.outputs
    out: list[Verdict] = []
    for i, w in enumerate(white):
        acf = w.autocorrelation
        L = int(acf.lags.max())
        extra = _periodogram_text(w.periodogram, w.white)
        if w.white:
            out.append(Verdict("whiteness", True,
                               f"residuals of {outs[i]} look white (lags 1..{L} inside the {acf.band_text}; "
                               f"Ljung-Box p = {w.ljung_box_pvalue:.3g}{extra})", outs[i]))
            continue
        head = (f"residuals of {outs[i]} are correlated (lags {_lags_text(acf.significant_lags)} outside the "
                f"{acf.band_text}; Ljung-Box p = {w.ljung_box_pvalue:.2g}{extra})")
        if input_bad[i].any():
            msg, cause = (f"{head}, largely a consequence of the input-to-output error reported for this output; "
                          "fix that first"), "input_dynamics"
        elif model.noise_gain is None:
            msg, cause = (f"{head} while independent of the inputs: the input dynamics look right but the "
                          "disturbance is coloured; a noise model is needed for good prediction"), "noise_model"
        else:
            msg, cause = (f"{head} while independent of the inputs: the model's noise description is too "
                          "simple; a richer noise model would predict better"), "noise_model"
        out.append(Verdict("whiteness", False, msg, outs[i], None, cause))
    return out


def _periodogram_text(cp: CumulativePeriodogram | None, white: bool) -> str:
    if cp is None:
        return ""
    where = "inside" if cp.white else "outside"
    text = f"; cumulative periodogram {where} its {100 * cp.confidence:g} % band"
    if white and not cp.white:
        text += ", a slow colouring the lags shown do not reach"
    return text


def _level_verdicts(levels: Sequence[LevelDependence]) -> list[Verdict]:
    out = []
    for d in levels:
        if not d.depends:
            out.append(Verdict("nonlinearity", True,
                               f"the residuals of {d.output} do not depend clearly on the level of "
                               f"{d.level_signal}", d.output))
            continue
        what = []
        if d.share >= 0.2:
            what.append(f"its mean changes with the level beyond a straight line ({100 * d.share:.0f} % of the "
                        "error variance)")
        if d.spread_ratio >= 2.0:
            what.append(f"its spread changes {d.spread_ratio:.1f}-fold between level bins")
        out.append(Verdict(
            "nonlinearity", False,
            f"the residuals of {d.output} depend on the level of {d.level_signal} ({'; '.join(what)}): "
            "the process may be nonlinear around this operating point; try a smaller amplitude, or a model per "
            "operating point", d.output, None, "nonlinearity"))
    return out


def _spectral_verdicts(spectral: SpectralComparison) -> list[Verdict]:
    """Coherence notes and one frequency-response verdict per channel (or per mismatch band)."""
    out: list[Verdict] = []
    if spectral.source == "welch":
        out += _coherence_verdicts(spectral)
    for j in spectral.judgements:
        out += _channel_verdicts(spectral, j)
    return out


def _coherence_verdicts(spectral: SpectralComparison) -> list[Verdict]:
    """One note per output (and input) whose coherence is low somewhere in the excited band."""
    groups: dict[tuple[str, str | None], list[FrequencyBand]] = {}
    for band in spectral.low_coherence_bands:
        groups.setdefault((band.output, band.input), []).append(band)
    out = []
    for (oname, iname), bands in groups.items():
        src = iname if iname is not None else "the inputs"
        shown = ", ".join(f"{b.low_hz:.4g}-{b.high_hz:.4g}" for b in bands[:3])
        more = f" and {len(bands) - 3} more stretch(es)" if len(bands) > 3 else ""
        out.append(Verdict(
            "coherence", False,
            f"coherence between {src} and {oname} is below {COHERENCE_LOW:g} in {shown} Hz{more} inside the "
            f"excited band (lowest {min(b.worst for b in bands):.2f}): the data cannot support the model there "
            "(little excitation, much noise, a nonlinearity or another input)", oname, iname, "low_coherence"))
    if not out:
        out.append(Verdict("coherence", True, f"coherence is at least {COHERENCE_LOW:g} over the excited band"))
    return out


def _estimate_text(spectral: SpectralComparison) -> str:
    if spectral.source == "periodic":
        return (f"the response measured at the excited lines of the periodic input ({spectral.n_segments} "
                "periods averaged)")
    return (f"the H1 estimate ({spectral.segment_length}-sample segments, {spectral.n_segments} averages, "
            f"{spectral.segment.resolution_hz:.3g} Hz resolution)")


def _model_region_text(spectral: SpectralComparison) -> str:
    """Say that the model's own confidence region was allowed for (when it was)."""
    return "" if spectral.model_radius is None else " widened by the model's own confidence region"


def _channel_verdicts(spectral: SpectralComparison, j: Any) -> list[Verdict]:
    conf = f"{100 * spectral.confidence:g} %"
    where = f"{j.low_hz:.4g}-{j.high_hz:.4g} Hz" if j.informative else ""
    share = (f"{100 * j.informative_share:.0f} % of the excited band informative, {j.informative} of "
             f"{j.excited} frequencies")
    if j.status == "disagrees":
        bands = [b for b in spectral.mismatch_bands if b.output == j.output and b.input == j.input]
        shown = ", ".join(f"{b.low_hz:.4g}-{b.high_hz:.4g}" for b in bands[:3])
        more = f" and {len(bands) - 3} more band(s)" if len(bands) > 3 else ""
        return [Verdict(
            "frequency_response", False,
            f"the model misses the measured response from {j.input} to {j.output} in {shown} Hz{more} (relative "
            f"error up to {100 * max(b.worst for b in bands):.0f} %, outside the {100 * MISMATCH_CONFIDENCE:g} % "
            f"region of {_estimate_text(spectral)}{_model_region_text(spectral)}); judged over {where}, {share}",
            j.output, j.input, "model_mismatch")]
    if j.status == "cannot_judge":
        return [Verdict(
            "frequency_response", None,
            f"cannot judge the response from {j.input} to {j.output}: only {share} (coherence below "
            f"{COHERENCE_LOW:g} or a {conf} region wider than half the response) in {_estimate_text(spectral)}; "
            "record a longer log, excite more strongly, or average periods", j.output, j.input, "low_coherence")]
    return [Verdict(
        "frequency_response", True,
        f"the model agrees with the measured response from {j.input} to {j.output} over {where} ({share}; "
        f"{j.outside} outside the {conf} region of {_estimate_text(spectral)}{_model_region_text(spectral)})",
        j.output, j.input)]


def _mode_name(mode: Any) -> str:
    if "negative_real" in mode.flags or mode.s is None:
        return f"the pole at z = {mode.z.real:.4g}"
    if mode.is_pair and mode.natural_frequency_hz is not None:
        return f"the {mode.natural_frequency_hz:.4g} Hz mode"
    if mode.time_constant_s is not None:
        return f"the real mode with tau = {mode.time_constant_s:.4g} s"
    return f"the pole at z = {mode.z.real:.4g}"


def _order_advice(model: StateSpaceModel, missed: Sequence[str], gaps: Sequence[FitGap],
                  singular_values: Sequence[float] | None) -> OrderAdvice:
    """Weigh the mode flags, the missed input dynamics, the fit gap and the singular values."""
    cancelling, negative = [], []
    if model.n_states:
        from .modes import mode_table

        try:
            table = mode_table(model)
        except (OptionError, ModelError, np.linalg.LinAlgError, ValueError):
            table = None
        for mode in (table.modes if table is not None else ()):
            if "near_cancellation" in mode.flags:
                cancelling.append(_mode_name(mode))
            if "negative_real" in mode.flags:
                negative.append(_mode_name(mode))
    delay_states = int(np.count_nonzero(np.abs(model.poles()) <= 1e-12)) if model.n_states else 0
    return order_advice(n_states=model.n_states, cancelling_modes=cancelling, negative_real_modes=negative,
                        missed_input_dynamics=missed, gaps=gaps, singular_values=singular_values,
                        delay_states=delay_states)


def _order_verdict(advice: OrderAdvice) -> Verdict:
    if advice.direction == "keep":
        return Verdict("order", True, advice.message)
    if advice.direction == "unclear":
        return Verdict("order", None, advice.message, cause="order")
    return Verdict("order", False, advice.message, cause="order")


# --------------------------------------------------------------------------------------------
# JSON
# --------------------------------------------------------------------------------------------


def _corr_dict(c: Correlation, judged: range | None = None) -> dict:
    """Return a correlation as JSON; ``judged``: the lags its verdict reads (``judged_lags``, ``outside_judged``)."""
    out = {
        "lags": json_ready(c.lags),
        "values": json_ready(c.values),
        "band": json_ready(c.band),
        "confidence": c.confidence,
        "simultaneous": c.simultaneous,
        "significant_lags": list(c.significant_lags),
    }
    if judged is not None:
        out["judged_lags"] = [judged.start, judged.stop - 1]
        out["outside_judged"] = list(c.outside(judged))
    return out


def _band_dict(b: FrequencyBand) -> dict:
    return {"output": b.output, "input": b.input, "low_hz": b.low_hz, "high_hz": b.high_hz,
            "worst": json_ready(b.worst)}


def _spectral_dict(sp: SpectralComparison) -> dict:
    seg = sp.segment
    return {
        "source": sp.source,
        "frequencies_hz": json_ready(sp.frequencies_hz),
        "segment_length": sp.segment_length,
        "n_segments": sp.n_segments,
        "effective_averages": sp.effective_averages,
        "segment_choice": None if seg is None else {
            "segment": seg.segment, "window": seg.window, "resolution_hz": seg.resolution_hz,
            "needed_hz": seg.needed_hz, "reasons": list(seg.reasons), "limited_by_log": seg.limited_by_log,
            "text": seg.describe()},
        "confidence": sp.confidence,
        "model_magnitude": json_ready(np.abs(sp.model_response)),
        "model_phase_deg": json_ready(np.degrees(np.angle(sp.model_response))),
        "model_seen_magnitude": json_ready(np.abs(sp.model_seen)),
        "estimate_magnitude": json_ready(np.abs(sp.estimate)),
        "estimate_phase_deg": json_ready(np.degrees(np.angle(sp.estimate))),
        "radius": json_ready(sp.radius),
        "model_radius": None if sp.model_radius is None else json_ready(sp.model_radius),
        "dense_frequencies_hz": json_ready(sp.dense_frequencies_hz),
        "dense_magnitude": json_ready(np.abs(sp.dense_response)),
        "dense_phase_deg": json_ready(np.degrees(np.angle(sp.dense_response))),
        "coherence": json_ready(sp.coherence),
        "multiple_coherence": json_ready(sp.multiple_coherence),
        "excited": json_ready(sp.excited),
        "informative": json_ready(sp.informative),
        "low_coherence_bands": [_band_dict(b) for b in sp.low_coherence_bands],
        "mismatch_bands": [_band_dict(b) for b in sp.mismatch_bands],
        "judgements": [{"output": j.output, "input": j.input, "status": j.status, "excited": j.excited,
                        "informative": j.informative, "informative_share": j.informative_share,
                        "low_hz": j.low_hz, "high_hz": j.high_hz,
                        "outside": j.outside, "largest_error": j.largest_error} for j in sp.judgements],
    }


def _residual_dict(report: ValidationReport) -> dict:
    outs, ins = report.outputs, report.inputs
    span = report.lag_span
    leads = None if span is None else range(0, span.lags + 1)
    lags_back = None if span is None else range(-span.lags, 0)
    return {
        "lag_span": None if span is None else {
            "lags": span.lags, "seconds": span.lags * report.sample_time, "settling_time_s": span.settling_time_s,
            "slowest_time_constant_s": span.slowest_time_constant_s, "reason": span.reason},
        "whiteness": {
            w.output: {
                "ljung_box_statistic": json_ready(w.ljung_box_statistic),
                "ljung_box_pvalue": json_ready(w.ljung_box_pvalue),
                "white": w.white,
                "autocorrelation": _corr_dict(w.autocorrelation),
                "cumulative_periodogram": None if w.periodogram is None else {
                    "statistic": w.periodogram.statistic, "band": w.periodogram.band,
                    "confidence": w.periodogram.confidence, "white": w.periodogram.white},
            }
            for w in report.whiteness
        },
        "prewhitening": {ins[j]: {"ar_order": w.order, "coefficients": json_ready(w.coefficients),
                                  "innovation_share": w.innovation_share}
                         for j, w in enumerate(report.whiteners)},
        "cross_correlation": {
            outs[i]: {ins[j]: _corr_dict(c, leads) for j, c in enumerate(row)}
            for i, row in enumerate(report.cross_correlation)
        },
        "feedback_correlation": {
            outs[i]: {ins[j]: _corr_dict(c, lags_back) for j, c in enumerate(row)}
            for i, row in enumerate(report.feedback_correlation)
        },
        "normality": {
            name: {
                "jarque_bera": json_ready(report.normality.statistic[i]),
                "pvalue": json_ready(report.normality.pvalue[i]),
                "skewness": json_ready(report.normality.skewness[i]),
                "kurtosis": json_ready(report.normality.kurtosis[i]),
            }
            for i, name in enumerate(outs)
        },
    }


def report_to_dict(report: ValidationReport, *, include_signals: bool = False) -> dict:
    """Return a validation report as a JSON-safe dict (non-finite numbers become None).

    Parameters
    ----------
    report : ValidationReport
    include_signals : bool, default False
        Also include the residual, simulated and predicted time series (large).

    Returns
    -------
    dict
        Keys: ``n_samples, sample_time, inputs, outputs, options, initial_state,
        x0, prediction_steps, headline, poor_outputs, fit, fits, fit_note,
        scored_from, lag_span, whiteness, prewhitening, cross_correlation,
        normality, spectral, levels, gaps, advice, verdicts, gates`` (and
        ``signals`` when asked).
    """
    outs = report.outputs
    opts = report.options
    d: dict[str, Any] = {
        "n_samples": report.n_samples, "sample_time": report.sample_time,
        "inputs": list(report.inputs), "outputs": list(outs),
        "options": {f.name: json_ready(getattr(opts, f.name)) for f in fields(opts)},
        "initial_state": report.initial_state, "x0": json_ready(report.x0),
        "prediction_steps": report.prediction_steps,
        "headline": report.headline, "poor_outputs": list(report.poor_outputs),
        "fit": {name: {"simulation_percent": json_ready(report.simulation_fit[i]),
                       "prediction_percent": json_ready(report.prediction_fit[i])}
                for i, name in enumerate(outs)},
        "fits": [{"kind": f.kind, "label": f.label, "first_scored": f.first_scored,
                  "percent": dict(zip(outs, json_ready(f.fit), strict=True))} for f in report.fits],
        "fit_note": report.fit_note, "scored_from": report.scored_from,
        **_residual_dict(report),
        "spectral": _spectral_dict(report.spectral),
        "levels": [{"output": v.output, "level_signal": v.level_signal, "share": v.share,
                    "spread_ratio": json_ready(v.spread_ratio), "pvalue": v.pvalue, "depends": v.depends,
                    "edges": json_ready(v.edges), "means": json_ready(v.means), "stds": json_ready(v.stds)}
                   for v in report.levels],
        "gaps": [{"output": g.output, "in_sample": json_ready(g.in_sample), "held_out": json_ready(g.held_out),
                  "kind": g.kind, "message": g.message} for g in report.gaps],
        "advice": None if report.advice is None else {
            "direction": report.advice.direction, "message": report.advice.message,
            "too_high": list(report.advice.too_high), "too_low": list(report.advice.too_low)},
        "verdicts": [{"test": v.test, "passed": v.passed, "outcome": v.outcome, "message": v.message,
                      "output": v.output, "input": v.input, "cause": v.cause} for v in report.verdicts],
        "gates": {"passed": report.passed, "gated": report.gated,
                  "failed": [v.message for v in report.gate_failures]},
    }
    if include_signals:
        d["signals"] = {
            "measured": json_ready(report.measured),
            "simulated": json_ready(report.simulated),
            "predicted": json_ready(report.predicted),
            "residuals": json_ready(report.residuals),
        }
    return d


def fit_percent(y: np.ndarray, y_hat: np.ndarray) -> np.ndarray:
    """Normalised fit of a model output to a measured output, per output channel.

    Parameters
    ----------
    y : array_like, shape (N, p)
        Measured output.
    y_hat : array_like, shape (N, p)
        Model output (simulated or predicted).

    Returns
    -------
    numpy.ndarray, shape (p,)
        ``100 (1 - ||y - y_hat|| / ||y - mean(y)||)`` per column; 100 is a
        perfect fit, 0 is no better than the mean, and it can be negative.
        A constant measured output gives ``-inf`` unless matched exactly (100).

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, sec. 16.6 (model validation, comparing outputs).

    Examples
    --------
    >>> fit_percent([[1.0], [2.0], [3.0]], [[1.0], [2.0], [3.0]]).tolist()
    [100.0]
    """
    y = as_signal(y, "y", ndim=2)
    y_hat = as_signal(y_hat, "y_hat", ndim=2)
    if y.shape != y_hat.shape:
        raise OptionError(f"y_hat must have the shape of y {y.shape}; got {y_hat.shape}")
    err = column_norms(y - y_hat)
    spread = column_norms(y - column_sums(y) / max(y.shape[0], 1))
    with np.errstate(divide="ignore", invalid="ignore"):
        fit = 100.0 * (1.0 - err / spread)
    fit = np.where(spread == 0, np.where(err == 0, 100.0, -np.inf), fit)
    return fit
