"""Write an invented fleet of end-of-line test logs, with a few planted odd units.

Scenario: the end-of-line test of electric linear actuators off one production line.
Each actuator is driven by a random binary current command around its holding current
and its rod speed is logged. Every unit follows the same continuous-time model

    G(s) = K * wn^2 / (s^2 + 2 zeta wn s + wn^2) * 1 / (tau s + 1)

(a compliant coupling between motor and rod gives the resonance ``wn``; the current
loop and the rod friction give the real time constant ``tau``), with unit-to-unit
spread of the parameters (normal, relative standard deviations in ``SPREAD``, draws
clipped at +-``TOLERANCE_SIGMAS`` standard deviations: the production tolerance). A few
units are planted as odd (``PLANTS``):

* ``low_resonance`` - the resonance 8 % below the design value (a loose coupling);
* ``high_damping`` - twice the design damping ratio (a dragging seal);
* ``extra_mode`` - an additional lightly damped mode at ``EXTRA_MODE_HZ`` in series
  (a cracked mounting bracket), unity DC gain.

Each log has a ``time [s]`` column, the serial number in a ``unit`` column, the command
``current_cmd [A]`` and the measured ``rod_speed [mm/s]`` with white measurement noise.
The files are named ``eol_<k>.csv``; the serial is ``AX-<seed>-<k>``. The true figures of
every unit go to ``truth.json`` in the same folder.

Usage (the files are generated on demand, never kept in the repository)::

    python sample_data/fleet.py DIR --units 40 [--seed 7] [--plant 3 low_resonance ...]

Every random number comes from ``numpy.random.default_rng(seed)``, so a folder is
reproduced exactly by the same arguments.
"""

from __future__ import annotations

import argparse
import json
from dataclasses import asdict, dataclass, replace
from pathlib import Path

import numpy as np
from scipy import signal

#: Nominal actuator (the fleet's design values).
NOMINAL_GAIN_MM_S_PER_A = 40.0
NOMINAL_RESONANCE_HZ = 24.0
NOMINAL_DAMPING = 0.06
NOMINAL_TIME_CONSTANT_S = 0.05
#: Relative standard deviation of each parameter over the fleet.
SPREAD = {"gain": 0.02, "resonance": 0.015, "damping": 0.08, "time_constant": 0.03}
#: Draws beyond this many standard deviations are clipped (units outside it never leave the line).
TOLERANCE_SIGMAS = 2.5
#: The additional mode of an ``extra_mode`` unit.
EXTRA_MODE_HZ = 70.0
EXTRA_MODE_DAMPING = 0.05
#: Kinds of planted odd units.
PLANTS = ("low_resonance", "high_damping", "extra_mode")
#: Logging.
SAMPLE_TIME_S = 0.002
SAMPLES = 3000
HOLD_SAMPLES = 4
CURRENT_LEVELS_A = (1.0, 3.0)
NOISE_MM_S = 0.2


@dataclass(frozen=True)
class Actuator:
    """The true parameters of one unit."""

    serial: str
    gain_mm_s_per_a: float
    resonance_hz: float
    damping_ratio: float
    time_constant_s: float
    extra_mode_hz: float | None = None
    plant: str | None = None


def actuator_tf(a: Actuator) -> tuple[np.ndarray, np.ndarray]:
    """Continuous transfer function (numerator, denominator) of one unit."""
    wn = 2 * np.pi * a.resonance_hz
    num = np.array([a.gain_mm_s_per_a * wn**2])
    den = np.polymul([1.0, 2 * a.damping_ratio * wn, wn**2], [a.time_constant_s, 1.0])
    if a.extra_mode_hz is not None:
        we = 2 * np.pi * a.extra_mode_hz
        num = num * we**2
        den = np.polymul(den, [1.0, 2 * EXTRA_MODE_DAMPING * we, we**2])
    return num, den


