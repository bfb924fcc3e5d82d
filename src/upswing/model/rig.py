"""Load a TOML rig file into a validated, immutable :class:`Rig`.

Validation happens here, once, at the boundary: every later stage may trust a :class:`Rig`. Each problem is a
:class:`~upswing.errors.RigFileError` naming the file, the key, the accepted range and the value found; legal but
implausible values (a 300 m link is probably millimetres) become entries of :attr:`Rig.warnings`.
"""

from __future__ import annotations

import difflib
import hashlib
import math
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from upswing.errors import RigFileError
from upswing.model import schema
from upswing.model.schema import JOINTS, REQUIRED, Key, Table

# Order of the physical parameter vector p that the equations of motion take: f(x, u, p).
PARAMETER_NAMES: tuple[str, ...] = (
    "link1.mass", "link1.length", "link1.com", "link1.inertia", "link1.damping", "link1.coulomb",
    "link2.mass", "link2.length", "link2.com", "link2.inertia", "link2.damping", "link2.coulomb",
    "cart.mass", "cart.damping", "cart.coulomb",
    "gravity",
)

STATE_NAMES = {
    "fixed": ("theta1", "theta2", "theta1_dot", "theta2_dot"),
    "cart": ("x", "theta1", "theta2", "x_dot", "theta1_dot", "theta2_dot"),
}
STATE_UNITS = {"x": "m", "theta1": "rad", "theta2": "rad", "x_dot": "m/s", "theta1_dot": "rad/s",
               "theta2_dot": "rad/s"}
INPUT_UNITS = {"cart": "N", "shoulder": "N m", "elbow": "N m"}


@dataclass(frozen=True)
class Link:
    """A rigid link turning about its proximal joint. SI units: kg, m, kg m^2, N m s/rad, N m."""

    mass: float
    length: float
    com: float
    inertia: float
    damping: float = 0.0
    coulomb: float = 0.0
    inertia_defaulted: bool = False


@dataclass(frozen=True)
class Cart:
    """The cart on its rail. SI units: kg, N s/m, N, m (``travel`` is the half-length from the rail's centre)."""

    mass: float
    damping: float
    coulomb: float
    travel: float


@dataclass(frozen=True)
class Actuator:
    """Limits of one actuated joint. Efforts in N m (N for the cart), speeds in rad/s (m/s for the cart).

    ``stall`` and ``no_load_speed`` together describe a motor line: the effort available while driving at speed w
    is ``min(peak, stall * (1 - w / no_load_speed))``; both are ``None`` when no motor line is given.
    """

    joint: str
    peak: float
    continuous: float
    max_speed: float
    stall: float | None = None
    no_load_speed: float | None = None


@dataclass(frozen=True)
class Balance:
    """Balance design settings: LQR weights (``None`` means Bryson's rule), loop rate [Hz], delay [samples], and
    the estimators' tuning: process noise [rad/s^2, m/s^2 for the cart], effort noise at each input [N, N m]
    (``None``: none) and the velocity filter's cut-off [Hz]."""

    q: tuple[float, ...] | None
    r: tuple[float, ...] | None
    sample_rate: float
    delay_samples: int
    process_noise: float = schema.BALANCE.key("process_noise").default
    cart_process_noise: float = schema.BALANCE.key("cart_process_noise").default
    effort_noise: tuple[float, ...] | None = None  # None: no effort noise in the filter's model
    velocity_cutoff: float | None = None  # None: sample_rate / 10 (upswing.synthesis.estimation)


@dataclass(frozen=True)
class Sensors:
    """Encoders and their noise: counts per revolution, cart resolution [m], noise standard deviations."""

    encoder_counts: int
    cart_resolution: float
    angle_noise: float
    cart_noise: float

    @property
    def angle_resolution(self) -> float:
        """One encoder count [rad]."""
        return 2.0 * math.pi / self.encoder_counts


@dataclass(frozen=True)
class Uncertainty:
    """Relative parameter spreads, keyed by names from :data:`PARAMETER_NAMES`."""

    distribution: str
    spreads: tuple[tuple[str, float], ...] = ()

    def spread_vector(self) -> np.ndarray:
        """Relative spread for every entry of the parameter vector (0 where none is declared)."""
        given = dict(self.spreads)
        return np.array([given.get(name, 0.0) for name in PARAMETER_NAMES])


