"""Energy-based swing-up laws: the optimizer-free way from hanging to the balance controller's catch region.

Two published ideas, each used only where it honestly applies:

**Pivot energy pumping (cart rig).** Åström & Furuta (2000, *Automatica* 36) swing a single pendulum on a cart by
commanding the pivot acceleration a = sat_ng(k (E0 - E) * d(...)/dt), which makes the pendulum energy E rise
monotonically towards E0 while the acceleration is unsaturated (V = (E - E0)^2 / 2 is a Lyapunov function). We
generalize it to two stacked links: in the frame moving with the pivot the links' energy E_p obeys

    dE_p/dt = a * H(q, q_dot) - (joint friction power),
    H = (m1 lc1 + m2 l1) cos(theta1) theta1_dot + m2 lc2 cos(theta1 + theta2) (theta1_dot + theta2_dot),

so the law a = clip(k (E_d - E_p) H, -n g, n g) - k_x x - k_v x_dot gives dE_p/dt = k (E_d - E_p) H^2 >= 0 (for
k_x = k_v = 0, no joint friction, unsaturated). The cart force that realizes a is found by collocated partial
feedback linearization of the cart coordinate. **Where it stops working:** equal energy is not the upright state
when two links are passive. At E_p = E_d the links whirl chaotically (link 2 reached 58 rad/s on the demo cart rig)
and a catch needs the motion to pass through the balance controller's region of attraction by chance. The law is
offered for pre-swinging and as an initial guess for the trajectory optimizer, not as a swing-up that ends upright.

**Collocated partial feedback linearization with energy shaping (acrobot, pendubot).** Spong (1995, *IEEE Control
Systems* 15(1)) linearizes the actuated ("collocated") joint exactly: with M q_ddot + h = S u + Q_f, the input

    u = alpha_bar v + beta,  alpha_bar = M_aa - M_as M_ss^-1 M_sa,  beta = (h_a - f_a) - M_as M_ss^-1 (h_s - f_s)

makes q_ddot_a = v whatever the passive joint does (a: actuated coordinate, s: passive one). The outer loop shapes
the energy (Spong 1996, IFAC World Congress; Fantoni, Lozano & Spong 2000, *IEEE TAC* 45 for the pendubot): with
E~ = E - E_d and the Lyapunov function V = 1/2 k_E E~^2 + 1/2 k_P q_a^2 + 1/2 q_dot_a^2, passivity dE/dt = u q_dot_a
(no friction) gives dV/dt = q_dot_a (k_E E~ u + k_P q_a + v); choosing

    v = -(k_D q_dot_a + k_P q_a + k_E E~ beta) / (1 + k_E alpha_bar E~)

makes dV/dt = -k_D q_dot_a^2 <= 0. The division is well posed while k_E < 1 / (max alpha_bar (E_d - E_hanging));
the rig file gives k_E as a fraction of that bound. We fade k_E out linearly inside a small band around E_d
(``energy_deadband``), which keeps V a Lyapunov function (the weight becomes a function of E~ alone) and removes
the energy term's pull towards tilted equilibria near the top. **Limits:** LaSalle's argument admits closed-loop
equilibria other than upright (link 1 tilted, the other link bent so the centre of mass sits above the shoulder;
Xin & Kaneda 2007 analyse the gain conditions), and a saturated motor breaks the Lyapunov argument. Measured rates
on the demo rigs are in ``benchmarks/energy_swingup.py`` and the tests.

Fully actuated arms and other actuator sets get no energy law: :func:`energy_law_params` raises with the reason.

Every law is a pure function of a batch of states ``X`` (N, n_states) and a frozen :class:`EnergyLawParams`, returns
inputs (N, n_inputs) already saturated at ``peak``, and uses the rig's nominal model (viscous and Coulomb friction
included; sgn(0) = 0) — a batch engine evaluates it on perturbed plants to see the effect of model error.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from upswing.errors import RequestError
from upswing.model.batched import (
    bias_batch,
    energy_batch,
    friction_batch,
    mass_matrix_batch,
    pendulum_energy_batch,
    pivot_coupling_batch,
)
from upswing.model.equilibria import equilibrium_state, wrap_angle
from upswing.model.rig import Rig

# Collocated-loop defaults by family, used when the rig file leaves them out. Chosen on the demo rigs
# (scenarios/acrobot.toml, scenarios/pendubot.toml) by gain sweeps with batched closed-loop runs (success rates:
# benchmarks/energy_swingup.py); a rig far from those should be tuned.
FAMILY_DEFAULTS: dict[str, dict[str, float]] = {
    "acrobot": {"energy_gain": 0.85, "collocated_kp": 10.0, "collocated_kd": 1.0},
    "pendubot": {"energy_gain": 0.3, "collocated_kp": 60.0, "collocated_kd": 10.0},
}

UNSUITED: dict[str, str] = {
    "fully actuated": "both joints are actuated, so there is no passive link to pump energy into and no "
                      "collocated/non-collocated split; use the trajectory optimizer with time-varying LQR "
                      "tracking (--method optimal) instead",
    "custom": "no published energy-based swing-up law is implemented for this actuator set; use the trajectory "
              "optimizer with time-varying LQR tracking (--method optimal) instead",
}

LIMITATIONS: dict[str, str] = {
    "cart": "energy pumping brings the links' energy to the upright level, but with two passive links equal energy "
            "is not the upright state: the links then whirl and a catch happens only if the motion passes through "
            "the balance controller's region of attraction by chance (none within 20 s on the demo cart rig); use "
            "it to pre-swing or as an optimizer's initial guess",
    "acrobot": "the closed loop can settle in a tilted equilibrium (link 2 bent so the centre of mass is above the "
               "shoulder) instead of reaching the catch region, and a saturated motor voids the Lyapunov argument; "
               "on the demo acrobot 11 of 16 starts near hanging were caught within 20 s",
    "pendubot": "the closed loop can settle in a tilted equilibrium (link 1 held off vertical with link 2 bent) or "
                "miss the catch region on its first pass and never return to it; on the demo pendubot only 1 of 16 "
                "starts was caught within 20 s (best of a 96-point gain sweep: 5 of 8), so it is not a dependable "
                "swing-up there: use the trajectory optimizer",
}


@dataclass(frozen=True)
class EnergyLawParams:
    """Everything an energy-based swing-up law needs, resolved from a rig once.

    Attributes
    ----------
    family : str
        ``"cart"``, ``"acrobot"`` or ``"pendubot"``.
    law : str
        ``"pivot energy pumping"`` (cart) or ``"collocated energy shaping"`` (acrobot, pendubot).
    base : str
        ``"fixed"`` or ``"cart"``.
    p : ndarray, shape (n_parameters,)
        Nominal parameter vector the law's model uses.
    peak : ndarray, shape (n_inputs,)
        Saturation [N m or N].
    actuated_index : int
        Index of the actuated generalized coordinate in q (0 for the cart and the pendubot, 1 for the acrobot).
    energy_upright, energy_hanging, energy_target : float
        Energy the law regulates at upright, at hanging, and its target E_d [J] (cart: the links' energy in the
        pivot frame; fixed base: the total energy).
    k_energy : float
        Cart: pumping gain k [(m/s^2) / (J kg m/s)]; acrobot/pendubot: Lyapunov energy weight k_E
        [1 / (J kg m^2)].
    k_energy_bound : float
        Acrobot/pendubot: the well-posedness bound on k_E (0 for the cart).
    kp, kd : float
        Collocated loop stiffness [1/s^2] and damping [1/s] (0 for the cart).
    deadband : float
        Energy band [J] inside which k_E fades out linearly (0: no fading).
    accel_limit : float
        Cart: saturation of the pumping term [m/s^2].
    rail_kx, rail_kv : float
        Cart centring gains [1/s^2], [1/s].
    """

    family: str
    law: str
    base: str
    p: np.ndarray
    peak: np.ndarray
    actuated_index: int
    energy_upright: float
    energy_hanging: float
    energy_target: float
    k_energy: float
    k_energy_bound: float = 0.0
    kp: float = 0.0
    kd: float = 0.0
    deadband: float = 0.0
    accel_limit: float = 0.0
    rail_kx: float = 0.0
    rail_kv: float = 0.0

    @property
    def limitation(self) -> str:
        """Where this law stops working, in words."""
        return LIMITATIONS[self.family]


def unsuited_reason(rig: Rig) -> str | None:
    """Why no energy-based law is offered for this rig's family, or ``None`` when one is."""
    return UNSUITED.get(rig.family)


