"""Preparing logged data for estimation.

One function, :func:`prepare`, turns raw logged records into what the
estimators take: deviations from an operating point, optionally detrended and
decimated, split into an estimation part and a held-out validation part.

Order of the steps, for every experiment (contiguous record) separately:

0. **Frozen tail** (on by default). Trailing samples that repeat the record's
   last values in every channel, input and output alike, bit for bit, are
   left out when there are at least ``max(20, 1 %)`` of them: a record padded
   to a length or a logger that kept writing its last reading after the
   signals stopped. No measured channel holds one value to the last bit for
   that long while it carries information, and a hold-out made of such
   samples scores the model on nothing (its fit percent divides by the
   variation of an almost constant signal). The first sample of the run is
   kept (it is where the signals arrived); the rest is reported by
   :class:`~ident.errors.FrozenDataWarning` and in
   :attr:`PreparedData.frozen_tails`. Leading samples at rest are kept: they
   are the initial state and the ``offset="initial"`` level.
1. **Split.** The last ``holdout`` fraction of each experiment is held out for
   validation; the first part is used for estimation. Every experiment
   contributes to both parts, so a log of several experiments is validated on
   all of them, and experiments are never joined end to end.
2. **Operating point.** With ``offset="mean"`` it is the mean of the
   estimation parts of all experiments (pooled, each sample counting once);
   with ``offset="initial"`` the mean over the first ``initial_window_s``
   seconds of each experiment (pooled). It is subtracted from every sample,
   estimation and validation alike.
3. **Detrend** (optional). A straight line per channel is fitted by least
   squares to the estimation part of each experiment, extended over its
   validation part, and subtracted from both. The held-out data therefore never
   influences the estimate.
4. **Decimate** (optional). Each whole experiment is low-pass filtered and
   down-sampled with :func:`scipy.signal.decimate`, then split at the
   decimated counterpart of the split point.

With ``validation_data`` (records of a separate log, e.g. a validation run
recorded after the estimation run) nothing is held out of the estimation
records: they are used whole for estimation, and the validation records,
reduced by the same operating point and decimated the same way, are the
held-out data. Detrending is refused then (a line fitted to one record does not
carry over to another).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, fields
from typing import Any, Literal

import numpy as np

from .._validate import (
    as_signal,
    int_in_range,
    names_tuple,
    one_of,
    options_from_mapping,
    positive_float,
    sample_time_value,
)
from ..choices import OFFSET_METHODS
from ..errors import FrozenDataWarning, OptionError
from ..lti._linalg import column_sums
from ..lti.models import OperatingPoint
from .data import Experiment, as_experiments

__all__ = ["OFFSET_METHODS", "PreprocessOptions", "PreparedData", "prepare", "as_records"]


#: Largest decimation factor done with the default 8th-order Chebyshev IIR
#: filter; larger factors use scipy's FIR filter (scipy's own advice).
_IIR_DECIMATE_LIMIT = 13

#: Fraction of each experiment's estimation part used as the initial window
#: when ``offset="initial"`` and no ``initial_window_s`` is given.
_DEFAULT_INITIAL_FRACTION = 0.05

#: Largest decimation factor accepted.
_MAX_DECIMATION = 1000

#: A frozen tail is left out when it is at least this many samples long and
#: at least this share of its record (step 0 of the module docstring).
_FROZEN_MIN_SAMPLES = 20
_FROZEN_MIN_FRACTION = 0.01


@dataclass(frozen=True, slots=True, eq=False, kw_only=True)
class PreprocessOptions:
    """How raw logged data is turned into estimation and validation data.

    Parameters
    ----------
    offset : {"mean", "initial"}
        Operating point subtracted from the data: the mean of the estimation
        part (default), or the mean level over an initial window.
    initial_window_s : float, optional
        Length in seconds of the initial window for ``offset="initial"``.
        Default ``None``: the first 5 % of each experiment's estimation part
        (at least one sample).
    detrend : bool
        Remove a straight line fitted to the estimation part of each experiment
        (default ``False``).
    decimate : int
        Decimation factor ``q >= 1`` (default 1, none). The new sample time is
        ``q`` times the original one.
    holdout : float
        Fraction in ``[0, 1)`` of each experiment, at its end, held out for
        validation (default 0.3). ``0`` keeps everything for estimation.
    drop_frozen_tail : bool
        Leave out the trailing samples of a record that repeat its last values
        in every channel (step 0 of the module docstring; default ``True``).
        The hold-out fraction applies to what remains.
    """

    offset: Literal["mean", "initial"] = "mean"
    initial_window_s: float | None = None
    detrend: bool = False
    decimate: int = 1
    holdout: float = 0.3
    drop_frozen_tail: bool = True

    def __post_init__(self) -> None:
        one_of(self.offset, "offset", OFFSET_METHODS)
        if self.initial_window_s is not None:
            object.__setattr__(
                self, "initial_window_s", positive_float(self.initial_window_s, "initial_window_s")
            )
        if not isinstance(self.detrend, (bool, np.bool_)):
            raise OptionError(f"detrend must be true or false; got {self.detrend!r}")
        object.__setattr__(self, "detrend", bool(self.detrend))
        object.__setattr__(self, "decimate", int_in_range(self.decimate, "decimate", 1, _MAX_DECIMATION))
        if not (isinstance(self.holdout, (int, float, np.integer, np.floating))
                and not isinstance(self.holdout, (bool, np.bool_)) and 0.0 <= self.holdout < 1.0):
            raise OptionError(f"holdout must be a number in [0, 1); got {self.holdout!r}")
        holdout = float(self.holdout)
        object.__setattr__(self, "holdout", holdout)
        if not isinstance(self.drop_frozen_tail, (bool, np.bool_)):
            raise OptionError(f"drop_frozen_tail must be true or false; got {self.drop_frozen_tail!r}")
        object.__setattr__(self, "drop_frozen_tail", bool(self.drop_frozen_tail))

    @classmethod
    def from_mapping(cls, mapping: Mapping[str, Any], *, key_path: str = "") -> PreprocessOptions:
        """Build options from a mapping such as a parsed TOML table.

        Parameters
        ----------
        mapping : Mapping
            Keys are the field names; missing keys take their defaults.
        key_path : str
            Dotted location of the table, used in error messages.

        Raises
        ------
        PipelineError
            An unknown key, or a value that is not allowed.
        """
        return options_from_mapping(cls, mapping, key_path)

    def to_dict(self) -> dict[str, Any]:
        """Return the options as a plain dict (for provenance records)."""
        return {f.name: getattr(self, f.name) for f in fields(self)}


@dataclass(frozen=True, slots=True, eq=False)
class PreparedData:
    """Data ready for the estimators, with a record of what was done to it.

    Attributes
    ----------
    estimation : tuple of Experiment
        Estimation part of each experiment, as deviations from the operating
        point (and from the trend, when detrended), at the decimated rate.
    validation : tuple of Experiment
        Held-out part of each experiment, treated the same way; empty when
        ``holdout`` is 0. An experiment whose held-out part is empty is left out.
    operating_point : OperatingPoint
        Levels subtracted from the raw data: the mean of the estimation part
        (``offset="mean"``) or of the initial window (``offset="initial"``).
    sample_time : float
        Sample time after decimation, in s.
    decimation : int
        Decimation factor applied.
    estimation_ranges, validation_ranges : tuple of (int, int)
        Half-open sample index ranges ``(start, stop)`` of each experiment's
        estimation and validation parts in the original (undecimated) record.
    trends : numpy.ndarray or None
        Shape (n_experiments, 2, m + p): intercept and slope per sample (at the
        original rate, time counted from the experiment's first sample) of the
        line removed from each input and output column, inputs first; ``None``
        without detrending.
    input_names, output_names, input_units, output_units : tuple of str
        Signal names and units.
    options : PreprocessOptions
        The options used.
    separate_validation : bool
        The validation records come from separate records (``validation_data``
        of :func:`prepare`), not from the tails of the estimation records. Their
        ranges count on after the estimation records with a gap of one sample
        (records laid end to end, none continuing an estimation record).
    frozen_tails : tuple of (int, int)
        Half-open sample index ranges, counted like the other ranges, left out
        because they repeat their record's last values in every channel
        (``drop_frozen_tail``); empty when none was found.
    """

    estimation: tuple[Experiment, ...]
    validation: tuple[Experiment, ...]
    operating_point: OperatingPoint
    sample_time: float
    decimation: int
    estimation_ranges: tuple[tuple[int, int], ...]
    validation_ranges: tuple[tuple[int, int], ...]
    trends: np.ndarray | None
    input_names: tuple[str, ...]
    output_names: tuple[str, ...]
    input_units: tuple[str, ...]
    output_units: tuple[str, ...]
    options: PreprocessOptions
    separate_validation: bool = False
    frozen_tails: tuple[tuple[int, int], ...] = ()

    @property
    def n_inputs(self) -> int:
        """Number of inputs ``m``."""
        return self.estimation[0].n_inputs

    @property
    def n_outputs(self) -> int:
        """Number of outputs ``p``."""
        return self.estimation[0].n_outputs

    @property
    def n_estimation_samples(self) -> int:
        """Total number of estimation samples (decimated), over all experiments."""
        return sum(e.n_samples for e in self.estimation)

    @property
    def n_validation_samples(self) -> int:
        """Total number of validation samples (decimated), over all experiments."""
        return sum(e.n_samples for e in self.validation)


def as_records(data: Any) -> tuple[tuple[np.ndarray, np.ndarray], ...]:
    """Accept an Experiment, a (u, y) pair of arrays, or a sequence of either."""
    if isinstance(data, Experiment):
        return ((data.u, data.y),)
    if (
        isinstance(data, tuple)
        and len(data) == 2
        and isinstance(data[0], np.ndarray)
        and isinstance(data[1], np.ndarray)
    ):
        data = (data,)
    try:
        items = list(data)
    except TypeError as exc:
        raise OptionError(
            "data must be an Experiment, a (u, y) pair or a sequence of them; "
            f"got {type(data).__name__}"
        ) from exc
    records = []
    for k, item in enumerate(items):
        if isinstance(item, Experiment):
            records.append((item.u, item.y))
            continue
        try:
            u, y = item
        except (TypeError, ValueError) as exc:
            raise OptionError(
                f"experiment {k} must be an Experiment or a (u, y) pair; got {type(item).__name__}"
            ) from exc
        u = as_signal(u, f"experiment {k} u", ndim=2, bounded=True)
        y = as_signal(y, f"experiment {k} y", ndim=2, bounded=True)
        if u.shape[0] != y.shape[0]:
            raise OptionError(
                f"experiment {k}: u and y must have the same number of samples; "
                f"got {u.shape[0]} and {y.shape[0]}"
            )
        records.append((u, y))
    # as_experiments checks count and matching signal counts without copying twice
    if not records:
        raise OptionError("at least one experiment is needed; got none")
    m, p = records[0][0].shape[1], records[0][1].shape[1]
    for k, (u, y) in enumerate(records[1:], start=1):
        if (u.shape[1], y.shape[1]) != (m, p):
            raise OptionError(
                f"experiment {k} has {u.shape[1]} inputs and {y.shape[1]} outputs; "
                f"experiment 0 has {m} and {p}"
            )
    return tuple(records)


def _decimate(x: np.ndarray, q: int) -> np.ndarray:
    if q == 1:
        return x
    from scipy import signal

    ftype = "iir" if q <= _IIR_DECIMATE_LIMIT else "fir"
    return signal.decimate(x, q, ftype=ftype, axis=0, zero_phase=True)


def _min_decimate_length(q: int) -> int:
    # filtfilt's default pad length is 3 * max(len(a), len(b)); the IIR filter has
    # order 8 (9 coefficients), the FIR filter 20 q + 1 taps (scipy.signal.decimate).
    taps = 9 if q <= _IIR_DECIMATE_LIMIT else 20 * q + 1
    return 3 * taps + 1


def prepare(
    data: Any,
    sample_time: float,
    options: PreprocessOptions | None = None,
    *,
    input_names: Sequence[str] | None = None,
    output_names: Sequence[str] | None = None,
    input_units: Sequence[str] | None = None,
    output_units: Sequence[str] | None = None,
    segment_starts: Sequence[int] | None = None,
    validation_data: Any = None,
    validation_starts: Sequence[int] | None = None,
    overwrite: bool = False,
) -> PreparedData:
    """Remove the operating point, detrend, decimate and split logged data.

    Parameters
    ----------
    data : Experiment, (u, y) pair, or sequence of them
        The raw records; each is one contiguous experiment (or a segment of a
        log between timing gaps). ``u`` has shape (N, m), ``y`` (N, p).
    sample_time : float
        Sample time of the raw records, in s.
    options : PreprocessOptions, optional
        What to do; default ``PreprocessOptions()``.
    input_names, output_names : sequence of str, optional
        Signal names; default ``u1, ...`` and ``y1, ...``.
    input_units, output_units : sequence of str, optional
        Signal units; default empty strings.
    segment_starts : sequence of int, optional
        Index of each record's first sample in the original log, used for the
        reported ranges; default: records laid end to end from index 0.
    validation_data : Experiment, (u, y) pair, or sequence of them, optional
        Separate validation records (another log). When given, ``holdout`` is
        not applied: the records of ``data`` are all estimation data, and these
        are the validation data.
    validation_starts : sequence of int, optional
        Index of each validation record's first sample in its own log (records
        laid end to end from index 0 by default).
    overwrite : bool, default False
        Let the operating point be subtracted in place in the arrays of
        ``data`` when they are writeable float64 and neither ``detrend`` nor
        ``decimate`` is asked (the arrays then hold the deviations): saves a
        copy of the log, for callers that need the raw values no more.

    Returns
    -------
    PreparedData
        Estimation and validation experiments and the record of the steps.

    Raises
    ------
    OptionError
        Inconsistent shapes, non-finite values, or an experiment too short for
        the split or the decimation asked.

    Notes
    -----
    The split point of an experiment with ``N`` raw samples decimated by ``q``
    is ``s = round((1 - holdout) * ceil(N / q))`` in decimated samples, i.e.
    ``s * q`` in raw samples; the operating point and trend are computed on the
    raw samples ``[0, s q)``. See the module docstring for the order of steps.

    Examples
    --------
    >>> import numpy as np
    >>> u = np.arange(10.0)[:, None]
    >>> prep = prepare((u, 2 * u), 1.0, PreprocessOptions(holdout=0.3))
    >>> prep.operating_point.inputs.tolist(), prep.estimation_ranges, prep.validation_ranges
    ([3.0], ((0, 7),), ((7, 10),))
    """
    options = PreprocessOptions() if options is None else options
    if not isinstance(options, PreprocessOptions):
        raise OptionError(f"options must be PreprocessOptions; got {type(options).__name__}")
    sample_time = sample_time_value(sample_time)
    records = as_records(data)
    m, p = records[0][0].shape[1], records[0][1].shape[1]
    labels = _signal_labels(m, p, input_names, output_names, input_units, output_units)
    starts = _record_starts(records, segment_starts)
    q = options.decimate
    if validation_data is not None:
        return _prepare_separate(records, as_records(validation_data), sample_time, options, labels,
                                 starts, validation_starts)

    records, frozen = _without_frozen_tails(records, starts, options, ("the log", "segment"))  # 0. frozen tails
    splits = _split_points(records, q, options.holdout)  # 1. split points (raw samples)
    op_u, op_y = _operating_levels(records, splits, options, sample_time)  # 2. operating point
    operating_point = OperatingPoint(inputs=op_u, outputs=op_y)
    level = np.concatenate((op_u, op_y))

    estimation, validation, est_ranges, val_ranges, trends = [], [], [], [], []
    for (u, y), (s_dec, s_raw), start in zip(records, splits, starts, strict=True):
        if q == 1 and not options.detrend:
            # the deviations are made once and shared by the two parts (no copy of a copy)
            ud, yd = (_in_place(u, op_u), _in_place(y, op_y)) if overwrite else (u - op_u, y - op_y)
            est_u, est_y, val_u, val_y = ud[:s_dec], yd[:s_dec], ud[s_dec:], yd[s_dec:]
        else:
            z, coef = _deviations(u, y, level, s_raw, options.detrend)  # 3. detrend
            if coef is not None:
                trends.append(coef)
            # 4. decimate the whole experiment, then split
            z = _decimate(z, q)
            est_u, est_y = np.array(z[:s_dec, :m]), np.array(z[:s_dec, m:])
            val_u, val_y = np.array(z[s_dec:, :m]), np.array(z[s_dec:, m:])
            del z
        estimation.append(Experiment._owned(est_u, est_y))
        est_ranges.append((int(start), int(start + s_raw)))
        n_raw = u.shape[0]
        if val_u.shape[0] > 0:
            validation.append(Experiment._owned(val_u, val_y))
            val_ranges.append((int(start + s_raw), int(start + n_raw)))

    trend_array = None
    if options.detrend:
        trend_array = np.array(trends)
        trend_array.flags.writeable = False
    return PreparedData(
        estimation=as_experiments(estimation),
        validation=tuple(validation),
        operating_point=operating_point,
        sample_time=sample_time * q,
        decimation=q,
        estimation_ranges=tuple(est_ranges),
        validation_ranges=tuple(val_ranges),
        trends=trend_array,
        **labels,
        options=options,
        frozen_tails=frozen,
    )


def frozen_tail_length(u: np.ndarray, y: np.ndarray) -> int:
    """Count the trailing samples that repeat an earlier sample's values in every channel, bit for bit.

    The samples counted are those after the first one of the final run of
    identical rows (that one is where the signals arrived and is not counted);
    ``N - 1`` when the whole record holds one value.

    Parameters
    ----------
    u, y : numpy.ndarray
        Inputs (N, m) and outputs (N, p) of one record.

    Returns
    -------
    int
    """
    n = u.shape[0]
    last_u, last_y = u[-1], y[-1]
    end, block = n - 1, 256  # rows [end, n) equal the last row
    while end > 0:
        a = max(0, end - block)
        same = np.all(u[a:end] == last_u, axis=1) & np.all(y[a:end] == last_y, axis=1)
        if not same.all():
            first = a + int(np.flatnonzero(~same)[-1]) + 1  # first row of the final run
            return n - first - 1
        end, block = a, 2 * block
    return n - 1


def frozen_tail_rule(count: int, n: int) -> bool:
    """Return whether ``count`` trailing repeats (:func:`frozen_tail_length`) of an ``n``-sample record are left out.

    At least ``max(20, 1 %)`` of the record, and not the whole record (a
    record that is one value throughout is left to the signal checks).
    """
    return max(_FROZEN_MIN_SAMPLES, math.ceil(_FROZEN_MIN_FRACTION * n)) <= count < n - 1


def _without_frozen_tails(records: tuple, starts: Sequence[int], options: PreprocessOptions,
                          what: tuple[str, str]) -> tuple[tuple, tuple[tuple[int, int], ...]]:
    """Return the records without their frozen tails (step 0) and the ranges left out.

    ``what`` names the records in the warning: one record, and one of several
    (numbered from 1).
    """
    if not options.drop_frozen_tail:
        return records, ()
    kept, frozen = [], []
    for k, ((u, y), start) in enumerate(zip(records, starts, strict=True)):
        n = u.shape[0]
        count = frozen_tail_length(u, y)
        if frozen_tail_rule(count, n):
            a, b = int(start) + n - count, int(start) + n
            where = what[0] if len(records) == 1 else f"{what[1]} {k + 1}"
            warnings.warn(f"samples {a}-{b - 1} (the last {count} of {where}) repeat the values of sample {a - 1} in "
                          "every channel, to the last bit (a padded or stopped recording); they are left out of "
                          "estimation and validation", FrozenDataWarning, stacklevel=3)
            kept.append((u[:n - count], y[:n - count]))
            frozen.append((a, b))
        else:
            kept.append((u, y))
    return tuple(kept), tuple(frozen)


def _prepare_separate(records: tuple, others: tuple, sample_time: float, options: PreprocessOptions,
                      labels: dict[str, tuple], starts: np.ndarray,
                      validation_starts: Sequence[int] | None) -> PreparedData:
    """Estimation on every sample of ``records``, validation on ``others`` (another log)."""
    m, p = records[0][0].shape[1], records[0][1].shape[1]
    if (others[0][0].shape[1], others[0][1].shape[1]) != (m, p):
        raise OptionError(f"the validation records have {others[0][0].shape[1]} inputs and "
                          f"{others[0][1].shape[1]} outputs; the estimation records {m} and {p}")
    if options.detrend:
        raise OptionError("detrend cannot be used with separate validation records: a line fitted to one "
                          "record does not carry over to another")
    q = options.decimate
    own = _record_starts(others, validation_starts)
    after = max(int(a) + u.shape[0] for (u, _), a in zip(records, starts, strict=True)) + 1
    records, frozen_est = _without_frozen_tails(records, starts, options, ("the estimation log", "estimation record"))
    others, frozen_val = _without_frozen_tails(others, [after + a for a in own], options,
                                               ("the validation log", "validation record"))
    full = [(u.shape[0] // q if q > 1 else u.shape[0], u.shape[0]) for u, _ in records]
    for k, (u, _) in enumerate([*records, *others]):
        if q > 1 and u.shape[0] < _min_decimate_length(q):
            raise OptionError(f"record {k} has {u.shape[0]} samples; decimation by {q} needs at least "
                              f"{_min_decimate_length(q)}")
    op_u, op_y = _operating_levels(records, full, options, sample_time)
    level = np.concatenate((op_u, op_y))
    estimation = [_deviation_experiment(u, y, level, q, m) for u, y in records]
    validation = [_deviation_experiment(u, y, level, q, m) for u, y in others]
    est_ranges = tuple((int(a), int(a + u.shape[0])) for (u, _), a in zip(records, starts, strict=True))
    val_ranges = tuple((int(after + a), int(after + a + u.shape[0])) for (u, _), a in zip(others, own, strict=True))
    return PreparedData(estimation=as_experiments(estimation), validation=tuple(validation),
                        operating_point=OperatingPoint(inputs=op_u, outputs=op_y), sample_time=sample_time * q,
                        decimation=q, estimation_ranges=est_ranges, validation_ranges=val_ranges, trends=None,
                        **labels, options=options, separate_validation=True,
                        frozen_tails=frozen_est + frozen_val)


def _deviation_experiment(u: np.ndarray, y: np.ndarray, level: np.ndarray, q: int, m: int) -> Experiment:
    z = _decimate(np.hstack((u, y)) - level, q)
    return Experiment(u=z[:, :m], y=z[:, m:])


def _in_place(x: np.ndarray, level: np.ndarray) -> np.ndarray:
    """``x - level``, in ``x`` itself when it is a writeable float64 array (else a new array)."""
    if isinstance(x, np.ndarray) and x.dtype == np.float64 and x.flags.writeable:
        x -= level
        return x
    return x - level


def _signal_labels(m: int, p: int, input_names: Sequence[str] | None, output_names: Sequence[str] | None,
                   input_units: Sequence[str] | None, output_units: Sequence[str] | None) -> dict[str, tuple]:
    """Check the signal names (default ``u1, ...``, ``y1, ...``) and units (default empty)."""
    input_names = names_tuple(input_names, "input_names", m, "u")
    output_names = names_tuple(output_names, "output_names", p, "y")
    input_units = names_tuple(("",) * m if input_units is None else input_units, "input_units", m, "")
    output_units = names_tuple(
        ("",) * p if output_units is None else output_units, "output_units", p, ""
    )
    return {"input_names": input_names, "output_names": output_names,
            "input_units": input_units, "output_units": output_units}


def _record_starts(records: Sequence[tuple[np.ndarray, np.ndarray]],
                   segment_starts: Sequence[int] | None) -> np.ndarray:
    """Index of each record's first sample in the original log (default: laid end to end)."""
    if segment_starts is None:
        starts = np.concatenate(([0], np.cumsum([r[0].shape[0] for r in records])[:-1]))
    else:
        starts = np.asarray(segment_starts)
        if starts.shape != (len(records),):
            raise OptionError(
                f"segment_starts must hold {len(records)} indices; got {starts.size}"
            )
    return starts


