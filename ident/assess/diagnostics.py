"""Model validation: fit percent, prediction, residual analysis, spectra and verdicts.

:func:`validate_model` answers "does this model explain data it has not seen?"
on a log of input and output deviations from the model's operating point:

* fit percent of the free-run simulation and of the k-step-ahead prediction,
  with the initial state estimated from the first samples;
* whiteness of the one-step prediction residuals (autocorrelation with the
  confidence band, Ljung-Box test);
* independence of the residuals from each input (cross-correlation at positive
  lags: the model misses input dynamics; at negative lags: feedback);
* normality of the residuals (Jarque-Bera; reported, never gated);
* the model's frequency response against the nonparametric H1 estimate with the
  coherence of the data;
* one plain-language :class:`Verdict` per finding, with the likely cause.

Every threshold behind a verdict is a module constant below.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, fields
from typing import Any, Literal

import numpy as np

from .._json import json_ready
from .._validate import as_signal, fraction, int_in_range, one_of, positive_float
from ..errors import ModelError, OptionError, UnstableModelWarning
from ..lti._linalg import column_norms, column_sums
from ..lti.analysis import frequency_response
from ..lti.models import StateSpaceModel
from ..lti.simulate import estimate_initial_state, simulate, simulate_states

__all__ = [
    "INITIAL_STATE_MODES",
    "VERDICT_TESTS",
    "DATA_TESTS",
    "CAUSES",
    "CheckOptions",
    "Correlation",
    "WhitenessResult",
    "NormalityResult",
    "FrequencyBand",
    "SpectralComparison",
    "Verdict",
    "ValidationReport",
    "fit_percent",
    "predict",
    "correlation",
    "cross_correlation",
    "whiteness",
    "spectral_comparison",
    "validate_model",
    "report_to_dict",
]

#: How the initial state of simulation and prediction is chosen.
INITIAL_STATE_MODES = ("estimate", "zero")
#: Names of the tests a :class:`Verdict` can report on.
VERDICT_TESTS = (
    "min_fit",
    "whiteness",
    "input_independence",
    "feedback",
    "coherence",
    "frequency_response",
)
#: Tests whose failure speaks about the data (how it was taken) rather than the model.
DATA_TESTS = ("feedback", "coherence")
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
)

# --- gating rules (explicit, in one place) -------------------------------------------------
#: A correlation fails when any lag lies beyond this multiple of the band ...
STRONG_EXCEEDANCE_FACTOR = 1.5
#: ... or when more than this fraction of its lags lie outside it ...
ALLOWED_OUTSIDE_FRACTION = 0.05
#: ... with at least this many lags always allowed outside (a white sequence puts about
#: 1 % of its lags outside the 99 % band; two of 26 lags happen about 3 % of the time).
ALLOWED_OUTSIDE_MIN = 2
# Residuals are white when the Ljung-Box p-value is at least ``1 - confidence``.
#: Coherence (multiple coherence for several inputs) below this marks a band the
#: data cannot support.
COHERENCE_LOW = 0.5
#: Where the coherence is good, the model misses the nonparametric response when
#: ``|G - H| / |H|`` exceeds this relative tolerance ...
SPECTRAL_REL_TOL = 0.25
#: ... and this many times the random error of the H1 estimate ...
SPECTRAL_ERROR_FACTOR = 4.0
#: ... over at least this many adjacent frequency bins (also the shortest low-coherence band).
MIN_BAND_BINS = 3
#: A delay verdict needs the shifted model impulse response to cut the misfit to the
#: data's FIR estimate to below this fraction of the unshifted misfit.
DELAY_SHIFT_GAIN = 0.5
#: Largest delay shift (samples) examined for the delay verdict.
MAX_DELAY_SHIFT = 10
#: Samples used for the FIR estimate behind the delay verdict (leading part of the log).
FIR_MAX_SAMPLES = 50_000
#: Relative tolerance when comparing the log's sample time with the model's.
SAMPLE_TIME_RTOL = 1e-3
#: Default spectral segment: about this many averages ...
DEFAULT_SEGMENT_AVERAGES = 8
#: ... within these bounds (samples).
DEFAULT_SEGMENT_RANGE = (32, 2048)
#: The log must hold at least this many samples per residual lag examined.
MIN_SAMPLES_PER_LAG = 4


def _set(obj: Any, name: str, value: Any) -> None:
    object.__setattr__(obj, name, value)


def _readonly(x: Any, dtype: Any = float) -> np.ndarray:
    arr = np.array(x, dtype=dtype, copy=True)
    arr.flags.writeable = False
    return arr


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
    max_lag : int, default 25
        Largest lag of the residual auto- and cross-correlations and of the
        Ljung-Box test.
    confidence : float, default 0.99
        Confidence level of the correlation band ``+-z/sqrt(N)`` and of the
        Ljung-Box test (residuals are white when its p-value is at least
        ``1 - confidence``).
    initial_state : {"estimate", "zero"}, default "estimate"
        Estimate the initial state from the first samples, or start from zero.
    spectral_segment : int or None, default None
        Welch segment length in samples; ``None`` picks a power of two giving
        about :data:`DEFAULT_SEGMENT_AVERAGES` averages.
    min_fit : float or None, default None
        Gate: every output's simulation fit percent must reach this value.
    require_white : bool, default False
        Gate: every output's residuals must pass the Ljung-Box test.
    """

    prediction_steps: int = 1
    max_lag: int = 25
    confidence: float = 0.99
    initial_state: Literal["estimate", "zero"] = "estimate"
    spectral_segment: int | None = None
    min_fit: float | None = None
    require_white: bool = False

    def __post_init__(self) -> None:
        _set(self, "prediction_steps", int_in_range(self.prediction_steps, "prediction_steps", 1))
        _set(self, "max_lag", int_in_range(self.max_lag, "max_lag", 1))
        _set(self, "confidence", fraction(self.confidence, "confidence"))
        one_of(self.initial_state, "initial_state", INITIAL_STATE_MODES)
        if self.spectral_segment is not None:
            _set(self, "spectral_segment",
                 int_in_range(self.spectral_segment, "spectral_segment", 8))
        if self.min_fit is not None:
            is_number = isinstance(self.min_fit, (int, float, np.integer, np.floating)) and not isinstance(
                self.min_fit, (bool, np.bool_))
            value = float(self.min_fit) if is_number else math.nan
            if not math.isfinite(value) or value > 100:
                raise OptionError(f"min_fit must be a number of at most 100 (%); got {self.min_fit!r}")
            _set(self, "min_fit", value)
        if not isinstance(self.require_white, bool):
            raise OptionError(f"require_white must be true or false; got {self.require_white!r}")

    @classmethod
    def from_mapping(cls, mapping: Mapping[str, Any]) -> CheckOptions:
        """Build options from a mapping (a pipeline file table); unknown keys are refused."""
        if not isinstance(mapping, Mapping):
            raise OptionError(f"check options must be a table; got {type(mapping).__name__}")
        valid = [f.name for f in fields(cls)]
        unknown = sorted(set(mapping) - set(valid))
        if unknown:
            raise OptionError(
                f"unknown check option(s) {', '.join(map(repr, unknown))}; "
                f"valid: {', '.join(valid)}"
            )
        return cls(**dict(mapping))

    @property
    def z_value(self) -> float:
        """Two-sided normal quantile of :attr:`confidence` (2.576 for 0.99)."""
        from scipy import stats

        return float(stats.norm.ppf(0.5 + self.confidence / 2.0))


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
        Half width ``z / sqrt(N)`` of the band a white sequence stays inside.
    significant_lags : tuple of int
        Lags whose value lies outside the band (lag 0 of an autocorrelation,
        which is 1 by definition, is never listed).
    """

    lags: np.ndarray
    values: np.ndarray
    band: float
    significant_lags: tuple[int, ...]

    def __post_init__(self) -> None:
        _set(self, "lags", _readonly(self.lags, int))
        _set(self, "values", _readonly(self.values))
        _set(self, "band", float(self.band))
        _set(self, "significant_lags", tuple(int(k) for k in self.significant_lags))

    def fails(self, lags: np.ndarray | None = None) -> bool:
        """Apply the gating rule to the given lags (default: all lags).

        The rule: fail when any value exceeds ``STRONG_EXCEEDANCE_FACTOR * band``,
        or when more than ``max(ALLOWED_OUTSIDE_MIN, ALLOWED_OUTSIDE_FRACTION * count)``
        values lie outside the band.
        """
        mask = np.ones(self.lags.size, bool) if lags is None else np.isin(self.lags, lags)
        vals = np.abs(self.values[mask])
        if vals.size == 0:
            return False
        if np.any(vals > STRONG_EXCEEDANCE_FACTOR * self.band):
            return True
        allowed = max(ALLOWED_OUTSIDE_MIN, math.floor(ALLOWED_OUTSIDE_FRACTION * vals.size))
        return int(np.count_nonzero(vals > self.band)) > allowed

    def peak(self, lags: np.ndarray | None = None) -> tuple[int, float]:
        """Lag and value of the largest ``|value|`` among the given lags."""
        mask = np.ones(self.lags.size, bool) if lags is None else np.isin(self.lags, lags)
        idx = np.flatnonzero(mask)
        k = idx[int(np.argmax(np.abs(self.values[idx])))]
        return int(self.lags[k]), float(self.values[k])


@dataclass(frozen=True, slots=True, eq=False)
class WhitenessResult:
    """Whiteness of one output's residuals.

    Parameters
    ----------
    output : str
        Output name.
    autocorrelation : Correlation
        Lags 0 .. max_lag.
    ljung_box_statistic, ljung_box_pvalue : float
        Ljung-Box Q over lags 1 .. max_lag and its chi-square p-value.
    white : bool
        ``ljung_box_pvalue >= 1 - confidence``.
    """

    output: str
    autocorrelation: Correlation
    ljung_box_statistic: float
    ljung_box_pvalue: float
    white: bool


@dataclass(frozen=True, slots=True, eq=False)
class NormalityResult:
    """Jarque-Bera test of the residuals, per output (reported, never gated)."""

    statistic: np.ndarray
    pvalue: np.ndarray
    skewness: np.ndarray
    kurtosis: np.ndarray


@dataclass(frozen=True, slots=True, eq=False)
class FrequencyBand:
    """A contiguous frequency band flagged by the spectral comparison.

    Parameters
    ----------
    output : str
        Output name.
    input : str or None
        Input name; ``None`` for a low-coherence band of an output with several
        inputs (multiple coherence).
    low_hz, high_hz : float
        Band edges (frequency bins included), Hz.
    worst : float
        Lowest coherence (low-coherence band) or largest relative error
        ``|G - H| / |H|`` (mismatch band) in the band.
    """

    output: str
    input: str | None
    low_hz: float
    high_hz: float
    worst: float


@dataclass(frozen=True, slots=True, eq=False)
class SpectralComparison:
    """Model frequency response against the nonparametric estimate from the data.

    Parameters
    ----------
    frequencies_hz : numpy.ndarray, shape (F,)
        Welch frequency grid without the zero bin, Hz.
    model_response : numpy.ndarray, shape (F, p, m), complex
    estimate : numpy.ndarray, shape (F, p, m), complex
        H1 estimate ``S_yu S_uu^-1`` (``P_yu / P_uu`` for one input).
    coherence : numpy.ndarray, shape (F, p, m)
        Ordinary magnitude-squared coherence of each input-output pair.
    multiple_coherence : numpy.ndarray, shape (F, p)
        Multiple coherence of each output with all inputs (equals
        ``coherence[:, :, 0]`` for one input).
    low_coherence_bands : tuple of FrequencyBand
        Bands where the (multiple) coherence is below :data:`COHERENCE_LOW`.
    mismatch_bands : tuple of FrequencyBand
        Bands of good coherence where the model misses the estimate.
    segment_length, n_segments : int
        Welch segment length and number of segments.
    """

    frequencies_hz: np.ndarray
    model_response: np.ndarray
    estimate: np.ndarray
    coherence: np.ndarray
    multiple_coherence: np.ndarray
    low_coherence_bands: tuple[FrequencyBand, ...]
    mismatch_bands: tuple[FrequencyBand, ...]
    segment_length: int
    n_segments: int


@dataclass(frozen=True, slots=True, eq=False)
class Verdict:
    """Outcome of one validation test in plain words.

    Parameters
    ----------
    test : str
        One of :data:`VERDICT_TESTS`.
    passed : bool
        Whether the test passed.
    message : str
        One or two sentences: what was found and its likely cause.
    output, input : str or None
        Signals the verdict is about, when it is about particular ones.
    cause : str or None
        Short code of the likely cause (one of :data:`CAUSES`) when failed.
    """

    test: str
    passed: bool
    message: str
    output: str | None = None
    input: str | None = None
    cause: str | None = None


@dataclass(frozen=True, slots=True, eq=False)
class ValidationReport:
    """Everything :func:`validate_model` found.

    Parameters
    ----------
    simulation_fit : numpy.ndarray, shape (p,)
        Fit percent of the free-run simulation per output.
    prediction_fit : numpy.ndarray, shape (p,)
        Fit percent of the ``prediction_steps``-ahead prediction per output.
    prediction_steps : int
    residuals : numpy.ndarray, shape (N, p)
        One-step prediction errors (the simulation error when the model has no
        innovation gain); all residual tests use them.
    whiteness : tuple of WhitenessResult
        One per output.
    cross_correlation : tuple of tuple of Correlation
        ``[i][j]``: residual of output ``i`` against input ``j``, lags
        ``-max_lag .. max_lag`` (positive lag: input leads the residual).
    normality : NormalityResult
    spectral : SpectralComparison
    verdicts : tuple of Verdict
    n_samples : int
    initial_state : str
        How the initial state was chosen (one of :data:`INITIAL_STATE_MODES`).
    x0 : numpy.ndarray, shape (n,)
        Initial state of the simulation.
    simulated, predicted : numpy.ndarray, shape (N, p)
        Free-run simulation and k-step prediction (deviations).
    measured : numpy.ndarray, shape (N, p)
        The measured output deviations.
    inputs, outputs : tuple of str
        Signal names (from the model).
    sample_time : float
    options : CheckOptions
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

    @property
    def gate_failures(self) -> tuple[Verdict, ...]:
        """Failed verdicts of the gated tests (``min_fit``; ``whiteness`` when required)."""
        gated = {"min_fit"} | ({"whiteness"} if self.options.require_white else set())
        return tuple(v for v in self.verdicts if v.test in gated and not v.passed)

    @property
    def passed(self) -> bool:
        """True when no gate failed (the verdicts of ungated tests do not count)."""
        return not self.gate_failures


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


