"""Layering rules: the numeric core never loads the I/O, CLI or plotting stack."""

import subprocess
import sys

import pytest

CORE_MODULES = [
    "ident.lti.models",
    "ident.lti.simulate",
    "ident.lti.convert",
    "ident.lti.realization",
    "ident.lti.discretize",
    "ident.lti.analysis",
    "ident.estimate.data",
    "ident.estimate.arx",
    "ident.estimate.delay",
    "ident.estimate.order",
    "ident.estimate.subspace",
    "ident.estimate.preprocess",
    "ident.estimate.identify",
    "ident.assess.modes",
    "ident.assess.expectations",
    "ident.assess.diagnostics",
    "ident.assess.drift",
    "ident.estimate.excitation",
]


def test_core_does_not_import_io_cli_or_plotting():
    code = (
        "import sys\n"
        + "".join(f"import {m}\n" for m in CORE_MODULES)
        + "bad = [m for m in ('click', 'matplotlib', 'pandas') if m in sys.modules]\n"
        + "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_help_does_not_load_numeric_stack():
    code = (
        "import sys\n"
        "from ident.cli import cli\n"
        "try:\n"
        "    cli.main(['--help'], standalone_mode=False)\n"
        "except SystemExit:\n"
        "    pass\n"
        "print('LOADED:' + ','.join(m for m in ('numpy', 'scipy', 'matplotlib', 'pandas') if m in sys.modules))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert "Commands:" in out.stdout
    assert out.stdout.strip().splitlines()[-1] == "LOADED:"


@pytest.mark.parametrize("module", CORE_MODULES)
def test_core_module_exports_are_declared(module):
    mod = __import__(module, fromlist=["__all__"])
    assert hasattr(mod, "__all__") and mod.__all__
    for name in mod.__all__:
        assert hasattr(mod, name), f"{module}.__all__ names missing {name}"


def test_python_dash_m_runs_the_cli():
    out = subprocess.run([sys.executable, "-m", "ident", "--version"], capture_output=True, text=True)
    assert out.returncode == 0 and "rigfit" in out.stdout


def test_internal_error_exit_1_without_traceback(monkeypatch, capsys):
    import click

    from ident.cli import _common

    @click.command()
    def boom():
        raise RuntimeError("unexpected")

    status = _common.run_guarded(boom, [])
    err = capsys.readouterr().err
    assert status == 1
    assert "internal error" in err and "--debug" in err and "Traceback" not in err


def test_usage_errors_are_one_error_line(run_cli):
    result = run_cli("modes")  # missing argument
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert lines[0] == "error: Missing argument 'MODEL'."
    assert lines[1:] == ["hint: see 'cli modes --help'"]
    assert "Usage:" not in result.stderr
