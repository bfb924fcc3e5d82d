"""The closed-form batch model against the casadi derivation, and the two backends against each other."""

from __future__ import annotations

import numpy as np
import pytest

from upswing.model.dynamics import model_for
from upswing.verification import kernels
from upswing.verification.simulate import generalized_input_map


def _batch(r, n=64, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(0.0, 2.0, (n, r.n_states))
    U = rng.normal(0.0, 1.0, (n, r.n_inputs))
    P = np.tile(r.parameter_vector(), (n, 1)) * rng.uniform(0.8, 1.2, (n, 16))
    P[:, 2] = np.minimum(P[:, 2], P[:, 1])
    P[:, 8] = np.minimum(P[:, 8], P[:, 7])
    return X, U, P


@pytest.mark.skipif(not kernels.HAVE_NUMBA, reason="numba not installed")
def test_sincos_matches_libm():
    # Reference: numpy's sin/cos (the C library); fdlibm's kernels are accurate to < 1 ulp (Sun, 1993), the
    # two-part reduction adds about one more ulp for |x| < 1e3: 4e-16 absolute covers 2 ulp of values <= 1.
    from numba import njit

    f = njit(kernels.sincos)
    x = np.concatenate([np.linspace(-1e3, 1e3, 20001), np.pi / 4 * np.arange(-40, 41)])
    s, c = np.array([f(v) for v in x]).T
    assert np.max(np.abs(s - np.sin(x))) < 4e-16 * 2
    assert np.max(np.abs(c - np.cos(x))) < 4e-16 * 2


def test_right_hand_side_matches_casadi(demo_rig):
    # Reference: the Lagrangian derivation in casadi (upswing.model.dynamics), an independent symbolic route.
    # 1e-12 relative: both are double-precision evaluations of the same equations with different operation order.
    X, U, P = _batch(demo_rig)
    ref = model_for(demo_rig).rhs_batch(X, U, P)
    T = generalized_input_map(demo_rig) @ U.T
    got = kernels._np_derivative(np.array(X.T, order="C"), T, kernels.plant_coefficients(P),
                                 demo_rig.base == "cart").T
    assert np.max(np.abs(got - ref)) <= 1e-12 * np.max(np.abs(ref))


def test_monitors_match_casadi(demo_rig):
    # Base load against casadi's Newton-Euler expression and kinetic energy against casadi's Lagrangian T.
    X, U, P = _batch(demo_rig, n=16, seed=1)
    model = model_for(demo_rig)
    S = np.array(X.T, order="C")
    T = np.ascontiguousarray(generalized_input_map(demo_rig) @ U.T)
    M = np.empty((5, X.shape[0]))
    kernels.advance_numpy(S.copy(), T, kernels.plant_coefficients(P), 1e-4, 1, M)
    for i in range(X.shape[0]):
        load = np.asarray(model.base_load(X[i], U[i], P[i])).ravel()
        energy = np.asarray(model.energy(X[i], P[i])).ravel()
        scale = max(1.0, np.max(np.abs(load)))
        assert np.allclose(M[:3, i], load, rtol=0, atol=1e-11 * scale)  # same equations, rounding only
        assert M[4, i] == pytest.approx(energy[0], rel=1e-12, abs=1e-12)


@pytest.mark.skipif(not kernels.HAVE_NUMBA, reason="numba not installed")
def test_numba_backend_matches_numpy_backend(demo_rig):
    # The compiled path against the plain numpy path on the same inputs: identical algebra, so agreement to
    # rounding (the polynomial sin/cos differs from libm by an ulp or two; 1e-12 leaves ample room over 40 steps).
    X, U, P = _batch(demo_rig, n=257, seed=2)
    T = np.ascontiguousarray(generalized_input_map(demo_rig) @ U.T)
    C = kernels.plant_coefficients(P)
    S1, S2 = np.array(X.T, order="C"), np.array(X.T, order="C")
    M1, M2 = np.empty((5, 257)), np.empty((5, 257))
    kernels.advance_numba(S1, T, C, 1e-3, 10, M1)
    kernels.advance_numpy(S2, T, C, 1e-3, 10, M2)
    assert np.max(np.abs(S1 - S2)) < 1e-12 * max(1.0, np.max(np.abs(S2)))
    assert np.max(np.abs(M1 - M2)) < 1e-12 * max(1.0, np.max(np.abs(M2)))


@pytest.mark.skipif(not kernels.HAVE_NUMBA, reason="numba not installed")
@pytest.mark.parametrize("name", ["acrobot", "cart-double"])
def test_whole_simulation_numba_matches_numpy(name):
    # The compiled sample steps (reading, actuator limits with the acrobot's motor line, bounds and peaks) and
    # kernels against their plain numpy forms, on a batch where some rollouts hold and some fall, run into the
    # end stop or saturate. Quantization is off: a one-ulp difference (polynomial sin/cos) could flip a count and
    # make the two runs differ for real; the seeded sensor noise is the same in both. 1e-9 relative over 0.4 s of
    # closed loop: rounding amplified by at most the unstable modes' growth, e^(13 * 0.4) ~ 200.
    from conftest import rig

    from upswing.verification.controllers import balance_controller
    from upswing.verification.simulate import SimulationSetup, simulate

    r = rig(name)
    controller = balance_controller(r)
    rng = np.random.default_rng(4)
    nq = r.n_states // 2
    x0 = np.zeros((40, r.n_states))
    x0[:, nq - 2:nq] = rng.uniform(-0.5, 0.5, (40, 2))  # from well inside to well outside the catch range
    x0[:, -2:] = rng.uniform(-3.0, 3.0, (40, 2))
    if r.cart is not None:
        x0[:5, 0] = 0.39  # 2 cm from the end stop
    runs = [simulate(r, controller, x0, setup=SimulationSetup(horizon=0.4, quantize=False, backend=b), seed=2)
            for b in ("numba", "numpy")]
    fast, ref = runs
    assert len(set(ref.status.tolist())) >= 2, ref.status  # more than one outcome really occurs
    assert np.array_equal(fast.status, ref.status) and np.array_equal(fast.end_time, ref.end_time)
    for field in ("final_error", "peak_input", "rms_input", "peak_request", "saturated_time", "peak_speed",
                  "peak_rail", "peak_monitors", "peak_force", "hold_error", "settle_time"):
        a, b = getattr(fast, field), getattr(ref, field)
        assert np.allclose(a, b, rtol=1e-9, atol=1e-9 * max(1.0, float(np.max(np.abs(b))))), field
