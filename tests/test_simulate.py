import subprocess
import sys

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal
from systems import random_stable

import ident.lti.simulate as simulate_module
from ident.errors import ModelError, OptionError
from ident.lti.models import StateSpaceModel
from ident.lti.simulate import (
    all_pole_filter,
    estimate_initial_state,
    first_order_recursion,
    simulate,
    simulate_states,
    state_chunks,
)


def _models():
    # stable second-order oscillator (distinct poles: modal path)
    yield StateSpaceModel(
        A=[[1.5, -0.7], [1.0, 0.0]], B=[[1.0], [0.0]], C=[[1.0, 0.5]], D=[[0.2]], sample_time=0.01
    )
    # Jordan block (defective A: recursion path)
    yield StateSpaceModel(
        A=[[0.9, 1.0], [0.0, 0.9]], B=[[0.0], [1.0]], C=[[1.0, 0.0]], D=[[0.0]], sample_time=1.0
    )
    # 2x2 MIMO, third order
    yield StateSpaceModel(
        A=[[0.8, 0.1, 0.0], [0.0, 0.5, 0.2], [0.0, -0.2, 0.5]],
        B=[[1.0, 0.0], [0.0, 1.0], [0.5, 0.5]],
        C=[[1.0, 0.0, 1.0], [0.0, 1.0, 0.0]],
        D=[[0.0, 0.1], [0.0, 0.0]],
        sample_time=0.5,
    )


def _dlsim(model, u, x0):
    # reference: scipy.signal.dlsim on the same (A, B, C, D) and x0 (the plain recursion)
    _, y, x = signal.dlsim((model.A, model.B, model.C, model.D, model.sample_time), u, x0=x0)
    return y.reshape(u.shape[0], -1), x.reshape(u.shape[0], -1)


def _assert_matches(actual, desired, rtol):
    # relative to the largest value: a signal crossing zero has no relative error there
    scale = float(np.max(np.abs(desired), initial=0.0))
    assert_allclose(actual, desired, rtol=rtol, atol=rtol * scale)


def _companion(a):
    n = len(a) - 1
    A = np.zeros((n, n))
    A[0] = -np.asarray(a[1:])
    A[1:, :-1] = np.eye(n - 1)
    return StateSpaceModel(A=A, B=np.eye(n)[:, :1], C=np.eye(n)[:1], D=[[0.0]], sample_time=1.0)


@pytest.fixture
def small_blocks(monkeypatch):
    # short chunks and blocks: many chunks, several lifting levels, uneven tails
    monkeypatch.setattr(simulate_module, "_CHUNK", 1000)
    monkeypatch.setattr(simulate_module, "_BLOCK", 4)
    monkeypatch.setattr(simulate_module, "_PLAIN", 3)


@pytest.mark.parametrize("model", list(_models()))
def test_simulate_matches_scipy_dlsim(model, rng):
    u = rng.standard_normal((500, model.n_inputs))
    x0 = rng.standard_normal(model.n_states)
    y_ref, x_ref = _dlsim(model, u, x0)
    # noise-free arithmetic: agreement to rounding (1e-10 relative)
    assert_allclose(simulate(model, u, x0), y_ref, rtol=1e-10, atol=1e-10)
    assert_allclose(simulate_states(model, u, x0), x_ref, rtol=1e-10, atol=1e-10)


@pytest.mark.parametrize("n", range(1, 13))
@pytest.mark.parametrize("blocks", ["default", "small"])
def test_random_stable_systems_match_dlsim(n, blocks, request):
    if blocks == "small":
        request.getfixturevalue("small_blocks")
    rng = np.random.default_rng(100 + n)
    m, p = (1, 1) if n % 3 else (2, 3)  # every third order MIMO
    model = random_stable(200 + n, n, m, p, sample_time=0.05)
    N = 4099  # no multiple of any block or chunk length
    u = rng.standard_normal((N, m))
    x0 = rng.standard_normal(n)
    y_ref, x_ref = _dlsim(model, u, x0)
    # the same recursion; lifting adds rounding of the block-start states only
    _assert_matches(simulate(model, u, x0), y_ref, 1e-10)
    _assert_matches(simulate_states(model, u, x0), x_ref, 1e-10)