@dataclass(frozen=True)
class VerificationSettings:
    """How ``upswing verify`` decides: ``required_success`` is the success rate (a fraction) that the lower end of
    the 95 % Wilson interval of the Monte Carlo success rate must reach for a pass."""

    required_success: float = schema.VERIFICATION.key("required_success").default


@dataclass(frozen=True)
class SwingUpSettings:
    """The rig file's ``[swingup]`` table (see :data:`upswing.model.schema.SWINGUP` for every key's meaning).

    ``None`` means "not given": the energy law then uses its documented family default
    (:data:`upswing.synthesis.swingup.energy.FAMILY_DEFAULTS`), and the hand-over uses the region-of-attraction
    estimate for ``handover_level``.

    Attributes
    ----------
    energy_gain : float or None
        Acrobot/pendubot energy weight as a fraction of its well-posedness bound [-].
    collocated_kp, collocated_kd : float or None
        Gains of the collocated joint's loop [1/s^2], [1/s].
    energy_deadband : float
        Fade-out band of the energy term, fraction of the hanging-to-upright energy gap [-].
    pump_gain : float
        Cart energy-pumping gain [-].
    pump_limit : float
        Largest pumping acceleration [multiples of g].
    rail_stiffness, rail_damping : float
        Cart centring during pumping [1/s^2], [1/s].
    energy_margin : float
        Target energy above the upright level, fraction of the gap [-].
    handover_level : float or None
        rho_in of the hand-over rule [-] (cost-to-go level).
    release_factor : float
        rho_out / rho_in [-].
    plan_effort_share, plan_speed_share : float
        Shares of peak (and motor line) and of max_speed the optimized trajectory may use [-].
    tracking_r_factor : float
        Tracking input weight as a multiple of the balance design's R [-].
    tracking_rate_cutoff : float
        Cut-off of the tracking rate estimate's error filter [Hz].
    """

    energy_gain: float | None = None
    collocated_kp: float | None = None
    collocated_kd: float | None = None
    energy_deadband: float = 0.075
    pump_gain: float = 2.5
    pump_limit: float = 1.0
    rail_stiffness: float = 2.0
    rail_damping: float = 2.8
    energy_margin: float = 0.01
    handover_level: float | None = None
    release_factor: float = schema.SWINGUP.key("release_factor").default
    plan_effort_share: float = schema.SWINGUP.key("plan_effort_share").default
    plan_speed_share: float = schema.SWINGUP.key("plan_speed_share").default
    tracking_r_factor: float = schema.SWINGUP.key("tracking_r_factor").default
    tracking_rate_cutoff: float = schema.SWINGUP.key("tracking_rate_cutoff").default


@dataclass(frozen=True)
class Mount:
    """The rig file's ``[mount]`` table: what the fixing that holds the base can take (see
    :data:`upswing.model.schema.MOUNT` for each key).

    Two force ratings, not one: the ones a person can look up or calculate differ by direction. A friction clamp
    resists sliding with friction coefficient times its clamping force but lift-off with the full clamping force; a
    bolt pattern is checked in shear and in tension separately; the base-load datasheets of industrial arms list
    horizontal and vertical forces apart. One rating for both would have to be the smaller one, which either hides
    a weak direction or fails a rig for a strength it has.

    The ratings are as the datasheet or the bolt calculation gives them; upswing divides each by ``safety_factor``
    (stated by the user, no default) to get the limit it judges against (:meth:`limit`).

    Attributes
    ----------
    horizontal_force, vertical_force : float or None
        Ratings [N] along x and along y (either way); None: not rated, that load is reported but not judged.
    moment : float or None
        Rating [N m] about the rated point, in the plane of motion; None: not rated.
    safety_factor : float
        Ratings are divided by it [-], >= 1.
    shoulder_height, shoulder_offset : float
        Vertical and horizontal distance [m] from the moment rating's point to the shoulder axis (the lever arms
        of the horizontal and the vertical force there); 0 rates the moment about the shoulder axis itself.
    """

    horizontal_force: float | None
    vertical_force: float | None
    moment: float | None
    safety_factor: float
    shoulder_height: float = 0.0
    shoulder_offset: float = 0.0

    def limit(self, rating: str) -> float | None:
        """``rating`` (``"horizontal_force"``, ``"vertical_force"`` or ``"moment"``) / ``safety_factor``, the
        allowed load [N or N m]; None when that rating is not given."""
        value = getattr(self, rating)
        return None if value is None else value / self.safety_factor