def energy_law_params(rig: Rig) -> EnergyLawParams:
    """Resolve the energy law for a rig: its family's published law with the rig file's ``[swingup]`` gains.

    Raises
    ------
    RequestError
        For a fully actuated arm or another actuator set that no energy law suits (the message says why and
        what to use instead).
    """
    reason = unsuited_reason(rig)
    if reason is not None:
        raise RequestError(f"{rig.source}: no energy-based swing-up for the {rig.family} family: {reason}")
    s = rig.swingup
    p = rig.parameter_vector()
    upright = equilibrium_state(rig, "upright")[None, :]
    hanging = equilibrium_state(rig, "hanging")[None, :]
    if rig.family == "cart":
        e_up = float(pendulum_energy_batch(upright, p, rig.base)[0])
        e_hang = float(pendulum_energy_batch(hanging, p, rig.base)[0])
        gap = e_up - e_hang
        link_mass = rig.link1.mass + rig.link2.mass
        accel_limit = s.pump_limit * rig.gravity
        # pump_gain is dimensionless: a whole-gap shortfall with H = sqrt(gap * link mass) asks for
        # pump_gain * accel_limit.
        k = s.pump_gain * accel_limit / (gap * np.sqrt(gap * link_mass))
        return EnergyLawParams(
            family="cart", law="pivot energy pumping", base=rig.base, p=p, peak=rig.peak_inputs,
            actuated_index=0, energy_upright=e_up, energy_hanging=e_hang,
            energy_target=e_up + s.energy_margin * gap, k_energy=float(k), accel_limit=accel_limit,
            rail_kx=s.rail_stiffness, rail_kv=s.rail_damping)
    defaults = FAMILY_DEFAULTS[rig.family]
    fraction = defaults["energy_gain"] if s.energy_gain is None else s.energy_gain
    kp = defaults["collocated_kp"] if s.collocated_kp is None else s.collocated_kp
    kd = defaults["collocated_kd"] if s.collocated_kd is None else s.collocated_kd
    e_up = float(energy_batch(upright, p, rig.base)[0, 2])
    e_hang = float(energy_batch(hanging, p, rig.base)[0, 2])
    gap = e_up - e_hang
    target = e_up + s.energy_margin * gap
    actuated_index = 1 if rig.family == "acrobot" else 0
    bound = 1.0 / (_alpha_bar_max(p, actuated_index) * (target - e_hang))
    return EnergyLawParams(
        family=rig.family, law="collocated energy shaping", base=rig.base, p=p, peak=rig.peak_inputs,
        actuated_index=actuated_index, energy_upright=e_up, energy_hanging=e_hang, energy_target=target,
        k_energy=fraction * bound, k_energy_bound=bound, kp=kp, kd=kd, deadband=s.energy_deadband * gap)