def _special_models():
    theta = 0.3
    # defective: a 3x3 Jordan block
    yield "jordan", StateSpaceModel(
        A=[[0.95, 1.0, 0.0], [0.0, 0.95, 1.0], [0.0, 0.0, 0.95]],
        B=[[0.0], [0.0], [1.0]], C=[[1.0, 0.0, 0.0]], D=[[0.0]], sample_time=1.0,
    ), 3000
    # marginally stable: an undamped pair on the unit circle (rotation by theta)
    yield "marginal", StateSpaceModel(
        A=[[np.cos(theta), -np.sin(theta)], [np.sin(theta), np.cos(theta)]],
        B=[[1.0], [0.0]], C=[[1.0, 1.0]], D=[[0.0]], sample_time=1.0,
    ), 3000
    # an integrator next to a stable pole
    yield "integrator", StateSpaceModel(
        A=[[1.0, 0.0], [0.3, 0.6]], B=[[1.0], [0.5]], C=[[0.0, 1.0]], D=[[0.1]], sample_time=1.0,
    ), 3000
    # mildly unstable pole over a short horizon (grows by 1.02**300 ~ 380)
    yield "unstable", StateSpaceModel(
        A=[[1.02, 0.1], [0.0, 0.7]], B=[[0.0], [1.0]], C=[[1.0, 0.0]], D=[[0.0]], sample_time=1.0,
    ), 300


@pytest.mark.parametrize(("name", "model", "N"), list(_special_models()), ids=lambda v: v if isinstance(v, str) else "")
@pytest.mark.parametrize("blocks", ["default", "small"])
def test_special_systems_match_dlsim(name, model, N, blocks, request):
    if blocks == "small":
        request.getfixturevalue("small_blocks")
    rng = np.random.default_rng(7)
    u = rng.standard_normal((N, 1))
    x0 = rng.standard_normal(model.n_states)
    y_ref, x_ref = _dlsim(model, u, x0)
    # same recursion as dlsim: rounding only (the marginal and unstable cases grow, hence relative)
    _assert_matches(simulate(model, u, x0), y_ref, 1e-10)
    _assert_matches(simulate_states(model, u, x0), x_ref, 1e-10)


@pytest.mark.parametrize("N", [0, 1, 2, 3, 17])
def test_short_signals(N, rng):
    model = list(_models())[2]
    u = rng.standard_normal((N, 2))
    x0 = rng.standard_normal(3)
    y = simulate(model, u, x0)
    assert y.shape == (N, 2)
    if N:
        y_ref, x_ref = _dlsim(model, u, x0)
        # rounding only
        assert_allclose(y, y_ref, rtol=1e-12, atol=1e-12)
        assert_allclose(simulate_states(model, u, x0), x_ref, rtol=1e-12, atol=1e-12)
    else:
        assert simulate_states(model, u, x0).shape == (0, 3)


def test_static_gain_model(rng):
    model = StateSpaceModel(A=np.zeros((0, 0)), B=np.zeros((0, 2)), C=np.zeros((1, 0)), D=[[2.0, -1.0]],
                            sample_time=1.0)
    u = rng.standard_normal((20, 2))
    # closed form: y = D u
    assert_allclose(simulate(model, u), u @ np.array([[2.0], [-1.0]]), rtol=1e-15, atol=0)


@pytest.mark.parametrize("roots", [[0.999, 0.998, 0.9 + 0.1j, 0.9 - 0.1j], [0.99, 0.98, 0.97]])
def test_companion_form_with_slow_poles(roots, rng):
    # an ARX model in observer form: powers of A grow ~1e5 beyond the spectral
    # radius, so lifting needs the block-start refinement
    model = _companion(np.real(np.poly(roots)))
    u = rng.standard_normal((20000, 1))
    y_ref, _ = _dlsim(model, u, np.zeros(model.n_states))
    # dlsim itself is only good to ~1e-10 here (checked against an extended-precision
    # recursion when this test was written), so 1e-8 of the largest output
    _assert_matches(simulate(model, u), y_ref, 1e-8)