@dataclass(frozen=True)
class Rig:
    """A validated double-pendulum rig. Immutable; build new rigs with :meth:`with_parameters`.

    States and inputs follow ``docs/conventions.md``: fixed base x = [theta1, theta2, theta1_dot, theta2_dot],
    cart base x = [x, theta1, theta2, x_dot, theta1_dot, theta2_dot]; inputs are the actuated ones of
    (cart, shoulder, elbow), in that order.
    """

    name: str
    base: str
    actuated: tuple[str, ...]
    gravity: float
    link1: Link
    link2: Link
    cart: Cart | None
    actuators: tuple[Actuator, ...]
    balance: Balance
    sensors: Sensors
    uncertainty: Uncertainty
    verification: VerificationSettings = field(default_factory=VerificationSettings)
    swingup: SwingUpSettings = field(default_factory=SwingUpSettings)
    mount: Mount | None = None
    description: str = ""
    source: str = "<table>"
    content_hash: str = ""
    text: str = field(default="", repr=False)
    warnings: tuple[str, ...] = ()

    @property
    def state_names(self) -> tuple[str, ...]:
        return STATE_NAMES[self.base]

    @property
    def input_names(self) -> tuple[str, ...]:
        return self.actuated

    @property
    def n_states(self) -> int:
        return len(self.state_names)

    @property
    def n_inputs(self) -> int:
        return len(self.actuated)

    @property
    def state_units(self) -> tuple[str, ...]:
        return tuple(STATE_UNITS[s] for s in self.state_names)

    @property
    def input_units(self) -> tuple[str, ...]:
        return tuple(INPUT_UNITS[u] for u in self.input_names)

    @property
    def family(self) -> str:
        """``acrobot``, ``pendubot``, ``cart``, ``fully actuated`` or ``custom`` (other actuator sets)."""
        return _FAMILIES.get((self.base, self.actuated), "custom")

    def actuator(self, joint: str) -> Actuator:
        for a in self.actuators:
            if a.joint == joint:
                return a
        raise KeyError(f"{joint} is not actuated on rig {self.name!r}")

    @property
    def peak_inputs(self) -> np.ndarray:
        """Saturation levels in input order [N m or N]."""
        return np.array([a.peak for a in self.actuators])

    def parameter_vector(self) -> np.ndarray:
        """Physical parameters in :data:`PARAMETER_NAMES` order; cart entries are 0 on a fixed base."""
        values = {"gravity": self.gravity}
        for tag, link in (("link1", self.link1), ("link2", self.link2)):
            for attr in ("mass", "length", "com", "inertia", "damping", "coulomb"):
                values[f"{tag}.{attr}"] = getattr(link, attr)
        cart = self.cart or Cart(0.0, 0.0, 0.0, 0.0)
        for attr in ("mass", "damping", "coulomb"):
            values[f"cart.{attr}"] = getattr(cart, attr)
        return np.array([values[name] for name in PARAMETER_NAMES], dtype=float)

    def with_parameters(self, p: np.ndarray) -> Rig:
        """A copy with the physical parameters replaced by ``p`` (in :data:`PARAMETER_NAMES` order)."""
        v = dict(zip(PARAMETER_NAMES, (float(x) for x in p), strict=True))

        def link(tag: str, old: Link) -> Link:
            return replace(old, **{a: v[f"{tag}.{a}"] for a in
                                   ("mass", "length", "com", "inertia", "damping", "coulomb")})

        cart = None if self.cart is None else replace(
            self.cart, mass=v["cart.mass"], damping=v["cart.damping"], coulomb=v["cart.coulomb"])
        return replace(self, link1=link("link1", self.link1), link2=link("link2", self.link2), cart=cart,
                       gravity=v["gravity"])


# ----------------------------------------------------------------------------------------------------------------
# Loading


