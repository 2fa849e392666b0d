"""Levenberg-Marquardt driver: against scipy.optimize.least_squares, monotone loss, admissible set."""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from ident.estimate.gauss_newton import Linearization, minimize


def _problem(residual, jacobian, admissible=lambda x: True):
    def loss(x):
        return math.inf if not admissible(x) else float(residual(x) @ residual(x))

    def linearize(x):
        J, e = jacobian(x), residual(x)
        q, r = np.linalg.qr(J)
        return Linearization(R=r, z=q.T @ e, loss=float(e @ e))

    def step(x, h, lin):
        return x + h

    return loss, linearize, step


def _rosenbrock(x):
    return np.array([10.0 * (x[1] - x[0] ** 2), 1.0 - x[0]])


def _rosenbrock_jac(x):
    return np.array([[-20.0 * x[0], 10.0], [-1.0, 0.0]])


def test_rosenbrock_matches_scipy_least_squares():
    from scipy.optimize import least_squares

    x0 = np.array([-1.2, 1.0])
    res = minimize(x0, *_problem(_rosenbrock, _rosenbrock_jac), max_iterations=200, gtol=1e-30)
    ref = least_squares(_rosenbrock, x0, jac=_rosenbrock_jac, method="lm", xtol=1e-14, ftol=1e-14)
    # the minimum is (1, 1) (closed form); scipy's MINPACK LM finds the same point
    assert_allclose(res.point, ref.x, atol=1e-7)
    assert_allclose(res.point, [1.0, 1.0], atol=1e-7)
    assert res.converged


def test_loss_never_increases_and_history_is_recorded():
    rng = np.random.default_rng(3)
    t = np.linspace(0, 4, 60)
    y = 2.5 * np.exp(-1.3 * t) + 0.01 * rng.standard_normal(t.size)

    def residual(x):
        return y - x[0] * np.exp(-x[1] * t)

    def jac(x):
        return -np.column_stack([np.exp(-x[1] * t), -x[0] * t * np.exp(-x[1] * t)])

    res = minimize(np.array([1.0, 0.2]), *_problem(residual, jac), max_iterations=100, gtol=1e-20)
    assert np.all(np.diff(res.history) <= 0.0)
    assert res.history[0] == res.initial_loss and res.history[-1] == res.loss
    from scipy.optimize import curve_fit

    ref, _ = curve_fit(lambda tt, a, b: a * np.exp(-b * tt), t, y, p0=[1.0, 0.2])
    assert_allclose(res.point, ref, rtol=1e-6)  # scipy.optimize.curve_fit on the same data


def test_inadmissible_points_are_never_accepted_and_the_boundary_is_reported():
    # minimum of (x - 2)^2 at 2, but only x < 1 is admissible
    loss, linearize, step = _problem(lambda x: np.array([x[0] - 2.0]), lambda x: np.array([[1.0]]),
                                     admissible=lambda x: x[0] < 1.0)
    res = minimize(np.array([0.0]), loss, linearize, step, max_iterations=200, gtol=1e-30)
    assert res.point[0] < 1.0
    assert res.point[0] > 0.99  # creeps up to the edge of the admissible set
    assert res.stop_reason == "boundary"
    assert res.rejected_inadmissible > 0


def test_an_inadmissible_start_is_refused():
    loss, linearize, step = _problem(lambda x: x, lambda x: np.eye(1), admissible=lambda x: False)
    with pytest.raises(ValueError, match="not admissible"):
        minimize(np.array([1.0]), loss, linearize, step)
