"""The ``rigfit`` command line: one click group with thin subcommands.

Subcommands live in their own modules and are imported only when invoked, so
``rigfit --help`` does not load numpy, scipy or matplotlib.

Exit status
-----------
0 success; 1 internal error (run with ``--debug`` for the traceback);
2 bad input or usage (one-line ``error:`` message on stderr);
3 a gate, expectation or drift threshold failed.
"""

from __future__ import annotations

import importlib
import sys

import click

from ..errors import IdentError
from ._common import DataError, Interrupted, run_guarded

__all__ = ["cli", "main", "DataError"]

# name -> "module:attribute", relative to this package
_COMMANDS: dict[str, str] = {
    "inspect": "inspect_cmd:inspect",
    "convert": "convert_cmd:convert",
    "fit": "fit_cmd:fit",
    "modes": "modes_cmd:modes",
    "check": "check_cmd:check",
    "drift": "drift_cmd:drift",
    "run": "run_cmd:run",
    "fleet": "fleet_cmd:fleet",
    "demo": "demo_cmd:demo",
    "excite": "excite_cmd:excite",
}

_SHORT_HELP: dict[str, str] = {
    "inspect": "Summarise a rig log: columns, timing, statistics, excitation.",
    "convert": "Show or write a model in another form (tf, ss, continuous, discrete).",
    "fit": "Identify a linear model from a rig log (ARX or subspace).",
    "modes": "Tabulate a model's poles in physical units and flag implausible ones.",
    "check": "Validate a model on a log: fit percent, residual whiteness, spectra.",
    "drift": "Compare a model with a baseline model after a hardware change.",
    "run": "Run a pipeline file end to end into a new run folder with a report.",
    "fleet": "Run one pipeline on every unit's log (on Dask) and find the odd units out.",
    "demo": "Run the bundled demo pipelines on the sample data.",
    "excite": "Design a test signal (PRBS, multisine, chirp, ...) and write it for the rig.",
}


class _LazyGroup(click.Group):
    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted(_COMMANDS)

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        target = _COMMANDS.get(cmd_name)
        if target is None:
            return None
        module_name, attr = target.split(":")
        module = importlib.import_module(f"{__name__}.{module_name}")
        return getattr(module, attr)

    def invoke(self, ctx: click.Context):
        try:
            return super().invoke(ctx)
        except click.UsageError as exc:
            # one line, like every other bad-input error, instead of click's usage banner
            where = exc.ctx.command_path if exc.ctx is not None else "rigfit"
            raise DataError(exc.format_message(), f"see '{where} --help'") from exc
        except IdentError as exc:
            raise DataError(str(exc), getattr(exc, "hint", None)) from exc
        except (FileNotFoundError, IsADirectoryError, PermissionError) as exc:
            raise DataError(f"{exc.filename}: {exc.strerror}") from exc
        except KeyboardInterrupt:
            raise Interrupted() from None

    def format_commands(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        rows = [(name, _SHORT_HELP.get(name, "")) for name in self.list_commands(ctx)]
        with formatter.section("Commands"):
            formatter.write_dl(rows)


@click.group(cls=_LazyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="rigfit", prog_name="rigfit")
@click.option("--debug", is_flag=True, help="Show the full traceback of internal errors.")
@click.pass_context
def cli(ctx: click.Context, debug: bool) -> None:
    """rigfit: turn test-rig logs into checked linear plant models.

    Exit status: 0 ok, 1 internal error, 2 bad input, 3 a gate or expectation failed.
    """
    ctx.ensure_object(dict)
    ctx.obj["debug"] = debug


def main(argv: list[str] | None = None) -> None:
    """Console-script entry point."""
    sys.exit(run_guarded(cli, argv))
