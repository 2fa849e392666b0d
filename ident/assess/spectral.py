"""The model's frequency response against a nonparametric estimate, with confidence bands.

:func:`spectral_comparison` answers "does the model's frequency response agree
with what the data show, and where can the data tell?":

1. **Resolution from the question** (:func:`choose_segment`). The Welch
   segment must resolve the lowest frequency the input excites and the
   sharpest mode of the model inside the excited band (a quarter of its
   half-power width ``2 zeta f_n``) and the corner of its slowest real mode; the segment length
   follows from the resolution of the Hann window (``1.5 / (L T)``), and the
   log's length caps it so that at least :data:`MIN_AVERAGES` averages remain.
   The choice and what set it are stated.
2. **The H1 estimate with its confidence region** (Bendat and Piersol [1]_,
   sec. 9.2 and 9.3): ``H1 = S_yu S_uu^-1``, the (multiple) coherence, and at
   each frequency the radius ``r`` of the circle about the estimate that holds
   the true response with probability ``confidence``::

       r^2 = F(2, 2 (n_d - m); confidence) (1 - g^2) S_yy [S_uu^-1]_jj / (n_d - m)

   (``n_d`` averages, ``m`` inputs; for one input ``S_yy / S_uu``). Overlapping
   Hann segments count as ``n_d = K / (1 + 2 c^2)`` independent ones, ``c =
   0.167`` the correlation of half-overlapping Hann segments (Welch [2]_).
3. **The model on a dense grid** for the figures, and **the model seen through
   the same estimator** for the verdict: the model is simulated on the same
   input and its H1 estimate is taken with the same segments, so window leakage
   and segment transients affect both curves alike and their difference is
   noise and model error only.
4. **Where the data can tell**: a frequency is *informative* when the input
   excites it (its spectrum within :data:`EXCITED_LEVEL_DB` of its peak), the
   coherence is at least :data:`COHERENCE_LOW` and the band is narrow
   (``r <= INFORMATIVE_RADIUS |H|``). The verdict compares the model with the
   estimate only there; when less than :data:`MIN_INFORMATIVE_FRACTION` of the
   excited frequencies are informative it *cannot judge* (never "agrees"), and
   it always names the band it judged.
5. **The model's own uncertainty**: when the model carries a parameter
   covariance (:class:`ident.lti.covariance.ParameterCovariance`), its response
   has a confidence circle of radius ``r_m`` too
   (:func:`ident.lti.covariance.response_band`); estimate and model errors are
   independent, so a difference counts against the model only beyond
   ``sqrt(r^2 + r_m^2)``. A model whose data leave a mode uncertain is then
   not called wrong for a difference that uncertainty explains.

For a periodic input the frequency response at the excited lines (from
:mod:`ident.estimate.periodic`, passed in as a :class:`LineResponse`) replaces
the Welch estimate: no leakage, no window, a standard deviation from the
period-to-period scatter.

References
----------
.. [1] J. S. Bendat and A. G. Piersol, *Random Data: Analysis and Measurement
   Procedures*, 4th ed., Wiley, 2010, sec. 9.2 (single-input frequency response
   estimates and their confidence intervals) and 9.3 (multiple inputs).
.. [2] P. D. Welch, "The use of fast Fourier transform for the estimation of
   power spectra", *IEEE Trans. Audio Electroacoustics* AU-15(2), 70-73, 1967.
.. [3] R. Pintelon and J. Schoukens, *System Identification: A Frequency Domain
   Approach*, 2nd ed., Wiley-IEEE Press, 2012 (frequency response from
   periodic excitation).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from .._validate import fraction, int_in_range
from ..errors import OptionError
from ..lti.analysis import frequency_response
from ..lti.covariance import ParameterCovariance, response_band
from ..lti.models import StateSpaceModel
from ..lti.simulate import simulate

__all__ = [
    "COHERENCE_LOW",
    "EXCITED_LEVEL_DB",
    "INFORMATIVE_RADIUS",
    "MIN_INFORMATIVE_FRACTION",
    "MISMATCH_CONFIDENCE",
    "SPECTRAL_REL_TOL",
    "MIN_BAND_BINS",
    "MIN_AVERAGES",
    "MAX_AVERAGES",
    "SegmentChoice",
    "LineResponse",
    "FrequencyBand",
    "ChannelJudgement",
    "SpectralComparison",
    "choose_segment",
    "spectral_comparison",
]

#: Coherence (multiple coherence for several inputs) below this marks a frequency the
#: data cannot support (little excitation, much noise, a nonlinearity or another input).
COHERENCE_LOW = 0.5
#: A frequency is excited by an input when its spectrum is within this many dB of its peak.
EXCITED_LEVEL_DB = -20.0
#: A frequency is informative when the confidence radius is at most this share of |H|.
INFORMATIVE_RADIUS = 0.5
#: Below this share of informative excited frequencies the verdict cannot judge.
MIN_INFORMATIVE_FRACTION = 0.3
#: A frequency counts as a miss when the model lies outside the estimate's region at
#: this level (a level close to 1 keeps chance misses over hundreds of bins rare) ...
MISMATCH_CONFIDENCE = 0.999
#: ... and the relative error ``|G - H| / |H|`` exceeds this ...
SPECTRAL_REL_TOL = 0.25
#: ... over at least this many adjacent informative frequencies (also the shortest
#: low-coherence band reported).
MIN_BAND_BINS = 3
#: The segment is at most this long a share of the log that this many averages remain ...
MIN_AVERAGES = 6
#: ... and at least so long that no more than about this many are taken (more averages
#: narrow the region little and cost time; a longer segment lowers the window's bias).
MAX_AVERAGES = 256
#: Low-coherence stretches closer than this share of the frequencies are reported as one band.
_LOW_COHERENCE_GAP = 0.02
#: Shortest segment, samples.
MIN_SEGMENT = 64
#: Correlation of the spectra of half-overlapping Hann segments (Welch 1967, table 1).
_HANN_OVERLAP_CORRELATION = 0.167
#: Noise-equivalent bandwidth of the Hann window, in bins.
_HANN_BANDWIDTH_BINS = 1.5
#: Resolution asked for a mode: this share of its half-power width ``2 zeta f_n`` (four
#: resolution cells across the peak keep the window's smoothing bias well inside the
#: confidence region).
_MODE_WIDTH_SHARE = 0.25
#: Points of the dense model grid.
_DENSE_POINTS = 600


def _frozen(x: Any, dtype: Any = float) -> np.ndarray:
    arr = np.array(x, dtype=dtype, copy=True)
    arr.flags.writeable = False
    return arr


# --------------------------------------------------------------------------- the segment


@dataclass(frozen=True, slots=True, eq=False)
class SegmentChoice:
    """The Welch segment chosen for the frequency-response estimate, and why.

    Attributes
    ----------
    segment : int
        Segment length, samples.
    window : str
        Window of every segment (``"hann"``), half overlapping.
    resolution_hz : float
        Noise-equivalent bandwidth of the window, ``1.5 / (segment T)``.
    needed_hz : float or None
        Resolution the question asks for (``None``: nothing asks for more than
        the shortest segment).
    reasons : tuple of str
        What set ``needed_hz`` (the lowest excited frequency, a mode).
    limited_by_log : bool
        The log is too short for the resolution needed.
    given : bool
        The segment was given by the caller.
    """

    segment: int
    window: str
    resolution_hz: float
    needed_hz: float | None
    reasons: tuple[str, ...]
    limited_by_log: bool
    given: bool = False

    def describe(self) -> str:
        """One sentence on the choice."""
        head = f"Welch segment {self.segment} samples, {self.window} window, half overlap: resolution " \
               f"{self.resolution_hz:.4g} Hz"
        if self.given:
            return head + " (segment given)"
        if self.needed_hz is None:
            return head + " (nothing needs finer)"
        why = "; ".join(self.reasons)
        if self.limited_by_log:
            return head + f"; {self.needed_hz:.4g} Hz would be needed ({why}) but the log is too short"
        if self.resolution_hz < 0.5 * self.needed_hz:
            return head + (f", finer than the {self.needed_hz:.4g} Hz {why} needs (a long log: at most "
                           f"{MAX_AVERAGES} averages are taken)")
        return head + f", to resolve {why}"


def _fine_input_spectrum(u: np.ndarray, fs: float) -> tuple[np.ndarray, np.ndarray]:
    """Welch spectrum of each input with a long segment (a quarter of the log), zero bin dropped."""
    from scipy import signal

    n = u.shape[0]
    seg = int(min(n, max(MIN_SEGMENT, 1 << int(math.floor(math.log2(max(n // 4, 2)))))))
    f, p = signal.welch(u, fs=fs, nperseg=seg, axis=0)
    return f[1:], p[1:]


def _excited_edges(u: np.ndarray, fs: float) -> tuple[float, float, bool]:
    """Lowest and highest excited frequency of the inputs, and whether the excitation reaches the lowest bin."""
    f, p = _fine_input_spectrum(u, fs)
    level = 10 ** (EXCITED_LEVEL_DB / 10)
    excited = p >= level * p.max(axis=0, keepdims=True)
    rows = np.flatnonzero(excited.any(axis=1))
    if rows.size == 0:
        return float(f[0]), float(f[-1]), True
    return float(f[rows[0]]), float(f[rows[-1]]), bool(rows[0] == 0)


def _mode_needs(model: StateSpaceModel, low: float, high: float) -> list[tuple[float, str]]:
    """List the resolution each mode in ``[low, high]`` Hz asks for (quarter half-power width, half corner)."""
    if model.n_states == 0:
        return []
    from ..lti.discretize import poles_to_continuous

    s = poles_to_continuous(model.poles(), model.sample_time)
    needs = []
    for pole in s[np.isfinite(s)]:
        if pole.imag < 0 or pole.real >= 0:
            continue
        fn = abs(pole) / (2 * math.pi)
        if not low <= fn <= high:
            continue
        if pole.imag > 0:
            zeta = -pole.real / abs(pole)
            needs.append((_MODE_WIDTH_SHARE * 2 * zeta * fn, f"the mode at {fn:.4g} Hz (damping {zeta:.3g})"))
        else:
            needs.append((fn / 2, f"the corner of the real mode at {fn:.4g} Hz"))
    return needs


def choose_segment(model: StateSpaceModel, u: np.ndarray, sample_time: float, *,
                   segment: int | None = None) -> SegmentChoice:
    """Welch segment fine enough for the excited band and the model's sharpest mode.

    Parameters
    ----------
    model : StateSpaceModel
        The model to be judged.
    u : numpy.ndarray, shape (N, m)
        Inputs.
    sample_time : float
        Sample time, s.
    segment : int, optional
        A segment given by the caller (kept, and said so).

    Returns
    -------
    SegmentChoice

    Notes
    -----
    The resolution needed is the smallest of: half the lowest excited frequency
    (unless the input excites down to the lowest frequency a quarter of the log
    resolves: a broadband input sets no limit), ``zeta f_n / 2`` (a quarter of
    the half-power width) for every oscillating mode and ``f_c / 2`` for every
    real mode with its natural
    frequency inside the excited band. With the Hann window's noise-equivalent
    bandwidth of 1.5 bins, ``L = 1.5 / (T df)`` rounded up to a power of two,
    at least :data:`MIN_SEGMENT` (and long enough that no more than about
    :data:`MAX_AVERAGES` averages are taken) and at most ``2 N / (MIN_AVERAGES
    + 1)``.
    """
    n = u.shape[0]
    fs = 1.0 / sample_time
    longest = int(max(min(n, MIN_SEGMENT), 2 * n // (MIN_AVERAGES + 1)))
    shortest = min(longest, 1 << int(math.ceil(math.log2(max(2 * n / (MAX_AVERAGES + 1), 2.0)))))
    if segment is not None:
        seg = int_in_range(segment, "segment", 8, n)
        return SegmentChoice(seg, "hann", _HANN_BANDWIDTH_BINS * fs / seg, None, (), False, True)
    low, high, broadband = _excited_edges(u, fs)
    needs = [] if broadband else [(low / 2, f"the lowest excited frequency {low:.4g} Hz")]
    needs += _mode_needs(model, low, high)
    if not needs:
        seg = min(n, max(MIN_SEGMENT, shortest, 1 << int(math.ceil(math.log2(max(n // 16, 2))))))
        seg = min(seg, longest)
        return SegmentChoice(seg, "hann", _HANN_BANDWIDTH_BINS * fs / seg, None, (), False)
    needed, why = min(needs)
    wanted = _HANN_BANDWIDTH_BINS * fs / max(needed, 1e-300)
    seg = 1 << int(math.ceil(math.log2(max(wanted, 2.0))))
    seg = max(seg, min(MIN_SEGMENT, n), shortest)
    limited = seg > longest
    if limited:
        seg = max(min(MIN_SEGMENT, n), 1 << int(math.floor(math.log2(longest))))
    return SegmentChoice(seg, "hann", _HANN_BANDWIDTH_BINS * fs / seg, float(needed), (why,), limited)


# --------------------------------------------------------------------------- results


@dataclass(frozen=True, slots=True, eq=False)
class LineResponse:
    """A measured frequency response at the excited lines of a periodic input.

    Attributes
    ----------
    frequencies_hz : numpy.ndarray, shape (L,)
    frf : numpy.ndarray, complex, shape (L, p, m)
        ``nan`` where a line does not determine an entry.
    frf_std : numpy.ndarray, shape (L, p, m)
        Standard deviation of ``frf`` (of the complex value).
    measured_periods : int
        Periods averaged (the standard deviations have ``2 (P - 1)`` degrees of
        freedom per block).
    """

    frequencies_hz: np.ndarray
    frf: np.ndarray
    frf_std: np.ndarray
    measured_periods: int

    def __post_init__(self) -> None:
        object.__setattr__(self, "frequencies_hz", _frozen(self.frequencies_hz))
        object.__setattr__(self, "frf", _frozen(self.frf, complex))
        object.__setattr__(self, "frf_std", _frozen(self.frf_std))
        object.__setattr__(self, "measured_periods", int(self.measured_periods))


@dataclass(frozen=True, slots=True, eq=False)
class FrequencyBand:
    """A contiguous frequency band flagged by the spectral comparison.

    Parameters
    ----------
    output : str
    input : str or None
        ``None`` for a low-coherence band of an output with several inputs.
    low_hz, high_hz : float
        Band edges (frequencies included), Hz.
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
class ChannelJudgement:
    """What the comparison could say about one input-output channel.

    Attributes
    ----------
    output, input : str
    status : {"agrees", "disagrees", "cannot_judge"}
    excited : int
        Frequencies the input excites.
    informative : int
        Of those, frequencies where the estimate is informative.
    informative_share : float
        Informative share of the excited band, measured on a logarithmic
        frequency axis (each frequency weighted by its share of a decade, as a
        Bode plot shows it); the verdict cannot judge below
        :data:`MIN_INFORMATIVE_FRACTION`.
    low_hz, high_hz : float or None
        Range of the informative frequencies (the band judged).
    outside : int
        Informative frequencies where the model lies outside the estimate's
        confidence region (at ``confidence``).
    largest_error : float or None
        Largest relative error ``|G - H| / |H|`` over the informative frequencies.
    """

    output: str
    input: str
    status: str
    excited: int
    informative: int
    informative_share: float
    low_hz: float | None
    high_hz: float | None
    outside: int
    largest_error: float | None


