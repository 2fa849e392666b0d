"""Shared pieces of the subcommands: error mapping, warnings, output helpers."""

from __future__ import annotations

import contextlib
import json
import sys
import traceback
import warnings
from collections.abc import Iterator
from typing import Any

import click

from ..choices import UPSAMPLE_METHODS
from ..errors import IdentError, printable

EXIT_OK = 0
EXIT_INTERNAL = 1
EXIT_BAD_INPUT = 2
EXIT_GATE_FAILED = 3
#: Exit status after Ctrl-C (128 + SIGINT, as shells report it).
EXIT_INTERRUPTED = 130


class DataError(click.ClickException):
    """A user error in the data or options: one line on stderr, exit status 2."""

    exit_code = EXIT_BAD_INPUT

    def __init__(self, message: str, hint: str | None = None) -> None:
        super().__init__(message)
        self.hint = hint

    def show(self, file: Any = None) -> None:  # noqa: D102
        stream = file if file is not None else sys.stderr
        click.echo(f"error: {printable(self.format_message())}", file=stream)
        if self.hint:
            click.echo(f"hint: {printable(self.hint)}", file=stream)


class GateFailed(click.ClickException):
    """A validation gate, expectation or drift threshold failed: exit status 3."""

    exit_code = EXIT_GATE_FAILED

    def show(self, file: Any = None) -> None:  # noqa: D102
        click.echo(f"failed: {printable(self.format_message())}", file=file if file is not None else sys.stderr)


class Interrupted(click.ClickException):
    """The user pressed Ctrl-C: ``interrupted`` on stderr, exit status 130.

    Raised in place of :class:`KeyboardInterrupt` inside the command group, so
    click does not turn it into its own abort (exit 1, a blank line). Every
    output is written through :mod:`ident.io.atomic`, which removes its
    temporary files and folders on the way out, so nothing partial is left at
    a final path.
    """

    exit_code = EXIT_INTERRUPTED

    def __init__(self) -> None:
        super().__init__("interrupted")

    def show(self, file: Any = None) -> None:  # noqa: D102
        click.echo("interrupted", file=file if file is not None else sys.stderr)


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    # Deprecation notices of the libraries underneath (click, numpy, pandas ...) are for
    # rigfit's developers, who see them as errors in the test suite; a user is not told.
    if issubclass(category, DeprecationWarning | PendingDeprecationWarning):
        return
    click.echo(f"warning: {printable(message)}", err=True)


def run_guarded(command: click.Command, argv: list[str] | None = None) -> int:
    """Run a click command, mapping errors to rigfit's exit statuses.

    Returns the exit status: 0 ok, 1 internal error, 2 bad input or usage,
    3 gate failed. Tracebacks are shown only with ``--debug``.
    """
    args = list(sys.argv[1:] if argv is None else argv)
    debug = "--debug" in args
    old_show = warnings.showwarning
    warnings.showwarning = _show_warning
    streams = (sys.stdout, sys.stderr)
    try:
        command.main(args=args, prog_name="rigfit", standalone_mode=False)
        return EXIT_OK
    except click.exceptions.Exit as exc:
        return exc.exit_code
    except SystemExit:
        if sys.stdout is not streams[0]:  # click met a closed stdout pipe: it swapped the streams, then exit(1)
            sys.stdout, sys.stderr = streams
            _silence_stdout()
            return EXIT_OK
        raise
    except click.Abort as exc:
        if isinstance(exc.__context__, KeyboardInterrupt):  # Ctrl-C while click parsed the options
            click.echo("interrupted", err=True)
            return EXIT_INTERRUPTED
        click.echo("aborted", err=True)
        return EXIT_INTERNAL
    except click.UsageError as exc:
        where = exc.ctx.command_path if exc.ctx is not None else "rigfit"
        DataError(exc.format_message(), f"see '{where} --help'").show()
        return EXIT_BAD_INPUT
    except click.ClickException as exc:
        exc.show()
        return exc.exit_code
    except IdentError as exc:
        DataError(str(exc), getattr(exc, "hint", None)).show()
        return EXIT_BAD_INPUT
    except (FileNotFoundError, IsADirectoryError, PermissionError) as exc:
        DataError(f"{exc.filename}: {exc.strerror}").show()
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        click.echo("interrupted", err=True)
        return EXIT_INTERRUPTED
    except BrokenPipeError:  # the reader of stdout went away (`rigfit ... | head`): stop quietly
        _silence_stdout()
        return EXIT_OK
    except Exception as exc:  # internal error: short message, traceback on --debug
        if debug:
            traceback.print_exc()
        click.echo(
            f"internal error: {type(exc).__name__}: {printable(exc)} (run again with 'rigfit --debug ...' "
            "for the traceback)",
            err=True,
        )
        return EXIT_INTERNAL
    finally:
        warnings.showwarning = old_show