def _alpha_bar_max(p: np.ndarray, actuated_index: int) -> float:
    """Largest alpha_bar over the elbow angle (on a fixed base M depends on theta2 only) [kg m^2]."""
    X = np.zeros((1441, 4))
    X[:, 1] = np.linspace(-np.pi, np.pi, 1441)  # includes theta2 = 0 and +-pi, where the extremes lie
    alpha_bar, _ = _collocated_terms(X, p, "fixed", actuated_index)
    return float(alpha_bar.max())


# ----------------------------------------------------------------------------------------------------------------
# Collocated partial feedback linearization


def _collocated_terms(X: np.ndarray, p: np.ndarray, base: str, actuated_index: int
                      ) -> tuple[np.ndarray, np.ndarray]:
    """alpha_bar (N,) and beta (N,) with u = alpha_bar v + beta giving q_ddot_a = v (Spong 1995)."""
    M = mass_matrix_batch(X, p, base)
    rest = bias_batch(X, p, base) - friction_batch(X, p, base)  # h - Q_f
    n_q = M.shape[-1]
    a = actuated_index
    s = [i for i in range(n_q) if i != a]
    M_ss = M[:, s][:, :, s]
    M_as = M[:, a, s]
    # M_ss^-1 [M_sa, h_s - f_s] in one batched solve
    sol = np.linalg.solve(M_ss, np.stack([M_as, rest[:, s]], axis=-1))
    alpha_bar = M[:, a, a] - np.einsum("ni,ni->n", M_as, sol[..., 0])
    beta = rest[:, a] - np.einsum("ni,ni->n", M_as, sol[..., 1])
    return alpha_bar, beta


