"""One piece of advice about the order, and the in-sample against held-out fit gap."""

import pytest

from ident.assess.advice import FIT_GAP_POINTS, fit_gap, order_advice, singular_value_order


def test_fit_gap_kinds_at_the_threshold():
    gaps = fit_gap(["a", "b", "c", "d"], [93.0, 62.0, 80.0, 80.0],
                   [62.0, 93.0, 80.0 - FIT_GAP_POINTS, float("-inf")])
    # issue 13: 93 % in-sample against 62 % held out is called out; the reverse is suspicious
    assert [g.kind for g in gaps] == ["held_out_lower", "held_out_higher", "none", "none"]
    assert "over-fitting" in gaps[0].message and "nonlinearity" in gaps[0].message
    assert "suspicious" in gaps[1].message
    assert "not finite" in gaps[3].message


def test_singular_value_gap():
    # a ratio of 10 or more marks the first clear gap (SINGULAR_GAP_RATIO)
    assert singular_value_order([50.0, 20.0, 1.5, 1.0]) == 2
    assert singular_value_order([5.0, 4.0, 3.0]) is None
    assert singular_value_order(None) is None


@pytest.mark.parametrize(("high", "low", "direction"), [
    ((), (), "keep"),
    (("the 3 Hz mode",), (), "lower"),
    ((), ("u -> y",), "higher"),
    (("the 3 Hz mode",), ("u -> y",), "unclear"),
])
def test_advice_never_says_too_high_and_too_low_at_once(high, low, direction):
    advice = order_advice(n_states=4, cancelling_modes=high, missed_input_dynamics=low)
    assert advice.direction == direction
    says_high = "too high" in advice.message
    says_low = "too low" in advice.message
    assert not (says_high and says_low)
    assert says_high == (direction == "lower") and says_low == (direction == "higher")
    if direction == "unclear":
        assert "unlikely to be the problem" in advice.message and "nonlinearity" in advice.message


def test_over_fitting_gap_and_singular_values_are_evidence():
    gaps = fit_gap(["y"], [93.0], [62.0])
    advice = order_advice(n_states=6, gaps=gaps)
    assert advice.direction == "lower" and "changed operating point" in advice.message
    # singular values with a clear gap after 4 states, a model of 2: too low
    advice = order_advice(n_states=2, singular_values=[90.0, 40.0, 20.0, 10.0, 0.5, 0.4])
    assert advice.direction == "higher" and "4 states" in advice.message
    # delay states do not count as dynamics: 4 states of which 2 are a delay, gap after 4
    advice = order_advice(n_states=4, delay_states=2, singular_values=[90.0, 40.0, 20.0, 10.0, 0.5])
    assert advice.direction == "higher"