def draw_fleet(n_units: int, seed: int, plants: dict[int, str] | None = None) -> list[Actuator]:
    """Draw ``n_units`` units around the nominal values; ``plants`` maps unit number (1-based) to a kind."""
    rng = np.random.default_rng(seed)
    units = []
    for k in range(1, n_units + 1):
        draw = np.clip(rng.standard_normal(4), -TOLERANCE_SIGMAS, TOLERANCE_SIGMAS)
        a = Actuator(
            serial=f"AX-{seed}-{k:04d}",
            gain_mm_s_per_a=NOMINAL_GAIN_MM_S_PER_A * (1 + SPREAD["gain"] * draw[0]),
            resonance_hz=NOMINAL_RESONANCE_HZ * (1 + SPREAD["resonance"] * draw[1]),
            damping_ratio=NOMINAL_DAMPING * (1 + SPREAD["damping"] * draw[2]),
            time_constant_s=NOMINAL_TIME_CONSTANT_S * (1 + SPREAD["time_constant"] * draw[3]),
        )
        kind = (plants or {}).get(k)
        if kind == "low_resonance":
            a = replace(a, resonance_hz=0.92 * NOMINAL_RESONANCE_HZ, plant=kind)
        elif kind == "high_damping":
            a = replace(a, damping_ratio=2.0 * NOMINAL_DAMPING, plant=kind)
        elif kind == "extra_mode":
            a = replace(a, extra_mode_hz=EXTRA_MODE_HZ, plant=kind)
        elif kind is not None:
            raise ValueError(f"unknown plant {kind!r}; kinds are {', '.join(PLANTS)}")
        units.append(a)
    return units


def unit_log(a: Actuator, rng: np.random.Generator, samples: int = SAMPLES) -> tuple[np.ndarray, np.ndarray]:
    """Simulate one unit's test of ``samples`` samples: the current command and the noisy rod speed."""
    n_clock = -(-samples // HOLD_SAMPLES)
    levels = np.where(rng.random(n_clock) < 0.5, *CURRENT_LEVELS_A)
    u = np.repeat(levels, HOLD_SAMPLES)[:samples]
    num, den = actuator_tf(a)
    numd, dend, _ = signal.cont2discrete((num, den), SAMPLE_TIME_S, method="zoh")
    # start in steady state at the first level: the DC gain times the first command
    zi = signal.lfilter_zi(numd.ravel(), dend) * u[0]
    y, _ = signal.lfilter(numd.ravel(), dend, u, zi=zi)
    return u, y + NOISE_MM_S * rng.standard_normal(samples)


def write_fleet(folder: Path, n_units: int, *, seed: int = 7, plants: dict[int, str] | None = None,
                samples: int = SAMPLES) -> dict:
    """Write ``eol_<k>.csv`` of ``samples`` rows for every unit and ``truth.json``; return the truth."""
    folder.mkdir(parents=True, exist_ok=True)
    units = draw_fleet(n_units, seed, plants)
    rng = np.random.default_rng(seed + 1)
    t = np.arange(samples) * SAMPLE_TIME_S
    for k, a in enumerate(units, start=1):
        u, y = unit_log(a, rng, samples)
        lines = ["time [s],unit,current_cmd [A],rod_speed [mm/s]"]
        lines += [f"{ti:.3f},{a.serial},{ui:.1f},{yi:.3f}" for ti, ui, yi in zip(t, u, y, strict=True)]
        (folder / f"eol_{k:04d}.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    truth = {
        "scenario": "end-of-line test of linear actuators",
        "seed": seed,
        "sample_time_s": SAMPLE_TIME_S,
        "samples": samples,
        "noise_mm_s": NOISE_MM_S,
        "units": [{"file": f"eol_{k:04d}.csv", **asdict(a)} for k, a in enumerate(units, start=1)],
    }
    (folder / "truth.json").write_text(json.dumps(truth, indent=2) + "\n", encoding="utf-8")
    return truth


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("folder", type=Path)
    parser.add_argument("--units", type=int, default=40)
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--plant", nargs=2, action="append", default=[], metavar=("UNIT", "KIND"),
                        help=f"plant an odd unit: its number (1-based) and a kind ({', '.join(PLANTS)})")
    args = parser.parse_args(argv)
    truth = write_fleet(args.folder, args.units, seed=args.seed,
                        plants={int(k): kind for k, kind in args.plant})
    planted = [u["serial"] + " " + u["plant"] for u in truth["units"] if u["plant"]]
    print(f"{args.units} units in {args.folder}" + (f"; planted: {', '.join(planted)}" if planted else ""))


if __name__ == "__main__":
    main()