def collocated_input(X: np.ndarray, v: np.ndarray, params: EnergyLawParams) -> np.ndarray:
    """The input that gives the actuated coordinate the acceleration ``v`` exactly (on the nominal model).

    u = alpha_bar(q) v + beta(q, q_dot), from eliminating the passive coordinates' accelerations from
    M q_ddot + h = S u + Q_f (Spong 1995). Not saturated.

    Parameters
    ----------
    X : ndarray, shape (N, n_states)
    v : ndarray, shape (N,)
        Desired acceleration of the actuated coordinate [rad/s^2 or m/s^2].
    params : EnergyLawParams

    Returns
    -------
    ndarray, shape (N,)
        Torque [N m] or force [N].
    """
    X = np.atleast_2d(np.asarray(X, dtype=float))
    alpha_bar, beta = _collocated_terms(X, params.p, params.base, params.actuated_index)
    return alpha_bar * np.asarray(v, dtype=float) + beta


def regulated_energy(X: np.ndarray, params: EnergyLawParams) -> np.ndarray:
    """The energy the law drives to ``energy_target`` [J], shape (N,): the links' energy in the pivot frame on a
    cart, the total energy on a fixed base."""
    X = np.atleast_2d(np.asarray(X, dtype=float))
    if params.base == "cart":
        return pendulum_energy_batch(X, params.p, params.base)
    return energy_batch(X, params.p, params.base)[:, 2]


# ----------------------------------------------------------------------------------------------------------------
# The laws


def pivot_pumping_acceleration(X: np.ndarray, params: EnergyLawParams) -> np.ndarray:
    """Cart acceleration demanded by the pumping law [m/s^2], shape (N,).

    a = clip(k (E_d - E_p) H, -n g, n g) - k_x x - k_v x_dot (Åström & Furuta 2000, generalized to two links).
    """
    X = np.atleast_2d(np.asarray(X, dtype=float))
    shortfall = params.energy_target - pendulum_energy_batch(X, params.p, params.base)
    pump = params.k_energy * shortfall * pivot_coupling_batch(X, params.p, params.base)
    pump = np.clip(pump, -params.accel_limit, params.accel_limit)
    return pump - params.rail_kx * X[:, 0] - params.rail_kv * X[:, 3]


def energy_shaping_acceleration(X: np.ndarray, params: EnergyLawParams) -> np.ndarray:
    """Acceleration of the actuated joint demanded by the energy-shaping outer loop [rad/s^2], shape (N,).

    v = -(k_D q_dot_a + k_P wrap(q_a) + k(E~) E~ beta) / (1 + k(E~) alpha_bar E~), with k(E~) = k_E min(1, |E~| /
    deadband) (Spong 1996; Fantoni, Lozano & Spong 2000).
    """
    X = np.atleast_2d(np.asarray(X, dtype=float))
    n_q = X.shape[1] // 2
    a = params.actuated_index
    alpha_bar, beta = _collocated_terms(X, params.p, params.base, a)
    e_tilde = regulated_energy(X, params) - params.energy_target
    k = params.k_energy
    if params.deadband > 0:
        k = k * np.minimum(1.0, np.abs(e_tilde) / params.deadband)
    q_a = wrap_angle(X[:, a])
    return -(params.kd * X[:, n_q + a] + params.kp * q_a + k * e_tilde * beta) / (1.0 + k * alpha_bar * e_tilde)


def energy_swingup_input(X: np.ndarray, params: EnergyLawParams) -> np.ndarray:
    """Evaluate the family's energy-based swing-up law on a batch of states.

    Parameters
    ----------
    X : ndarray, shape (N, n_states)
        States in the rig's state order.
    params : EnergyLawParams
        From :func:`energy_law_params`.

    Returns
    -------
    ndarray, shape (N, 1)
        The input [N m or N], saturated at ``peak``.
    """
    X = np.atleast_2d(np.asarray(X, dtype=float))
    law = pivot_pumping_acceleration if params.base == "cart" else energy_shaping_acceleration
    u = collocated_input(X, law(X, params), params)
    return np.clip(u, -params.peak[0], params.peak[0])[:, None]

