"""The Python interface: fit a model on a pandas DataFrame (or a log file), look at it, check it, save it.

``import ident`` then::

    result = ident.fit(df, inputs=["valve_cmd"], outputs=["flow"], sample_time=0.01)
    result.model.to_scipy()        # scipy.signal.StateSpace, names and units on result.model
    result.modes                   # a DataFrame, one row per mode
    report = result.check(df2)     # validation on other data; report.to_frame()
    result.save("valve.json")
    again = ident.load_model("valve.json")

In a notebook the result, the mode table and the validation report show as tidy
HTML tables (``_repr_html_``), made from the same pieces as the run report.

The array-level functions (:func:`ident.estimate.identify.identify`,
:func:`ident.assess.modes.mode_table`, :func:`ident.assess.diagnostics.validate_model`,
:func:`ident.io.modelfile.save_model` ...) stay available for those who want them;
this module only joins them up.
"""

from __future__ import annotations

import hashlib
import os
import re
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .errors import LogFormatError, OptionError

__all__ = ["fit", "load_model", "ModelResult", "CheckResult", "ModeFrame"]

#: ``file_name`` given to a DataFrame in messages and provenance.
FRAME_NAME = "DataFrame"
_UNIT_RE = re.compile(r"^(?P<name>.*?)\s*(?:\[(?P<u1>[^\]]*)\]|\((?P<u2>[^)]*)\))\s*$")
#: Keys of :class:`ident.estimate.preprocess.PreprocessOptions` accepted directly by :func:`fit`.
_PREPROCESS_KEYS = ("offset", "initial_window_s", "detrend", "decimate", "holdout", "drop_frozen_tail")


# --------------------------------------------------------------------------- data in


def _split_unit(label: str) -> tuple[str, str]:
    m = _UNIT_RE.match(label.strip())
    if m and m.group("name").strip():
        unit = m.group("u1") if m.group("u1") is not None else m.group("u2")
        return m.group("name").strip(), unit.strip()
    return label.strip(), ""


def _frame_table(frame: Any, units: Mapping[str, str] | None) -> Any:
    """Build a :class:`ident.io.log.Table` of the numeric columns of a DataFrame (index as ``time`` when it is one)."""
    import pandas as pd

    from .io.log import Column, LogSource, Table

    frame = frame.copy(deep=False)
    if isinstance(frame.index, pd.DatetimeIndex | pd.TimedeltaIndex):
        start = frame.index[0]
        frame.insert(0, "time [s]", np.asarray((frame.index - start) / pd.Timedelta(seconds=1), dtype=float))
    given = {k.lower(): v for k, v in (units or {}).items()}
    columns, digest = [], hashlib.sha256()
    for label in frame.columns:
        name, unit = _split_unit(str(label))
        series = frame[label]
        if not (pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series)):
            continue  # text columns cannot be signals; naming one is refused as a missing column
        values = np.asarray(series.to_numpy(dtype=float, na_value=np.nan), dtype=float)
        bad = np.flatnonzero(~np.isfinite(values))
        if bad.size:
            k = int(bad[0])
            raise LogFormatError(f"not a finite number ({values[k]!r}); index label {frame.index[k]!r}",
                                 path=FRAME_NAME, row=k + 1, column=name,
                                 hint="drop or fill the bad rows (DataFrame.dropna, interpolate) first")
        digest.update(name.encode())
        digest.update(values.tobytes())
        columns.append(Column(name, given.get(name.lower(), unit), values))
    if not columns:
        raise LogFormatError("has no numeric column", path=FRAME_NAME)
    n = columns[0].values.shape[0]
    source = LogSource(path=FRAME_NAME, file_name=FRAME_NAME, sha256=digest.hexdigest(), first_row=1,
                       last_row=n, format="dataframe")
    return Table(columns=tuple(columns), source=source)


