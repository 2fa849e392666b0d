"""One place that decides what to say about a model's order and its fit gap.

Several findings bear on whether a model has too many or too few states, and
taken one by one they can point both ways at once: a mode that nearly cancels a
zero says "too high", residuals that still depend on past inputs say "too
low". :func:`order_advice` weighs all of them together and gives one piece of
advice, so a report never says both:

* signs of **too high** an order: a mode that nearly cancels a zero
  (``near_cancellation``), a pole near the negative real axis
  (``negative_real``, noise fitting), an in-sample fit far above the held-out
  fit (over-fitting; the same gap also comes from a nonlinearity or a changed
  operating point, which the advice names);
* signs of **too low** an order: residuals that depend on past inputs where a
  changed delay does not explain it (missed input dynamics), subspace singular
  values with a clear gap after more states than the model has.

With signs on one side only the advice points that way; with signs on both
sides it says the order is unlikely to be the problem and names what is more
likely (a nonlinearity, a changed operating point, a wrong delay, feedback).

:func:`fit_gap` compares the in-sample fit with the held-out fit: a held-out
fit far below the in-sample one is over-fitting, a nonlinearity or a changed
operating point; one far above it is suspicious (easier held-out data, or a
disturbance in the estimation data).

References
----------
.. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
   Prentice Hall, 1999, sec. 16.4-16.6 (model structure selection and
   validation: cross-validation, residual analysis, pole-zero cancellations).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

__all__ = [
    "FIT_GAP_POINTS",
    "SINGULAR_GAP_RATIO",
    "ORDER_DIRECTIONS",
    "FitGap",
    "OrderAdvice",
    "fit_gap",
    "singular_value_order",
    "order_advice",
]

#: An in-sample and a held-out fit further apart than this (percentage points) are
#: called out.
FIT_GAP_POINTS = 10.0
#: A subspace singular value this many times larger than the next marks a clear gap.
SINGULAR_GAP_RATIO = 10.0
#: What :func:`order_advice` can say.
ORDER_DIRECTIONS = ("keep", "lower", "higher", "unclear")


@dataclass(frozen=True, slots=True, eq=False)
class FitGap:
    """In-sample against held-out fit of one output.

    Attributes
    ----------
    output : str
    in_sample, held_out : float
        Fit percent.
    kind : {"none", "held_out_lower", "held_out_higher"}
        ``held_out_lower`` when the held-out fit is more than
        :data:`FIT_GAP_POINTS` below the in-sample fit, ``held_out_higher``
        when it is that much above.
    message : str
        One or two sentences.
    """

    output: str
    in_sample: float
    held_out: float
    kind: str
    message: str


def fit_gap(outputs: Sequence[str], in_sample: Sequence[float], held_out: Sequence[float]) -> tuple[FitGap, ...]:
    """Compare the in-sample and held-out fit of every output.

    Parameters
    ----------
    outputs : sequence of str
    in_sample, held_out : sequence of float
        Fit percent per output (``-inf`` for a diverged simulation).

    Returns
    -------
    tuple of FitGap
    """
    out = []
    for name, a, b in zip(outputs, in_sample, held_out, strict=True):
        a, b = float(a), float(b)
        if not (np.isfinite(a) and np.isfinite(b)):
            kind, text = "none", f"{name}: fit not finite (in-sample {a:.1f} %, held-out {b:.1f} %)"
        elif a - b > FIT_GAP_POINTS:
            kind = "held_out_lower"
            text = (f"the held-out fit of {name} ({b:.1f} %) is far below its in-sample fit ({a:.1f} %): "
                    "over-fitting, a nonlinearity, or an operating point that changed between the two parts")
        elif b - a > FIT_GAP_POINTS:
            kind = "held_out_higher"
            text = (f"the held-out fit of {name} ({b:.1f} %) is far above its in-sample fit ({a:.1f} %), "
                    "which is suspicious: the held-out data may be easier (smaller or slower signals, less "
                    "noise), or the estimation data hold a disturbance the model could not follow; check "
                    "the split")
        else:
            kind = "none"
            text = f"the held-out fit of {name} ({b:.1f} %) is close to its in-sample fit ({a:.1f} %)"
        out.append(FitGap(name, a, b, kind, text))
    return tuple(out)


def singular_value_order(singular_values: Sequence[float] | None) -> int | None:
    """Order after the first clear gap (a ratio of at least :data:`SINGULAR_GAP_RATIO`), or ``None``."""
    if singular_values is None:
        return None
    sv = np.asarray(singular_values, dtype=float)
    sv = sv[np.isfinite(sv) & (sv > 0)]
    if sv.size < 2:
        return None
    ratios = sv[:-1] / sv[1:]
    gaps = np.flatnonzero(ratios >= SINGULAR_GAP_RATIO)
    return int(gaps[0] + 1) if gaps.size else None


@dataclass(frozen=True, slots=True, eq=False)
class OrderAdvice:
    """The one piece of advice about the model's order.

    Attributes
    ----------
    direction : {"keep", "lower", "higher", "unclear"}
    message : str
        The advice in plain words, with its evidence.
    too_high, too_low : tuple of str
        The evidence for each direction, one phrase each.
    """

    direction: str
    message: str
    too_high: tuple[str, ...]
    too_low: tuple[str, ...]


def order_advice(
    *,
    n_states: int,
    cancelling_modes: Sequence[str] = (),
    negative_real_modes: Sequence[str] = (),
    missed_input_dynamics: Sequence[str] = (),
    gaps: Sequence[FitGap] = (),
    singular_values: Sequence[float] | None = None,
    delay_states: int = 0,
) -> OrderAdvice:
    """Weigh every finding about the order and give one piece of advice.

    Parameters
    ----------
    n_states : int
        States of the model.
    cancelling_modes : sequence of str
        Modes flagged ``near_cancellation`` (described, e.g. "the 3.1 Hz mode").
    negative_real_modes : sequence of str
        Modes flagged ``negative_real``.
    missed_input_dynamics : sequence of str
        Channels ("u -> y") whose residuals depend on past inputs where a
        delay shift does not explain it.
    gaps : sequence of FitGap
        In-sample against held-out fit per output.
    singular_values : sequence of float, optional
        Subspace singular values of the estimation data.
    delay_states : int
        States that only hold input delays (not counted as dynamics).

    Returns
    -------
    OrderAdvice
    """
    high, low = [], []
    if cancelling_modes:
        high.append(f"{', '.join(cancelling_modes)} nearly cancel{'s' if len(cancelling_modes) == 1 else ''} "
                    "a zero")
    if negative_real_modes:
        high.append(f"{', '.join(negative_real_modes)} lie{'s' if len(negative_real_modes) == 1 else ''} "
                    "near the negative real axis (noise fitting)")
    over = [g.output for g in gaps if g.kind == "held_out_lower"]
    if over:
        high.append(f"the held-out fit of {', '.join(over)} is far below the in-sample fit")
    if missed_input_dynamics:
        low.append(f"the residuals still depend on past inputs ({', '.join(missed_input_dynamics)})")
    sv_order = singular_value_order(singular_values)
    dynamic = n_states - delay_states
    if sv_order is not None and sv_order > dynamic:
        low.append(f"the subspace singular values show a clear gap after {sv_order} states, more than the "
                   f"model's {dynamic}")
    return OrderAdvice(_direction(high, low), _message(high, low, over), tuple(high), tuple(low))


def _direction(high: Sequence[str], low: Sequence[str]) -> str:
    if high and low:
        return "unclear"
    if high:
        return "lower"
    if low:
        return "higher"
    return "keep"


def _message(high: Sequence[str], low: Sequence[str], over: Sequence[str]) -> str:
    if high and low:
        return ("the order is unlikely to be the problem: signs point both ways (" + "; ".join(high)
                + " -- but " + "; ".join(low) + "); more likely a nonlinearity, an operating point that "
                "changed, a wrong delay or feedback in the data; try a smaller amplitude or a log around "
                "one operating point before changing the order")
    if high:
        text = "the order is probably too high: " + "; ".join(high)
        if over and len(high) == 1:
            text += (" (over-fitting; a nonlinearity or a changed operating point give the same gap, so "
                     "check those if a lower order does not close it)")
        return text + "; try fewer states"
    if low:
        return "the order is probably too low: " + "; ".join(low) + "; try more states (or a longer delay)"
    return "no sign that the order is wrong"
