"""Tests of realisations: canonical, modal, balanced, minimal (ident.lti.realization)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import linalg, signal, stats
from systems import SETTINGS, random_stable

from ident.errors import ModelError, OptionError
from ident.lti.analysis import frequency_response
from ident.lti.models import OperatingPoint, StateSpaceModel
from ident.lti.realization import (
    REALIZATIONS,
    balanced_realization,
    controllable_form,
    minimal_realization,
    modal_form,
    observable_form,
    realize,
    similarity_transform,
)

FREQS = np.array([0.0, 0.05, 0.3, 1.0, 2.5, 4.0])


def rel_err(a, b) -> float:
    return float(np.max(np.abs(a - b)) / np.max(np.abs(b)))


def assert_same_roots(actual, desired, rtol):
    """Match each desired root to a distinct nearest actual root (order-free)."""
    actual = list(np.asarray(actual, dtype=complex))
    assert len(actual) == len(desired)
    for r in desired:
        k = int(np.argmin([abs(a - r) for a in actual]))
        assert abs(actual[k] - r) <= rtol * max(1.0, abs(r)), (actual[k], r)
        actual.pop(k)


def gramians(model: StateSpaceModel):
    """Controllability and observability Gramians with scipy.linalg Lyapunov solvers."""
    A, B, C = model.A, model.B, model.C
    if model.is_discrete:
        return (
            linalg.solve_discrete_lyapunov(A, B @ B.T),
            linalg.solve_discrete_lyapunov(A.T, C.T @ C),
        )
    return (
        linalg.solve_continuous_lyapunov(A, -B @ B.T),
        linalg.solve_continuous_lyapunov(A.T, -C.T @ C),
    )


def test_similarity_transform_changes_coordinates_only():
    model = random_stable(1, 4, 2, 2, 0.1)
    T = np.random.default_rng(1).standard_normal((4, 4)) + 3 * np.eye(4)
    out = similarity_transform(model, T)
    # closed form: A' = T^-1 A T, C' = C T
    assert_allclose(out.A, np.linalg.solve(T, model.A @ T), rtol=1e-12, atol=1e-12)
    assert_allclose(out.C, model.C @ T, rtol=1e-14)
    # invariants: poles (numpy.linalg.eigvals) and frequency response
    assert_same_roots(out.poles(), np.linalg.eigvals(model.A), rtol=1e-10)
    assert rel_err(frequency_response(out, FREQS), frequency_response(model, FREQS)) < 1e-12
    with pytest.raises(OptionError, match="invertible"):
        similarity_transform(model, np.ones((4, 4)))


@SETTINGS
@given(
    seed=st.integers(0, 2**32 - 1),
    n=st.integers(1, 12),
    m=st.integers(1, 2),
    p=st.integers(1, 2),
    discrete=st.booleans(),
)
def test_modal_form_same_eigenvalues_and_response(seed, n, m, p, discrete):
    model = random_stable(seed, n, m, p, 0.1 if discrete else None)
    modal = modal_form(model)
    # oracle: numpy.linalg.eigvals of the original A; simple poles: ~1e-12
    assert_same_roots(modal.poles(), np.linalg.eigvals(model.A), rtol=1e-9)
    assert rel_err(frequency_response(modal, FREQS), frequency_response(model, FREQS)) < 1e-10
    # structure: block diagonal with 1x1 and 2x2 blocks (entries beyond the first
    # off-diagonals are exactly zero), 2x2 blocks of the form [[s, w], [-w, s]]
    A = modal.A
    assert np.all(np.triu(A, 2) == 0) and np.all(np.tril(A, -2) == 0)
    for k in range(n - 1):
        if A[k, k + 1] != 0:
            assert_allclose(A[k + 1, k], -A[k, k + 1], rtol=1e-12)
            assert_allclose(A[k + 1, k + 1], A[k, k], rtol=1e-12)
            assert A[k, k + 1] > 0


def test_modal_form_refuses_jordan_block():
    model = StateSpaceModel(A=[[-1.0, 1.0], [0.0, -1.0]], B=[[0.0], [1.0]], C=[[1.0, 0.0]], D=[[0.0]])
    with pytest.raises(ModelError, match="repeated"):
        modal_form(model)


@SETTINGS
@given(
    seed=st.integers(0, 2**32 - 1),
    n=st.integers(1, 12),
    m=st.integers(1, 2),
    p=st.integers(1, 2),
    discrete=st.booleans(),
)
def test_balanced_realization_against_lyapunov_gramians(seed, n, m, p, discrete):
    model = random_stable(seed, n, m, p, 0.2 if discrete else None)
    result = balanced_realization(model)
    Wc, Wo = gramians(model)
    # Hankel singular values: sqrt(eig(Wc Wo)), Gramians from
    # scipy.linalg.solve_continuous_lyapunov / solve_discrete_lyapunov
    ref = np.sort(np.sqrt(np.abs(np.linalg.eigvals(Wc @ Wo))))[::-1]
    hsv = result.hankel_singular_values
    ref = ref[: hsv.size]
    # the eigenvalues of the product Wc Wo carry an absolute error ~eps * hsv0^2, so
    # the reference square roots are good to ~sqrt(eps) * hsv0 only: 1e-7 * hsv0
    assert_allclose(hsv, ref, rtol=1e-6, atol=1e-7 * ref[0])
    # the balanced model's own Gramians are both diag(hsv)
    Wc_b, Wo_b = gramians(result.model)
    scale = hsv[0]
    assert_allclose(Wc_b, np.diag(hsv), atol=1e-8 * scale)
    assert_allclose(Wo_b, np.diag(hsv), atol=1e-8 * scale)
    assert rel_err(frequency_response(result.model, FREQS), frequency_response(model, FREQS)) < 1e-8


def test_balanced_refuses_unstable_model_naming_the_pole():
    model = StateSpaceModel(A=[[1.2, 0.0], [0.0, 0.5]], B=[[1.0], [1.0]], C=[[1.0, 1.0]],
                            D=[[0.0]], sample_time=0.1)
    with pytest.raises(ModelError, match=r"pole 1\.2 is on or outside the unit circle"):
        balanced_realization(model)


def non_minimal(seed: int, n: int, extra_c: int, extra_o: int, discrete: bool):
    """Minimal model plus uncontrollable and unobservable states, hidden by a similarity."""
    base = random_stable(seed, n, 2, 2, 0.1 if discrete else None)
    rng = np.random.default_rng(seed + 1)
    k = n + extra_c + extra_o
    A = np.zeros((k, k))
    A[:n, :n] = base.A
    lam = rng.uniform(0.2, 0.8, extra_c + extra_o)
    if not discrete:
        lam = -lam
    A[n:, n:] = np.diag(lam)
    # uncontrollable states feed the output; unobservable states are driven by u
    A[:n, n : n + extra_c] = rng.standard_normal((n, extra_c))
    B = np.zeros((k, 2))
    B[:n] = base.B
    B[n + extra_c :] = rng.standard_normal((extra_o, 2))
    C = np.zeros((2, k))
    C[:, :n] = base.C
    C[:, n : n + extra_c] = rng.standard_normal((2, extra_c))
    T = stats.ortho_group.rvs(k, random_state=rng) @ np.diag(rng.uniform(0.5, 2.0, k))
    Ti = np.linalg.inv(T)
    full = StateSpaceModel(A=Ti @ A @ T, B=Ti @ B, C=C @ T, D=base.D, sample_time=base.sample_time)
    return base, full


@SETTINGS
@given(
    seed=st.integers(0, 2**31),
    n=st.integers(1, 8),
    extra_c=st.integers(0, 3),
    extra_o=st.integers(0, 3),
    discrete=st.booleans(),
)
def test_minimal_realization_removes_hidden_states(seed, n, extra_c, extra_o, discrete):
    base, full = non_minimal(seed, n, extra_c, extra_o, discrete)
    reduced = minimal_realization(full)
    # oracle: the minimal model the states were added to (closed form of the construction)
    assert reduced.n_states == n
    assert_same_roots(reduced.poles(), np.linalg.eigvals(base.A), rtol=1e-7)
    assert rel_err(frequency_response(reduced, FREQS), frequency_response(base, FREQS)) < 1e-9


def test_minimal_realization_tol_is_checked():
    with pytest.raises(OptionError, match="tol"):
        minimal_realization(random_stable(1, 2, 1, 1, None), tol=-1.0)


@pytest.mark.parametrize("form", ["controllable", "observable"])
def test_canonical_forms_match_scipy_tf2ss(form):
    num, den = [0.5, -0.2, 0.1], [1.0, -1.2, 0.61, -0.05]  # invented third-order plant
    A, B, C, D = signal.tf2ss(num, den)
    model = StateSpaceModel(A=A, B=B, C=C, D=D, sample_time=0.01)
    # scramble the coordinates, then ask for the canonical form back
    T = np.random.default_rng(3).standard_normal((3, 3)) + 2 * np.eye(3)
    scrambled = similarity_transform(model, T)
    out = controllable_form(scrambled) if form == "controllable" else observable_form(scrambled)
    # canonical forms are unique, so here the matrices themselves are the oracle:
    # scipy.signal.tf2ss gives the controllable form; the observable one is its dual
    if form == "controllable":
        assert_allclose(out.A, A, atol=1e-12)
        assert_allclose(out.B, B, atol=1e-12)
        assert_allclose(out.C, C, atol=1e-12)
    else:
        assert_allclose(out.A, A.T, atol=1e-12)
        assert_allclose(out.B, C.T, atol=1e-12)
        assert_allclose(out.C, B.T, atol=1e-12)
    assert_allclose(out.D, D, atol=1e-15)


def test_canonical_forms_need_siso():
    with pytest.raises(ModelError, match="one input and one output"):
        controllable_form(random_stable(1, 3, 2, 1, None))


@pytest.mark.parametrize("form", REALIZATIONS)
def test_realize_keeps_behaviour_and_metadata(form):
    op = OperatingPoint(inputs=[0.3], outputs=[1.0])
    model = random_stable(8, 5, 1, 1, 0.05).with_changes(
        inputs=("heater",), outputs=("temp",), output_units=("degC",), operating_point=op
    )
    out = realize(model, form)
    assert out.inputs == ("heater",) and out.output_units == ("degC",)
    assert out.sample_time == 0.05
    assert_allclose(out.operating_point.inputs, [0.3], rtol=0)
    # companion forms at order 5: ~1e-12 relative
    assert rel_err(frequency_response(out, FREQS), frequency_response(model, FREQS)) < 1e-9
    with pytest.raises(OptionError, match="form must be one of"):
        realize(model, "diagonal")


@pytest.mark.parametrize("form", REALIZATIONS)
def test_static_gain_realizations(form):
    # closed form: no states, so every realisation is the gain itself
    static = StateSpaceModel(A=np.zeros((0, 0)), B=np.zeros((0, 1)), C=np.zeros((1, 0)), D=[[2.0]])
    out = realize(static, form)
    assert out.n_states == 0
    assert_allclose(out.D, [[2.0]], rtol=0)


def test_balanced_truncation_matches_the_scipy_balanced_realization(rng):
    # Moore (1981); Laub et al. (1987): the numpy-only truncation used by the search keeps
    # the leading states of the balanced realisation computed with scipy's Lyapunov
    # solvers (ident.lti.realization), up to the signs of the states: same Hankel singular
    # values, same truncated transfer function, and the H-infinity error within twice the
    # sum of the dropped Hankel singular values
    from ident.lti.truncation import balanced_truncation, stein_gramian

    poles = [0.95, 0.7, -0.3, 0.5 + 0.4j, 0.5 - 0.4j]
    A = np.diag([0.95, 0.7, -0.3, 0.0, 0.0])
    A[3:, 3:] = [[0.5, 0.4], [-0.4, 0.5]]
    Q = rng.standard_normal((5, 5))
    A = Q @ A @ np.linalg.inv(Q)
    model = StateSpaceModel(A, rng.standard_normal((5, 2)), rng.standard_normal((2, 5)), np.zeros((2, 2)), 0.1)
    assert_allclose(np.sort_complex(np.linalg.eigvals(A)), np.sort_complex(np.array(poles)), atol=1e-10)
    reference = balanced_realization(model)
    Wc = stein_gramian(A, model.B @ model.B.T)
    assert_allclose(Wc, linalg.solve_discrete_lyapunov(A, model.B @ model.B.T), rtol=1e-7)  # cond(Q) ~ 1e2
    hsv = reference.hankel_singular_values
    full = balanced_truncation(model, 5)  # balanced, nothing dropped: both Gramians diag(hsv)
    for W in (linalg.solve_discrete_lyapunov(full.A.T, full.C.T @ full.C),
              linalg.solve_discrete_lyapunov(full.A, full.B @ full.B.T)):
        assert_allclose(W, np.diag(hsv), rtol=1e-6, atol=1e-6 * hsv[0])
    for r in (1, 3, 4):
        small = balanced_truncation(model, r)
        top = reference.model
        leading = StateSpaceModel(top.A[:r, :r], top.B[:r], top.C[:, :r], top.D, 0.1)
        for z in np.exp(1j * np.linspace(0.0, np.pi, 400)):
            assert_allclose(_tf(small, z), _tf(leading, z), rtol=1e-6, atol=1e-9)
        w = np.linspace(0.0, np.pi, 400)
        err = max(np.linalg.norm(_tf(model, z) - _tf(small, z), 2) for z in np.exp(1j * w))
        assert err <= 2 * hsv[r:].sum() * (1 + 1e-6)


def _tf(model, z):
    n = model.n_states
    return model.C @ np.linalg.solve(z * np.eye(n) - model.A, model.B) + model.D


def test_balanced_truncation_refuses_unstable_models():
    from ident.lti.truncation import balanced_truncation

    with pytest.raises(ModelError, match="stable"):
        balanced_truncation(StateSpaceModel(np.diag([1.01, 0.5]), np.ones((2, 1)), np.ones((1, 2)),
                                            np.zeros((1, 1)), 1.0), 1)