def _read(data: Any, inputs: Sequence[str], outputs: Sequence[str], *, sample_time: float | None,
          time: str | None, units: Mapping[str, str] | None) -> Any:
    """Read a :class:`ident.io.log.Log` from a DataFrame or a log file."""
    if sample_time is not None and time is not None:
        raise OptionError("give sample_time or time, not both")
    rate = None
    if sample_time is not None:
        if not (isinstance(sample_time, int | float) and np.isfinite(sample_time) and sample_time > 0):
            raise OptionError(f"sample_time must be a positive number of seconds; got {sample_time!r}")
        rate = 1.0 / float(sample_time)
    if isinstance(data, str | os.PathLike):
        from .io.log import read_log

        log = read_log(data, list(inputs), list(outputs), time=time, sample_rate=rate)
        if units:
            log = _with_units(log, units)
        return log
    if not hasattr(data, "columns") or not hasattr(data, "index"):
        raise OptionError(f"data must be a pandas DataFrame or the path of a log file; got {type(data).__name__}")
    from .io.log import log_from_table

    table = _frame_table(data, units)
    return log_from_table(table, list(inputs), list(outputs), time=time, sample_rate=rate)


def _with_units(log: Any, units: Mapping[str, str]) -> Any:
    import dataclasses

    given = {k.lower(): v for k, v in units.items()}
    return dataclasses.replace(
        log,
        input_units=tuple(given.get(n.lower(), u) for n, u in zip(log.input_names, log.input_units, strict=True)),
        output_units=tuple(given.get(n.lower(), u) for n, u in zip(log.output_names, log.output_units, strict=True)),
    )


def _names(value: str | Sequence[str], what: str) -> list[str]:
    if isinstance(value, str):
        return [value]
    names = list(value)
    if not names or not all(isinstance(n, str) for n in names):
        raise OptionError(f"{what} must be a column name or a non-empty list of column names; got {value!r}")
    return names


def _options(options: Mapping[str, Any]) -> Any:
    from .estimate.identify import IdentifyOptions
    from .estimate.preprocess import PreprocessOptions

    opts = dict(options)
    pre = {k: opts.pop(k) for k in _PREPROCESS_KEYS if k in opts}
    if opts.get("order") == "auto":
        opts["order"] = None
    if pre:
        opts["preprocess"] = PreprocessOptions(**pre)
    try:
        return IdentifyOptions(**opts)
    except TypeError as exc:
        from dataclasses import fields

        from ._validate import did_you_mean

        known = [f.name for f in fields(IdentifyOptions) if f.name != "preprocess"] + list(_PREPROCESS_KEYS)
        bad = [k for k in opts if k not in known]
        hint = did_you_mean(bad[0], known) if bad else None
        raise OptionError(f"unknown fit option(s) {', '.join(map(repr, bad)) or exc}; known: {', '.join(known)}",
                          hint=hint) from None


# --------------------------------------------------------------------------- public functions


