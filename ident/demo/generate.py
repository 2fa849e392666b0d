"""Write the rigfit demo logs and their true parameters.

Three invented test-rig scenarios, simulated from documented continuous-time models that
are discretised exactly (zero-order hold: the excitation is held between samples):

* ``belt_axis_before.csv`` - a belt-driven carriage on a packaging-machine test bench
  (two-mass drive, one lightly damped belt resonance), 1 kHz;
* ``belt_axis_after.csv`` - the same axis after a belt replacement (stiffer belt, the
  resonance moves up, the damping changes), new excitation and noise seed;
* ``heated_platen.csv`` - a two-zone heated platen (two heater duties to two zone
  temperatures, coupled through a shared base plate), 1 Hz, 3 s transport delay.

``truth.json`` receives every true figure (physical parameters, continuous and discrete
models, modes, delays, noise, quantisation, excitation, operating point).

This module ships inside the package, so ``rigfit demo`` can write the logs wherever it
runs; ``sample_data/generate.py`` in the repository calls it. Usage::

    python sample_data/generate.py            # writes into sample_data/
    python -m ident.demo.generate --out DIR   # writes into DIR

The output is deterministic: every random number comes from ``np.random.default_rng``
with the fixed seeds in ``SEEDS``, and numbers are written with fixed decimals, so two
runs give byte-identical files.
"""

from __future__ import annotations

import argparse
import json
from dataclasses import asdict, dataclass, replace
from pathlib import Path

import numpy as np
from scipy.signal import cont2discrete

#: Output folder of :func:`main` without ``--out`` (relative to the current folder);
#: ``sample_data/generate.py`` passes its own folder instead.
DEFAULT_OUT = Path("sample_data")

#: One fixed seed per log (the belt pair differs in excitation and noise realisation).
SEEDS = {
    "belt_axis_before.csv": 20261201,
    "belt_axis_after.csv": 20261202,
    "heated_platen.csv": 20261203,
}

BELT_SAMPLE_TIME = 1e-3  # s
BELT_DURATION = 24.0  # s
PLATEN_SAMPLE_TIME = 1.0  # s
PLATEN_DURATION = 7200.0  # s

#: Significant digits kept for floats in truth.json (stable across platforms).
JSON_DIGITS = 12


# --------------------------------------------------------------------------------------
# Belt-driven axis
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class BeltAxis:
    """Physical parameters of the two-mass belt drive (SI units in the field names)."""

    motor_inertia_kg_m2: float  # rotor + drive pulley
    pulley_radius_m: float
    carriage_mass_kg: float
    belt_stiffness_n_per_m: float  # both belt spans, referred to the carriage
    belt_damping_n_s_per_m: float
    motor_viscous_friction_n_m_s_per_rad: float
    carriage_viscous_friction_n_s_per_m: float


BELT_BEFORE = BeltAxis(
    motor_inertia_kg_m2=1.2e-4,
    pulley_radius_m=0.02,
    carriage_mass_kg=2.5,
    belt_stiffness_n_per_m=10.5e3,
    belt_damping_n_s_per_m=4.0,
    motor_viscous_friction_n_m_s_per_rad=6.4e-4,
    carriage_viscous_friction_n_s_per_m=4.0,
)
#: New belt: 50 % stiffer, with less internal damping than the worn one.
BELT_AFTER = replace(BELT_BEFORE, belt_stiffness_n_per_m=15.75e3, belt_damping_n_s_per_m=3.0)

BELT_STATES = ("motor_speed [rad/s]", "carriage_speed [m/s]", "belt_stretch [m]")

#: Excitation of the torque command (same settings before and after the belt change).
BELT_TORQUE_OFFSET = 0.112  # N m, steady state 50 rad/s, 1.0 m/s
BELT_TORQUE_AMPLITUDE = 0.15  # N m, levels offset +- amplitude
BELT_HOLD_SAMPLES = 3  # minimum hold (clock period) of the random binary signal
#: Motor encoder: counts per revolution (1024 lines, x4 evaluation).
ENCODER_COUNTS_PER_REV = 4096
#: Linear scale on the carriage: resolution and position noise (head vibration, interpolation).
SCALE_RESOLUTION = 1e-6  # m
SCALE_POSITION_NOISE = 1e-6  # m, standard deviation