@dataclass(frozen=True, slots=True, eq=False)
class SpectralComparison:
    """Model frequency response against the nonparametric estimate from the data.

    Parameters
    ----------
    source : {"welch", "periodic"}
        H1 estimate from Welch segments, or the response at the excited lines
        of a periodic input.
    frequencies_hz : numpy.ndarray, shape (F,)
        Frequencies of the estimate (Welch bins without zero, or the lines), Hz.
    estimate : numpy.ndarray, complex, shape (F, p, m)
    radius : numpy.ndarray, shape (F, p, m)
        Radius of the confidence circle about ``estimate`` at ``confidence``.
    confidence : float
    model_response : numpy.ndarray, complex, shape (F, p, m)
        The model's frequency response at ``frequencies_hz``.
    model_seen : numpy.ndarray, complex, shape (F, p, m)
        The model's response as the same estimator sees it (Welch: its H1
        estimate from its simulated output; lines: equal to ``model_response``).
        The verdict compares ``estimate`` with this.
    dense_frequencies_hz : numpy.ndarray, shape (D,)
    dense_response : numpy.ndarray, complex, shape (D, p, m)
        The model on a dense logarithmic grid, for figures.
    coherence : numpy.ndarray, shape (F, p, m)
        Ordinary coherence (``nan`` for lines).
    multiple_coherence : numpy.ndarray, shape (F, p)
    excited : numpy.ndarray of bool, shape (F, m)
    informative : numpy.ndarray of bool, shape (F, p, m)
    low_coherence_bands, mismatch_bands : tuple of FrequencyBand
    judgements : tuple of ChannelJudgement
        One per channel, outputs first.
    segment : SegmentChoice or None
        ``None`` for lines.
    segment_length, n_segments : int
        Welch segment length and number of segments (period and periods for lines).
    effective_averages : float
        Independent averages behind the confidence radius.
    model_radius : numpy.ndarray, shape (F, p, m), or None
        Radius of the confidence circle of the model's response at
        ``confidence`` from its parameter covariance; ``None`` when the model
        carries none (the verdict then treats the model as exact).
    """

    source: str
    frequencies_hz: np.ndarray
    estimate: np.ndarray
    radius: np.ndarray
    confidence: float
    model_response: np.ndarray
    model_seen: np.ndarray
    dense_frequencies_hz: np.ndarray
    dense_response: np.ndarray
    coherence: np.ndarray
    multiple_coherence: np.ndarray
    excited: np.ndarray
    informative: np.ndarray
    low_coherence_bands: tuple[FrequencyBand, ...]
    mismatch_bands: tuple[FrequencyBand, ...]
    judgements: tuple[ChannelJudgement, ...]
    segment: SegmentChoice | None
    segment_length: int
    n_segments: int
    effective_averages: float
    model_radius: np.ndarray | None = None

    def __post_init__(self) -> None:
        if self.model_radius is not None:
            object.__setattr__(self, "model_radius", _frozen(self.model_radius))
        for name in ("frequencies_hz", "radius", "dense_frequencies_hz", "coherence", "multiple_coherence"):
            object.__setattr__(self, name, _frozen(getattr(self, name)))
        for name in ("estimate", "model_response", "model_seen", "dense_response"):
            object.__setattr__(self, name, _frozen(getattr(self, name), complex))
        for name in ("excited", "informative"):
            object.__setattr__(self, name, _frozen(getattr(self, name), bool))

    def judgement(self, output: str, input: str) -> ChannelJudgement:
        """Return the judgement of one channel."""
        return next(j for j in self.judgements if j.output == output and j.input == input)


