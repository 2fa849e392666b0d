import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from ident.errors import ModelError, OptionError
from ident.models import StateSpaceModel
from ident.simulate import estimate_initial_state, simulate, simulate_states


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


@pytest.mark.parametrize("model", list(_models()))
def test_simulate_matches_scipy_dlsim(model, rng):
    # reference: scipy.signal.dlsim on the same (A, B, C, D) and x0
    u = rng.standard_normal((500, model.n_inputs))
    x0 = rng.standard_normal(model.n_states)
    _, y_ref, x_ref = signal.dlsim(
        (model.A, model.B, model.C, model.D, model.sample_time), u, x0=x0
    )
    # noise-free arithmetic: agreement to rounding (1e-10 relative)
    assert_allclose(simulate(model, u, x0), y_ref, rtol=1e-10, atol=1e-10)
    assert_allclose(simulate_states(model, u, x0), x_ref, rtol=1e-10, atol=1e-10)


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


def test_simulate_rejects_bad_input():
    model = next(_models())
    with pytest.raises(OptionError, match="column"):
        simulate(model, np.zeros((10, 2)))
    with pytest.raises(OptionError, match="finite"):
        simulate(model, np.array([[0.0], [np.nan]]))
    cont = model.with_changes(sample_time=None)
    with pytest.raises(ModelError, match="discrete"):
        simulate(cont, np.zeros((10, 1)))


@pytest.mark.parametrize("a", [[1.0, -0.9], [1.0, -1.5, 0.7], [1.0, -(0.8 + 0.3j)]])
def test_all_pole_filter_equals_lfilter(a, rng, monkeypatch):
    import ident.simulate as simulate_module
    from ident.simulate import all_pole_filter

    monkeypatch.setattr(simulate_module, "_POLE_BLOCK", 7)  # many blocks, carry-over between them
    r = rng.standard_normal(500) + (1j * rng.standard_normal(500) if np.iscomplexobj(np.array(a)) else 0)
    # reference: scipy.signal.lfilter([1], a, r) runs the same recursion; rounding only
    assert_allclose(all_pole_filter(np.array(a), r), signal.lfilter([1.0], a, r), rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("pole", [0.9, -0.5, 0.7 + 0.4j, 0.0])
def test_first_order_recursion_equals_lfilter(pole, rng):
    from ident.simulate import first_order_recursion

    drive = rng.standard_normal((300, 3))
    start = rng.standard_normal(3)
    x, nxt = first_order_recursion(pole, drive, start)
    # reference: scipy.signal.lfilter([0, 1], [1, -pole], drive, axis=0, zi=start), same recursion
    want, zf = signal.lfilter([0.0, 1.0], [1.0, -pole], drive, axis=0, zi=start[None, :].astype(complex))
    assert_allclose(x, want if np.iscomplexobj(np.array(pole)) else want.real, rtol=1e-12, atol=1e-12)
    assert_allclose(nxt, zf[0] if np.iscomplexobj(np.array(pole)) else zf[0].real, rtol=1e-12, atol=1e-12)