def fit(
    data: Any,
    *,
    inputs: str | Sequence[str],
    outputs: str | Sequence[str],
    sample_time: float | None = None,
    time: str | None = None,
    units: Mapping[str, str] | None = None,
    progress: Callable[[str, float], None] | None = None,
    workers: int = 1,
    **options: Any,
) -> ModelResult:
    """Identify a linear model from logged inputs and outputs.

    Parameters
    ----------
    data : pandas.DataFrame or path-like
        One row per sample. Columns may be named ``"name [unit]"``; a
        ``DatetimeIndex`` or ``TimedeltaIndex`` is taken as the time base. A path
        is read as ``rigfit fit`` reads a log (CSV, Parquet, MDF, HDF5).
    inputs, outputs : str or sequence of str
        Column names (bare names; case-insensitive), in model order.
    sample_time : float, optional
        Seconds between rows, when the data have no time column.
    time : str, optional
        Name of the time column (default: ``time`` or ``t``, or the index).
    units : mapping of str to str, optional
        Unit per column name, for columns whose names carry none.
    progress : callable, optional
        Called as ``progress(step, fraction_done)``.
    workers : int, default 1
        Processes for the candidate search (``workers`` of
        :func:`ident.estimate.identify.identify`; the model does not depend on it).
    **options
        Fit options, as in a pipeline file's ``[fit]`` and ``[preprocess]``
        tables: ``method``, ``order`` (an int or ``"auto"``), ``max_order``,
        ``delay``, ``weighting``, ``horizon``, ``stabilize``, ``refinement``,
        ... and ``offset``, ``detrend``, ``decimate``, ``holdout``, ``drop_frozen_tail``.

    Returns
    -------
    ModelResult
        ``.model`` (a :class:`~ident.lti.models.StateSpaceModel` with names,
        units and operating point), ``.modes``, ``.check(...)``, ``.save(...)``.

    Raises
    ------
    ident.errors.IdentError
        Bad data (named by row and column), unknown options, data that cannot
        support the model asked for.
    """
    from .estimate.identify import identify

    log = _read(data, _names(inputs, "inputs"), _names(outputs, "outputs"), sample_time=sample_time,
                time=time, units=units)
    opts = _options(options)
    result = identify(
        [(log.u[a:b], log.y[a:b]) for a, b in log.segments], log.sample_time, opts,
        input_names=log.input_names, output_names=log.output_names,
        input_units=log.input_units, output_units=log.output_units,
        segment_starts=[a for a, _ in log.segments], progress=progress, workers=workers,
    )
    duration = max((b - a - 1) * log.sample_time for a, b in log.segments) or None
    provenance = {
        "log": {"file_name": log.source.file_name, "sha256": log.source.sha256, "format": log.source.format,
                "n_samples": log.n_samples, "sample_time": log.sample_time, "duration_s": duration},
        "estimation": {"command": "python ident.fit", "method": result.method, "order": result.order,
                       "options": opts.to_dict(), "input_delay": list(result.input_delay),
                       "noise_model": result.noise_model},
        "validation": {"fit_percent": dict(zip(log.output_names, map(float, result.validation_fit), strict=True)),
                       "estimation_fit_percent": dict(zip(log.output_names, map(float, result.estimation_fit),
                                                          strict=True))},
    }
    return ModelResult(model=result.model, provenance=provenance, identification=result,
                       pole_covariance=result.pole_covariance, parameter_covariance=result.covariance,
                       log_duration_s=duration)


def load_model(path: str | os.PathLike) -> ModelResult:
    """Read a model file written by ``rigfit`` or :meth:`ModelResult.save`.

    Returns
    -------
    ModelResult
        With the file's provenance; ``identification`` is ``None``.
    """
    from .io.modelfile import load_model as _load
    from .io.modelfile import log_duration_from_provenance

    loaded = _load(path)
    return ModelResult(model=loaded.model, provenance=dict(loaded.provenance), identification=None,
                       pole_covariance=loaded.pole_covariance(), parameter_covariance=loaded.parameter_covariance(),
                       log_duration_s=log_duration_from_provenance(loaded.provenance, loaded.model.sample_time),
                       path=str(path))


# --------------------------------------------------------------------------- results


