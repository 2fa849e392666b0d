"""The numpy-only helpers of ident.lti._linalg against scipy.linalg (the reference)."""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import linalg

from ident.lti._linalg import block_diag, column_norms, column_stds, column_sums, solve_upper


@pytest.mark.parametrize("k", [1, 2, 7, 30])
def test_solve_upper_equals_scipy(k, rng):
    R = np.triu(rng.standard_normal((k, k))) + 3.0 * np.eye(k)
    b = rng.standard_normal((k, 3))
    # scipy.linalg.solve_triangular is the reference; both are back substitution
    assert_allclose(solve_upper(R, b), linalg.solve_triangular(R, b), rtol=1e-12, atol=1e-14)
    assert_allclose(solve_upper(R, b[:, 0]), linalg.solve_triangular(R, b[:, 0]), rtol=1e-12, atol=1e-14)


def test_solve_upper_ignores_lower_triangle(rng):
    R = np.triu(rng.standard_normal((5, 5))) + 2.0 * np.eye(5)
    noisy = R + np.tril(rng.standard_normal((5, 5)), -1)
    b = rng.standard_normal(5)
    assert_allclose(solve_upper(noisy, b), linalg.solve_triangular(R, b), rtol=1e-12)


def test_block_diag_equals_scipy(rng):
    blocks = [rng.standard_normal((2, 3)), np.zeros((1, 0)), rng.standard_normal((1, 1)), np.zeros((0, 2))]
    # scipy.linalg.block_diag is the reference, empty blocks included
    assert_allclose(block_diag(blocks), linalg.block_diag(*blocks))


@pytest.mark.parametrize("shape", [(1000, 1), (12345, 3), (7, 5), (0, 2)])
def test_column_reductions_equal_numpy(shape, rng):
    x = rng.standard_normal(shape) * 1e3 + 5.0
    # numpy's own axis-0 reductions are the reference
    assert_allclose(column_sums(x), x.sum(axis=0), rtol=1e-13, atol=1e-9)
    assert_allclose(column_norms(x), np.linalg.norm(x, axis=0), rtol=1e-13)
    assert column_sums(x).shape == (shape[1],)
    if shape[0]:
        assert_allclose(column_stds(x), x.std(axis=0), rtol=1e-12)