def test_schur_fallback_matches_dlsim(monkeypatch, rng):
    # force the path taken when refinement cannot repair lifting
    monkeypatch.setattr(simulate_module._Recursion, "solve", lambda self, W, N, x0: None)
    monkeypatch.setattr(simulate_module, "_CHUNK", 700)
    model = random_stable(31, 5, 2, 2, sample_time=0.1)
    u = rng.standard_normal((2000, 2))
    x0 = rng.standard_normal(5)
    y_ref, x_ref = _dlsim(model, u, x0)
    # unitary change of basis, scalar recursions: rounding only
    _assert_matches(simulate(model, u, x0), y_ref, 1e-10)
    _assert_matches(simulate_states(model, u, x0), x_ref, 1e-10)


def test_schur_form_of_a_defective_matrix():
    from ident.lti.simulate import _schur

    A = np.array([[0.5, 1.0, 0.0, 0.0], [0.0, 0.5, 1.0, 0.0], [0.0, 0.0, 0.5, 0.0], [0.2, 0.0, 0.1, -0.3]])
    T, Z = _schur(A)
    # Z unitary, T upper triangular, Z T Z^H = A to rounding (definition of the Schur form)
    assert_allclose(Z.conj().T @ Z, np.eye(4), atol=1e-13)
    assert_allclose(np.tril(T, -1), 0.0, atol=0)
    assert_allclose(Z @ T @ Z.conj().T, A, atol=1e-13)
    # eigenvalues on the diagonal; the triple one of a Jordan block only to eps**(1/3)
    assert_allclose(np.sort_complex(np.diag(T)), np.sort_complex(np.array([-0.3, 0.5, 0.5, 0.5])), atol=1e-4)


def test_unexcited_unstable_mode_stays_zero(rng):
    # the unstable mode is neither excited nor started: the plain recursion keeps it at 0
    model = StateSpaceModel(A=np.diag([1.5, 0.5]), B=[[0.0], [1.0]], C=[[1.0, 1.0]], D=[[0.0]], sample_time=1.0)
    u = rng.standard_normal((70000, 1))
    y = simulate(model, u)
    y_ref, _ = _dlsim(model, u[:5000], np.zeros(2))
    # dlsim on the first samples: rounding only; no inf/nan later (0 * 1.5**k stays 0)
    assert_allclose(y[:5000], y_ref, rtol=1e-12, atol=1e-12)
    assert np.all(np.isfinite(y))


def test_state_chunks_bounded_and_contiguous(monkeypatch, rng):
    monkeypatch.setattr(simulate_module, "_CHUNK", 256)
    model = random_stable(5, 4, 2, 1, sample_time=0.1)
    u = rng.standard_normal((1100, 2))
    x0 = rng.standard_normal(4)
    parts = list(state_chunks(model.A, model.B, u, x0))
    # chunk ranges tile the samples in order
    assert [(k0, k1) for k0, k1, _ in parts] == [(0, 256), (256, 512), (512, 768), (768, 1024), (1024, 1100)]
    for k0, k1, x in parts:
        assert x.shape == (k1 - k0, 4)
        base = x
        while base.base is not None:
            base = base.base
        # working memory per chunk: one buffer of (chunk rounded up to a block) x (n + m)
        assert base.nbytes <= (256 + simulate_module._BLOCK) * (4 + 2) * 8
    _, x_ref = _dlsim(model, u, x0)
    _assert_matches(np.concatenate([x for _, _, x in parts]), x_ref, 1e-10)


def test_simulate_leaves_input_unchanged(rng):
    model = next(_models())
    u = rng.standard_normal((50, 1))
    before = u.copy()
    simulate(model, u)
    assert_allclose(u, before, rtol=0, atol=0)


def test_initial_state_recovered(rng):
    model = next(_models())
    u = rng.standard_normal((300, 1))
    x0 = np.array([2.0, -1.0])
    y = simulate(model, u, x0)
    # noise-free: exact recovery up to rounding
    assert_allclose(estimate_initial_state(model, u, y), x0, rtol=1e-8, atol=1e-9)


def test_initial_state_recovered_mimo(rng):
    model = random_stable(9, 5, 2, 2, sample_time=0.1)
    u = rng.standard_normal((400, 2))
    x0 = rng.standard_normal(5)
    y = simulate(model, u, x0)
    # noise-free and observable: exact recovery up to rounding
    assert_allclose(estimate_initial_state(model, u, y), x0, rtol=1e-7, atol=1e-8)


