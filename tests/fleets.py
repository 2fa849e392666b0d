"""The invented fleet of ``sample_data/fleet.py`` and its pipeline, shared by the fleet tests."""

from __future__ import annotations

import importlib.util
import sys
import textwrap
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
_spec = importlib.util.spec_from_file_location("fleet_scenario", REPO / "sample_data" / "fleet.py")
FLEET = importlib.util.module_from_spec(_spec)
sys.modules[_spec.name] = FLEET  # dataclasses look their module up while the module runs
_spec.loader.exec_module(FLEET)


def write_pipeline(folder: Path, first_log: str) -> Path:
    """Write ``eol.toml``, the end-of-line pipeline of the fleet's logs, into ``folder``."""
    path = folder / "eol.toml"
    path.write_text(textwrap.dedent(f"""
        name = "actuator end-of-line test"
        [log]
        paths = ["{first_log}"]
        inputs = ["current_cmd"]
        outputs = ["rod_speed"]
        [fit]
        method = "subspace"
        max_order = 6
        [check]
        max_lag = 25
        """), encoding="utf-8")
    return path