def belt_axis_model(p: BeltAxis) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Continuous state-space model of the belt axis.

    States ``[motor speed w (rad/s), carriage speed v (m/s), belt stretch d = r*theta - x
    (m)]``, input motor torque ``T`` (N m), outputs ``[w, v]``::

        J  dw/dt = T - b_m w - r F,   F = k d + c (r w - v)
        m  dv/dt = F - b_c v
           dd/dt = r w - v
    """
    J, r, m = p.motor_inertia_kg_m2, p.pulley_radius_m, p.carriage_mass_kg
    k, c = p.belt_stiffness_n_per_m, p.belt_damping_n_s_per_m
    bm, bc = p.motor_viscous_friction_n_m_s_per_rad, p.carriage_viscous_friction_n_s_per_m
    A = np.array(
        [
            [-(bm + r * r * c) / J, r * c / J, -r * k / J],
            [r * c / m, -(bc + c) / m, k / m],
            [r, -1.0, 0.0],
        ]
    )
    B = np.array([[1.0 / J], [0.0], [0.0]])
    C = np.array([[1.0, 0.0, 0.0], [0.0, 1.0, 0.0]])
    D = np.zeros((2, 1))
    return A, B, C, D


def belt_closed_form_resonance_hz(p: BeltAxis) -> float:
    """Undamped belt mode: ``w^2 = k (1/J' + 1/m)`` with ``J' = J / r^2`` (closed form)."""
    j_eq = p.motor_inertia_kg_m2 / p.pulley_radius_m**2
    omega_sq = p.belt_stiffness_n_per_m * (1.0 / j_eq + 1.0 / p.carriage_mass_kg)
    return float(np.sqrt(omega_sq) / (2 * np.pi))


# --------------------------------------------------------------------------------------
# Heated platen
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class HeatedPlaten:
    """Lumped thermal parameters of the two-zone platen (SI units in the field names)."""

    zone_1_capacity_j_per_k: float
    zone_2_capacity_j_per_k: float
    base_capacity_j_per_k: float
    conductance_zone_1_zone_2_w_per_k: float
    conductance_zone_1_base_w_per_k: float
    conductance_zone_2_base_w_per_k: float
    loss_zone_1_ambient_w_per_k: float
    loss_zone_2_ambient_w_per_k: float
    loss_base_ambient_w_per_k: float  # fan-cooled base
    heater_1_power_w: float  # at 100 % duty
    heater_2_power_w: float
    ambient_temp_degc: float
    transport_delay_s: float  # heater to thermocouple


PLATEN = HeatedPlaten(
    zone_1_capacity_j_per_k=600.0,
    zone_2_capacity_j_per_k=750.0,
    base_capacity_j_per_k=4000.0,
    conductance_zone_1_zone_2_w_per_k=2.0,
    conductance_zone_1_base_w_per_k=6.0,
    conductance_zone_2_base_w_per_k=6.0,
    loss_zone_1_ambient_w_per_k=0.8,
    loss_zone_2_ambient_w_per_k=1.0,
    loss_base_ambient_w_per_k=12.0,
    heater_1_power_w=800.0,
    heater_2_power_w=1000.0,
    ambient_temp_degc=22.0,
    transport_delay_s=3.0,
)
PLATEN_STATES = ("zone_1_rise [K]", "zone_2_rise [K]", "base_rise [K]")
#: Duty levels of each heater (low, high) in %, and the random binary clock period.
PLATEN_DUTY_LEVELS = ((30.0, 60.0), (25.0, 55.0))
PLATEN_HOLD_SAMPLES = 30
THERMOCOUPLE_NOISE = 0.05  # degC, standard deviation
THERMOCOUPLE_RESOLUTION = 0.01  # degC


def platen_model(p: HeatedPlaten) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Continuous state-space model of the platen (temperature rises over ambient).

    States: rises of zone 1, zone 2 and base over ambient (K); inputs: heater duties (%);
    outputs: zone rises (K); the logged temperatures add the ambient temperature. Each
    node obeys ``C_i dT_i/dt = P_i u_i / 100 - sum_j G_ij (T_i - T_j) - G_ia T_i``.
    """
    c1, c2, c3 = p.zone_1_capacity_j_per_k, p.zone_2_capacity_j_per_k, p.base_capacity_j_per_k
    g12 = p.conductance_zone_1_zone_2_w_per_k
    g13, g23 = p.conductance_zone_1_base_w_per_k, p.conductance_zone_2_base_w_per_k
    g1a, g2a, g3a = (
        p.loss_zone_1_ambient_w_per_k,
        p.loss_zone_2_ambient_w_per_k,
        p.loss_base_ambient_w_per_k,
    )
    A = np.array(
        [
            [-(g12 + g13 + g1a) / c1, g12 / c1, g13 / c1],
            [g12 / c2, -(g12 + g23 + g2a) / c2, g23 / c2],
            [g13 / c3, g23 / c3, -(g13 + g23 + g3a) / c3],
        ]
    )
    B = np.array([[p.heater_1_power_w / 100.0 / c1, 0.0], [0.0, p.heater_2_power_w / 100.0 / c2], [0.0, 0.0]])
    C = np.array([[1.0, 0.0, 0.0], [0.0, 1.0, 0.0]])
    D = np.zeros((2, 2))
    return A, B, C, D


# --------------------------------------------------------------------------------------
# Shared pieces
# --------------------------------------------------------------------------------------


def random_binary(rng: np.random.Generator, n: int, hold: int, low: float, high: float) -> np.ndarray:
    """Random binary signal: at every ``hold``-th sample the level flips with probability 1/2.

    The signal therefore keeps each level for at least ``hold`` samples; its spectrum is
    that of a random telegraph with clock period ``hold`` samples (first null at
    ``1 / (hold T)``).
    """
    n_clock = -(-n // hold)
    flips = rng.random(n_clock) < 0.5
    state = (np.cumsum(flips) + int(rng.random() < 0.5)) % 2
    levels = np.where(state == 1, high, low)
    return np.repeat(levels, hold)[:n]


def simulate_discrete(Ad: np.ndarray, Bd: np.ndarray, u: np.ndarray, x0: np.ndarray) -> np.ndarray:
    """States ``x[k]`` of ``x[k+1] = Ad x[k] + Bd u[k]`` for k = 0..N-1, shape (N, n)."""
    x = np.empty((u.shape[0], Ad.shape[0]))
    xk = np.array(x0, dtype=float)
    for k in range(u.shape[0]):
        x[k] = xk
        xk = Ad @ xk + Bd @ u[k]
    return x


def zoh(A, B, C, D, dt):
    """Exact ZOH discretisation (scipy.signal.cont2discrete)."""
    Ad, Bd, Cd, Dd, _ = cont2discrete((A, B, C, D), dt, method="zoh")
    return Ad, Bd, Cd, Dd


def modes(A: np.ndarray) -> list[dict]:
    """Modes of a continuous system matrix: oscillatory pairs and real time constants."""
    out = []
    for lam in sorted(np.linalg.eigvals(A), key=lambda z: (abs(z), z.imag)):
        if lam.imag < 0:
            continue
        if lam.imag > 0:
            wn = abs(lam)
            out.append(
                {
                    "kind": "oscillatory",
                    "eigenvalue_real": lam.real,
                    "eigenvalue_imag": lam.imag,
                    "natural_frequency_hz": wn / (2 * np.pi),
                    "damping_ratio": -lam.real / wn,
                    "damped_frequency_hz": lam.imag / (2 * np.pi),
                }
            )
        else:
            out.append({"kind": "real", "eigenvalue_real": lam.real, "time_constant_s": -1.0 / lam.real})
    return out


def _clean(obj):
    """Round floats to ``JSON_DIGITS`` significant digits and turn arrays into lists."""
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _clean(obj.tolist())
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        value = float(f"{float(obj):.{JSON_DIGITS}g}")
        return 0.0 if value == 0.0 else value
    return obj


def _model_dict(A, B, C, D, states=None) -> dict:
    out = {"A": A, "B": B, "C": C, "D": D}
    if states is not None:
        out = {"states": list(states), **out}
    return out


def write_csv(path: Path, header: list[str], columns: list[np.ndarray], fmts: list[str]) -> None:
    """Write columns as comma-separated text with fixed decimals and LF line ends."""
    data = np.column_stack(columns)
    with open(path, "w", encoding="utf-8", newline="\n") as fh:
        np.savetxt(fh, data, fmt=fmts, delimiter=",", header=",".join(header), comments="")


# --------------------------------------------------------------------------------------
# Scenarios
# --------------------------------------------------------------------------------------


def belt_axis_log(p: BeltAxis, seed: int, out: Path, name: str) -> dict:
    """Simulate one belt-axis log, write it to ``out / name`` and return its truth."""
    rng = np.random.default_rng(seed)
    T = BELT_SAMPLE_TIME
    n = int(round(BELT_DURATION / T))
    A, B, C, D = belt_axis_model(p)
    Ad, Bd, Cd, Dd = zoh(A, B, C, D, T)

    u0 = BELT_TORQUE_OFFSET
    torque = random_binary(rng, n, BELT_HOLD_SAMPLES, u0 - BELT_TORQUE_AMPLITUDE, u0 + BELT_TORQUE_AMPLITUDE)
    x_ss = -np.linalg.solve(A, B[:, 0] * u0)

    # Augment with motor angle and carriage position (integrals of states 0 and 1) for the
    # encoder and the linear scale, then discretise the augmented model exactly as well.
    A_aug = np.zeros((5, 5))
    A_aug[:3, :3] = A
    A_aug[3, 0] = 1.0
    A_aug[4, 1] = 1.0
    B_aug = np.vstack([B, np.zeros((2, 1))])
    Ad_aug, Bd_aug, _, _ = zoh(A_aug, B_aug, np.eye(5), np.zeros((5, 1)), T)
    # Sample -1 sits in the steady state at the operating torque, angle and position zero.
    u_ext = np.concatenate([[u0], torque])[:, None]
    x = simulate_discrete(Ad_aug, Bd_aug, u_ext, np.concatenate([x_ss, [0.0, 0.0]]))

    step_angle = 2 * np.pi / ENCODER_COUNTS_PER_REV
    counts = np.floor(x[:, 3] / step_angle)
    motor_speed = np.diff(counts) * (step_angle / T)
    position = x[:, 4] + SCALE_POSITION_NOISE * rng.standard_normal(n + 1)
    scale_counts = np.floor(position / SCALE_RESOLUTION)
    carriage_speed = np.diff(scale_counts) * (SCALE_RESOLUTION / T)

    time = np.arange(n) * T
    header = ["time [s]", "motor_torque_cmd [N m]", "motor_speed [rad/s]", "carriage_speed [m/s]"]
    write_csv(
        out / name,
        header,
        [time, torque, motor_speed, carriage_speed],
        ["%.3f", "%.4f", "%.4f", "%.4f"],
    )

    y_ss = C @ x_ss
    motor_step = step_angle / T
    carriage_step = SCALE_RESOLUTION / T
    return {
        "scenario": "belt-driven carriage on a packaging-machine test bench",
        "seed": seed,
        "sample_time": T,
        "duration": n * T,
        "n_rows": n,
        "time_column": "time [s]",
        "inputs": [{"name": "motor_torque_cmd", "unit": "N m"}],
        "outputs": [
            {"name": "motor_speed", "unit": "rad/s"},
            {"name": "carriage_speed", "unit": "m/s"},
        ],
        "physical_parameters": asdict(p),
        "derived_parameters": {
            "motor_inertia_at_carriage_kg": p.motor_inertia_kg_m2 / p.pulley_radius_m**2,
            "undamped_belt_resonance_closed_form_hz": belt_closed_form_resonance_hz(p),
            "antiresonance_motor_speed_closed_form_hz": float(
                np.sqrt(p.belt_stiffness_n_per_m / p.carriage_mass_kg) / (2 * np.pi)
            ),
        },
        "continuous_model": _model_dict(A, B, C, D, BELT_STATES),
        "discrete_model": {"method": "zoh", "sample_time": T, **_model_dict(Ad, Bd, Cd, Dd)},
        "modes": modes(A),
        "input_delay_samples": [0],
        "operating_point": {
            "inputs": {"motor_torque_cmd": u0},
            "outputs": {"motor_speed": y_ss[0], "carriage_speed": y_ss[1]},
            "steady_state": x_ss,
        },
        "initial_condition": (
            "at t = -sample_time the plant is in the steady state of the operating-point "
            "torque with motor angle 0 and carriage position 0; that sample's torque is the "
            "operating-point torque"
        ),
        "excitation": {
            "type": "random binary (level flips with probability 0.5 every hold_samples)",
            "hold_samples": BELT_HOLD_SAMPLES,
            "levels": [u0 - BELT_TORQUE_AMPLITUDE, u0 + BELT_TORQUE_AMPLITUDE],
            "first_spectral_null_hz": 1.0 / (BELT_HOLD_SAMPLES * T),
        },
        "measurement": {
            "motor_speed": (
                "backward difference over one sample of the floored encoder count "
                "(angle / quantisation_step_rad), times step/sample_time; equals the mean "
                "speed over the last sample interval plus quantisation noise"
            ),
            "carriage_speed": (
                "backward difference over one sample of the floored linear-scale count of "
                "(position + white position noise)"
            ),
        },
        "quantisation": {
            "motor_encoder_counts_per_rev": ENCODER_COUNTS_PER_REV,
            "motor_angle_step_rad": step_angle,
            "motor_speed_step": motor_step,
            "carriage_position_step_m": SCALE_RESOLUTION,
            "carriage_speed_step": carriage_step,
        },
        "noise": {
            "carriage_position_noise_std_m": SCALE_POSITION_NOISE,
            # difference of two independent uniform quantisation errors: var = 2 q^2 / 12
            "motor_speed_std": motor_step / np.sqrt(6.0),
            # difference of two independent (noise + quantisation) errors
            "carriage_speed_std": float(np.sqrt(2.0 * (SCALE_POSITION_NOISE**2 + SCALE_RESOLUTION**2 / 12.0)) / T),
        },
    }


def platen_log(p: HeatedPlaten, seed: int, out: Path, name: str) -> dict:
    """Simulate the heated-platen log, write it to ``out / name`` and return its truth."""
    rng = np.random.default_rng(seed)
    T = PLATEN_SAMPLE_TIME
    n = int(round(PLATEN_DURATION / T))
    delay = int(round(p.transport_delay_s / T))
    A, B, C, D = platen_model(p)
    Ad, Bd, Cd, Dd = zoh(A, B, C, D, T)

    u0 = np.array([(lo + hi) / 2 for lo, hi in PLATEN_DUTY_LEVELS])
    duties = np.column_stack([random_binary(rng, n, PLATEN_HOLD_SAMPLES, lo, hi) for lo, hi in PLATEN_DUTY_LEVELS])
    # Before t = 0 the duties sat at the operating point for a long time (steady state).
    x_ss = -np.linalg.solve(A, B @ u0)
    u_delayed = np.vstack([np.tile(u0, (delay, 1)), duties[: n - delay]])
    x = simulate_discrete(Ad, Bd, u_delayed, x_ss)
    temps = x @ C.T + p.ambient_temp_degc
    measured = temps + THERMOCOUPLE_NOISE * rng.standard_normal(temps.shape)
    counts = np.round(measured / THERMOCOUPLE_RESOLUTION)

    time = np.arange(n) * T
    header = [
        "time [s]",
        "heater_1_duty [%]",
        "heater_2_duty [%]",
        "zone_1_temp [degC]",
        "zone_2_temp [degC]",
    ]
    write_csv(
        out / name,
        header,
        [time, duties[:, 0], duties[:, 1], counts[:, 0] / 100.0, counts[:, 1] / 100.0],
        ["%.1f", "%.1f", "%.1f", "%.2f", "%.2f"],
    )

    y_ss = C @ x_ss + p.ambient_temp_degc
    return {
        "scenario": "two-zone heated platen",
        "seed": seed,
        "sample_time": T,
        "duration": n * T,
        "n_rows": n,
        "time_column": "time [s]",
        "inputs": [
            {"name": "heater_1_duty", "unit": "%"},
            {"name": "heater_2_duty", "unit": "%"},
        ],
        "outputs": [
            {"name": "zone_1_temp", "unit": "degC"},
            {"name": "zone_2_temp", "unit": "degC"},
        ],
        "physical_parameters": asdict(p),
        "continuous_model": {
            **_model_dict(A, B, C, D, PLATEN_STATES),
            "output_offset": [p.ambient_temp_degc, p.ambient_temp_degc],
            "note": "logged temperature = C x + D u + output_offset (ambient); x = rises in K",
        },
        "discrete_model": {"method": "zoh", "sample_time": T, **_model_dict(Ad, Bd, Cd, Dd)},
        "modes": modes(A),
        "static_gain_k_per_percent": -C @ np.linalg.solve(A, B),
        "input_delay_samples": [delay, delay],
        "operating_point": {
            "inputs": {"heater_1_duty": u0[0], "heater_2_duty": u0[1]},
            "outputs": {"zone_1_temp": y_ss[0], "zone_2_temp": y_ss[1]},
            "steady_state": x_ss,
        },
        "initial_condition": (
            "steady state of the operating-point duties; the delayed duties before t = 0 are the operating-point duties"
        ),
        "excitation": {
            "type": "random binary per heater, independent (level flips with probability 0.5 every hold_samples)",
            "hold_samples": PLATEN_HOLD_SAMPLES,
            "levels": [list(lv) for lv in PLATEN_DUTY_LEVELS],
        },
        "measurement": {
            "zone_temps": "ambient + rise + white thermocouple noise, rounded to the resolution",
        },
        "quantisation": {"zone_temp_step": THERMOCOUPLE_RESOLUTION},
        "noise": {
            "thermocouple_noise_std": THERMOCOUPLE_NOISE,
            # Gaussian noise plus an independent uniform rounding error
            "zone_temp_std": float(np.sqrt(THERMOCOUPLE_NOISE**2 + THERMOCOUPLE_RESOLUTION**2 / 12.0)),
        },
    }


def belt_change(before: dict, after: dict) -> dict:
    """Return the true shift of the belt resonance between the two belt-axis logs."""

    def resonance(truth):
        (mode,) = [m for m in truth["modes"] if m["kind"] == "oscillatory"]
        return mode

    b, a = resonance(before), resonance(after)
    shift = a["natural_frequency_hz"] - b["natural_frequency_hz"]
    return {
        "before": "belt_axis_before.csv",
        "after": "belt_axis_after.csv",
        "resonance_before_hz": b["natural_frequency_hz"],
        "resonance_after_hz": a["natural_frequency_hz"],
        "resonance_shift_hz": shift,
        "resonance_shift_percent": 100.0 * shift / b["natural_frequency_hz"],
        "damping_ratio_before": b["damping_ratio"],
        "damping_ratio_after": a["damping_ratio"],
        "stiffness_ratio": (
            after["physical_parameters"]["belt_stiffness_n_per_m"]
            / before["physical_parameters"]["belt_stiffness_n_per_m"]
        ),
    }


def generate(out: Path) -> dict:
    """Write the three logs and ``truth.json`` into ``out``; return the truth mapping."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    before = belt_axis_log(BELT_BEFORE, SEEDS["belt_axis_before.csv"], out, "belt_axis_before.csv")
    after = belt_axis_log(BELT_AFTER, SEEDS["belt_axis_after.csv"], out, "belt_axis_after.csv")
    platen = platen_log(PLATEN, SEEDS["heated_platen.csv"], out, "heated_platen.csv")
    truth = _clean(
        {
            "generator": "sample_data/generate.py",
            "units": "sample_time and duration in s; other units in the key names or listed",
            "files": {
                "belt_axis_before.csv": before,
                "belt_axis_after.csv": after,
                "heated_platen.csv": platen,
            },
            "belt_change": belt_change(before, after),
        }
    )
    with open(out / "truth.json", "w", encoding="utf-8", newline="\n") as fh:
        json.dump(truth, fh, indent=2)
        fh.write("\n")
    return truth


def main(argv: list[str] | None = None, *, default_out: Path | None = None) -> None:
    """Command-line entry point; ``default_out`` is the folder written without ``--out``."""
    parser = argparse.ArgumentParser(description="Write the rigfit demo logs and truth.json.")
    parser.add_argument("--out", type=Path, default=default_out or DEFAULT_OUT, help="output folder")
    args = parser.parse_args(argv)
    truth = generate(args.out)
    change = truth["belt_change"]
    print(
        f"wrote {', '.join(truth['files'])} and truth.json into {args.out}; belt resonance "
        f"{change['resonance_before_hz']:.2f} Hz -> {change['resonance_after_hz']:.2f} Hz "
        f"({change['resonance_shift_percent']:+.1f} %)"
    )


if __name__ == "__main__":
    main()