def test_simulate_rejects_bad_input():
    model = next(_models())
    with pytest.raises(OptionError, match="column"):
        simulate(model, np.zeros((10, 2)))
    with pytest.raises(OptionError, match="finite"):
        simulate(model, np.array([[0.0], [np.nan]]))
    cont = model.with_changes(sample_time=None)
    with pytest.raises(ModelError, match="discrete"):
        simulate(cont, np.zeros((10, 1)))
    with pytest.raises(OptionError, match="x0"):
        simulate(model, np.zeros((10, 1)), x0=[1.0])


@pytest.mark.parametrize("a", [[1.0, -0.9], [1.0, -1.5, 0.7], [1.0, -(0.8 + 0.3j)]])
def test_all_pole_filter_equals_lfilter(a, rng, monkeypatch):
    monkeypatch.setattr(simulate_module, "_POLE_BLOCK", 7)  # many blocks, carry-over between them
    r = rng.standard_normal(500) + (1j * rng.standard_normal(500) if np.iscomplexobj(np.array(a)) else 0)
    # reference: scipy.signal.lfilter([1], a, r) runs the same recursion; rounding only
    assert_allclose(all_pole_filter(np.array(a), r), signal.lfilter([1.0], a, r), rtol=1e-12, atol=1e-12)


def _random_poly(rng, na, radius):
    poles = []
    while len(poles) < na:
        if na - len(poles) >= 2 and rng.random() < 0.5:
            p = rng.uniform(0.2, radius) * np.exp(1j * rng.uniform(0.05, 3.0))
            poles += [p, p.conjugate()]
        else:
            poles.append(rng.uniform(-radius, radius))
    return np.real(np.poly(poles))


@pytest.mark.parametrize("na", range(1, 13))
@pytest.mark.parametrize("N", [1, 2, 37, 5003])
def test_all_pole_filter_random_polynomials(na, N):
    rng = np.random.default_rng(300 + na)
    a = _random_poly(rng, na, 0.97)
    r = rng.standard_normal(N)
    want = signal.lfilter([1.0], a, r)
    # reference: scipy.signal.lfilter, the same recursion; rounding only
    _assert_matches(all_pole_filter(a, r), want, 1e-10)


@pytest.mark.parametrize(
    "roots",
    [[0.999, 0.998, 0.9 + 0.1j, 0.9 - 0.1j], [0.995, 0.995, 0.995, 0.9], [0.99, 0.98, 0.97]],
)
@pytest.mark.parametrize("N", [1500, 30000])
def test_all_pole_filter_slow_poles(roots, N, rng):
    # clustered poles near 1 (a fast-sampled ARX model): the repaired paths
    a = np.real(np.poly(roots))
    r = rng.standard_normal(N)
    # lfilter itself is good to ~1e-9 here (extended-precision check when written)
    _assert_matches(all_pole_filter(a, r), signal.lfilter([1.0], a, r), 1e-8)


def test_all_pole_filter_cascade_fallback(monkeypatch, rng):
    # force the cascade of first-order sections (taken when the block repair fails)
    monkeypatch.setattr(simulate_module, "_GROWTH_OK", 0.0)
    monkeypatch.setattr(simulate_module, "_SHORT", 0)
    monkeypatch.setattr(simulate_module._PoleSolver, "solve_refined", lambda self, r: None)
    a = _random_poly(np.random.default_rng(5), 6, 0.9)
    r = rng.standard_normal(3000)
    # roots of well-separated poles are accurate: rounding only
    _assert_matches(all_pole_filter(a, r), signal.lfilter([1.0], a, r), 1e-10)


def test_all_pole_filter_complex_coefficients_long(rng):
    a = np.poly([0.9 + 0.2j, 0.5 - 0.4j, -0.3])
    r = rng.standard_normal(20000) + 1j * rng.standard_normal(20000)
    # reference: scipy.signal.lfilter with complex coefficients; rounding only
    _assert_matches(all_pole_filter(a, r), signal.lfilter([1.0], a, r), 1e-10)


def test_all_pole_filter_edge_cases():
    # na = 0: the identity; N = 0: empty
    assert_allclose(all_pole_filter(np.array([1.0]), np.array([1.0, 2.0])), [1.0, 2.0], rtol=0, atol=0)
    assert all_pole_filter(np.array([1.0, -0.5]), np.zeros(0)).shape == (0,)


