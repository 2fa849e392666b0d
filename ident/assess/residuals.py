"""Residual analysis pieces: input prewhitening, bands, lag span, whiteness views, level dependence.

The validation (:mod:`ident.assess.diagnostics`) asks four questions of the
prediction and simulation errors of a model, and this module holds the numeric
answers:

* **Is the residual related to the input?** The cross-correlation of a
  residual with an input has the textbook spread ``1/sqrt(N)`` only when one
  of the two is white. A coloured input (a swept sine, filtered noise) with a
  coloured residual (a model without a noise model) spreads it much wider, so
  an open-loop log looks as if it had feedback. The input is therefore
  *prewhitened* (:func:`fit_input_whitener`): an autoregressive model of the
  input is fitted by least squares, its order chosen by AIC, and the same
  filter is applied to the input and to the residual before correlating them
  (Box and Jenkins [1]_, sec. 11.2). Independence of the residual from the
  input is not changed by a common filter, and the filtered input is white.
* **Which lags, and which band?** The lag span follows the model's slowest
  settling time (:func:`lag_span`), and the band is simultaneous over every lag
  shown (:func:`simultaneous_band`): a white sequence stays inside it at *all*
  lags with the stated probability, so one lag outside is already evidence, and
  the table, the figure and the verdict read the same numbers.
* **Is the residual white?** Besides the autocorrelation, the cumulative
  periodogram (:func:`cumulative_periodogram`), which for white noise rises as a
  straight line and stays inside a Kolmogorov-Smirnov band (Bartlett's test,
  [1]_ sec. 8.2.5, [2]_).
* **Does the error depend on the level?** The prediction error of a right
  linear model of a linear process is independent of the input, so its mean
  and spread are the same at every level of the input and of the model's
  (simulated) output. :func:`level_dependence` bins the error by level and
  measures how much of it the level explains beyond a straight line, and how
  much its spread changes.

References
----------
.. [1] G. E. P. Box, G. M. Jenkins, G. C. Reinsel and G. M. Ljung, *Time Series
   Analysis: Forecasting and Control*, 5th ed., Wiley, 2015, sec. 8.2.5
   (cumulative periodogram check) and sec. 12.2 (prewhitening the input when
   identifying transfer functions).
.. [2] J. Durbin, "Tests for serial correlation in regression analysis based on
   the periodogram of least-squares residuals", *Biometrika* 56(1), 1-15, 1969.
.. [3] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
   Prentice Hall, 1999, sec. 16.6 (residual analysis).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .._validate import as_signal, fraction, int_in_range
from ..lti.models import StateSpaceModel

__all__ = [
    "PREWHITEN_MAX_ORDER",
    "MIN_LAGS",
    "MAX_AUTO_LAGS",
    "SETTLING_TIME_CONSTANTS",
    "LEVEL_BINS",
    "LEVEL_SHARE",
    "SPREAD_RATIO",
    "InputWhitener",
    "LagSpan",
    "CumulativePeriodogram",
    "LevelDependence",
    "fit_input_whitener",
    "simultaneous_band",
    "lag_span",
    "cumulative_periodogram",
    "level_dependence",
]

#: Largest order of the autoregressive input model used for prewhitening.
PREWHITEN_MAX_ORDER = 30
#: At most this many samples fit the input model (the filter is applied to all).
_WHITENER_FIT_SAMPLES = 50_000
#: An order is refused when its innovation variance falls below this share of the
#: input variance (a nearly deterministic input, e.g. a pure sine, is not whitened
#: into rounding noise).
_MIN_INNOVATION_SHARE = 1e-4
#: Fewest lags examined, and most when chosen automatically.
MIN_LAGS = 20
MAX_AUTO_LAGS = 250
#: The settling time is this many time constants of the slowest stable mode (2 %).
SETTLING_TIME_CONSTANTS = 4.0
#: A pole within this distance of the unit circle is treated as an integrator
#: (no settling time).
_INTEGRATOR_MARGIN = 1e-6
#: At most this many samples estimate the autocorrelation behind the effective sample size.
_EFFECTIVE_FIT_SAMPLES = 1 << 17
#: Level bins of :func:`level_dependence` (quantiles of the level).
LEVEL_BINS = 5
#: The error depends on the level when the bins explain at least this share of its
#: variance beyond a straight line ...
LEVEL_SHARE = 0.2
#: ... or its standard deviation differs by this factor between two bins ...
SPREAD_RATIO = 2.0
#: ... and the effect is significant at this level once the error's autocorrelation
#: is allowed for (effective sample size).
LEVEL_SIGNIFICANCE = 1e-3


# --------------------------------------------------------------------------- prewhitening


@dataclass(frozen=True, slots=True, eq=False)
class InputWhitener:
    """An autoregressive model ``A(q) u[t] = w[t]`` of one input, used as a whitening filter.

    Attributes
    ----------
    coefficients : numpy.ndarray, shape (k + 1,)
        ``[1, a_1, ..., a_k]`` of ``A(q) = 1 + a_1 q^-1 + ... + a_k q^-k``.
    innovation_share : float
        Variance of ``w`` over the variance of ``u`` (1 for a white input).
    """

    coefficients: np.ndarray
    innovation_share: float

    def __post_init__(self) -> None:
        coef = np.array(self.coefficients, dtype=float)
        coef.flags.writeable = False
        object.__setattr__(self, "coefficients", coef)

    @property
    def order(self) -> int:
        """Order ``k`` of the input model (0: no filtering)."""
        return self.coefficients.size - 1

    def apply(self, x: np.ndarray) -> np.ndarray:
        """Filter a sequence by ``A(q)``; the first ``order`` samples are dropped (no start-up)."""
        x = np.asarray(x, dtype=float)
        if self.order == 0:
            return x.copy()
        return np.convolve(x, self.coefficients, mode="valid")


def fit_input_whitener(u: np.ndarray, max_order: int = PREWHITEN_MAX_ORDER) -> InputWhitener:
    """Least-squares autoregressive model of an input, order by AIC, as a whitening filter.

    Parameters
    ----------
    u : array_like, shape (N,)
        One input (its mean is removed).
    max_order : int
        Largest order tried (default :data:`PREWHITEN_MAX_ORDER`, at most
        ``N / 20``).

    Returns
    -------
    InputWhitener
        Order 0 (no filtering) for a constant or too short input.

    Notes
    -----
    For every order ``k`` the coefficients minimise ``sum_t (u[t] + a_1 u[t-1]
    + ... + a_k u[t-k])^2`` over the common samples ``t >= max_order``, and the
    order minimises ``AIC(k) = N' log(sigma_k^2) + 2 k`` ([1]_ sec. 7.2 and
    [2]_ sec. 16.4); all orders come from one QR factorisation. Orders whose
    innovation variance is below :data:`_MIN_INNOVATION_SHARE` of the input
    variance are not used.

    References
    ----------
    .. [1] G. E. P. Box, G. M. Jenkins, G. C. Reinsel and G. M. Ljung, *Time
       Series Analysis*, 5th ed., Wiley, 2015.
    .. [2] L. Ljung, *System Identification*, 2nd ed., Prentice Hall, 1999.
    """
    x = as_signal(u, "u", ndim=1)[:_WHITENER_FIT_SAMPLES]
    x = x - x.mean()
    top = int(min(int_in_range(max_order, "max_order", 0), x.size // 20))
    var = float(x @ x) / max(x.size, 1)
    if top == 0 or var == 0.0:
        return InputWhitener(np.ones(1), 1.0)
    lags = list(range(1, top + 1)) + [0]
    rows = np.column_stack([x[top - i:x.size - i] for i in lags])
    R = np.linalg.qr(rows, mode="r")
    n_rows = rows.shape[0]
    target = float(rows[:, -1] @ rows[:, -1]) / n_rows
    best_k, best_aic, best_var = 0, n_rows * math.log(target), target
    for k in range(1, top + 1):
        sub = np.linalg.qr(R[:, list(range(k)) + [top]], mode="r")
        sigma2 = float(sub[k, k] ** 2) / n_rows
        if sigma2 < _MIN_INNOVATION_SHARE * var:
            break
        aic = n_rows * math.log(sigma2) + 2 * k
        if aic < best_aic:
            best_k, best_aic, best_var = k, aic, sigma2
    if best_k == 0:
        return InputWhitener(np.ones(1), 1.0)
    sub = np.linalg.qr(R[:, list(range(best_k)) + [top]], mode="r")
    coef = np.linalg.solve(sub[:best_k, :best_k], sub[:best_k, best_k])  # u[t] ~ sum c_i u[t-i]
    return InputWhitener(np.concatenate([[1.0], -coef]), best_var / var)


# --------------------------------------------------------------------------- bands and lags


def simultaneous_band(n_samples: int, n_lags: int, confidence: float) -> float:
    """Half width of a band a white sequence's correlations stay inside at every lag.

    Parameters
    ----------
    n_samples : int
        Samples ``N`` behind each correlation.
    n_lags : int
        Number of lags judged together.
    confidence : float
        Probability that a white sequence stays inside at all ``n_lags`` lags.

    Returns
    -------
    float
        ``z / sqrt(N)`` with ``z`` the normal quantile at ``1 - (1 - confidence)
        / (2 n_lags)`` (Bonferroni; the correlations of a white sequence at
        different lags are nearly independent, so the level is nearly exact).

    Examples
    --------
    >>> round(simultaneous_band(10_000, 1, 0.95) * 100, 3)  # one lag: the usual 1.96 / sqrt(N)
    1.96
    """
    from scipy import stats

    n = int_in_range(n_samples, "n_samples", 1)
    k = int_in_range(n_lags, "n_lags", 1)
    level = fraction(confidence, "confidence")
    z = float(stats.norm.isf((1.0 - level) / (2.0 * k)))
    return z / math.sqrt(n)


@dataclass(frozen=True, slots=True, eq=False)
class LagSpan:
    """How many lags the residual correlations cover, and why.

    Attributes
    ----------
    lags : int
        Largest lag, samples.
    settling_time_s : float or None
        Settling time of the model's slowest stable mode
        (:data:`SETTLING_TIME_CONSTANTS` time constants, plus samples of pure
        delay); ``None`` when the model has no stable mode slower than a sample.
    slowest_time_constant_s : float or None
    reason : str
        One sentence: what set the span.
    """

    lags: int
    settling_time_s: float | None
    slowest_time_constant_s: float | None
    reason: str


def lag_span(model: StateSpaceModel, n_samples: int, *, min_samples_per_lag: int = 4) -> LagSpan:
    """Lag span of the residual correlations: the model's slowest settling time, in samples.

    Parameters
    ----------
    model : StateSpaceModel
        Discrete-time model.
    n_samples : int
        Samples of the residuals.
    min_samples_per_lag : int
        The span is at most ``n_samples / min_samples_per_lag``.

    Returns
    -------
    LagSpan
        ``lags`` between :data:`MIN_LAGS` and :data:`MAX_AUTO_LAGS` (and the
        data limit).

    Notes
    -----
    A residual correlated with the input at lags up to the settling time points
    at dynamics the model misses; beyond it, a correct model's response has
    died away. The settling time is ``4 tau`` of the slowest stable pole
    (``tau = -T / ln|z|``; 2 % of a step remains), plus one sample per pole at
    the origin (pure delays).
    """
    T = model.sample_time
    poles = model.poles() if model.n_states else np.zeros(0, complex)
    radius = np.abs(poles)
    stable = radius[(radius < 1.0 - _INTEGRATOR_MARGIN) & (radius > 1e-12)]
    delay_samples = int(np.count_nonzero(radius <= 1e-12))
    tau = float(-T / np.log(stable.max())) if stable.size else None
    settle = (SETTLING_TIME_CONSTANTS * tau if tau is not None else 0.0) + delay_samples * T
    cap = max(1, n_samples // min_samples_per_lag)
    wanted = int(math.ceil(settle / T - 1e-9)) if settle > 0 else 0
    lags = min(max(wanted, MIN_LAGS), MAX_AUTO_LAGS, cap)
    if wanted > lags and lags < MAX_AUTO_LAGS:
        reason = (f"the log allows {lags} lags ({n_samples} samples); the model settles in "
                  f"{settle:.4g} s ({wanted} samples)")
    elif wanted > lags:
        reason = (f"capped at {MAX_AUTO_LAGS} lags; the model settles in {settle:.4g} s "
                  f"({wanted} samples)")
    elif wanted < MIN_LAGS:
        reason = f"at least {MIN_LAGS} lags; the model settles within {max(wanted, 1)} sample(s)"
    else:
        reason = (f"the model's settling time ({SETTLING_TIME_CONSTANTS:g} time constants of its "
                  f"slowest mode, tau = {tau:.4g} s" + (f", plus {delay_samples} samples of delay" if
                                                        delay_samples else "") + ")")
    return LagSpan(lags=int(lags), settling_time_s=settle if settle > 0 else None,
                   slowest_time_constant_s=tau, reason=reason)


# --------------------------------------------------------------------------- cumulative periodogram


@dataclass(frozen=True, slots=True, eq=False)
class CumulativePeriodogram:
    """Bartlett's cumulative periodogram of a residual and its Kolmogorov-Smirnov band.

    Attributes
    ----------
    frequencies_hz : numpy.ndarray, shape (q,)
        Fourier frequencies ``k / (N T)``, ``k = 1 .. q``, ``q = floor((N - 1) / 2)``.
    values : numpy.ndarray, shape (q,)
        ``C(k) = sum_{j <= k} I(j) / sum_{j <= q} I(j)`` (``I`` the periodogram).
    band : float
        Half width of the band about the line ``k / q`` that white noise stays
        inside with probability ``confidence``.
    statistic : float
        ``max_k |C(k) - k / q|``.
    confidence : float
    white : bool
        ``statistic <= band``.
    """

    frequencies_hz: np.ndarray
    values: np.ndarray
    band: float
    statistic: float
    confidence: float
    white: bool

    def __post_init__(self) -> None:
        for name in ("frequencies_hz", "values"):
            arr = np.array(getattr(self, name), dtype=float)
            arr.flags.writeable = False
            object.__setattr__(self, name, arr)


def cumulative_periodogram(residual: np.ndarray, sample_time: float,
                           confidence: float = 0.95) -> CumulativePeriodogram:
    """Cumulative periodogram of a residual with the Kolmogorov-Smirnov band of white noise.

    Parameters
    ----------
    residual : array_like, shape (N,)
        The sequence (its mean is removed).
    sample_time : float
        Sample time, s (for the frequency axis).
    confidence : float, default 0.95
        Probability that white noise stays inside the band.

    Returns
    -------
    CumulativePeriodogram

    Notes
    -----
    For white noise the normalised partial sums ``C(1) .. C(q-1)`` behave like
    the ordered values of ``q - 1`` independent uniform variables [1]_, so
    ``max |C(k) - k/q|`` has the two-sided Kolmogorov-Smirnov distribution with
    ``q - 1`` observations; the band is its quantile
    (:data:`scipy.stats.kstwo`), about ``1.36 / sqrt(q)`` at 95 % ([2]_,
    sec. 8.2.5).

    References
    ----------
    .. [1] J. Durbin, *Biometrika* 56(1), 1-15, 1969.
    .. [2] Box, Jenkins, Reinsel and Ljung, *Time Series Analysis*, 5th ed., 2015.
    """
    from scipy import stats

    x = as_signal(residual, "residual", ndim=1)
    level = fraction(confidence, "confidence")
    x = x - x.mean()
    n = x.size
    q = (n - 1) // 2
    if q < 2:
        raise ValueError(f"the cumulative periodogram needs at least 5 samples; got {n}")
    power = np.abs(np.fft.rfft(x)[1:q + 1]) ** 2
    total = float(power.sum())
    values = np.cumsum(power) / total if total > 0 else np.arange(1, q + 1) / q
    line = np.arange(1, q + 1) / q
    stat = float(np.max(np.abs(values - line)))
    band = float(stats.kstwo(q - 1).ppf(level))
    freq = np.arange(1, q + 1) / (n * sample_time)
    return CumulativePeriodogram(freq, values, band, stat, level, bool(stat <= band))


# --------------------------------------------------------------------------- level dependence


@dataclass(frozen=True, slots=True, eq=False)
class LevelDependence:
    """How a model's error depends on the level of one signal.

    Attributes
    ----------
    output : str
        Output whose error is examined.
    level_signal : str
        Signal whose level is binned (an input, or the model's output).
    edges : numpy.ndarray, shape (bins + 1,)
        Level bin edges (quantiles), deviations from the operating point.
    means, stds : numpy.ndarray, shape (bins,)
        Mean and standard deviation of the error in each bin.
    share : float
        Share of the error variance the bins explain beyond a straight line in
        the level (``0`` .. ``1``).
    spread_ratio : float
        Largest over smallest bin standard deviation.
    pvalue : float
        Significance of the bin means (F test on the effective sample size).
    effective_samples : float
        Samples counted as independent, from the error's autocorrelation.
    depends : bool
        ``share >= LEVEL_SHARE`` or ``spread_ratio >= SPREAD_RATIO``, with
        ``pvalue < LEVEL_SIGNIFICANCE``.
    """

    output: str
    level_signal: str
    edges: np.ndarray
    means: np.ndarray
    stds: np.ndarray
    share: float
    spread_ratio: float
    pvalue: float
    effective_samples: float
    depends: bool


def _effective_samples(e: np.ndarray, max_lag: int = 50) -> float:
    """``N / (1 + 2 sum_k r_k)`` over the lags before the autocorrelation first turns negative.

    The autocorrelation comes from at most :data:`_EFFECTIVE_FIT_SAMPLES` leading samples.
    """
    n = e.size
    e = e[:_EFFECTIVE_FIT_SAMPLES]
    ec = e - e.mean()
    spec = np.fft.rfft(ec, 2 * ec.size)
    acov = np.fft.irfft(np.abs(spec) ** 2)[: max_lag + 1]
    if acov[0] <= 0:
        return float(n)
    r = acov[1:] / acov[0]
    stop = np.flatnonzero(r <= 0)
    r = r[: stop[0]] if stop.size else r
    return float(n / max(1.0, 1.0 + 2.0 * r.sum()))


def level_dependence(error: np.ndarray, level: np.ndarray, *, output: str = "y1",
                     level_signal: str = "level", bins: int = LEVEL_BINS) -> LevelDependence:
    """Bin a model's error by the level of a signal and measure the dependence.

    Parameters
    ----------
    error : array_like, shape (N,)
        Prediction (or simulation) error ``y - yhat`` of one output.
    level : array_like, shape (N,)
        The level: an input, or the model's simulated output (both independent
        of the noise when the model is right).
    output, level_signal : str
        Names kept in the result.
    bins : int
        Number of quantile bins.

    Returns
    -------
    LevelDependence

    Notes
    -----
    A straight line in the level is removed first (a gain error of a linear
    model is linear in the level), then the bin means of what remains and the
    bin standard deviations are compared. The F test of the bin means counts
    ``N_eff = N / (1 + 2 sum r_k)`` independent samples, ``r_k`` the error's
    autocorrelation, so a slowly wandering error does not pass for a level
    effect.
    """
    from scipy import stats

    e = as_signal(error, "error", ndim=1)
    x = as_signal(level, "level", ndim=1)
    k = int_in_range(bins, "bins", 2)
    edges = np.quantile(x, np.linspace(0.0, 1.0, k + 1))
    index = np.clip(np.searchsorted(edges, x, side="right") - 1, 0, k - 1)
    design = np.column_stack([np.ones_like(x), x])
    coef, *_ = np.linalg.lstsq(design, e, rcond=None)
    rest = e - design @ coef
    counts = np.bincount(index, minlength=k)
    used = counts > 1
    means = np.array([rest[index == b].mean() if used[b] else np.nan for b in range(k)])
    stds = np.array([e[index == b].std() if used[b] else np.nan for b in range(k)])
    total = float(np.sum(rest**2))
    between = float(np.nansum(counts * np.nan_to_num(means) ** 2))
    share = between / total if total > 0 else 0.0
    ratio = float(np.nanmax(stds) / np.nanmin(stds)) if np.nanmin(stds) > 0 else math.inf
    n_eff = _effective_samples(e)
    groups = int(np.count_nonzero(used))
    dof2 = max(n_eff - groups, 1.0)
    f_stat = (share / max(groups - 1, 1)) / max((1.0 - share) / dof2, 1e-300)
    pvalue = float(stats.f.sf(f_stat, max(groups - 1, 1), dof2))
    strong = share >= LEVEL_SHARE or ratio >= SPREAD_RATIO
    if ratio >= SPREAD_RATIO and share < LEVEL_SHARE:  # a spread effect: test the log variances
        pvalue = min(pvalue, _spread_pvalue(e, index, k, n_eff))
    return LevelDependence(output, level_signal, edges, means, stds, share, ratio, pvalue, n_eff,
                           bool(strong and pvalue < LEVEL_SIGNIFICANCE))


def _spread_pvalue(e: np.ndarray, index: np.ndarray, k: int, n_eff: float) -> float:
    """Bartlett's test of equal bin variances with every bin's count scaled to the effective sample size."""
    from scipy import stats

    scale = n_eff / e.size
    groups = [e[index == b] for b in range(k) if np.count_nonzero(index == b) > 1]
    n = np.array([g.size * scale for g in groups])
    if np.any(n <= 1):
        return 1.0
    var = np.array([g.var(ddof=1) for g in groups])
    if np.any(var <= 0):
        return 1.0
    pooled = float(np.sum((n - 1) * var) / np.sum(n - 1))
    stat = (np.sum(n - 1) * math.log(pooled) - np.sum((n - 1) * np.log(var)))
    corr = 1.0 + (np.sum(1.0 / (n - 1)) - 1.0 / np.sum(n - 1)) / (3.0 * (len(groups) - 1))
    return float(stats.chi2.sf(stat / corr, len(groups) - 1))
