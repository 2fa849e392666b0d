"""ident.assess.fleet: the robust outlier rule against scipy/numpy, and mode matching across units."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from ident.assess.fleet import (
    MAD_SCALE,
    ModePoint,
    OutlierRule,
    Quantity,
    chance_flags,
    match_fleet_modes,
    median_unit,
    presence_reasons,
    robust_screen,
    screen_reasons,
)
from ident.errors import OptionError


def test_mad_scale_is_the_normal_consistency_constant():
    # 1 / Phi^-1(3/4), as scipy.stats.median_abs_deviation(scale="normal") uses
    assert_allclose(MAD_SCALE, 1.0 / stats.norm.ppf(0.75), rtol=1e-14)


def test_median_mad_and_z_equal_scipy(rng):
    x = rng.normal(24.0, 0.4, size=(41, 3))
    x[5, 0] = 21.0  # a planted low value
    x[7, 2] = np.nan  # a unit without this quantity
    qs = [Quantity("f", "frequency", "Hz"), Quantity("g", "gain", ""), Quantity("h", "other", "")]
    screen = robust_screen(x, qs, OutlierRule(min_relative_spread=0.0))
    for q in range(3):
        col = x[:, q][np.isfinite(x[:, q])]
        assert screen.median[q] == np.median(col)
        assert_allclose(screen.scale[q], stats.median_abs_deviation(col, scale="normal"), rtol=1e-12)
    z = (x[:, 0] - np.median(x[:, 0])) / stats.median_abs_deviation(x[:, 0], scale="normal")
    assert_allclose(screen.z[:, 0], z, rtol=1e-12)
    assert np.isnan(screen.z[7, 2]) and screen.n_values.tolist() == [41, 41, 40]
    assert screen.flagged[5, 0] and screen.flagged[:, 0].sum() == 1


def test_rule_on_a_small_worked_example():
    # median 13, |x - 13| = 3 2 1 0 1 2 87 -> MAD 2, scale 1.4826 * 2 = 2.9652 (closed form)
    x = np.array([[10.0], [11.0], [12.0], [13.0], [14.0], [15.0], [100.0]])
    screen = robust_screen(x, [Quantity("q", "q", "")], OutlierRule(min_relative_spread=0.0))
    assert screen.median[0] == 13.0  # closed form
    assert screen.mad[0] == 2.0  # closed form
    assert_allclose(screen.z[:, 0], (x[:, 0] - 13.0) / (MAD_SCALE * 2.0), rtol=1e-15)
    assert screen.flagged[:, 0].tolist() == [False] * 6 + [True]  # z(100) = 29.3 > 3.5; z(10) = -1.0
    reason = screen_reasons(screen, 6)[0]
    assert "669.2 % above the fleet median 13" in reason and "limit 3.5" in reason  # (100 - 13) / 13


def test_low_side_quantity_ignores_high_values():
    x = np.array([[90.0], [91.0], [92.0], [93.0], [94.0], [99.9], [60.0]])
    screen = robust_screen(x, [Quantity("fit", "fit", "%", side="low")], OutlierRule())
    assert screen.flagged[:, 0].tolist() == [False] * 6 + [True]


def test_too_few_units_are_not_screened():
    x = np.array([[1.0], [1.0], [1.0], [9.0]])
    screen = robust_screen(x, [Quantity("q", "q", "")], OutlierRule(min_units=5))
    assert np.isnan(screen.median[0]) and not screen.flagged.any()


def test_spread_floor_when_most_units_agree_exactly():
    # MAD = 0; the floor 0.5 % of |median| = 0.05 decides: 10.1 is 2 scales away, 11 is 20 (closed form)
    x = np.array([[10.0]] * 6 + [[10.1], [11.0]])
    screen = robust_screen(x, [Quantity("q", "q", "")], OutlierRule(min_relative_spread=0.005))
    assert screen.mad[0] == 0.0 and screen.scale[0] == pytest.approx(0.05)
    assert screen.flagged[:, 0].tolist() == [False] * 7 + [True]


@pytest.mark.parametrize("kwargs", [{"threshold": 0}, {"min_units": 2}, {"rare_mode_fraction": 1.5},
                                    {"min_relative_spread": -0.1}])
def test_rule_refuses_bad_values(kwargs):
    with pytest.raises(OptionError):
        OutlierRule(**kwargs)


def test_rule_from_mapping_refuses_unknown_keys():
    with pytest.raises(OptionError, match="threshhold"):
        OutlierRule.from_mapping({"threshhold": 3})


def _pair(f, z):
    return ModePoint(f, z, 1 / (2 * np.pi * f * z), True)


def _real(tau):
    return ModePoint(1 / (2 * np.pi * tau), None, tau, False)


def test_modes_are_numbered_by_physical_mode_whatever_their_order():
    units = [
        [_real(0.05), _pair(24.0, 0.06)],
        [_pair(23.5, 0.061), _real(0.052)],           # other order
        [_pair(24.4, 0.058), _pair(70.0, 0.05), _real(0.049)],  # an extra mode
        [_real(0.051)],                                # the resonance missing
    ]
    fleet = match_fleet_modes(units, units[0], limit=0.7)
    # numbered by median frequency: the real pole (3.2 Hz), the 24 Hz pair, the 70 Hz pair
    assert [round(m.natural_frequency_hz) for m in fleet.reference] == [3, 24, 70]
    assert fleet.from_reference == (True, True, False)
    assert fleet.assignment.tolist() == [[0, 1, -1], [1, 0, -1], [2, 0, 1], [0, -1, -1]]
    assert fleet.counts.tolist() == [4, 3, 1]


def test_median_unit_is_the_typical_one():
    units = [
        [_pair(21.0, 0.06), _real(0.05)],     # far in frequency
        [_pair(23.9, 0.059), _real(0.0495)],
        [_pair(24.0, 0.06), _real(0.05)],     # every figure the element-wise median of the five
        [_pair(24.3, 0.062), _real(0.051)],
        [_pair(24.1, 0.061), _real(0.0505)],
        [_pair(24.0, 0.06), _real(0.05), _pair(70.0, 0.05)],  # a rarer mode count: not a candidate
    ]
    # medians over the five two-mode units: 24.0 Hz, damping 0.06, time constant 0.05 s (by inspection)
    assert median_unit(units) == 2
    assert median_unit([]) is None


def test_presence_reasons_name_extra_and_missing_modes():
    units = [[_real(0.05), _pair(24.0, 0.06)] for _ in range(5)]
    units.append([_real(0.05), _pair(24.0, 0.06), _pair(70.0, 0.05)])
    units.append([_real(0.05)])
    fleet = match_fleet_modes(units, units[0])
    rule = OutlierRule()
    assert presence_reasons(fleet, 0, units[0], rule) == []
    extra = presence_reasons(fleet, 5, units[5], rule)
    assert len(extra) == 1 and extra[0].startswith("extra mode 3 (70 Hz") and "1 of 7 units" in extra[0]
    missing = presence_reasons(fleet, 6, units[6], rule)
    assert len(missing) == 1 and missing[0].startswith("lacks mode 2 (24 Hz") and "6 of 7 units" in missing[0]
    # an extra mode the unit's data leave unidentified (its confidence region crosses the unit
    # circle) is no evidence: the same unit with that mode unidentified is not called odd for it
    from dataclasses import replace

    vague = [*units[:5], [*units[5][:2], replace(units[5][2], identified=False)], units[6]]
    assert presence_reasons(match_fleet_modes(vague, vague[0]), 5, vague[5], rule) == []


def test_a_mode_that_cancels_a_zero_or_may_be_unstable_is_not_identified():
    # common practice, no source: a pole nearly cancelled by a zero hardly enters the response
    # (at N = 1000 such noise-fitted real poles called five healthy units odd), and one whose
    # confidence region crosses the unit circle is not pinned down; other flags do not matter
    from ident.fleet.aggregate import mode_points

    base = {"natural_frequency_hz": 3.2, "damping_ratio": 1.0, "time_constant_s": 0.05, "is_pair": False}
    flags = [["near_cancellation"], ["uncertain_stability"], ["lightly_damped"], []]
    points = mode_points([{**base, "flags": f} for f in flags])
    assert [p.identified for p in points] == [False, False, True, True]


def test_chance_flags_counts_the_normal_tail():
    x = np.column_stack([np.linspace(-1, 1, 101), np.linspace(90, 99, 101)])
    qs = [Quantity("a", "a", ""), Quantity("fit", "fit", "%", side="low")]
    screen = robust_screen(x, qs, OutlierRule(threshold=3.0))
    # 101 * 2 * Q(3) + 101 * Q(3), Q(3) = 1.3499e-3 (scipy.stats.norm.sf(3))
    assert chance_flags(screen) == pytest.approx(101 * 3 * stats.norm.sf(3.0), rel=1e-12)
