"""The README's promises that CI and users rely on."""

import re
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
README = (REPO / "README.md").read_text(encoding="utf-8")


def _quick_start_commands() -> list[str]:
    section = README.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"```sh\n(.+?)\n```", section)


def test_quick_start_has_exactly_two_commands():
    commands = _quick_start_commands()
    assert commands == ["pip install . && rigfit demo", "pip install '.[test]' && pytest"]


def test_ci_runs_the_readme_test_command_verbatim():
    test_command = _quick_start_commands()[1]
    ci = (REPO / ".ci" / "run").read_text(encoding="utf-8")
    assert test_command in ci.splitlines()


def test_readme_carries_the_safety_caution():
    assert "## Safety" in README
    assert "operating point" in README and "frequency band" in README
    assert "qualified engineers have the" in README