def correlation(x: np.ndarray, max_lag: int, confidence: float = 0.99) -> Correlation:
    """Normalised autocorrelation of a sequence for lags 0 .. max_lag.

    Parameters
    ----------
    x : array_like, shape (N,)
        The sequence (demeaned here).
    max_lag : int
        Largest lag.
    confidence : float, default 0.99
        Level of the band ``+-z/sqrt(N)``.

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
    band = _band(x.size, confidence)
    lags = np.arange(max_lag + 1)
    sig = tuple(int(k) for k in lags[1:][np.abs(values[1:]) > band])
    return Correlation(lags, values, band, sig)


def cross_correlation(
    e: np.ndarray, u: np.ndarray, max_lag: int, confidence: float = 0.99
) -> Correlation:
    """Normalised cross-correlation of a residual with an input, lags -max_lag .. max_lag.

    Parameters
    ----------
    e : array_like, shape (N,)
        Residual.
    u : array_like, shape (N,)
        Input.
    max_lag : int
        Largest lag.
    confidence : float, default 0.99
        Level of the band ``+-z/sqrt(N)``.

    Returns
    -------
    Correlation
        ``r(k) = sum_t e[t+k] u[t] / (N std(e) std(u))``: at a positive lag the
        input leads the residual (missed input dynamics), at a negative lag the
        residual leads the input (feedback).

    Notes
    -----
    The band holds for a white residual; a coloured residual with a coloured
    input widens the true spread (Ljung, sec. 16.6).
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
    band = _band(e.size, confidence)
    lags = np.arange(-max_lag, max_lag + 1)
    sig = tuple(int(k) for k in lags[np.abs(values) > band])
    return Correlation(lags, values, band, sig)


