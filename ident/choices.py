"""Every fixed set of choices, defined once.

The numeric core validates against these tuples and the command line offers
them as ``click.Choice``; this module imports nothing, so the CLI can use it
without loading numpy.
"""

from __future__ import annotations

__all__ = [
    "METHODS", "WEIGHTINGS", "NOISE_MODELS", "REFINEMENTS", "POLYNOMIAL_STRUCTURES", "DISCRETIZE_METHODS",
    "REALIZATIONS", "FLAGS", "UPSAMPLE_METHODS", "SIGNAL_KINDS", "SPACINGS", "HARMONICS", "PHASES", "ARRANGEMENTS",
    "OFFSET_METHODS",
]

#: Model families of ``identify`` / ``rigfit fit --method``: ``"auto"`` (ARX and
#: subspace candidates, refined), ARX alone, subspace starts alone, or one of the
#: polynomial structures of ``POLYNOMIAL_STRUCTURES`` fitted by prediction error.
METHODS: tuple[str, ...] = ("arx", "subspace", "auto", "oe", "armax", "bj")

#: Subspace weightings (``ident.estimate.subspace``).
WEIGHTINGS: tuple[str, ...] = ("n4sid", "moesp", "cva")

#: What a prediction-error refinement minimises (``ident.estimate.refine``):
#: the simulation error with no noise model, or the one-step prediction error of
#: the innovations form with its noise gain estimated too.
NOISE_MODELS: tuple[str, ...] = ("output_error", "innovations")

#: Refinement of the candidates of ``identify`` (``rigfit fit --refine``): the
#: noise models above, ``"auto"`` (output error for open-loop data, innovations
#: when the log was taken in closed loop) or ``"none"`` (keep the direct estimates).
REFINEMENTS: tuple[str, ...] = ("auto", "output_error", "innovations", "none")

#: Polynomial model structures fitted by prediction error
#: (``ident.estimate.polynomial``): output-error, ARMAX and Box-Jenkins.
POLYNOMIAL_STRUCTURES: tuple[str, ...] = ("oe", "armax", "bj")

#: Discretisation methods, both directions (``rigfit convert --method``).
DISCRETIZE_METHODS: tuple[str, ...] = ("zoh", "foh", "tustin", "matched")

#: State coordinates offered by ``ident.lti.realization.realize`` (``rigfit convert --realization``).
REALIZATIONS: tuple[str, ...] = ("controllable", "observable", "modal", "balanced")

#: Ways to bring a slower channel up to the common rate (``rigfit fit --upsample``,
#: ``[log] upsample``): zero-order hold or linear interpolation between its samples.
UPSAMPLE_METHODS: tuple[str, ...] = ("zoh", "linear")

#: Every plausibility flag a mode can carry, in the order they are reported.
FLAGS: tuple[str, ...] = (
    "unstable",
    "marginal",
    "integrator",
    "lightly_damped",
    "negative_real",
    "near_nyquist",
    "slow_for_log",
    "near_cancellation",
    "uncertain_stability",
)

#: Test-signal families of ``ident.estimate.signal_design`` (``rigfit excite --kind``).
SIGNAL_KINDS: tuple[str, ...] = ("prbs", "binary", "noise", "multisine", "chirp")

#: Spacing of a multisine's frequency lines, or of a sweep's frequency over time.
SPACINGS: tuple[str, ...] = ("linear", "log")

#: Which harmonics of the period a multisine may excite.
HARMONICS: tuple[str, ...] = ("all", "odd", "odd-random")

#: Phases of a multisine: Schroeder's formula, a low crest factor found from it, or random.
PHASES: tuple[str, ...] = ("low-crest", "schroeder", "random")

#: How the signals of several inputs are made distinguishable in one test.
ARRANGEMENTS: tuple[str, ...] = ("orthogonal", "interleaved", "shifted", "independent")

#: Ways of choosing the operating point that is subtracted from the data.
OFFSET_METHODS: tuple[str, ...] = ("mean", "initial")
