"""Tests for ident.estimate.order: information criteria and the best-index rule."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose

from ident.errors import OptionError
from ident.estimate.order import CRITERIA, best_index, information_criteria


def test_closed_form_values():
    c = information_criteria(0.5, 2, 100)
    # closed form, Ljung 1999 sec. 16.4: AIC = log V + 2d/N, BIC = log V + d log N / N,
    # FPE = V (1 + d/N) / (1 - d/N)
    assert_allclose(c.aic, math.log(0.5) + 0.04, rtol=1e-15)  # exact arithmetic
    assert_allclose(c.bic, math.log(0.5) + 2 * math.log(100) / 100, rtol=1e-15)
    assert_allclose(c.fpe, 0.5 * 1.02 / 0.98, rtol=1e-15)
    assert c.as_dict().keys() == set(CRITERIA)
    assert c.get("fpe") == c.fpe


def test_aic_bic_match_statsmodels_ols(rng):
    # statsmodels' OLS aic/bic are -2 llf + 2k and -2 llf + k log N with the Gaussian
    # log-likelihood llf = -N/2 (log 2 pi + log(ssr/N) + 1), so per sample they differ from
    # the normalised criteria by the constant log(2 pi) + 1 (closed form).
    N = 300
    X = rng.standard_normal((N, 3))
    y = X @ [1.0, -2.0, 0.5] + 0.3 * rng.standard_normal(N)
    res = sm.OLS(y, X).fit()
    c = information_criteria(res.ssr / N, 3, N)
    const = math.log(2 * math.pi) + 1
    # rounding only (both are sums of a handful of double-precision terms)
    assert_allclose(c.aic, res.aic / N - const, rtol=1e-12)
    assert_allclose(c.bic, res.bic / N - const, rtol=1e-12)


def test_zero_loss_and_bad_arguments():
    c = information_criteria(0.0, 1, 10)
    assert c.aic == -math.inf and c.bic == -math.inf and c.fpe == 0.0
    with pytest.raises(OptionError, match="n_samples must exceed n_parameters; got n_samples=5"):
        information_criteria(1.0, 5, 5)
    with pytest.raises(OptionError, match="non-negative"):
        information_criteria(-1.0, 1, 10)
    with pytest.raises(OptionError, match="criterion must be one of"):
        c.get("mdl")


def test_best_index_prefers_fewer_parameters_on_ties():
    assert best_index([3.0, 1.0, 1.0, 2.0], [1, 5, 2, 1]) == 2
    assert best_index([50.0, 90.0, 90.0], [1, 4, 3], larger_is_better=True) == 2
    # -inf criterion (exact fit) wins; NaN never wins
    assert best_index([np.nan, -np.inf, 0.0], [1, 3, 1]) == 1
    assert best_index([np.nan, np.nan], [2, 1]) == 1