def _silence_stdout() -> None:
    """Point stdout at the null device, so the interpreter's last flush finds no closed pipe."""
    import os

    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):
        pass


def echo_json(payload: Any) -> None:
    """Print ``payload`` as JSON on stdout (NaN and inf become null)."""
    from .._json import json_ready  # numpy: imported only when output is written

    click.echo(json.dumps(json_ready(payload), indent=2, allow_nan=False))




def progress_enabled(quiet: bool) -> bool:
    """Progress bars only when not quiet and stderr is a terminal."""
    return not quiet and sys.stderr.isatty()


@contextlib.contextmanager
def progress_step(label: str, enabled: bool, length: int = 1) -> Iterator[Any]:
    """Show a click progress bar on stderr, or yield a no-op object when disabled."""
    if enabled:
        with click.progressbar(length=length, label=label, file=sys.stderr) as bar:
            yield bar
    else:
        class _Null:
            def update(self, n: int) -> None:
                pass

        yield _Null()


def reraise_as_data_error(exc: IdentError) -> DataError:
    """Convert a library error into the CLI's exit-2 error."""
    return DataError(str(exc), getattr(exc, "hint", None))


#: Keyword arguments of :func:`ident.io.log.read_log` set by :func:`log_options`,
#: by the parameter name click passes to the command.
LOG_OPTION_NAMES = ("time_column", "sample_rate", "drop_bad_rows", "split_at_gaps",
                    "jitter_tolerance", "resample_hz", "upsample")

#: Help text shared by the commands' --input/--output options: how columns are chosen.
SELECTOR_HELP = ("a name (group/name in MDF and HDF5 files), a shell-style pattern such as "
                 "'u*' (case-insensitive) or a position such as '#2' (as 'rigfit inspect' numbers them)")


def log_options(command: Any) -> Any:
    """Add the options every log-reading command shares (one spelling everywhere).

    ``--time NAME``, ``--sample-rate HZ``, ``--drop-bad-rows``,
    ``--split-at-gaps``, ``--jitter-tolerance FRACTION``, ``--resample HZ`` and
    ``--upsample zoh|linear``; the command receives them as ``time_column``,
    ``sample_rate``, ``drop_bad_rows``, ``split_at_gaps``, ``jitter_tolerance``,
    ``resample_hz`` and ``upsample`` (see :func:`read_log_kwargs`).
    """
    decorators = [
        click.option("--time", "time_column", default=None, metavar="NAME",
                     help="Read the time stamps (in s, or in the unit of the header) from this column. By default a "
                          "column named 'time' or 't' is used."),
        click.option("--sample-rate", "sample_rate", type=float, default=None, metavar="HZ",
                     help="Take this sample rate in Hz for a log that has no time column."),
        click.option("--drop-bad-rows", is_flag=True,
                     help="Drop rows with a non-numeric, empty, NaN or inf cell instead of refusing the log. "
                          "The count is reported, and a dropped row is a gap."),
        click.option("--split-at-gaps", is_flag=True,
                     help="Split the log into segments at time gaps and dropped rows instead of refusing it. "
                          "Each segment is then a separate experiment."),
        click.option("--jitter-tolerance", type=float, default=0.1, show_default=True,
                     metavar="FRACTION", help="Accept time steps that differ from the sample time T by at most "
                                                  "this fraction of T."),
        click.option("--resample", "resample_hz", type=float, default=None, metavar="HZ",
                     help="Bring every chosen channel to this rate in Hz, by anti-alias filtered decimation "
                          "going down and by --upsample going up. Without it, channels at different "
                          "rates are an error."),
        click.option("--upsample", type=click.Choice(UPSAMPLE_METHODS), default=None,
                     help="Bring a slower channel up to the common rate (or onto its grid) by zero-order hold "
                          "or by linear interpolation. A warning says what this does to the dynamics."),
    ]
    for deco in reversed(decorators):
        command = deco(command)
    return command


def read_log_kwargs(params: dict[str, Any]) -> dict[str, Any]:
    """Keyword arguments for :func:`ident.io.log.read_log` from :func:`log_options` values."""
    return {
        "time": params["time_column"],
        "sample_rate": params["sample_rate"],
        "drop_bad_rows": params["drop_bad_rows"],
        "split_at_gaps": params["split_at_gaps"],
        "jitter_tolerance": params["jitter_tolerance"],
        "resample_hz": params["resample_hz"],
        "upsample": params["upsample"],
    }
