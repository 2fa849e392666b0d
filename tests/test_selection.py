"""Tests of ident.estimate.selection: the held-out accuracy tests and the choice among candidates."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.signal import lfilter
from scipy.stats import norm

from ident.estimate.hac import andrews_bandwidth
from ident.estimate.selection import (
    Contender,
    as_accurate_pvalue,
    effective_samples,
    equal_accuracy_pvalue,
    select,
)


def _ar1(rng, n, phi, scale=1.0, p=1):
    return lfilter([1.0], [1.0, -phi], scale * rng.standard_normal((n, p)), axis=0)


def test_equal_accuracy_pvalue_is_the_newey_west_t_test_of_the_loss_differential(rng):
    # Diebold and Mariano (1995): the mean loss differential over its HAC standard error,
    # one-sided; statsmodels' OLS on a constant with Bartlett (Newey-West) weights gives
    # the same standard error at the same bandwidth (Newey and West 1987)
    a = _ar1(rng, 3000, 0.8, 1.05)
    b = _ar1(rng, 3000, 0.8)
    scales = np.array([1.0])
    d = (a[:, 0] ** 2 - b[:, 0] ** 2)
    L = andrews_bandwidth([(d - d.mean())[:, None] / np.max(np.abs(d))])
    ols = sm.OLS(d, np.ones_like(d)).fit(cov_type="HAC", cov_kwds={"maxlags": L, "use_correction": False})
    expected = norm.sf(ols.params[0] / ols.bse[0])
    assert equal_accuracy_pvalue([a], [b], scales) == pytest.approx(expected, rel=1e-9)


def test_equal_accuracy_pvalue_is_one_sided_and_exact_at_identity(rng):
    # common practice, no source: a model equal to the reference is not worse (p = 1), a
    # clearly worse one gives p near 0, a clearly better one p near 1
    e = _ar1(rng, 2000, 0.5)
    scales = np.ones(1)
    assert equal_accuracy_pvalue([e], [e], scales) == 1.0
    assert equal_accuracy_pvalue([2 * e], [e], scales) < 1e-6
    assert equal_accuracy_pvalue([e], [2 * e], scales) > 1 - 1e-6


def test_equal_accuracy_rejects_at_about_its_level_under_the_null(rng):
    # Diebold and Mariano (1995), sec. 3: under equal accuracy the one-sided test rejects
    # at about its nominal level; 400 pairs of independent AR(0.7) error series of one size
    rejections = 0
    for _ in range(400):
        a, b = _ar1(rng, 1500, 0.7), _ar1(rng, 1500, 0.7)
        rejections += equal_accuracy_pvalue([a], [b], np.ones(1)) < 0.05
    assert 0.02 <= rejections / 400 <= 0.10


def test_as_accurate_catches_one_output_hidden_behind_another(rng):
    # Bonferroni (1936): reject when the joint test or any per-output test at level / p does.
    # The simpler model is worse on output 1 and better on output 2 by about as much:
    # the joint test sees nothing, the per-output test sees output 1
    n = 4000
    best = _ar1(rng, n, 0.6, p=2)
    simple = best.copy()
    simple[:, 0] *= 1.15
    simple[:, 1] *= np.sqrt(max(2 - 1.15**2, 0.0))
    scales = np.ones(2)
    joint = equal_accuracy_pvalue([simple], [best], scales)
    first = equal_accuracy_pvalue([simple[:, [0]]], [best[:, [0]]], scales[:1])
    assert joint > 0.05
    assert first < 0.01
    assert as_accurate_pvalue([simple], [best], scales) == pytest.approx(min(joint, 2 * first))
    assert as_accurate_pvalue([simple], [best], scales) < 0.05
    # one output: the joint p-value
    assert as_accurate_pvalue([simple[:, [0]]], [best[:, [0]]], scales[:1]) == first


def test_effective_samples_of_an_ar1_series(rng):
    # Priestley (1981), sec. 5.3: the variance of the mean of an AR(1) series with
    # coefficient phi is (1 + phi) / (1 - phi) times that of white noise, so the effective
    # count is N (1 - phi) / (1 + phi); a Bartlett estimate is within about 20 % of it
    n, phi = 40_000, 0.8
    e = _ar1(rng, n, phi)
    assert effective_samples([e]) == pytest.approx(n * (1 - phi) / (1 + phi), rel=0.25)
    assert effective_samples([rng.standard_normal((n, 1))]) == pytest.approx(n, rel=0.1)


def _contender(errors, n_states, n_parameters, loss, *, unstable=False, redundant=False, n_est=2000):
    return Contender(n_states=n_states, n_parameters=n_parameters, held_out_errors=(errors,),
                     held_out_fit=100 * (1 - float(np.sqrt(np.mean(errors**2)))), estimation_loss=loss,
                     estimation_samples=n_est, unstable=unstable, redundant=redundant)


def test_select_keeps_a_tied_simpler_model_unless_the_estimation_data_support_the_bigger(rng):
    # Ljung, System Identification, 2nd ed., sec. 16.4: BIC = N ln V + d ln N among the
    # models the held-out test cannot separate
    base = 0.1 * rng.standard_normal((1000, 1))
    other = 0.1 * rng.standard_normal((1000, 1))
    other *= 1.01 * np.std(base) / np.std(other)  # 1 % worse: within the scatter of 1000 samples
    big = _contender(base, 4, 8, loss=0.0100)
    small_tied = _contender(other, 2, 4, loss=0.0101)
    rec = select([big, small_tied], np.ones(1))
    assert rec.tied == (1,) and rec.chosen == 1
    # the estimation data support the bigger model: its loss is far lower
    rec = select([big, _contender(other, 2, 4, loss=0.0200)], np.ones(1))
    assert rec.tied == (1,) and rec.chosen == 0
    # a simpler model clearly worse on the held-out data is never tied
    rec = select([big, _contender(base * 1.5, 2, 4, loss=0.0101)], np.ones(1))
    assert rec.tied == () and rec.chosen == 0


def test_select_passes_over_an_unstable_or_redundant_best(rng):
    # common practice, no source: an unstable candidate wins only when significantly better;
    # a tied candidate without a near pole-zero cancellation is preferred to one with it
    base = 0.1 * rng.standard_normal((1000, 1))
    other = 0.1 * rng.standard_normal((1000, 1))
    unstable = _contender(np.minimum(base, other), 3, 6, loss=0.01, unstable=True)  # a little better
    stable = _contender(other, 3, 6, loss=0.01)
    assert select([unstable, stable], np.ones(1)).chosen == 1
    # far better on the held-out data: the instability is supported and wins
    assert select([_contender(0.5 * other, 3, 6, loss=0.01, unstable=True), stable], np.ones(1)).chosen == 0
    redundant = _contender(base, 4, 8, loss=0.0099, redundant=True)
    plain = _contender(other, 2, 4, loss=0.0100)
    assert select([redundant, plain], np.ones(1)).chosen == 1