def whiteness(
    residual: np.ndarray, max_lag: int, confidence: float = 0.99, output: str = "y1"
) -> WhitenessResult:
    """Autocorrelation and Ljung-Box test of one residual sequence.

    Parameters
    ----------
    residual : array_like, shape (N,)
    max_lag : int
        Largest lag of the autocorrelation and of the Ljung-Box sum.
    confidence : float, default 0.99
        White when the Ljung-Box p-value is at least ``1 - confidence``.
    output : str
        Output name kept in the result.

    Returns
    -------
    WhitenessResult

    Notes
    -----
    ``Q = N (N + 2) sum_{k=1}^{L} r_k^2 / (N - k)``, chi-square with ``L``
    degrees of freedom for a white sequence [1]_; equal to
    :func:`statsmodels.stats.diagnostic.acorr_ljungbox` (which uses a direct,
    quadratic-time autocorrelation; the FFT one here suits long logs).

    References
    ----------
    .. [1] G. M. Ljung and G. E. P. Box, "On a measure of lack of fit in time
       series models", *Biometrika* 65(2), 297-303, 1978.
    """
    acf = correlation(residual, max_lag, confidence)
    x = as_signal(residual, "residual", ndim=1)
    if np.ptp(x) == 0:
        q, pval = 0.0, 1.0
    else:
        N = x.size
        r = acf.values[1:]
        q = float(N * (N + 2) * np.sum(r**2 / (N - np.arange(1, max_lag + 1))))
        from scipy import stats

        pval = float(stats.chi2.sf(q, max_lag))
    return WhitenessResult(str(output), acf, q, pval, bool(pval >= 1.0 - confidence))


