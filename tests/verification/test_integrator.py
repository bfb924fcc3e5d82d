"""The batch integrator against scipy's DOP853, RK4's order, and energy conservation."""

from __future__ import annotations

import numpy as np
from conftest import frictionless, rig
from scipy.integrate import solve_ivp

from upswing.model.dynamics import model_for
from upswing.verification.controllers import balance_controller
from upswing.verification.simulate import SimulationSetup, generalized_input_map, simulate


class Zero:
    """A controller that always asks for zero input (for open-loop checks)."""

    measurement = "state"

    def __init__(self, rate: float, m: int) -> None:
        self.sample_rate, self.m = rate, m

    def start(self, y):
        return np.zeros((y.shape[0], 0))

    def step(self, t, y, memory):
        return np.zeros((y.shape[0], self.m)), memory


def reference_closed_loop(r, controller, x0, horizon):
    """The plain loop a user would write: one rollout, scipy DOP853 between samples, input held, clipped to peak."""
    model = model_for(r)
    p = r.parameter_vector()
    Ts = 1.0 / controller.sample_rate
    x = np.array(x0, dtype=float)
    states = [x.copy()]
    memory = controller.start(x[None, :] * 0.0 + _error(r, x)[None, :])
    for k in range(round(horizon / Ts)):
        u, memory = controller.step(k * Ts, _error(r, x)[None, :], memory)
        u = np.clip(u[0], -r.peak_inputs, r.peak_inputs)
        sol = solve_ivp(lambda t, s, u=u: model.rhs(s, u, p), (0.0, Ts), x, method="DOP853", rtol=1e-10,
                        atol=1e-12)
        x = sol.y[:, -1]
        states.append(x.copy())
    return np.array(states)


def _error(r, x):
    e = x.copy()
    for i, s in enumerate(r.state_names):
        if s in ("theta1", "theta2"):
            e[i] = np.pi - np.mod(np.pi - e[i], 2 * np.pi)
    return e


def test_closed_loop_matches_dop853():
    # Reference: scipy's DOP853 (Hairer, Norsett & Wanner 1993) at rtol 1e-10, a general-purpose integrator.
    # Coulomb friction is off: its sign switch has no smooth solution, and RK4's order needs one.
    # Tolerance 1e-6 rad / rad/s: the step rule aims at ~1e-8 (h Omega <= 0.05); 100x margin, still far below
    # one encoder count (1.5e-3 rad).
    for name in ("acrobot", "cart-double"):
        r = frictionless(rig(name))
        controller = balance_controller(r, measurement="state")
        x0 = np.zeros((2, r.n_states))
        nq = r.n_states // 2
        x0[0, nq - 2:nq] = [0.03, -0.05]
        x0[1, nq - 2:nq] = [-0.02, 0.08]
        res = simulate(r, controller, x0, setup=SimulationSetup(horizon=1.0, record=True))
        for i in range(2):
            ref = reference_closed_loop(r, controller, x0[i], 1.0)
            assert np.max(np.abs(res.states[:, i, :] - ref)) < 1e-6, name


def test_rk4_is_fourth_order():
    # Classical RK4 theory: the global error is O(h^4), so halving h divides it by 2^4 = 16 (Butcher, 2016,
    # Numerical Methods for ODEs, ch. 3). A large open-loop swing makes the error large enough to measure;
    # ratios in [13, 19] allow for the higher-order terms at these steps.
    r = frictionless(rig("acrobot"), viscous=False)
    model = model_for(r)
    x0 = np.array([2.0, -1.0, 0.0, 0.0])
    ref = solve_ivp(lambda t, s: model.rhs(s, np.zeros(1), r.parameter_vector()), (0, 0.5), x0, method="DOP853",
                    rtol=1e-12, atol=1e-12).y[:, -1]
    errors = []
    for nsub in (2, 4, 8):
        res = simulate(r, Zero(50.0, 1), x0[None, :], setup=SimulationSetup(horizon=0.5, substeps=nsub,
                                                                           bounds=_no_bounds()))
        final = res.final_error[0]  # error from upright with wrapped angles; compare in the same form
        errors.append(np.max(np.abs(final - _error(r, ref))))
    ratios = [errors[0] / errors[1], errors[1] / errors[2]]
    assert all(13.0 < q < 19.0 for q in ratios), (errors, ratios)


def _no_bounds():
    from upswing.verification.simulate import Bounds

    return Bounds(angle=None)


def test_energy_is_conserved_without_friction_or_input():
    # Lagrangian mechanics: with no friction and no input the total energy T + V is constant (common practice).
    # The drift of RK4 at h = 1 ms over 2 s of a large swing is O(h^4): we allow 1e-7 of the energy swing,
    # well above the ~1e-9 such a step gives and far below anything a budget would notice.
    for name in ("acrobot", "cart-double"):
        r = frictionless(rig(name), viscous=False)
        model = model_for(r)
        nq = r.n_states // 2
        x0 = np.zeros(r.n_states)
        x0[nq - 2:nq] = [2.5, -0.7]
        res = simulate(r, Zero(250.0, r.n_inputs), x0[None, :],
                       setup=SimulationSetup(horizon=2.0, substeps=4, record=True, bounds=_no_bounds()))
        energy = np.array([float(np.asarray(model.energy(x, r.parameter_vector())).ravel()[2])
                           for x in res.states[:, 0, :]])
        swing = np.ptp([float(np.asarray(model.energy(x, r.parameter_vector())).ravel()[1])
                        for x in res.states[:, 0, :]])
        assert np.ptp(energy) < 1e-7 * swing, name
        assert generalized_input_map(r).shape == (nq, r.n_inputs)