def _split_points(records: Sequence[tuple[np.ndarray, np.ndarray]], q: int,
                  holdout: float) -> list[tuple[int, int]]:
    """Per record, the estimation/validation split ``(decimated samples, raw samples)``."""
    splits = []
    for k, (u, _) in enumerate(records):
        n_raw = u.shape[0]
        if q > 1 and n_raw < _min_decimate_length(q):
            raise OptionError(
                f"experiment {k} has {n_raw} samples; decimation by {q} needs at least "
                f"{_min_decimate_length(q)}"
            )
        n_dec = math.ceil(n_raw / q)
        s_dec = int(round((1.0 - holdout) * n_dec))
        if s_dec < 2:
            raise OptionError(
                f"experiment {k} has {n_raw} samples; too few to keep an estimation part "
                f"with holdout {holdout:g} and decimation {q}"
            )
        splits.append((s_dec, min(s_dec * q, n_raw)))
    return splits


def _operating_levels(records: Sequence[tuple[np.ndarray, np.ndarray]], splits: Sequence[tuple[int, int]],
                      options: PreprocessOptions, sample_time: float) -> tuple[np.ndarray, np.ndarray]:
    """Input and output levels: means over the estimation parts, or over the initial windows."""
    if options.offset == "mean":
        total = sum(s_raw for _, s_raw in splits)
        op_u = sum(column_sums(r[0][:s_raw]) for r, (_, s_raw) in zip(records, splits, strict=True)) / total
        op_y = sum(column_sums(r[1][:s_raw]) for r, (_, s_raw) in zip(records, splits, strict=True)) / total
    else:
        windows = []
        for _, s_raw in splits:
            if options.initial_window_s is None:
                w = max(1, int(round(_DEFAULT_INITIAL_FRACTION * s_raw)))
            else:
                w = max(1, int(round(options.initial_window_s / sample_time)))
            windows.append(min(w, s_raw))
        total = sum(windows)
        op_u = sum(column_sums(r[0][:w]) for r, w in zip(records, windows, strict=True)) / total
        op_y = sum(column_sums(r[1][:w]) for r, w in zip(records, windows, strict=True)) / total
    return op_u, op_y


def _deviations(u: np.ndarray, y: np.ndarray, level: np.ndarray, s_raw: int,
                detrend: bool) -> tuple[np.ndarray, np.ndarray | None]:
    """``[u, y]`` minus the levels and, with ``detrend``, minus the line fitted to the first ``s_raw`` samples.

    Returns the deviations (a new array: the caller's data is never touched)
    and the trend coefficients ``(2, m + p)`` (``None`` without ``detrend``).
    """
    z = np.hstack((u, y))
    z -= level
    if not detrend:
        return z, None
    t_est = np.arange(s_raw, dtype=float)
    design = np.column_stack((np.ones(s_raw), t_est))
    coef, *_ = np.linalg.lstsq(design, z[:s_raw], rcond=None)  # (2, m + p)
    t_all = np.arange(z.shape[0], dtype=float)
    z -= coef[0] + np.outer(t_all, coef[1])
    return z, coef