def load_rig(path: str | Path) -> Rig:
    """Read and validate a TOML rig file.

    Parameters
    ----------
    path : str or Path
        The rig file.

    Returns
    -------
    Rig

    Raises
    ------
    RigFileError
        When the file cannot be read, is not TOML, or any key is missing, unknown, mistyped or out of range.
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise RigFileError(str(path), "", f"cannot be read ({exc.strerror or exc})") from None
    try:
        text = raw.decode("utf-8")
        table = tomllib.loads(text)
    except UnicodeDecodeError:
        raise RigFileError(str(path), "", "is not UTF-8 text; a rig file is TOML") from None
    except tomllib.TOMLDecodeError as exc:
        raise RigFileError(str(path), "", f"is not valid TOML ({exc})") from None
    rig = rig_from_table(table, source=str(path))
    return replace(rig, content_hash=hashlib.sha256(raw).hexdigest(), text=text)


def rig_from_table(table: dict[str, Any], *, source: str = "<table>") -> Rig:
    """Validate a parsed rig table (as ``tomllib`` returns it) and build a :class:`Rig`.

    Raises
    ------
    RigFileError
        As :func:`load_rig`.
    """
    return _Loader(source).build(table)


class _Loader:
    def __init__(self, source: str) -> None:
        self.source = source
        self.warnings: list[str] = []

    def fail(self, key: str, problem: str) -> RigFileError:
        return RigFileError(self.source, key, problem)

    # -- generic checks --------------------------------------------------------------------------------------------

    def check_names(self, given: dict[str, Any], allowed: list[str], where: str) -> None:
        for name in given:
            if name not in allowed:
                hint = difflib.get_close_matches(name, allowed, n=1)
                suggestion = f'; did you mean "{hint[0]}"?' if hint else ""
                path = f"{where}.{name}" if where else name
                raise self.fail(path, f"is not a known key (allowed here: {', '.join(allowed)}){suggestion}")

    def sub_table(self, parent: dict[str, Any], name: str, where: str, required: bool) -> dict[str, Any] | None:
        path = f"{where}.{name}" if where else name
        if name not in parent:
            if required:
                raise self.fail(path, "is missing; this table is required")
            return None
        value = parent[name]
        if not isinstance(value, dict):
            raise self.fail(path, f"must be a table ([{path}]); got {type(value).__name__}")
        return value

    def read(self, given: dict[str, Any], spec: Table, where: str) -> dict[str, Any]:
        """Check the keys of one table against its spec; return {name: value} with defaults filled in."""
        self.check_names(given, [k.name for k in spec.keys], where)
        return {k.name: self.value(given, k, where) for k in spec.keys}

    def value(self, given: dict[str, Any], key: Key, where: str) -> Any:
        path = f"{where}.{key.name}" if where else key.name
        if key.name not in given:
            if key.default is REQUIRED:
                raise self.fail(path, f"is missing; expected {_describe(key)}")
            return key.default
        value = given[key.name]
        if key.kind == "float":
            value = self.number(value, key, path)
        elif key.kind == "int":
            if isinstance(value, bool) or not isinstance(value, int):
                raise self.fail(path, f"must be an integer in {key.range_text()}; got {value!r}")
            if not key.in_range(value):
                raise self.fail(path, f"must be in {key.range_text()} {key.unit}; got {value}")
        elif key.kind == "str":
            if not isinstance(value, str):
                raise self.fail(path, f"must be text; got {value!r}")
            if key.choices is not None and value not in key.choices:
                raise self.fail(path, f"must be {key.range_text()}; got {value!r}{_hint(value, key.choices)}")
        elif key.kind == "strs":
            if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
                raise self.fail(path, f"must be a list of text, {key.range_text()}; got {value!r}")
            for v in value:
                if key.choices is not None and v not in key.choices:
                    raise self.fail(path, f"entries must be {key.range_text()}; got {v!r}{_hint(v, key.choices)}")
            if len(set(value)) != len(value):
                raise self.fail(path, f"lists a joint twice; got {value!r}")
            value = tuple(value)
        elif key.kind == "floats":
            if not isinstance(value, list):
                raise self.fail(path, f"must be a list of numbers; got {value!r}")
            value = tuple(self.number(v, key, f"{path}[{i}]") for i, v in enumerate(value))
        return value

    def number(self, value: Any, key: Key, path: str) -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise self.fail(path, f"must be a number in {key.range_text()} {key.unit}; got {value!r}")
        value = float(value)
        if not math.isfinite(value):
            raise self.fail(path, f"must be a finite number in {key.range_text()} {key.unit}; got {value}")
        if not key.in_range(value):
            raise self.fail(path, f"must be in {key.range_text()} {key.unit}; got {value:g}")
        if key.plausible is not None and not key.plausible[0] <= value <= key.plausible[1]:
            lo, hi = key.plausible
            mm = " (is the file in millimetres or grams?)" if value > hi else ""
            self.warnings.append(
                f"{self.source}: {path} = {value:g} {key.unit} is outside the usual bench range "
                f"[{lo:g}, {hi:g}]{mm}")
        return value

    # -- the rig ---------------------------------------------------------------------------------------------------

    def build(self, table: dict[str, Any]) -> Rig:
        self.check_names(table, [k.name for k in schema.TOP.keys] + list(schema.TOP_LEVEL_TABLES), "")
        top = {k.name: self.value(table, k, "") for k in schema.TOP.keys}
        base = top["base"]
        actuated = tuple(j for j in JOINTS if j in top["actuated"])  # canonical order: cart, shoulder, elbow
        if not actuated:
            raise self.fail("actuated", f"must name at least one joint, {schema.TOP.key('actuated').range_text()}")
        if base == "fixed" and "cart" in actuated:
            raise self.fail("actuated", 'lists "cart" but base = "fixed" has no cart; use base = "cart"')

        link1 = self.link(table, "link1")
        link2 = self.link(table, "link2")
        cart_table = self.sub_table(table, "cart", "", required=base == "cart")
        if base == "fixed" and cart_table is not None:
            raise self.fail("cart", 'is given but base = "fixed"; remove [cart] or set base = "cart"')
        cart = None if cart_table is None else Cart(**{
            k: v for k, v in self.read(cart_table, schema.CART, "cart").items()})

        actuators = self.actuators(table, actuated)
        n_states = len(STATE_NAMES[base])
        balance = self.balance(table, n_states, len(actuated))
        sensors = Sensors(**self.read(self.sub_table(table, "sensors", "", False) or {}, schema.SENSORS,
                                      "sensors"))
        uncertainty = self.uncertainty(table, base)
        verification = VerificationSettings(**self.read(self.sub_table(table, "verification", "", False) or {},
                                                        schema.VERIFICATION, "verification"))
        swingup = self.swingup(table, base, actuated)
        mount = self.mount(table)
        return Rig(
            name=top["name"], description=top["description"], base=base, actuated=actuated,
            gravity=top["gravity"], link1=link1, link2=link2, cart=cart, actuators=actuators,
            balance=balance, sensors=sensors, uncertainty=uncertainty, verification=verification, swingup=swingup,
            mount=mount, source=self.source, warnings=tuple(self.warnings),
        )

    def link(self, table: dict[str, Any], tag: str) -> Link:
        values = self.read(self.sub_table(table, tag, "", required=True), schema.LINK, tag)
        if values["com"] > values["length"]:
            raise self.fail(f"{tag}.com", f"must be in (0, length] = (0, {values['length']:g}] m; "
                                          f"got {values['com']:g}")
        defaulted = values["inertia"] is None
        if defaulted:
            values["inertia"] = values["mass"] * values["length"] ** 2 / 12.0
            if abs(values["com"] - values["length"] / 2) > 0.15 * values["length"]:
                self.warnings.append(
                    f"{self.source}: {tag}.inertia is not given, so the uniform-rod value m*l^2/12 = "
                    f"{values['inertia']:.3g} kg m^2 is used, but {tag}.com = {values['com']:g} m is far from "
                    f"length/2 = {values['length'] / 2:g} m: measure the inertia (docs/user-guide.md)")
        return Link(**values, inertia_defaulted=defaulted)

    def actuators(self, table: dict[str, Any], actuated: tuple[str, ...]) -> tuple[Actuator, ...]:
        group = self.sub_table(table, "actuator", "", required=True)
        self.check_names(group, list(JOINTS), "actuator")
        for joint in group:
            if joint not in actuated:
                raise self.fail(f"actuator.{joint}", f"is given but {joint!r} is not in actuated = "
                                                     f"{list(actuated)}")
        result = []
        for joint in actuated:
            given = self.sub_table(group, joint, "actuator", required=False)
            if given is None:
                raise self.fail(f"actuator.{joint}", "is missing; every actuated joint needs its limits "
                                                     "(peak, continuous, max_speed)")
            values = self.read(given, schema.ACTUATOR, f"actuator.{joint}")
            if values["continuous"] > values["peak"]:
                raise self.fail(f"actuator.{joint}.continuous",
                                f"must be in (0, peak] = (0, {values['peak']:g}]; got {values['continuous']:g}")
            if (values["stall"] is None) != (values["no_load_speed"] is None):
                raise self.fail(f"actuator.{joint}", "needs both stall and no_load_speed for a motor line, or neither")
            result.append(Actuator(joint=joint, **values))
        return tuple(result)

    def balance(self, table: dict[str, Any], n_states: int, n_inputs: int) -> Balance:
        given = self.sub_table(table, "balance", "", False) or {}
        values = self.read(given, schema.BALANCE, "balance")
        if "cart_process_noise" in given and n_states == len(STATE_NAMES["fixed"]):
            raise self.fail("balance.cart_process_noise", 'is given but base = "fixed" has no cart; remove it')
        for name, expected, what, entry in (("q", n_states, "states", "weight"), ("r", n_inputs, "inputs", "weight"),
                                            ("effort_noise", n_inputs, "inputs", "value")):
            if values[name] is not None and len(values[name]) != expected:
                raise self.fail(f"balance.{name}", f"must have one {entry} per {what[:-1]} ({expected} {what}); "
                                                   f"got {len(values[name])}")
        if (values["q"] is None) != (values["r"] is None):
            raise self.fail("balance", "needs both q and r, or neither (Bryson's rule then picks both)")
        cutoff = values["velocity_cutoff"]
        if cutoff is not None and cutoff >= values["sample_rate"] / 2.0:
            raise self.fail("balance.velocity_cutoff", f"must be below half the loop rate, (0, "
                                                       f"{values['sample_rate'] / 2.0:g}) Hz; got {cutoff:g}")
        return Balance(**values)

    def uncertainty(self, table: dict[str, Any], base: str) -> Uncertainty:
        given = self.sub_table(table, "uncertainty", "", False) or {}
        groups = {"link1": ("mass", "length", "com", "inertia", "damping", "coulomb"),
                  "link2": ("mass", "length", "com", "inertia", "damping", "coulomb"),
                  "cart": ("mass", "damping", "coulomb")}
        plain = {k: v for k, v in given.items() if k not in groups}
        values = self.read(plain, schema.UNCERTAINTY, "uncertainty")
        spreads = [("gravity", values["gravity"])] if values["gravity"] else []
        for group, names in groups.items():
            sub = self.sub_table(given, group, "uncertainty", False)
            if sub is None:
                continue
            if group == "cart" and base == "fixed":
                raise self.fail("uncertainty.cart", 'is given but base = "fixed" has no cart')
            self.check_names(sub, list(names), f"uncertainty.{group}")
            for name, raw in sub.items():
                key = replace(schema.UNCERTAIN_PARAMETER, name=name)
                spread = self.number(raw, key, f"uncertainty.{group}.{name}")
                if spread:
                    spreads.append((f"{group}.{name}", spread))
        return Uncertainty(distribution=values["distribution"], spreads=tuple(spreads))


    def swingup(self, table: dict[str, Any], base: str, actuated: tuple[str, ...]) -> SwingUpSettings:
        given = self.sub_table(table, "swingup", "", False) or {}
        values = self.read(given, schema.SWINGUP, "swingup")
        family = _FAMILIES.get((base, actuated), "custom")
        used = schema.SWINGUP_KEYS_BY_FAMILY[family]
        for name in given:
            if name not in used:
                raise self.fail(f"swingup.{name}", f"is not used by the {family} family (keys read there: "
                                                   f"{', '.join(used)})")
        return SwingUpSettings(**values)

    def mount(self, table: dict[str, Any]) -> Mount | None:
        given = self.sub_table(table, "mount", "", False)
        if given is None:
            return None
        values = self.read(given, schema.MOUNT, "mount")
        if all(values[k] is None for k in RATINGS):
            raise self.fail("mount", f"needs at least one rating ({', '.join(RATINGS)}); without one, leave "
                                     "[mount] out and the base loads are reported but not judged")
        return Mount(**values)


# The [mount] keys that rate a load (the others are the safety factor and lever arms).
RATINGS = ("horizontal_force", "vertical_force", "moment")

# (base, actuated) -> family name; Rig.family reads the same table.
_FAMILIES = {
    ("fixed", ("elbow",)): "acrobot",
    ("fixed", ("shoulder",)): "pendubot",
    ("cart", ("cart",)): "cart",
    ("fixed", ("shoulder", "elbow")): "fully actuated",
}


def _describe(key: Key) -> str:
    kinds = {"float": "a number", "int": "an integer", "str": "text", "floats": "a list of numbers",
             "strs": "a list of text"}
    unit = "" if key.unit == "-" else f" {key.unit}"
    if key.choices is not None:
        return f"{kinds[key.kind]}, {key.range_text()}"
    if key.kind == "str":
        return f"text ({key.doc})"
    return f"{kinds[key.kind]} in {key.range_text()}{unit} ({key.doc})"


def _hint(value: str, choices: tuple[str, ...]) -> str:
    match = difflib.get_close_matches(value, choices, n=1)
    return f'; did you mean "{match[0]}"?' if match else ""
