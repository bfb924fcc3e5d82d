"""Every rig-file key in one table: its type, unit, accepted range, default and meaning.

The loader (:mod:`upswing.model.rig`), the rig-file reference in ``docs/rig-file.md`` and the bad-input tests are
all generated from :data:`TABLES`, so the three cannot drift apart. To add a key, add one :class:`Key` here; to add
a table, add one :class:`Table` and teach :mod:`upswing.model.rig` what to build from it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

REQUIRED: Any = object()  # sentinel: the key has no default and must be given


@dataclass(frozen=True)
class Key:
    """One rig-file key.

    Attributes
    ----------
    name : str
        Key name inside its table.
    kind : str
        ``"float"``, ``"int"``, ``"str"``, ``"floats"`` (a list of numbers) or ``"strs"`` (a list of text).
    unit : str
        SI unit, or ``"-"`` for dimensionless / text.
    doc : str
        One-line meaning, as the rig-file reference prints it.
    default : Any
        Value when the key is absent; :data:`REQUIRED` when it must be given; ``None`` when absent means "not given"
        (the loader then derives a value, as for ``inertia``).
    low, high : float or None
        Accepted range ends; ``None`` means unbounded on that side.
    low_open, high_open : bool
        Whether the corresponding end is excluded.
    choices : tuple of str or None
        Accepted values for ``str`` and ``strs`` keys.
    plausible : tuple of float or None
        Range that a bench rig normally lies in; a value outside it is accepted with a warning.
    """

    name: str
    kind: str
    unit: str
    doc: str
    default: Any = REQUIRED
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    choices: tuple[str, ...] | None = None
    plausible: tuple[float, float] | None = None

    def range_text(self) -> str:
        """Accepted range in interval notation, e.g. ``(0, inf)``."""
        if self.choices is not None:
            return "one of " + ", ".join(f'"{c}"' for c in self.choices)
        lo = "-inf" if self.low is None else _fmt(self.low)
        hi = "inf" if self.high is None else _fmt(self.high)
        left = "(" if (self.low is None or self.low_open) else "["
        right = ")" if (self.high is None or self.high_open) else "]"
        return f"{left}{lo}, {hi}{right}"

    def in_range(self, value: float) -> bool:
        """Whether a finite number lies in the accepted range."""
        if self.low is not None and (value < self.low or (self.low_open and value == self.low)):
            return False
        return not (
            self.high is not None and (value > self.high or (self.high_open and value == self.high))
        )


@dataclass(frozen=True)
class Table:
    """A rig-file table (``""`` for the top level) and the keys it accepts."""

    name: str
    doc: str
    keys: tuple[Key, ...]

    def key(self, name: str) -> Key:
        for k in self.keys:
            if k.name == name:
                return k
        raise KeyError(name)


def _fmt(x: float) -> str:
    return "inf" if math.isinf(x) else f"{x:g}"


JOINTS = ("cart", "shoulder", "elbow")
BASES = ("fixed", "cart")

TOP = Table(
    "",
    "Top level: what the rig is.",
    (
        Key("name", "str", "-", "Free text naming the rig."),
        Key("base", "str", "-", "What link 1's pivot sits on.", choices=BASES),
        Key("actuated", "strs", "-", "Joints that have a motor.", choices=JOINTS),
        Key("gravity", "float", "m/s^2", "Gravitational acceleration (CGPM standard value by default).",
            default=9.80665, low=0.0, low_open=True, plausible=(9.7, 9.9)),
        Key("description", "str", "-", "Longer free text: what the rig represents.", default=""),
    ),
)

LINK = Table(
    "link1",  # the same keys serve link1 and link2
    "A link: a rigid body turning about its proximal joint.",
    (
        Key("mass", "float", "kg", "Link mass.", low=0.0, low_open=True, plausible=(0.005, 50.0)),
        Key("length", "float", "m", "Joint to joint (link 2: joint to tip).", low=0.0, low_open=True,
            plausible=(0.02, 3.0)),
        Key("com", "float", "m", "Distance from the link's proximal joint to its centre of mass; 0 < com <= length.",
            low=0.0, low_open=True),
        Key("inertia", "float", "kg m^2", "Moment of inertia about the link's own centre of mass "
            "(default: uniform rod, mass * length^2 / 12).", default=None, low=0.0),
        Key("damping", "float", "N m s/rad", "Viscous friction at the link's proximal joint.", default=0.0,
            low=0.0),
        Key("coulomb", "float", "N m", "Coulomb (dry) friction at the link's proximal joint.", default=0.0,
            low=0.0),
    ),
)

CART = Table(
    "cart",
    "The cart on its rail; required when base = \"cart\", an error on a fixed base.",
    (
        Key("mass", "float", "kg", "Cart mass (everything that translates but the links).", low=0.0,
            low_open=True, plausible=(0.05, 100.0)),
        Key("damping", "float", "N s/m", "Viscous friction along the rail.", default=0.0, low=0.0),
        Key("coulomb", "float", "N", "Coulomb friction along the rail.", default=0.0, low=0.0),
        Key("travel", "float", "m", "Half-length of usable rail from its centre; |x| = travel is the end stop.",
            low=0.0, low_open=True, plausible=(0.02, 5.0)),
    ),
)

ACTUATOR = Table(
    "actuator.<joint>",
    "One table per actuated joint (cart, shoulder, elbow). Units: N m and rad/s for joints, N and m/s for the cart.",
    (
        Key("peak", "float", "N m | N", "Saturation: |u| <= peak, never exceeded.", low=0.0, low_open=True),
        Key("continuous", "float", "N m | N", "RMS of the input over a manoeuvre must stay below this.",
            low=0.0, low_open=True),
        Key("max_speed", "float", "rad/s | m/s", "Joint (cart) speed budget.", low=0.0, low_open=True),
        Key("stall", "float", "N m | N", "Motor line: effort available at standstill; with no_load_speed the "
            "effort available while driving at speed w is min(peak, stall * (1 - w / no_load_speed)).",
            default=None, low=0.0, low_open=True),
        Key("no_load_speed", "float", "rad/s | m/s", "Motor line: speed at which the available driving effort "
            "reaches zero.", default=None, low=0.0, low_open=True),
    ),
)

BALANCE = Table(
    "balance",
    "Balance controller at the upright. Without q and r, weights follow Bryson's rule (see docs/theory.md).",
    (
        Key("q", "floats", "-", "State weights, one per state in state order.", default=None, low=0.0),
        Key("r", "floats", "-", "Input weights, one per input in input order (cart, shoulder, elbow).",
            default=None, low=0.0, low_open=True),
        Key("sample_rate", "float", "Hz", "The controller's loop rate; the balance design warns below 10x the fastest "
            "unstable pole's rate (as a frequency, lambda / 2 pi) and refuses below 2x.", default=500.0, low=0.0,
            low_open=True, plausible=(20.0, 20000.0)),
        Key("delay_samples", "int", "samples", "Computation delay designed in: u[k] is applied d samples late.",
            default=0, low=0, high=10),
        Key("process_noise", "float", "rad/s^2", "Kalman filter tuning: standard deviation of the unmodelled "
            "angular acceleration of each joint, held over one sample (friction, model error, bumps). Lower trusts "
            "the model more: smoother estimates, but more lag, so Coulomb friction makes the loop hunt more; higher "
            "passes more encoder noise to the motor (jitter). The default 2.5 is the middle of the range, 2 to 3, in "
            "which no demo rig failed to settle in the nonlinear Monte Carlo (benchmarks/study_estimator_defaults.py;"
            " the acrobot hunts out of its settling box below it, 172 of 1000 runs at 1, and jitters out above it, "
            "41 of 1000 at 5).",
            default=2.5, low=0.0, low_open=True, plausible=(0.01, 1000.0)),
        Key("cart_process_noise", "float", "m/s^2", "Kalman filter tuning: the same for the cart's acceleration "
            "(cart rigs only).", default=1.0, low=0.0, low_open=True, plausible=(0.001, 100.0)),
        Key("effort_noise", "floats", "N | N m", "Kalman filter tuning: standard deviation of an unmodelled effort "
            "at each actuated input, held over one sample, one per input in input order (drive force or torque error, "
            "the friction the linear model leaves out, cogging, belt stretch). It enters through the input matrix, so "
            "the filter no longer takes the commanded effort on trust; raising it returns the loop at the plant input "
            "towards the full-state loop's margins (loop transfer recovery) for a little more encoder noise in the "
            "estimate. Default: none.", default=None, low=0.0),
        Key("velocity_cutoff", "float", "Hz", "Cut-off of the first-order low-pass on the finite-difference "
            "velocity estimate; must be below half the loop rate (default: sample_rate / 10).", default=None,
            low=0.0, low_open=True),
    ),
)

SENSORS = Table(
    "sensors",
    "What the controller measures. Angles and cart position come from encoders; velocities are estimated.",
    (
        Key("encoder_counts", "int", "counts/rev", "Angle encoder counts per revolution (after quadrature).",
            default=4096, low=4),
        Key("cart_resolution", "float", "m", "Cart position resolution (one count).", default=1e-5, low=0.0,
            low_open=True),
        Key("angle_noise", "float", "rad", "Standard deviation of Gaussian noise on each angle reading.",
            default=0.0, low=0.0),
        Key("cart_noise", "float", "m", "Standard deviation of Gaussian noise on the cart position reading.",
            default=0.0, low=0.0),
    ),
)

UNCERTAINTY = Table(
    "uncertainty",
    "How well the parameters are known. Sub-tables [uncertainty.link1], [uncertainty.link2], [uncertainty.cart] "
    "give a relative spread per key (0.1 = +-10 %); `distribution` says how spreads are read.",
    (
        Key("distribution", "str", "-", "\"uniform\": spread is the half-width; \"normal\": spread is one "
            "standard deviation (truncated at 3 sigma).", default="uniform", choices=("uniform", "normal")),
        Key("gravity", "float", "-", "Relative spread of gravity.", default=0.0, low=0.0, high=0.5),
    ),
)

UNCERTAIN_PARAMETER = Key(
    "<parameter>", "float", "-", "Relative spread of that parameter (fraction, e.g. 0.1 = 10 %).", default=0.0,
    low=0.0, high=0.9,
)

VERIFICATION = Table(
    "verification",
    "How `upswing verify` decides. The verdict is pass when the lower end of the 95 % Wilson interval of the Monte "
    "Carlo success rate is at least `required_success` and every budget that has a limit is within it (see "
    "docs/theory.md, section 10).",
    (
        Key("required_success", "float", "-", "Success rate the rig must be shown to reach, as a fraction: the "
            "lower end of the 95 % Wilson interval must be at least this. With every rollout held, n rollouts show "
            "at most n / (n + 3.84), so 0.95 needs at least 73 rollouts and 0.99 at least 381. `--required-success` "
            "overrides it.", default=0.95, low=0.0, high=1.0, low_open=True, high_open=True,
            plausible=(0.5, 0.9999)),
    ),
)

SWINGUP = Table(
    "swingup",
    "Swing-up: the optimized trajectory's share of the limits and its tracking, the energy-based laws (see "
    "upswing.synthesis.swingup.energy) and the hand-over to the balance controller. "
    "Keys a family's law does not use are an error; keys left out take the documented default, which for the "
    "collocated-loop gains depends on the family.",
    (
        Key("energy_gain", "float", "-", "Acrobot and pendubot: energy weight k_E of the Lyapunov function, as a "
            "fraction of its well-posedness bound 1 / (max alpha_bar * (E_target - E_hanging)); default 0.85 "
            "(acrobot), 0.3 (pendubot).", default=None, low=0.0, high=1.0, low_open=True, high_open=True),
        Key("collocated_kp", "float", "1/s^2", "Acrobot and pendubot: stiffness k_P of the collocated (actuated) "
            "joint's loop; default 10 (acrobot), 60 (pendubot).", default=None, low=0.0),
        Key("collocated_kd", "float", "1/s", "Acrobot and pendubot: damping k_D of the collocated joint's loop; "
            "default 1 (acrobot), 10 (pendubot).", default=None, low=0.0, low_open=True),
        Key("energy_deadband", "float", "-", "Acrobot and pendubot: the energy term fades out linearly inside "
            "this band around the target, as a fraction of the hanging-to-upright energy gap.", default=0.075,
            low=0.0, high=1.0),
        Key("pump_gain", "float", "-", "Cart rig: energy-pumping gain k, dimensionless: a shortfall of the whole "
            "hanging-to-upright gap with H = sqrt(gap * link mass) asks for k times pump_limit.", default=2.5,
            low=0.0, low_open=True),
        Key("pump_limit", "float", "g", "Cart rig: largest cart acceleration the pumping term asks for, in "
            "multiples of gravity (the saturation level n of Astrom & Furuta, 2000).", default=1.0, low=0.0,
            low_open=True, high=10.0),
        Key("rail_stiffness", "float", "1/s^2", "Cart rig: pull of the cart toward the rail's centre during "
            "pumping.", default=2.0, low=0.0),
        Key("rail_damping", "float", "1/s", "Cart rig: damping of the cart's motion during pumping.",
            default=2.8, low=0.0),
        Key("energy_margin", "float", "-", "Target energy above the upright level, as a fraction of the "
            "hanging-to-upright energy gap.", default=0.01, low=0.0, high=0.5),
        Key("handover_level", "float", "-", "Cost-to-go level rho_in: hand over to the balance controller when "
            "(x - x_eq)' P (x - x_eq) <= rho_in (P: the discrete balance design's Riccati solution); default: "
            "the region-of-attraction estimate.", default=None, low=0.0, low_open=True),
        Key("release_factor", "float", "-", "Hysteresis: give control back to the swing-up law only above "
            "rho_out = release_factor * rho_in. At 1.5, 15 % of the demo acrobot's tracked runs engaged and "
            "released balance repeatedly (up to 43 times) while the balance loop's transient and saturation raised "
            "the level after the catch; at 3, every run switched exactly once, with the same catch rate.",
            default=3.0, low=1.0, low_open=True, high=100.0),
        Key("plan_effort_share", "float", "-", "Share of each actuator's peak (and motor line) the optimized "
            "trajectory may use; the rest is left to the tracking feedback. Motor sizing always plans to the full "
            "limit.", default=1.0, low=0.0, low_open=True, high=1.0, plausible=(0.5, 1.0)),
        Key("plan_speed_share", "float", "-", "Share of each actuator's max_speed the optimized trajectory may "
            "use: a tracked run on an uncertain rig overshoots its plan's speeds by a few per cent.", default=0.9,
            low=0.0, low_open=True, high=1.0, plausible=(0.5, 1.0)),
        Key("tracking_r_factor", "float", "-", "The time-varying LQR's input weight as a multiple of the balance "
            "design's R (same Q): above 1 the tracking gains stay small enough that encoder steps and noise do not "
            "drive the command into saturation; the table still ends on the balance cost-to-go.", default=10.0,
            low=0.0, low_open=True, high=1e4, plausible=(1.0, 1000.0)),
        Key("tracking_rate_cutoff", "float", "Hz", "Cut-off of the rate estimate while tracking: joint rates are "
            "the reference's rates plus a first-order low-pass of the differenced tracking error (below half the "
            "loop rate).", default=20.0, low=0.0, low_open=True, plausible=(2.0, 200.0)),
    ),
)

MOUNT = Table(
    "mount",
    "What the fixing that holds the rig's base (bench clamps, a bolt pattern, the rail's brackets) can take. "
    "Optional: without it the loads on the base are computed and reported but not judged. Each rating is the "
    "load the fixing's datasheet or bolt calculation allows in that direction, before upswing's safety factor; the "
    "budget limit is rating / safety_factor. A rating left out leaves that load unjudged (the hazard notes say so). "
    "How to find the numbers: docs/user-guide.md, section 7.1.",
    (
        Key("horizontal_force", "float", "N", "Horizontal force (along x, either way) the fixing can take before it "
            "slides or its bolts yield in shear: for friction clamps, friction coefficient * clamping force of the "
            "clamps together; for bolts, their allowed shear.", default=None, low=0.0, low_open=True,
            plausible=(5.0, 50000.0)),
        Key("vertical_force", "float", "N", "Vertical force (along y, pulling up or pressing down, the rig's weight "
            "included) the fixing can take; the lower of the two directions, usually lift-off: clamping force, or "
            "the bolts' allowed tension.", default=None, low=0.0, low_open=True, plausible=(5.0, 50000.0)),
        Key("moment", "float", "N m", "Moment in the plane of motion (about an axis parallel to the shoulder axis) "
            "the fixing can take about its rated point before it tips or pries loose: e.g. clamping force * "
            "distance between two clamps, or the bolt pattern's allowed tension * lever arm.", default=None,
            low=0.0, low_open=True, plausible=(0.5, 20000.0)),
        Key("safety_factor", "float", "-", "Factor the ratings are divided by to give the limits upswing judges "
            "against. Required with [mount] (no default: the factor is the user's practice to state, not upswing's "
            "to assume); 2 to 3 on the worst dynamic load is common practice for bench fixtures, more where loads "
            "reverse often or the rating is a breaking load. 1 when the ratings above are already allowable loads.",
            low=1.0, high=20.0, plausible=(1.0, 10.0)),
        Key("shoulder_height", "float", "m", "Height of the shoulder axis above the moment rating's point (the "
            "clamp face, the bolt pattern's centre): the horizontal force's lever arm there.", default=0.0, low=0.0,
            plausible=(0.0, 3.0)),
        Key("shoulder_offset", "float", "m", "Horizontal distance from the moment rating's point to the shoulder "
            "axis (on a cart rig: to the shoulder with the cart at the rail's centre): the vertical force's lever "
            "arm there.", default=0.0, low=0.0, plausible=(0.0, 3.0)),
    ),
)

TABLES: tuple[Table, ...] = (TOP, LINK, CART, ACTUATOR, BALANCE, SENSORS, UNCERTAINTY, VERIFICATION, SWINGUP, MOUNT)

# Table names a rig file may have at its top level (LINK serves both links; ACTUATOR has one sub-table per joint).
TOP_LEVEL_TABLES: tuple[str, ...] = ("link1", "link2", "cart", "actuator", "balance", "sensors", "uncertainty",
                                     "verification", "swingup", "mount")

# Which [swingup] keys each family reads; the loader rejects the others (a gain that silently does nothing is worse
# than an error). Families without an energy law (fully actuated, custom) read only the hand-over keys and, like
# every family, the keys of the optimized swing-up and its tracking.
_ENERGY_AND_HANDOVER_KEYS: dict[str, tuple[str, ...]] = {
    "acrobot": ("energy_gain", "collocated_kp", "collocated_kd", "energy_deadband", "energy_margin",
                "handover_level", "release_factor"),
    "pendubot": ("energy_gain", "collocated_kp", "collocated_kd", "energy_deadband", "energy_margin",
                 "handover_level", "release_factor"),
    "cart": ("pump_gain", "pump_limit", "rail_stiffness", "rail_damping", "energy_margin", "handover_level",
             "release_factor"),
    "fully actuated": ("handover_level", "release_factor"),
    "custom": ("handover_level", "release_factor"),
}
TRACKING_KEYS: tuple[str, ...] = ("plan_effort_share", "plan_speed_share", "tracking_r_factor", "tracking_rate_cutoff")
SWINGUP_KEYS_BY_FAMILY: dict[str, tuple[str, ...]] = {
    family: keys + TRACKING_KEYS for family, keys in _ENERGY_AND_HANDOVER_KEYS.items()
}