@pytest.mark.parametrize("pole", [0.9, -0.5, 0.7 + 0.4j, 0.0, 1.0])
def test_first_order_recursion_equals_lfilter(pole, rng):
    drive = rng.standard_normal((300, 3))
    start = rng.standard_normal(3)
    x, nxt = first_order_recursion(pole, drive, start)
    # reference: scipy.signal.lfilter([0, 1], [1, -pole], drive, axis=0, zi=start), same recursion
    want, zf = signal.lfilter([0.0, 1.0], [1.0, -pole], drive, axis=0, zi=start[None, :].astype(complex))
    assert_allclose(x, want if np.iscomplexobj(np.array(pole)) else want.real, rtol=1e-12, atol=1e-12)
    assert_allclose(nxt, zf[0] if np.iscomplexobj(np.array(pole)) else zf[0].real, rtol=1e-12, atol=1e-12)


def test_first_order_recursion_complex_drive_long(rng):
    drive = rng.standard_normal(70000) + 1j * rng.standard_normal(70000)  # more than one chunk
    x, nxt = first_order_recursion(0.99 * np.exp(0.1j), drive, 0.5 - 1j)
    want, zf = signal.lfilter([0.0, 1.0], [1.0, -0.99 * np.exp(0.1j)], drive, zi=[0.5 - 1j])
    # the same recursion; lifting rounds the block starts only
    _assert_matches(x, want, 1e-10)
    assert_allclose(nxt, zf[0], rtol=1e-10)
    assert x.shape == (70000,) and np.shape(nxt) == ()


def test_first_order_recursion_empty():
    x, nxt = first_order_recursion(0.5, np.zeros((0, 2)), np.array([1.0, 2.0]))
    # no samples: the start carries over unchanged
    assert x.shape == (0, 2)
    assert_allclose(nxt, [1.0, 2.0], rtol=0, atol=0)


def test_import_does_not_load_scipy():
    code = "import sys, ident.lti.simulate; print('scipy' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


@pytest.mark.parametrize(("n", "p"), [(1, 1), (3, 2), (10, 1)])
@pytest.mark.parametrize("count", [0, 1, 2, 7, 200, 513])
def test_free_response_matrix_stacks_c_times_powers_of_a(n, p, count):
    # oracle: numpy.linalg.matrix_power for every k (definition, no source)
    from ident.lti.simulate import free_response_matrix

    rng = np.random.default_rng(n + 10 * p)
    A = rng.standard_normal((n, n))
    A *= 0.99 / np.max(np.abs(np.linalg.eigvals(A)))
    model = StateSpaceModel(A=A, B=np.ones((n, 1)), C=rng.standard_normal((p, n)), D=np.zeros((p, 1)),
                            sample_time=1.0)
    got = free_response_matrix(model, count)
    assert got.shape == (count * p, n)
    if count:
        want = np.vstack([model.C @ np.linalg.matrix_power(A, k) for k in range(count)])
        assert_allclose(got, want, rtol=0, atol=1e-13 * np.max(np.abs(want)))


@pytest.mark.parametrize(("n", "p"), [(1, 1), (3, 2)])
@pytest.mark.parametrize("count", [1, 4096, 10_001])
def test_add_free_response_is_scipy_dlsim_from_x0_with_zero_input(n, p, count, monkeypatch):
    # oracle: scipy.signal.dlsim with x0 and a zero input; blocks of 4096 and of 1000 samples
    import ident.lti.simulate as sim

    rng = np.random.default_rng(3 * n + p)
    A = rng.standard_normal((n, n))
    A *= 0.999 / np.max(np.abs(np.linalg.eigvals(A)))
    C = rng.standard_normal((p, n))
    model = StateSpaceModel(A=A, B=np.ones((n, 1)), C=C, D=np.zeros((p, 1)), sample_time=1.0)
    x0 = rng.standard_normal(n)
    _, want, _ = signal.dlsim((A, np.ones((n, 1)), C, np.zeros((p, 1)), 1.0), np.zeros(count), x0=x0)
    base = rng.standard_normal((count, p))
    for block in (4096, 1000):
        monkeypatch.setattr(sim, "_FREE_BLOCK", block)
        got = sim.add_free_response(model, x0, base.copy())
        assert_allclose(got - base, want.reshape(count, p), rtol=0, atol=1e-11 * np.max(np.abs(want)))