def _mode_frame(table: Any, units: tuple[Sequence[str], Sequence[str]]) -> ModeFrame:
    from .assess.modes import mode_table_to_dict
    from .display import mode_rows

    rows = []
    for m, r in zip(table.modes, mode_rows(table), strict=True):
        rows.append({
            "kind": r["kind"], "frequency_hz": r["frequency_hz"], "frequency_std_hz": r["frequency_std_hz"],
            "damping_ratio": r["damping_ratio"], "damping_ratio_std": r["damping_ratio_std"],
            "time_constant_s": r["time_constant_s"], "time_constant_std_s": r["time_constant_std_s"],
            "period_s": r["period_s"], "flags": ", ".join(r["flags"]),
            "z": complex(m.z), "abs_z": abs(m.z), "s": None if m.s is None else complex(m.s),
            "natural_frequency_rad_s": m.natural_frequency_rad_s, "damped_frequency_hz": m.damped_frequency_hz,
        })
    columns = ["kind", "frequency_hz", "frequency_std_hz", "damping_ratio", "damping_ratio_std", "time_constant_s",
               "time_constant_std_s", "period_s", "flags", "z", "abs_z", "s", "natural_frequency_rad_s",
               "damped_frequency_hz"]
    frame = ModeFrame(rows, columns=columns, index=pd.RangeIndex(1, len(rows) + 1, name="mode"))
    record = mode_table_to_dict(table)
    record["units"] = {"inputs": list(units[0]), "outputs": list(units[1])}
    frame.attrs["mode_table"] = record
    frame.attrs["flags"] = dict(table.warnings)
    return frame


class ModeFrame(pd.DataFrame):
    """The mode table as a DataFrame: one row per mode (index ``mode``, 1-based).

    Columns: ``kind`` (oscillation, real, integrator), ``frequency_hz``,
    ``frequency_std_hz``, ``damping_ratio``, ``damping_ratio_std`` (oscillations),
    ``time_constant_s``, ``time_constant_std_s``, ``period_s``, ``flags``, then the detail: ``z``,
    ``abs_z``, ``s`` (``ln(z)/T``), ``natural_frequency_rad_s``,
    ``damped_frequency_hz``. ``attrs["flags"]`` explains each flag present.
    In a notebook it shows as the report's mode table.
    """

    @property
    def _constructor(self) -> type:
        return ModeFrame

    def _repr_html_(self) -> str | None:
        from .report import html_fragment, modes_html

        record = self.attrs.get("mode_table")
        if record is None or len(self) != len(record["modes"]):
            return super()._repr_html_()  # a slice or a changed frame: pandas' own table
        return html_fragment(modes_html(record))


@dataclass(frozen=True, slots=True, eq=False)
class CheckResult:
    """A model checked on data: :meth:`ModelResult.check` returns it.

    Attributes
    ----------
    report : ident.assess.diagnostics.ValidationReport
        Everything computed (fits, residual tests, spectra, verdicts).
    columns : dict
        ``{"inputs": [...], "outputs": [...]}``: the data columns used for the
        model's signals, in model order.
    source : str
        The file name, or ``"DataFrame"``.
    """

    report: Any
    columns: dict[str, list[str]]
    source: str

    @property
    def passed(self) -> bool:
        """True when no gate (``min_fit``, ``require_white``) failed."""
        return bool(self.report.passed)

    def to_frame(self) -> pd.DataFrame:
        """One row per output: simulation and prediction fit [%], Ljung-Box p-value, whiteness."""
        r = self.report
        return pd.DataFrame(
            {"simulation_fit_percent": np.asarray(r.simulation_fit, dtype=float),
             "prediction_fit_percent": np.asarray(r.prediction_fit, dtype=float),
             "ljung_box_pvalue": [float(w.ljung_box_pvalue) for w in r.whiteness],
             "white": [bool(w.white) for w in r.whiteness]},
            index=pd.Index(list(r.outputs), name="output"),
        )

    @property
    def verdicts(self) -> pd.DataFrame:
        """One row per verdict: ``test``, ``passed``, ``about`` (model or data) and ``message``."""
        from .assess.diagnostics import DATA_TESTS

        return pd.DataFrame(
            [{"test": v.test, "passed": bool(v.passed), "about": "data" if v.test in DATA_TESTS else "model",
              "message": v.message} for v in self.report.verdicts],
            columns=["test", "passed", "about", "message"],
        )

    def _repr_html_(self) -> str:
        from .assess.diagnostics import report_to_dict
        from .report import html_fragment, validation_html

        title = f"Check on {self.source}: {self.report.n_samples} samples"
        return html_fragment(validation_html(report_to_dict(self.report), title=title))

    def __repr__(self) -> str:
        fits = ", ".join(f"{o} {f:.1f} %" for o, f in zip(self.report.outputs, self.report.simulation_fit,
                                                            strict=True))
        return f"CheckResult({self.source}, {self.report.n_samples} samples; simulation fit {fits})"


