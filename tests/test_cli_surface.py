"""What a newcomer meets first on the command line: help texts, options, warnings."""

from __future__ import annotations

import dataclasses
import re
import subprocess
import sys
import warnings

import click
import pytest

from ident.cli import cli

_CTX = click.Context(cli)
COMMANDS = cli.list_commands(_CTX)


@pytest.mark.parametrize("command", ["", *COMMANDS])
def test_no_deprecation_warning_reaches_the_user(command):
    # a fresh process, as a user runs it, with every DeprecationWarning turned into an error
    args = [sys.executable, "-W", "error::DeprecationWarning", "-W", "error::PendingDeprecationWarning",
            "-m", "ident", *([command] if command else []), "--help"]
    run = subprocess.run(args, capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    assert "warning" not in run.stderr.lower()


def test_the_warning_printer_drops_library_deprecations():
    from ident.cli import _common

    @click.command()
    def noisy() -> None:
        warnings.warn("old click spelling", DeprecationWarning, stacklevel=1)
        warnings.warn("model has an unstable pole", UserWarning, stacklevel=1)

    from click.testing import CliRunner

    def run():
        return _common.run_guarded(noisy, [])

    with warnings.catch_warnings():
        warnings.simplefilter("always")
        result = CliRunner().invoke(click.command()(lambda: sys.exit(run())), [])
    assert "old click spelling" not in result.stderr
    assert "warning: model has an unstable pole" in result.stderr


def test_fit_offers_every_pipeline_fit_option():
    from ident.estimate.identify import IdentifyOptions
    from ident.estimate.preprocess import PreprocessOptions

    fit = cli.get_command(_CTX, "fit")
    params = {p.name for p in fit.params}
    aliases = {"order": "order_text", "drop_frozen_tail": "keep_frozen_tail"}  # the flag is the key negated
    keys = [f.name for f in dataclasses.fields(IdentifyOptions) if f.name != "preprocess"]
    keys += [f.name for f in dataclasses.fields(PreprocessOptions)]
    missing = [k for k in keys if aliases.get(k, k) not in params]
    assert not missing, f"rigfit fit lacks options for pipeline keys {missing}"


def test_fit_help_texts_are_whole_sentences():
    fit = cli.get_command(_CTX, "fit")
    for p in fit.params:
        if not getattr(p, "help", None):
            continue
        text = p.help.strip()
        # a sentence starts with a capital letter (or an option/quoted name) and ends with a full stop
        assert re.match(r"^[A-Z'\-]", text), (p.name, text)
        assert text.endswith("."), (p.name, text)
        # and has a verb: the first word is not a bare noun phrase like "Largest order tried"
        assert not re.match(r"^(Largest|Fraction|Model|Subspace|Input|Output|Time|No) ", text), (p.name, text)


def test_a_reader_that_stops_early_ends_the_command_quietly():
    # `rigfit inspect LOG | true`: the reader closes the pipe before rigfit writes; the command stops
    # with status 0 and prints nothing on stderr (common practice, no source)
    from pathlib import Path

    log = Path(__file__).resolve().parents[1] / "sample_data" / "belt_axis_before.csv"
    proc = subprocess.Popen([sys.executable, "-m", "ident", "inspect", str(log)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    proc.stdout.close()
    err = proc.stderr.read()
    proc.stderr.close()
    assert proc.wait(timeout=300) == 0, err
    assert err == b""