# --------------------------------------------------------------------------------------------
# spectra
# --------------------------------------------------------------------------------------------


def _default_segment(n_samples: int) -> int:
    lo, hi = DEFAULT_SEGMENT_RANGE
    target = max(1, n_samples // DEFAULT_SEGMENT_AVERAGES)
    seg = 1 << max(0, int(np.floor(np.log2(target))))
    return int(min(n_samples, max(lo, min(hi, seg))))


def _model_response(model: StateSpaceModel, frequencies_hz: np.ndarray) -> np.ndarray:
    return np.asarray(frequency_response(model, frequencies_hz), dtype=complex)


def _close_gaps(mask: np.ndarray, max_gap: int) -> np.ndarray:
    """Set to True the interior runs of False shorter than ``max_gap``."""
    out = mask.copy()
    for a, b in _runs(~mask):
        if a > 0 and b < mask.size and b - a < max_gap:
            out[a:b] = True
    return out


def _runs(mask: np.ndarray, min_len: int = 1) -> list[tuple[int, int]]:
    """Index ranges ``[start, stop)`` of runs of True at least ``min_len`` long."""
    edges = np.diff(np.concatenate([[0], mask.astype(int), [0]]))
    starts = np.flatnonzero(edges == 1)
    stops = np.flatnonzero(edges == -1)
    return [(int(a), int(b)) for a, b in zip(starts, stops, strict=True) if b - a >= min_len]


def spectral_comparison(
    model: StateSpaceModel,
    u: np.ndarray,
    y: np.ndarray,
    *,
    segment: int | None = None,
) -> SpectralComparison:
    """Compare a model's frequency response with the H1 estimate from data.

    Parameters
    ----------
    model : StateSpaceModel
        Discrete-time model.
    u : array_like, shape (N, m)
        Input deviations.
    y : array_like, shape (N, p)
        Output deviations.
    segment : int, optional
        Welch segment length (Hann window, half overlap, mean removed per
        segment, the defaults of :func:`scipy.signal.welch`); default from
        :data:`DEFAULT_SEGMENT_AVERAGES`.

    Returns
    -------
    SpectralComparison

    Notes
    -----
    ``H1 = S_yu S_uu^-1`` with ``S_yu[i, j] = csd(u_j, y_i)`` and
    ``S_uu[j, l] = csd(u_l, u_j)``; for one input this is ``P_yu / P_uu``.
    The random error of ``H1[i, j]`` is about
    ``sigma = sqrt((1 - g^2) S_yy [S_uu^-1]_jj / (2 n_d))`` for (multiple)
    coherence ``g^2`` and ``n_d`` averages; for one input
    ``sigma / |H| = sqrt(1 - g^2) / (|g| sqrt(2 n_d))`` [1]_. A bin counts as a
    miss when ``|G - H|`` exceeds :data:`SPECTRAL_ERROR_FACTOR` times ``sigma``
    and ``|G - H| / |H|`` exceeds :data:`SPECTRAL_REL_TOL`.

    References
    ----------
    .. [1] J. S. Bendat and A. G. Piersol, *Random Data: Analysis and
       Measurement Procedures*, 4th ed., Wiley, 2010, sec. 9.2.
    """
    from scipy import signal

    model = _check_model(model)
    u, y = _check_data(model, u, y)
    N = u.shape[0]
    seg = _default_segment(N) if segment is None else int_in_range(segment, "segment", 8, N)
    fs = 1.0 / model.sample_time
    kw = {"fs": fs, "nperseg": seg}
    m, p = model.n_inputs, model.n_outputs
    f, _ = signal.csd(u[:, 0], u[:, 0], **kw)
    keep = f > 0
    f = f[keep]
    F = f.size
    # S[j, l] = csd(u_j, u_l) = E[conj(U_j) U_l];  Syu[i, j] = csd(u_j, y_i) = (G S^T)[i, j]
    S = np.empty((F, m, m), complex)
    for j in range(m):
        for col in range(m):
            S[:, j, col] = signal.csd(u[:, j], u[:, col], **kw)[1][keep]
    Syu = np.empty((F, p, m), complex)
    Syy = np.empty((F, p))
    for i in range(p):
        Syy[:, i] = signal.welch(y[:, i], **kw)[1][keep]
        for j in range(m):
            Syu[:, i, j] = signal.csd(u[:, j], y[:, i], **kw)[1][keep]
    coh = np.empty((F, p, m))
    for i in range(p):
        for j in range(m):
            coh[:, i, j] = signal.coherence(u[:, j], y[:, i], **kw)[1][keep]
    # H1 = Syu (S^T)^-1, i.e. H^T = S^-1 Syu^T; multiple coherence = Re(H Syu^H) / Syy
    with np.errstate(all="ignore"):
        H = np.transpose(np.linalg.solve(S, np.transpose(Syu, (0, 2, 1))), (0, 2, 1))
        explained = np.real(np.einsum("fij,fij->fi", H, np.conj(Syu)))
        mcoh = np.clip(np.where(Syy > 0, explained / Syy, 0.0), 0.0, 1.0)
    if m == 1:
        mcoh = coh[:, :, 0].copy()
    G = _model_response(model, f)
    step = seg - seg // 2
    n_d = max(1, (N - seg) // step + 1)
    with np.errstate(all="ignore"):
        inv_diag = np.real(np.diagonal(np.linalg.inv(S), axis1=1, axis2=2))

    low_bands: list[FrequencyBand] = []
    miss_bands: list[FrequencyBand] = []
    for i in range(p):
        low = mcoh[:, i] < COHERENCE_LOW
        for a, b in _runs(_close_gaps(low, MIN_BAND_BINS), MIN_BAND_BINS):
            low_bands.append(FrequencyBand(
                model.outputs[i], model.inputs[0] if m == 1 else None,
                float(f[a]), float(f[b - 1]), float(mcoh[a:b, i].min()),
            ))
        for j in range(m):
            # standard error of H1[i, j]: sqrt((1 - g^2) Syy [S^-1]_jj / (2 n_d)); for one
            # input, relative to |H| this is sqrt(1 - g^2) / (|g| sqrt(2 n_d))
            sigma = np.sqrt(
                np.clip(1.0 - mcoh[:, i], 0.0, 1.0) * Syy[:, i] * inv_diag[:, j] / (2.0 * n_d)
            )
            with np.errstate(all="ignore"):
                miss = np.abs(G[:, i, j] - H[:, i, j])
                rel = miss / np.abs(H[:, i, j])
            bad = (~low) & np.isfinite(rel) & (rel > SPECTRAL_REL_TOL) & (
                miss > SPECTRAL_ERROR_FACTOR * sigma
            )
            for a, b in _runs(bad, MIN_BAND_BINS):
                miss_bands.append(FrequencyBand(
                    model.outputs[i], model.inputs[j], float(f[a]), float(f[b - 1]),
                    float(rel[a:b].max()),
                ))
    return SpectralComparison(
        frequencies_hz=_readonly(f),
        model_response=_readonly(G, complex),
        estimate=_readonly(H, complex),
        coherence=_readonly(coh),
        multiple_coherence=_readonly(mcoh),
        low_coherence_bands=tuple(low_bands),
        mismatch_bands=tuple(miss_bands),
        segment_length=seg,
        n_segments=n_d,
    )


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
    Fit percent is ``100 (1 - ||y - yhat|| / ||y - mean(y)||)``. The residual
    tests use the one-step prediction errors; with a correct model they are
    white and independent of past inputs [1]_.

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
    N = u.shape[0]
    L = options.max_lag
    ins, outs = model.inputs, model.outputs
    p, m = model.n_outputs, model.n_inputs

    x0, y_sim, sim_fit, y_pred, pred_fit, resid = _simulate_and_predict(model, u, y, options)

    # residual tests
    white = tuple(
        whiteness(resid[:, i], L, options.confidence, output=outs[i]) for i in range(p)
    )
    xcorr = tuple(
        tuple(cross_correlation(resid[:, i], u[:, j], L, options.confidence) for j in range(m))
        for i in range(p)
    )
    normality = _normality(resid)
    spectral = spectral_comparison(model, u, y, segment=options.spectral_segment)

    verdicts = _verdicts(model, u, y, options, sim_fit, pred_fit, white, xcorr, spectral)
    return ValidationReport(
        simulation_fit=_readonly(sim_fit),
        prediction_fit=_readonly(pred_fit),
        prediction_steps=options.prediction_steps,
        residuals=_readonly(resid),
        whiteness=white,
        cross_correlation=xcorr,
        normality=normality,
        spectral=spectral,
        verdicts=tuple(verdicts),
        n_samples=N,
        initial_state=options.initial_state,
        x0=_readonly(x0),
        simulated=_readonly(y_sim),
        predicted=_readonly(y_pred),
        measured=_readonly(y),
        inputs=ins,
        outputs=outs,
        sample_time=sample_time,
        options=options,
    )


def _check_validation_data(model: StateSpaceModel, N: int, sample_time: float, options: CheckOptions) -> None:
    """Refuse data at another sample time than the model's, or too short for the lags and segment asked."""
    if abs(sample_time - model.sample_time) > SAMPLE_TIME_RTOL * model.sample_time:
        raise OptionError(
            f"the data's sample time {sample_time:g} s differs from the model's "
            f"{model.sample_time:g} s",
            hint="resample the log or use a model identified at this rate",
        )
    L = options.max_lag
    need = max(32, MIN_SAMPLES_PER_LAG * L)
    if N < need:
        raise OptionError(
            f"validation needs at least {need} samples for max_lag {L}; got {N}"
        )
    seg = options.spectral_segment
    if seg is not None and seg > N:
        raise OptionError(f"spectral_segment must be at most the {N} samples; got {seg}")


def _simulate_and_predict(model: StateSpaceModel, u: np.ndarray, y: np.ndarray,
                          options: CheckOptions) -> tuple[np.ndarray, ...]:
    """Run the model on the data.

    Returns the initial state, the free-run simulation and its fit, the
    ``prediction_steps``-ahead prediction and its fit, and the one-step
    prediction errors (residuals).
    """
    estimate = options.initial_state == "estimate"
    n = model.n_states

    # free-run simulation
    x0 = estimate_initial_state(model, u, y) if estimate and n else np.zeros(n)
    y_sim = simulate(model, u, x0)
    sim_fit = fit_percent(y, y_sim)

    # predictions (initial predictor state estimated through the predictor itself)
    if model.noise_gain is not None and estimate and n:
        pred_model = _predictor(model)
        xp0 = estimate_initial_state(pred_model, np.hstack([u, y]), y)
    else:
        xp0 = x0
    y_pred = predict(model, u, y, options.prediction_steps, xp0)
    pred_fit = fit_percent(y, y_pred)
    y_one = y_pred if options.prediction_steps == 1 else predict(model, u, y, 1, xp0)
    return x0, y_sim, sim_fit, y_pred, pred_fit, y - y_one


def _normality(resid: np.ndarray) -> NormalityResult:
    """Jarque-Bera test of the residuals of each output (statsmodels)."""
    from statsmodels.stats.stattools import jarque_bera

    jb, jb_p, skew, kurt = jarque_bera(resid, axis=0)
    return NormalityResult(
        _readonly(np.atleast_1d(jb)), _readonly(np.atleast_1d(jb_p)),
        _readonly(np.atleast_1d(skew)), _readonly(np.atleast_1d(kurt)),
    )


def _verdicts(
    model: StateSpaceModel,
    u: np.ndarray,
    y: np.ndarray,
    options: CheckOptions,
    sim_fit: np.ndarray,
    pred_fit: np.ndarray,
    white: tuple[WhitenessResult, ...],
    xcorr: tuple[tuple[Correlation, ...], ...],
    spectral: SpectralComparison,
) -> list[Verdict]:
    """All verdicts in report order: fit, input independence and feedback, whiteness, spectra."""
    out = _fit_verdicts(model.outputs, sim_fit, options)
    correlation, input_bad = _correlation_verdicts(model, u, y, options, xcorr)
    out += correlation
    out += _whiteness_verdicts(model, white, input_bad, options.max_lag)
    out += _spectral_verdicts(spectral)
    return out


def _fit_verdicts(outs: tuple[str, ...], sim_fit: np.ndarray, options: CheckOptions) -> list[Verdict]:
    """``min_fit`` verdicts, one per output, when a minimum fit was asked for."""
    out: list[Verdict] = []
    if options.min_fit is not None:
        for i in range(len(outs)):
            ok = bool(sim_fit[i] >= options.min_fit)
            text = (
                f"simulation fit of {outs[i]} is {sim_fit[i]:.1f} % "
                f"({'meets' if ok else 'below'} the required {options.min_fit:g} %)"
            )
            if not ok:
                text += (
                    "; the model does not reproduce this log well enough; see the other "
                    "verdicts for the likely cause"
                )
            out.append(Verdict("min_fit", ok, text, outs[i], None, None if ok else "poor_fit"))
    return out


def _correlation_verdicts(
    model: StateSpaceModel,
    u: np.ndarray,
    y: np.ndarray,
    options: CheckOptions,
    xcorr: tuple[tuple[Correlation, ...], ...],
) -> tuple[list[Verdict], np.ndarray]:
    """Input independence (positive lags) and feedback (negative lags) per channel.

    Also returns, per output and input, whether the residuals depend on the
    input (the whiteness verdicts point at it).
    """
    ins, outs = model.inputs, model.outputs
    p, m = model.n_outputs, model.n_inputs
    L = options.max_lag
    pos = np.arange(0, L + 1)
    neg = np.arange(-L, 0)
    input_bad = np.zeros((p, m), bool)
    responses: dict[str, np.ndarray] = {}  # FIR estimate and Markov parameters, made on the first failure
    out: list[Verdict] = []
    for i in range(p):
        for j in range(m):
            c = xcorr[i][j]
            if c.fails(pos):
                input_bad[i, j] = True
                out.append(_input_dependence_verdict(model, u, y, L, c.peak(pos), c.band, i, j, responses))
            else:
                out.append(Verdict(
                    "input_independence", True,
                    f"residuals of {outs[i]} are independent of past {ins[j]}",
                    outs[i], ins[j],
                ))
            if c.fails(neg):
                lag, val = c.peak(neg)
                out.append(Verdict(
                    "feedback", False,
                    f"residuals of {outs[i]} are correlated with later values of {ins[j]} "
                    f"(lag {lag}, r = {val:+.3f}): {ins[j]} appears to react to {outs[i]}, "
                    "i.e. the log was taken with feedback; open-loop estimates can be biased",
                    outs[i], ins[j], "feedback",
                ))
            else:
                out.append(Verdict(
                    "feedback", True,
                    f"no sign of feedback from {outs[i]} to {ins[j]}", outs[i], ins[j],
                ))
    return out, input_bad


def _input_dependence_verdict(model: StateSpaceModel, u: np.ndarray, y: np.ndarray, L: int,
                              peak: tuple[int, float], band: float, i: int, j: int,
                              responses: dict[str, np.ndarray]) -> Verdict:
    """Failed input independence of output ``i`` on input ``j``: a wrong delay, or too low an order.

    The measured FIR response and the model's Markov parameters are computed
    once, into ``responses``, and compared for a delay shift.
    """
    ins, outs = model.inputs, model.outputs
    lag, val = peak
    if not responses:
        responses["fir"] = _fir_estimate(u, y, L + 1)
        responses["markov"] = _markov(model, L + 1 + MAX_DELAY_SHIFT)
    fir, markov = responses["fir"], responses["markov"]
    shift = _delay_shift(markov[:, i, j], fir[:, i, j], min(MAX_DELAY_SHIFT, L // 2))
    head = (
        f"residuals of {outs[i]} are correlated with {ins[j]} at lag {lag} "
        f"(r = {val:+.3f}, band +-{band:.3f})"
    )
    if shift:
        word = "later" if shift > 0 else "earlier"
        msg = (
            f"{head}: the measured response to {ins[j]} arrives {abs(shift)} "
            f"sample(s) {word} than the model's; the input delay looks wrong"
        )
        cause = "delay"
    else:
        msg = (
            f"{head}: the model misses part of how {ins[j]} drives {outs[i]}; "
            "likely too low a model order (or a missing delay)"
        )
        cause = "order"
    return Verdict("input_independence", False, msg, outs[i], ins[j], cause)


def _whiteness_verdicts(model: StateSpaceModel, white: tuple[WhitenessResult, ...],
                        input_bad: np.ndarray, L: int) -> list[Verdict]:
    """Residual whiteness per output, with the likely cause when it fails."""
    outs = model.outputs
    out: list[Verdict] = []
    for i, w in enumerate(white):
        pval = w.ljung_box_pvalue
        if w.white:
            out.append(Verdict(
                "whiteness", True,
                f"residuals of {outs[i]} look white (Ljung-Box p = {pval:.3g} over {L} lags)",
                outs[i],
            ))
            continue
        lags = _lags_text(w.autocorrelation.significant_lags)
        head = f"residuals of {outs[i]} are correlated (Ljung-Box p = {pval:.2g}"
        head += f"; lags {lags} outside the band)" if lags else ")"
        if input_bad[i].any():
            msg = (
                f"{head}, largely a consequence of the input-to-output error reported "
                "for this output; fix that first"
            )
            cause = "input_dynamics"
        elif model.noise_gain is None:
            msg = (
                f"{head} while independent of the inputs: the input dynamics look right "
                "but the disturbance is coloured; a noise model is needed for good "
                "prediction"
            )
            cause = "noise_model"
        else:
            msg = (
                f"{head} while independent of the inputs: the model's noise description "
                "is too simple; a richer noise model would predict better"
            )
            cause = "noise_model"
        out.append(Verdict("whiteness", False, msg, outs[i], None, cause))
    return out


def _spectral_verdicts(spectral: SpectralComparison) -> list[Verdict]:
    """Coherence and frequency-response verdicts from the spectral comparison."""
    out: list[Verdict] = []
    if spectral.low_coherence_bands:
        for band in spectral.low_coherence_bands:
            src = band.input if band.input is not None else "the inputs"
            out.append(Verdict(
                "coherence", False,
                f"coherence between {src} and {band.output} is below {COHERENCE_LOW:g} from "
                f"{band.low_hz:.4g} to {band.high_hz:.4g} Hz (lowest {band.worst:.2f}): the "
                "data cannot support the model there (little excitation or much noise)",
                band.output, band.input, "low_coherence",
            ))
    else:
        out.append(Verdict(
            "coherence", True,
            f"coherence is at least {COHERENCE_LOW:g} over the whole band up to "
            f"{spectral.frequencies_hz[-1]:.4g} Hz",
        ))
    if spectral.mismatch_bands:
        for band in spectral.mismatch_bands:
            out.append(Verdict(
                "frequency_response", False,
                f"the model misses the measured response from {band.input} to {band.output} "
                f"between {band.low_hz:.4g} and {band.high_hz:.4g} Hz (relative error up to "
                f"{100 * band.worst:.0f} %) where the data are reliable",
                band.output, band.input, "model_mismatch",
            ))
    else:
        out.append(Verdict(
            "frequency_response", True,
            "the model's frequency response agrees with the estimate from the data "
            "wherever the coherence is good",
        ))
    return out


# --------------------------------------------------------------------------------------------
# JSON
# --------------------------------------------------------------------------------------------


def _corr_dict(c: Correlation) -> dict:
    return {
        "lags": json_ready(c.lags),
        "values": json_ready(c.values),
        "band": json_ready(c.band),
        "significant_lags": list(c.significant_lags),
    }


def _band_dict(b: FrequencyBand) -> dict:
    return {"output": b.output, "input": b.input, "low_hz": b.low_hz, "high_hz": b.high_hz,
            "worst": json_ready(b.worst)}


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
        x0, prediction_steps, fit, whiteness, cross_correlation, normality,
        spectral, verdicts, gates`` (and ``signals`` when asked).
    """
    outs, ins = report.outputs, report.inputs
    opts = report.options
    sp = report.spectral
    d: dict[str, Any] = {
        "n_samples": report.n_samples,
        "sample_time": report.sample_time,
        "inputs": list(ins),
        "outputs": list(outs),
        "options": {f.name: json_ready(getattr(opts, f.name)) for f in fields(opts)},
        "initial_state": report.initial_state,
        "x0": json_ready(report.x0),
        "prediction_steps": report.prediction_steps,
        "fit": {
            name: {
                "simulation_percent": json_ready(report.simulation_fit[i]),
                "prediction_percent": json_ready(report.prediction_fit[i]),
            }
            for i, name in enumerate(outs)
        },
        "whiteness": {
            w.output: {
                "ljung_box_statistic": json_ready(w.ljung_box_statistic),
                "ljung_box_pvalue": json_ready(w.ljung_box_pvalue),
                "white": w.white,
                "autocorrelation": _corr_dict(w.autocorrelation),
            }
            for w in report.whiteness
        },
        "cross_correlation": {
            outs[i]: {ins[j]: _corr_dict(c) for j, c in enumerate(row)}
            for i, row in enumerate(report.cross_correlation)
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
        "spectral": {
            "frequencies_hz": json_ready(sp.frequencies_hz),
            "segment_length": sp.segment_length,
            "n_segments": sp.n_segments,
            "model_magnitude": json_ready(np.abs(sp.model_response)),
            "model_phase_deg": json_ready(np.degrees(np.angle(sp.model_response))),
            "estimate_magnitude": json_ready(np.abs(sp.estimate)),
            "estimate_phase_deg": json_ready(np.degrees(np.angle(sp.estimate))),
            "coherence": json_ready(sp.coherence),
            "multiple_coherence": json_ready(sp.multiple_coherence),
            "low_coherence_bands": [_band_dict(b) for b in sp.low_coherence_bands],
            "mismatch_bands": [_band_dict(b) for b in sp.mismatch_bands],
        },
        "verdicts": [
            {"test": v.test, "passed": v.passed, "message": v.message, "output": v.output,
             "input": v.input, "cause": v.cause}
            for v in report.verdicts
        ],
        "gates": {
            "passed": report.passed,
            "failed": [v.message for v in report.gate_failures],
        },
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