@dataclass(frozen=True, slots=True, eq=False)
class ModelResult:
    """A fitted or loaded model with what is known about it.

    Attributes
    ----------
    model : ident.lti.models.StateSpaceModel
        Knows its signal names, units and operating point; ``model.to_scipy()``
        gives the scipy.signal object.
    provenance : dict
        As written to (or read from) the model file.
    identification : ident.estimate.identify.Identification or None
        Candidates, selection and fits of :func:`fit`; ``None`` for a loaded file.
    pole_covariance : numpy.ndarray or None
        ``(n, 2, 2)`` covariance of the poles, when known.
    parameter_covariance : ident.lti.covariance.ParameterCovariance or None
        Covariance of the state-space parameters, when known (DC gain and
        frequency-response uncertainty follow from it).
    log_duration_s : float or None
        Longest contiguous stretch of the fitted data, for the ``slow_for_log`` flag.
    path : str or None
        The model file it was loaded from.
    """

    model: Any
    provenance: dict = field(default_factory=dict)
    identification: Any = None
    pole_covariance: Any = None
    parameter_covariance: Any = None
    log_duration_s: float | None = None
    path: str | None = None

    @property
    def mode_table(self) -> Any:
        """The :class:`ident.assess.modes.ModeTable` (default thresholds)."""
        from .assess.modes import mode_table

        return mode_table(self.model, log_duration_s=self.log_duration_s, pole_covariance=self.pole_covariance,
                          parameter_covariance=self.parameter_covariance)

    @property
    def modes(self) -> ModeFrame:
        """The mode table as a DataFrame (see :class:`ModeFrame`)."""
        return _mode_frame(self.mode_table, (self.model.input_units, self.model.output_units))

    @property
    def held_out_fit(self) -> pd.Series | None:
        """Simulation fit [%] per output on the held-out data (``None`` when unknown)."""
        fits = (self.provenance.get("validation") or {}).get("fit_percent")
        if not isinstance(fits, dict):
            return None
        return pd.Series({k: float(v) if v is not None else np.nan for k, v in fits.items()}, name="held_out_fit")

    def check(self, data: Any, *, inputs: Sequence[str] | None = None, outputs: Sequence[str] | None = None,
              sample_time: float | None = None, time: str | None = None, **options: Any) -> CheckResult:
        """Validate the model on other data (a DataFrame or a log file).

        Parameters
        ----------
        data : pandas.DataFrame or path-like
        inputs, outputs : sequence of str, optional
            Data column for each model signal, in model order (default: the
            model's signal names).
        sample_time : float, optional
            For data without a time column; default: the model's sample time.
        time : str, optional
            Name of the time column.
        **options
            :class:`ident.assess.diagnostics.CheckOptions` fields (``min_fit``,
            ``require_white``, ``prediction_steps``, ``max_lag`` ...).

        Returns
        -------
        CheckResult
        """
        from .assess.diagnostics import SAMPLE_TIME_RTOL, CheckOptions, validate_model
        from .errors import IdentError

        model = self.model
        ins = list(inputs) if inputs is not None else list(model.inputs)
        outs = list(outputs) if outputs is not None else list(model.outputs)
        if len(ins) != model.n_inputs or len(outs) != model.n_outputs:
            raise OptionError(f"the model has {model.n_inputs} input(s) and {model.n_outputs} output(s); "
                              f"got {len(ins)} input and {len(outs)} output column(s)")
        try:
            log = _read(data, ins, outs, sample_time=sample_time, time=time, units=None)
        except LogFormatError as exc:
            if sample_time is not None or time is not None or not exc.reason.startswith("no time column"):
                raise
            log = _read(data, ins, outs, sample_time=model.sample_time, time=None, units=None)
        if abs(log.sample_time - model.sample_time) > SAMPLE_TIME_RTOL * model.sample_time:
            raise IdentError(f"{log.source.file_name}: sample time {log.sample_time:g} s differs from the "
                             f"model's {model.sample_time:g} s", hint="resample the data to the model's rate")
        a, b = max(log.segments, key=lambda seg: seg[1] - seg[0])
        u, y = np.array(log.u[a:b]), np.array(log.y[a:b])
        op = model.operating_point
        u, y = (u - u.mean(axis=0), y - y.mean(axis=0)) if op is None else (u - op.inputs, y - op.outputs)
        report = validate_model(model, u, y, log.sample_time, CheckOptions(**options),
                                in_sample_fit=self._in_sample_fit(), covariance=self.parameter_covariance)
        return CheckResult(report=report, columns={"inputs": list(log.input_names), "outputs": list(log.output_names)},
                           source=log.source.file_name)

    def _in_sample_fit(self) -> list[float] | None:
        """In-sample fit per output, in model order, as the provenance records it (``None`` when it does not)."""
        fits = (self.provenance.get("validation") or {}).get("estimation_fit_percent")
        outs = self.model.outputs
        if not isinstance(fits, dict) or set(fits) != set(outs):
            return None
        values = [fits[o] for o in outs]
        return values if all(isinstance(v, (int, float)) for v in values) else None

    def save(self, path: str | os.PathLike, *, force: bool = False) -> Path:
        """Write the model file (atomically; an existing file only with ``force``)."""
        from .io.modelfile import save_model, uncertainty_provenance

        provenance = dict(self.provenance)
        if self.identification is not None:
            extra = uncertainty_provenance(self.pole_covariance, self.identification.covariance)
            provenance["estimation"] = {**provenance.get("estimation", {}), **extra}
        return save_model(path, self.model, provenance=provenance, force=force)

    def _signals(self) -> str:
        m = self.model

        def label(names: Sequence[str], units: Sequence[str]) -> str:
            return ", ".join(f"{n} [{u}]" if u else n for n, u in zip(names, units, strict=True))

        return f"{label(m.inputs, m.input_units)} -> {label(m.outputs, m.output_units)}"

    def __repr__(self) -> str:
        m = self.model
        fits = self.held_out_fit
        fit_text = "" if fits is None else "; held-out fit " + ", ".join(f"{k} {v:.1f} %" for k, v in fits.items())
        method = (self.provenance.get("estimation") or {}).get("method", "model")
        return f"ModelResult({method}, {m.n_states} states, T = {m.sample_time:g} s, {self._signals()}{fit_text})"

    def _repr_html_(self) -> str:
        from .report import html_fragment, modes_html, table_html

        m = self.model
        method = (self.provenance.get("estimation") or {}).get("method", "model")
        head = (f"{method} model, {m.n_states} states, sample time {m.sample_time:g} s: {self._signals()}"
                + (f" (from {Path(self.path).name})" if self.path else ""))
        parts = [f"<h2>{_escape(head)}</h2>"]
        fits = self.held_out_fit
        if fits is not None:
            in_sample = None
            if self.identification is not None:
                in_sample = dict(zip(m.outputs, map(float, self.identification.estimation_fit), strict=True))
            rows = [(o, f"{v:.1f} %", "–" if in_sample is None else f"{in_sample[o]:.1f} %") for o, v in fits.items()]
            parts.append(table_html(("output", "held-out fit", "in-sample fit"), rows))
        frame = self.modes
        parts.append(modes_html(frame.attrs["mode_table"]))
        from .pipeline import SAFETY_CAUTION

        parts.append(f'<p class="caution">{_escape(SAFETY_CAUTION)}</p>')
        return html_fragment(*parts)


def _escape(text: str) -> str:
    import html

    return html.escape(text, quote=True)