# --------------------------------------------------------------------------- estimation


@dataclass(frozen=True, slots=True, eq=False)
class _H1:
    f: np.ndarray
    H: np.ndarray
    coh: np.ndarray
    mcoh: np.ndarray
    Syy: np.ndarray
    inv_diag: np.ndarray
    Suu_diag: np.ndarray
    segments: int


def _h1(u: np.ndarray, y: np.ndarray, fs: float, seg: int) -> _H1:
    """H1 estimate, coherences and the spectra behind its error (Welch: Hann, half overlap)."""
    from scipy import signal

    kw = {"fs": fs, "nperseg": seg}
    m, p = u.shape[1], y.shape[1]
    f = signal.csd(u[:, 0], u[:, 0], **kw)[0]
    keep = f > 0
    f = f[keep]
    S = np.empty((f.size, m, m), complex)
    for j in range(m):
        for col in range(m):
            S[:, j, col] = signal.csd(u[:, j], u[:, col], **kw)[1][keep]
    Syu = np.empty((f.size, p, m), complex)
    Syy = np.empty((f.size, p))
    for i in range(p):
        Syy[:, i] = signal.welch(y[:, i], **kw)[1][keep]
        for j in range(m):
            Syu[:, i, j] = signal.csd(u[:, j], y[:, i], **kw)[1][keep]
    Suu = np.real(np.diagonal(S, axis1=1, axis2=2))
    with np.errstate(all="ignore"):
        coh = np.abs(Syu) ** 2 / (Suu[:, None, :] * Syy[:, :, None])
        H = np.transpose(np.linalg.solve(S, np.transpose(Syu, (0, 2, 1))), (0, 2, 1))
        explained = np.real(np.einsum("fij,fij->fi", H, np.conj(Syu)))
        mcoh = np.clip(np.where(Syy > 0, explained / Syy, 0.0), 0.0, 1.0)
        inv_diag = np.real(np.diagonal(np.linalg.inv(S), axis1=1, axis2=2))
    coh = np.clip(np.nan_to_num(coh), 0.0, 1.0)
    if m == 1:
        mcoh = coh[:, :, 0].copy()
    step = seg - seg // 2
    return _H1(f, H, coh, mcoh, Syy, inv_diag, Suu, max(1, (u.shape[0] - seg) // step + 1))


def _effective_averages(segments: int) -> float:
    """Independent averages of ``segments`` half-overlapping Hann segments (Welch 1967)."""
    if segments <= 1:
        return float(segments)
    return segments / (1.0 + 2.0 * _HANN_OVERLAP_CORRELATION**2 * (segments - 1) / segments)


def _radius(h: _H1, n_d: float, m: int, confidence: float) -> np.ndarray:
    """Radius of the confidence circle of every H1 entry (Bendat and Piersol sec. 9.2, 9.3)."""
    from scipy import stats

    dof = n_d - m
    if dof <= 0:
        return np.full(h.H.shape, np.inf)
    q = float(stats.f.ppf(confidence, 2, 2 * dof))
    noise = np.clip(1.0 - h.mcoh, 0.0, 1.0) * h.Syy  # (F, p)
    with np.errstate(all="ignore"):
        r2 = q * noise[:, :, None] * h.inv_diag[:, None, :] / dof
    return np.sqrt(np.where(np.isfinite(r2) & (r2 >= 0), r2, np.inf))


def _dense_grid(model: StateSpaceModel, f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    nyquist = 0.5 / model.sample_time
    low = max(float(f[0]) / 2, nyquist * 1e-5)
    grid = np.unique(np.concatenate([np.geomspace(low, nyquist, _DENSE_POINTS), f]))
    return grid, np.asarray(frequency_response(model, grid), dtype=complex)


def _welch_parts(model: StateSpaceModel, u: np.ndarray, y: np.ndarray, y_model: np.ndarray,
                 choice: SegmentChoice, confidence: float) -> dict[str, Any]:
    fs = 1.0 / model.sample_time
    data = _h1(u, y, fs, choice.segment)
    seen = _h1(u, y_model, fs, choice.segment).H
    n_d = _effective_averages(data.segments)
    level = 10 ** (EXCITED_LEVEL_DB / 10)
    excited = data.Suu_diag >= level * np.max(data.Suu_diag, axis=0, keepdims=True)
    return {"f": data.f, "H": data.H, "radius": _radius(data, n_d, u.shape[1], confidence),
            "seen": seen, "coh": data.coh, "mcoh": data.mcoh, "excited": excited, "segments": data.segments,
            "n_d": n_d, "low_radius": _radius(data, n_d, u.shape[1], MISMATCH_CONFIDENCE)}


def _line_parts(model: StateSpaceModel, lines: LineResponse, confidence: float) -> dict[str, Any]:
    from scipy import stats

    dof = max(2 * (lines.measured_periods - 1), 1)
    scale = math.sqrt(float(stats.f.ppf(confidence, 2, dof))) if lines.measured_periods > 1 else math.inf
    strict = math.sqrt(float(stats.f.ppf(MISMATCH_CONFIDENCE, 2, dof))) if lines.measured_periods > 1 else math.inf
    G = np.asarray(frequency_response(model, lines.frequencies_hz), dtype=complex)
    finite = np.isfinite(lines.frf)
    return {"f": lines.frequencies_hz, "H": lines.frf, "radius": lines.frf_std * scale, "seen": G,
            "coh": np.full(lines.frf.shape, np.nan), "mcoh": np.full(lines.frf.shape[:2], np.nan),
            "excited": finite.any(axis=1), "segments": lines.measured_periods, "n_d": float(lines.measured_periods),
            "low_radius": lines.frf_std * strict}


def spectral_comparison(
    model: StateSpaceModel,
    u: np.ndarray,
    y: np.ndarray,
    *,
    segment: int | None = None,
    confidence: float = 0.95,
    simulated: np.ndarray | None = None,
    lines: LineResponse | None = None,
    covariance: ParameterCovariance | None = None,
) -> SpectralComparison:
    """Compare a model's frequency response with the H1 estimate from data (or measured lines).

    Parameters
    ----------
    model : StateSpaceModel
        Discrete-time model with ``m`` inputs and ``p`` outputs.
    u : numpy.ndarray, shape (N, m)
        Input deviations.
    y : numpy.ndarray, shape (N, p)
        Output deviations.
    segment : int, optional
        Welch segment length; default from :func:`choose_segment`.
    confidence : float, default 0.95
        Level of the confidence radius drawn and of the informative test.
    simulated : numpy.ndarray, shape (N, p), optional
        The model's output on ``u`` (from its initial state); simulated from
        zero when omitted.
    lines : LineResponse, optional
        Measured response at the lines of a periodic input; used instead of
        the Welch estimate.
    covariance : ParameterCovariance, optional
        The model's parameter covariance; widens the region a difference must
        leave before it counts against the model (module docstring, item 5).
        Ignored when its dimensions are not the model's.

    Returns
    -------
    SpectralComparison

    Notes
    -----
    See the module docstring: the confidence radius of Bendat and Piersol, the
    model seen through the same estimator, informative frequencies, and the
    rule for a miss (outside the region at :data:`MISMATCH_CONFIDENCE`, a
    relative error above :data:`SPECTRAL_REL_TOL`, over at least
    :data:`MIN_BAND_BINS` adjacent informative frequencies).

    References
    ----------
    .. [1] J. S. Bendat and A. G. Piersol, *Random Data*, 4th ed., Wiley, 2010,
       sec. 9.2 and 9.3.
    """
    confidence = fraction(confidence, "confidence")
    if lines is not None:
        _check_lines(model, lines)
        parts, choice, seg = _line_parts(model, lines, confidence), None, 0
    else:
        choice = choose_segment(model, u, model.sample_time, segment=segment)
        y_model = simulate(model, u) if simulated is None else simulated
        parts, seg = _welch_parts(model, u, y, y_model, choice, confidence), choice.segment
    f = parts["f"]
    G = np.asarray(frequency_response(model, f), dtype=complex)
    dense_f, dense = _dense_grid(model, f)
    informative = _informative(parts, lines is not None)
    model_radius = _model_radius(model, covariance, f, confidence)
    if model_radius is not None:
        strict = math.sqrt(_chi2(MISMATCH_CONFIDENCE) / _chi2(confidence))
        parts["radius_judged"] = np.hypot(parts["radius"], model_radius)
        parts["low_radius"] = np.hypot(parts["low_radius"], strict * model_radius)
    low_bands = _low_coherence_bands(model, parts) if lines is None else []
    miss_bands, judgements = _judge(model, parts, informative)
    return SpectralComparison(
        source="periodic" if lines is not None else "welch", frequencies_hz=f, estimate=parts["H"],
        radius=parts["radius"], confidence=confidence, model_response=G, model_seen=parts["seen"],
        dense_frequencies_hz=dense_f, dense_response=dense, coherence=parts["coh"],
        multiple_coherence=parts["mcoh"], excited=parts["excited"], informative=informative,
        low_coherence_bands=tuple(low_bands), mismatch_bands=tuple(miss_bands), judgements=tuple(judgements),
        segment=choice, segment_length=seg if lines is None else 0, n_segments=int(parts["segments"]),
        effective_averages=float(parts["n_d"]), model_radius=model_radius,
    )


def _chi2(confidence: float) -> float:
    from scipy import stats

    return float(stats.chi2.ppf(confidence, 2))


def _model_radius(model: StateSpaceModel, covariance: ParameterCovariance | None, f: np.ndarray,
                  confidence: float) -> np.ndarray | None:
    """Confidence radius of the model's response at ``f``, or ``None`` without a usable covariance."""
    if covariance is None:
        return None
    if not isinstance(covariance, ParameterCovariance):
        raise OptionError(f"covariance must be a ParameterCovariance; got {type(covariance).__name__}")
    if not covariance.matches(model):
        return None
    radius = response_band(model, covariance, f, confidence).radius
    return np.where(np.isfinite(radius), radius, np.inf)


def _check_lines(model: StateSpaceModel, lines: LineResponse) -> None:
    if not isinstance(lines, LineResponse):
        raise OptionError(f"lines must be a LineResponse; got {type(lines).__name__}")
    expected = (lines.frequencies_hz.size, model.n_outputs, model.n_inputs)
    if lines.frf.shape != expected or lines.frf_std.shape != expected:
        raise OptionError(f"the line response must have shape {expected}; got {lines.frf.shape}")


def _informative(parts: dict[str, Any], periodic: bool) -> np.ndarray:
    H, r = parts["H"], parts["radius"]
    with np.errstate(all="ignore"):
        narrow = np.isfinite(r) & np.isfinite(H) & (r <= INFORMATIVE_RADIUS * np.abs(H))
    excited = parts["excited"][:, None, :]
    if periodic:
        return narrow & excited
    coherent = (parts["mcoh"] >= COHERENCE_LOW)[:, :, None]
    return narrow & excited & coherent


def _runs(mask: np.ndarray, min_len: int = 1) -> list[tuple[int, int]]:
    """Index ranges ``[start, stop)`` of runs of True at least ``min_len`` long."""
    edges = np.diff(np.concatenate([[0], mask.astype(int), [0]]))
    starts = np.flatnonzero(edges == 1)
    stops = np.flatnonzero(edges == -1)
    return [(int(a), int(b)) for a, b in zip(starts, stops, strict=True) if b - a >= min_len]


def _close_gaps(mask: np.ndarray, max_gap: int) -> np.ndarray:
    """Set to True the interior runs of False shorter than ``max_gap``."""
    out = mask.copy()
    for a, b in _runs(~mask):
        if a > 0 and b < mask.size and b - a < max_gap:
            out[a:b] = True
    return out


def _low_coherence_bands(model: StateSpaceModel, parts: dict[str, Any]) -> list[FrequencyBand]:
    """Bands of the excited range where the (multiple) coherence is below :data:`COHERENCE_LOW`."""
    f, mcoh = parts["f"], parts["mcoh"]
    excited = parts["excited"].any(axis=1)
    out = []
    m = model.n_inputs
    for i in range(model.n_outputs):
        low = (mcoh[:, i] < COHERENCE_LOW) & excited
        gap = max(MIN_BAND_BINS, int(_LOW_COHERENCE_GAP * f.size))
        for a, b in _runs(_close_gaps(low, gap), MIN_BAND_BINS):
            out.append(FrequencyBand(model.outputs[i], model.inputs[0] if m == 1 else None,
                                     float(f[a]), float(f[b - 1]), float(np.min(mcoh[a:b, i]))))
    return out


def _log_weights(f: np.ndarray) -> np.ndarray:
    """Share of a logarithmic frequency axis each frequency stands for."""
    if f.size < 2:
        return np.ones_like(f)
    return np.abs(np.gradient(np.log(f)))


def _judge(model: StateSpaceModel, parts: dict[str, Any],
           informative: np.ndarray) -> tuple[list[FrequencyBand], list[ChannelJudgement]]:
    """Mismatch bands and the judgement of every channel."""
    f, H, seen = parts["f"], parts["H"], parts["seen"]
    weight = _log_weights(f)
    bands, judgements = [], []
    for i, out_name in enumerate(model.outputs):
        for j, in_name in enumerate(model.inputs):
            info = informative[:, i, j]
            with np.errstate(all="ignore"):
                diff = np.abs(seen[:, i, j] - H[:, i, j])
                rel = diff / np.abs(H[:, i, j])
            outside = info & (diff > parts.get("radius_judged", parts["radius"])[:, i, j])
            miss = info & (diff > parts["low_radius"][:, i, j]) & (rel > SPECTRAL_REL_TOL)
            runs = _runs(miss, MIN_BAND_BINS)
            for a, b in runs:
                bands.append(FrequencyBand(out_name, in_name, float(f[a]), float(f[b - 1]),
                                           float(np.max(rel[a:b]))))
            excited_mask = parts["excited"][:, j]
            excited = int(np.count_nonzero(excited_mask))
            count = int(np.count_nonzero(info))
            total = float(weight[excited_mask].sum())
            share = float(weight[info].sum()) / total if total > 0 else 0.0
            if runs:
                status = "disagrees"
            elif count < MIN_BAND_BINS or share < MIN_INFORMATIVE_FRACTION:
                status = "cannot_judge"
            else:
                status = "agrees"
            judged = f[info]
            judgements.append(ChannelJudgement(
                out_name, in_name, status, excited, count, share,
                float(judged.min()) if count else None, float(judged.max()) if count else None,
                int(np.count_nonzero(outside)), float(np.max(rel[info])) if count else None,
            ))
    return bands, judgements
