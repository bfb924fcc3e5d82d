"""The documentation agrees with the code, and the bench formulas it teaches agree with physics.

- ``docs/rig-file.md`` is generated from the schema and must match the generator's output exactly.
- Every demo rig in ``scenarios/`` and the reference's worked example load; every rule across keys that the
  reference lists is enforced by the loader.
- The measurement formulas of ``docs/user-guide.md`` (compound pendulum, bifilar suspension, run-down tests) recover
  the parameters of upswing's own model from its simulated or computed motion, and the closed forms and worked
  numbers in ``docs/theory.md``, ``docs/conventions.md`` and ``docs/safety.md`` match the model.
"""

from __future__ import annotations

import copy
import math
import re
import tomllib
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import sympy as sp
from scipy.integrate import solve_ivp

from upswing.errors import RigFileError
from upswing.model import schema
from upswing.model.derived import derived_quantities
from upswing.model.dynamics import build_model, model_for
from upswing.model.equilibria import equilibrium_state
from upswing.model.modes import hanging_modes
from upswing.model.rig import PARAMETER_NAMES, load_rig, rig_from_table
from upswing.report.rig_reference import (
    CROSS_KEY_RULES,
    EXAMPLE,
    REGENERATE,
    SCENARIOS,
    rig_file_reference,
)

ROOT = Path(__file__).resolve().parents[1]
DOCS = ROOT / "docs"
G = 9.80665  # m/s^2, standard gravity (CGPM), the rig files' default


def _read(name: str) -> str:
    return (ROOT / name).read_text(encoding="utf-8")


# ----------------------------------------------------------------------------------------------------------------
# The generated reference


def test_rig_file_reference_matches_the_schema() -> None:
    path = DOCS / "rig-file.md"
    actual = path.read_text(encoding="utf-8") if path.exists() else ""
    expected = rig_file_reference()
    if actual != expected:
        a, e = actual.splitlines(), expected.splitlines()
        line = next((i for i, (x, y) in enumerate(zip(a, e, strict=False)) if x != y), min(len(a), len(e)))
        pytest.fail(
            "docs/rig-file.md is out of date with upswing.model.schema.TABLES (first difference at line "
            f"{line + 1}: file has {a[line] if line < len(a) else '<end>'!r}, generator gives "
            f"{e[line] if line < len(e) else '<end>'!r}).\nRegenerate it from the repository root with:\n"
            f"    {REGENERATE}")


def _sections(text: str) -> dict[str, str]:
    parts = re.split(r"^## ", text, flags=re.MULTILINE)
    return {p.splitlines()[0]: p for p in parts[1:]}


def test_reference_documents_every_table_and_key() -> None:
    # Guards the generator itself: each schema key has its own row in its own table's section.
    sections = _sections(rig_file_reference())
    for table in schema.TABLES:
        matching = [body for heading, body in sections.items()
                    if (table.name == "" and heading.startswith("Top level")) or f"[{table.name}]" in heading]
        assert len(matching) == 1, f"no single section for table {table.name!r}"
        for key in table.keys:
            assert f"| `{key.name}` |" in matching[0], f"{table.name}.{key.name} has no row"


# ----------------------------------------------------------------------------------------------------------------
# Rig files the docs point to


@pytest.mark.parametrize("path", sorted((ROOT / "scenarios").glob("*.toml"))
                         + sorted((ROOT / "src" / "upswing" / "demo").glob("*.toml")),
                         ids=lambda p: f"{p.parent.name}/{p.name}")
def test_every_scenario_loads_without_warnings(path: Path) -> None:
    rig = load_rig(path)
    assert rig.warnings == (), f"{path.name} is a demo rig of plausible bench size; warnings: {rig.warnings}"


def test_scenarios_named_in_the_docs_exist() -> None:
    named = {p for p, _ in SCENARIOS}
    for doc in [*DOCS.glob("*.md"), ROOT / "DEVELOPERS.md", ROOT / "README.md"]:
        named |= set(re.findall(r"scenarios/[\w.-]+\.toml", doc.read_text(encoding="utf-8")))
    assert named, "the docs should point to at least one demo rig"
    missing = sorted(p for p in named if not (ROOT / p).is_file())
    assert not missing, f"docs name scenario files that do not exist: {missing}"


def test_worked_example_loads_cleanly() -> None:
    rig = rig_from_table(tomllib.loads(EXAMPLE), source="worked example")
    assert rig.warnings == ()
    assert rig.family == "acrobot"


def _example() -> dict[str, Any]:
    return tomllib.loads(EXAMPLE)


def _cart_example() -> dict[str, Any]:
    t = _example()
    t["base"] = "cart"
    t["actuated"] = ["cart"]
    t["cart"] = {"mass": 1.1, "damping": 3.0, "coulomb": 0.5, "travel": 0.3}
    t["actuator"] = {"cart": {"peak": 25.0, "continuous": 9.0, "max_speed": 2.0}}
    t["balance"]["q"] = [20.0, 100.0, 150.0, 2.0, 1.0, 1.0]
    t["balance"]["r"] = [0.05]
    return t


def _set(path: str, value: Any, base: dict[str, Any] | None = None) -> dict[str, Any]:
    t = copy.deepcopy(_example() if base is None else base)
    *parents, last = path.split(".")
    node = t
    for p in parents:
        node = node.setdefault(p, {})
    if value is _DELETE:
        del node[last]
    else:
        node[last] = value
    return t


_DELETE = object()

# One or more violating tables per rule in CROSS_KEY_RULES, with the key the error must name.
VIOLATIONS: dict[tuple[str, str], list[tuple[dict[str, Any], str]]] = {
    ("", "actuated"): [
        (_set("actuated", []), "actuated"),
        (_set("actuated", ["elbow", "elbow"]), "actuated"),
        (_set("actuated", ["cart", "elbow"]), "actuated"),
    ],
    ("link1", "com"): [(_set("link2.com", 0.32), "link2.com"), (_set("link1.com", 0.28), "link1.com")],
    ("link1", "inertia"): [],  # a warning, not an error: see test_defaulted_inertia_rule
    ("cart", ""): [
        (_set("cart", _DELETE, _cart_example()), "cart"),
        (_set("cart", {"mass": 1.0, "travel": 0.3}), "cart"),
    ],
    ("actuator.<joint>", ""): [
        (_set("actuator.elbow", _DELETE), "actuator.elbow"),
        (_set("actuator.shoulder", {"peak": 1.0, "continuous": 0.5, "max_speed": 10.0}), "actuator.shoulder"),
    ],
    ("actuator.<joint>", "continuous"): [(_set("actuator.elbow.continuous", 1.7), "actuator.elbow.continuous")],
    ("actuator.<joint>", "stall"): [(_set("actuator.elbow.stall", 2.0), "actuator.elbow")],
    ("balance", "q"): [
        (_set("balance.q", [1.0, 1.0, 1.0]), "balance.q"),
        (_set("balance.r", [1.0, 1.0]), "balance.r"),
        (_set("balance.r", _DELETE), "balance"),
    ],
    ("balance", "effort_noise"): [(_set("balance.effort_noise", [0.1, 0.1]), "balance.effort_noise")],
    ("balance", "velocity_cutoff"): [(_set("balance.velocity_cutoff", 250.0), "balance.velocity_cutoff")],
    ("balance", "cart_process_noise"): [(_set("balance.cart_process_noise", 1.0), "balance.cart_process_noise")],
    ("uncertainty", ""): [(_set("uncertainty.cart", {"mass": 0.1}), "uncertainty.cart")],
    ("mount", ""): [(_set("mount", {"safety_factor": 2.0, "shoulder_height": 0.3}), "mount"),
                    (_set("mount", {"moment": 40.0}), "mount.safety_factor")],
}


def test_every_documented_rule_has_violation_cases() -> None:
    assert set(VIOLATIONS) == {(r.table, r.key) for r in CROSS_KEY_RULES}


@pytest.mark.parametrize("rule", CROSS_KEY_RULES, ids=lambda r: f"{r.table or 'top'}.{r.key or '*'}")
def test_documented_rules_across_keys_are_enforced(rule) -> None:
    for table, key in VIOLATIONS[(rule.table, rule.key)]:
        with pytest.raises(RigFileError) as info:
            rig_from_table(table, source="rule.toml")
        assert info.value.key == key, f"{rule.text!r}: error named {info.value.key!r}, expected {key!r}"
        assert str(info.value).startswith(f"rule.toml: {key}")


def test_defaulted_inertia_rule() -> None:
    # link1: com 0.183 m is 0.048 m from length/2 = 0.135 m, beyond 0.15 * 0.27 = 0.0405 m: warn.
    rig = rig_from_table(_set("link1.inertia", _DELETE))
    assert any("link1.inertia" in w for w in rig.warnings)
    assert rig.link1.inertia == pytest.approx(0.58 * 0.27**2 / 12, rel=1e-15)  # uniform rod m l^2 / 12 (common)
    # link2: com 0.16 m is 0.005 m from 0.155 m: no warning.
    rig = rig_from_table(_set("link2.inertia", _DELETE))
    assert rig.warnings == ()


def test_input_order_ignores_the_written_order() -> None:
    t = _set("actuated", ["elbow", "shoulder"])
    t["actuator"]["shoulder"] = {"peak": 3.0, "continuous": 1.0, "max_speed": 20.0}
    t["balance"]["r"] = [1.0, 2.0]
    assert rig_from_table(t).input_names == ("shoulder", "elbow")  # conventions: cart, shoulder, elbow


# ----------------------------------------------------------------------------------------------------------------
# The closed forms in docs/theory.md and the signs in docs/conventions.md


def _random_parameters(rng: np.random.Generator) -> dict[str, float]:
    v = {name: float(rng.uniform(0.05, 1.0)) for name in PARAMETER_NAMES}
    v["link1.com"] = v["link1.length"] * rng.uniform(0.1, 1.0)
    v["link2.com"] = v["link2.length"] * rng.uniform(0.1, 1.0)
    v["link1.inertia"] *= 0.01
    v["link2.inertia"] *= 0.01
    v["gravity"] = G
    return v


def test_theory_closed_form_mass_matrix_and_gravity() -> None:
    # Fixed-base entries as written in docs/theory.md section 1 (Spong 1995; Spong, Hutchinson & Vidyasagar 2006,
    # rewritten for angles from the upward vertical; from memory). Tolerance 1e-12: both sides are exact formulas,
    # so only rounding separates them.
    rng = np.random.default_rng(20240611)
    fixed = build_model("fixed", ("elbow",))
    cart = build_model("cart", ("cart",))
    for _ in range(5):
        v = _random_parameters(rng)
        p = np.array([v[n] for n in PARAMETER_NAMES])
        m1, m2, mc = v["link1.mass"], v["link2.mass"], v["cart.mass"]
        l1, lc1, lc2 = v["link1.length"], v["link1.com"], v["link2.com"]
        I1, I2 = v["link1.inertia"], v["link2.inertia"]
        th1, th2 = rng.uniform(-math.pi, math.pi, 2)
        c2, phi2 = math.cos(th2), th1 + th2
        M = np.array([[I1 + m1 * lc1**2 + I2 + m2 * (l1**2 + lc2**2 + 2 * l1 * lc2 * c2),
                       I2 + m2 * (lc2**2 + l1 * lc2 * c2)],
                      [I2 + m2 * (lc2**2 + l1 * lc2 * c2), I2 + m2 * lc2**2]])
        g = np.array([-(m1 * lc1 + m2 * l1) * G * math.sin(th1) - m2 * lc2 * G * math.sin(phi2),
                      -m2 * lc2 * G * math.sin(phi2)])
        np.testing.assert_allclose(np.array(fixed.mass_matrix([th1, th2], p)), M, rtol=1e-12, atol=1e-14)
        np.testing.assert_allclose(np.array(fixed.gravity_terms([th1, th2], p)).ravel(), g, rtol=1e-12, atol=1e-14)
        Mc = np.array(cart.mass_matrix([0.3, th1, th2], p))
        np.testing.assert_allclose(Mc[1:, 1:], M, rtol=1e-12, atol=1e-14)
        np.testing.assert_allclose(
            [Mc[0, 0], Mc[0, 1], Mc[0, 2]],
            [mc + m1 + m2, -(m1 * lc1 + m2 * l1) * math.cos(th1) - m2 * lc2 * math.cos(phi2),
             -m2 * lc2 * math.cos(phi2)], rtol=1e-12, atol=1e-14)


def test_base_load_signs_as_documented() -> None:
    # docs/conventions.md section 8; Newton's third law (common practice): at rest the rig pushes down with its
    # weight, and the base feels minus the shoulder torque. Tolerance 1e-12: exact identities up to rounding.
    rig = load_rig(ROOT / "scenarios" / "pendubot.toml")
    model, p = model_for(rig), rig.parameter_vector()
    x = equilibrium_state(rig, "hanging")
    weight = (rig.link1.mass + rig.link2.mass) * rig.gravity
    at_rest = np.array(model.base_load(x, [0.0], p)).ravel()
    np.testing.assert_allclose(at_rest, [0.0, -weight, 0.0], atol=1e-12)
    pushed = np.array(model.base_load(x, [1.0], p)).ravel()
    assert pushed[2] == pytest.approx(-1.0, abs=1e-12)
    assert pushed[1] == pytest.approx(-weight, abs=1e-12)  # at hanging the first motion is horizontal
    # +1 N m turns link 1 counter-clockwise: from hanging its centre of mass starts to the right, so the base is
    # pushed to the left.
    assert pushed[0] < 0
    assert model.rhs(x, [1.0], p)[2] > 0


# ----------------------------------------------------------------------------------------------------------------
# The bench formulas of docs/user-guide.md


def _single_link_rig(**link1: float):
    """The worked example's link 1 with a negligible, short link 2 (it neither loads link 1 nor resonates with
    it: its own pendulum frequency, ~17 rad/s, is far from link 1's ~6.7 rad/s)."""
    t = _example()
    t["link1"].update(link1)
    t["link2"] = {"mass": 1e-6, "length": 0.05, "com": 0.025, "inertia": 1e-6 * 0.05**2 / 12}
    return rig_from_table(t)


def test_compound_pendulum_recovers_the_inertia() -> None:
    # I_pivot = m g d T^2 / (4 pi^2) (physical pendulum, Huygens 1673; any dynamics text) and the parallel-axis
    # theorem, applied to the link-1 mode that upswing's modal analysis computes.
    rig = _single_link_rig()
    modes = hanging_modes(rig)
    mode = max(modes, key=lambda m: abs(m.absolute_shape[0]) / max(map(abs, m.absolute_shape)))
    T = 1.0 / mode.frequency_hz
    m, d = rig.link1.mass, rig.link1.com
    inertia = m * G * d * T**2 / (4 * math.pi**2) - m * d**2
    # 1e-4: the 1e-6 kg link 2 at the elbow adds ~m2 l1^2 = 7e-8 kg m^2 to I_pivot (3e-6 relative), amplified about
    # six-fold by the subtraction of m d^2.
    assert inertia == pytest.approx(rig.link1.inertia, rel=1e-4)
    guide = " ".join(_read("docs/user-guide.md").split())
    for quoted in (f"T = {T:.4f} s",  # the worked example's period and inertia about the pivot
                   f"I_pivot = 0.58 × 9.80665 × 0.183 × {T:.4f}² / (4π²) = {m * G * d * T**2 / (4 * math.pi**2):.5f}"):
        assert quoted in guide, f"docs/user-guide.md section 4.1 should quote {quoted!r}"


def test_bifilar_formula_from_the_suspension_geometry() -> None:
    # Derive the small-angle period from the geometry with sympy (a general-purpose reference library): a twist psi
    # moves each wire's lower end by a chord 2 b sin(psi/2), raising the link by L - sqrt(L^2 - chord^2).
    m, g, b, L, inertia, psi = sp.symbols("m g b L I psi", positive=True)
    rise = L - sp.sqrt(L**2 - 2 * b**2 * (1 - sp.cos(psi)))
    stiffness = sp.diff(m * g * rise, psi, 2).subs(psi, 0)
    period = 2 * sp.pi * sp.sqrt(inertia / stiffness)
    guide_formula = m * g * b**2 * period**2 / (4 * sp.pi**2 * L)  # docs/user-guide.md section 4.2
    assert sp.simplify(guide_formula - inertia) == 0
    T = float(period.subs({m: 0.58, g: G, b: 0.10, L: 0.80, inertia: 0.0037}))
    quoted = f"T ≈ {T:.3f} s"  # the worked example's period
    assert quoted in _read("docs/user-guide.md"), f"docs/user-guide.md section 4.2 should quote {quoted!r}"


def _peaks(rig, theta0: float, t_end: float, smoothing: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Times and amplitudes (theta1 - pi) of the successive maxima of a free swing about hanging."""
    model = build_model(rig.base, rig.actuated, coulomb_smoothing=smoothing)
    p = rig.parameter_vector()
    x0 = equilibrium_state(rig, "hanging")
    x0[0] += theta0
    u = np.zeros(rig.n_inputs)

    def turning(t: float, x: np.ndarray) -> float:
        return x[2]

    turning.direction = -1.0  # theta1_dot from + to -: a maximum of theta1
    sol = solve_ivp(lambda t, x: model.rhs(x, u, p), (0.0, t_end), x0, method="DOP853", rtol=1e-10,
                    atol=1e-12, events=turning)
    assert sol.success
    t, x = sol.t_events[0], sol.y_events[0]
    return t, x[:, 0] - math.pi


def test_logarithmic_decrement_recovers_viscous_damping() -> None:
    # damping = 2 I_pivot delta / T_d: log decrement of a lightly damped oscillator (Thomson & Dahleh, Theory of
    # Vibration with Applications; from memory), as docs/user-guide.md section 5.1 states it.
    b = 0.004  # N m s/rad: damping ratio ~0.013, a lightly damped bench bearing
    rig = _single_link_rig(damping=b, coulomb=0.0)
    t, A = _peaks(rig, 0.1, 9.0)
    assert len(A) >= 8
    n = len(A) - 1
    delta = math.log(A[0] / A[-1]) / n
    T_d = (t[-1] - t[0]) / n
    I_pivot = rig.link1.inertia + rig.link1.mass * rig.link1.com**2
    # 2e-3: the formula is the small-angle result; at 0.1 rad the period and the decay differ from it by
    # O(theta0^2/16) ~ 6e-4 (observed: 3e-4), and the integration error (rtol 1e-10) is far below that.
    assert 2 * I_pivot * delta / T_d == pytest.approx(b, rel=2e-3)


def test_linear_amplitude_drop_recovers_coulomb_friction() -> None:
    # coulomb = m g d dA / 4: an oscillator with dry friction loses 4 f / k of amplitude per cycle (Thomson & Dahleh;
    # from memory), docs/user-guide.md section 5.1.
    f = 0.004  # N m: drop of 4 f / (m g d) ~ 0.015 rad per cycle
    rig = _single_link_rig(damping=0.0, coulomb=f)
    t, A = _peaks(rig, 0.12, 4.5, smoothing=1e-4)
    assert len(A) >= 4
    drops = -np.diff(A)
    m, d = rig.link1.mass, rig.link1.com
    # 5e-3: at amplitudes up to 0.12 rad, sin(theta) ~ theta costs up to theta^2/6 ~ 2.4e-3 (observed: 2.1e-3 on the
    # first cycle, falling with the amplitude); the tanh smoothing at v_s = 1e-4 rad/s (peak speeds ~0.8 rad/s)
    # weakens friction only within ~1e-4 of a period. Equal drops per cycle are what identifies dry friction: a
    # viscous law gives drops proportional to the amplitude, 50 % apart over these cycles.
    np.testing.assert_allclose(m * G * d * drops / 4, f, rtol=5e-3)


# ----------------------------------------------------------------------------------------------------------------
# The worked numbers of docs/safety.md


def test_safety_example_numbers() -> None:
    safety = _read("docs/safety.md")
    rig = load_rig(ROOT / "scenarios" / "acrobot.toml")
    model, p = model_for(rig), rig.parameter_vector()
    energy = [float(model.energy(equilibrium_state(rig, name), p)[2]) for name in ("upright", "hanging")]
    dV = energy[0] - energy[1]
    l1, l2 = rig.link1, rig.link2
    # The closed form quoted in safety.md: potential energy of conventions.md section 6 (tolerance: rounding).
    assert dV == pytest.approx(2 * G * (l1.mass * l1.com + l2.mass * (l1.length + l2.com)), rel=1e-12)
    derived = derived_quantities(rig)
    omega = math.sqrt(2 * dV / derived.inertia_about_pivot)
    centripetal = (l1.mass * l1.com + l2.mass * (l1.length + l2.com)) * omega**2
    cart = load_rig(ROOT / "scenarios" / "cart-double.toml")
    mass = derived_quantities(cart).total_mass
    drive = cart.actuator("cart")
    flat = " ".join(safety.split())  # the quoted numbers may wrap across lines
    for quoted in (f"ΔV ≈ {dV:.1f} J, ω ≈ {omega:.1f} rad/s, tip speed ≈ {omega * derived.reach:.1f} m/s",
                   f"about {centripetal:.0f} N",
                   f"about {0.5 * mass * drive.max_speed**2:.1f} J",
                   f"takes about {drive.max_speed**2 / (2 * drive.peak / mass):.1f} m"):
        assert quoted in flat, f"docs/safety.md should quote {quoted!r} for the demo rigs as they are now"


def test_user_guide_lists_every_run_folder_file() -> None:
    # The run-folder table of docs/user-guide.md names exactly the files upswing design can write.
    from upswing.design.run_folder import DESCRIPTIONS

    guide = (ROOT / "docs" / "user-guide.md").read_text(encoding="utf-8")
    section = guide[guide.index("What the run folder holds"):guide.index("**The verdict**")]
    listed = set(re.findall(r"`([a-z_]+\.(?:html|json|toml|csv|h))`", section))
    assert listed == set(DESCRIPTIONS)


def test_quoted_balance_margins_are_the_demo_rigs_as_they_are_now() -> None:
    # docs/user-guide.md and the cart rig's [balance] comment quote the margins the design verdict judges (discrete
    # LQR + Kalman filter, design.pipeline.RUNNING_LOOP); recomputed here so a change to a rig or the code cannot
    # leave them stale. Every demo rig's judged loop meets the rule (decision.loop_margins).
    from upswing.design.decision import loop_margins
    from upswing.design.pipeline import RUNNING_LOOP
    from upswing.synthesis.study import study_balance

    guide = " ".join((ROOT / "docs" / "user-guide.md").read_text(encoding="utf-8").split())
    cart_lines = (ROOT / "scenarios" / "cart-double.toml").read_text(encoding="utf-8").splitlines()
    cart_file = " ".join(" ".join(line.lstrip("# ") for line in cart_lines).split())  # comments may wrap
    judged = {}
    for name in ("acrobot", "pendubot", "cart-double", "arm-2dof"):
        report = study_balance(load_rig(ROOT / "scenarios" / f"{name}.toml")).margins[RUNNING_LOOP]
        assert all(m.ok for m in loop_margins(report)), name
        judged[name] = report.loops

    def factor(lm) -> float:
        return min(lm.gain_margin[1], 1.0 / lm.gain_margin[0])

    cart, (acrobot,), (pendubot,), arm = (judged[n][0] if n == "cart-double" else judged[n]
                                          for n in ("cart-double", "acrobot", "pendubot", "arm-2dof"))
    quotes = {
        guide: [f"the gain margin factor is {factor(cart):.2f}, the phase margin {cart.phase_margin_deg:.0f} degrees",
                f"acrobot {factor(acrobot):.2f} (phase {acrobot.phase_margin_deg:.0f} degrees)",
                f"pendubot {factor(pendubot):.2f} ({pendubot.phase_margin_deg:.0f} degrees)",
                f"fully actuated arm {factor(arm[0]):.2f} and {factor(arm[1]):.2f} ({arm[0].phase_margin_deg:.0f} and "
                f"{arm[1].phase_margin_deg:.0f} degrees)"],
        cart_file: [f"factor {factor(cart):.2f} ({cart.gain_margin[0]:.3f} .. {cart.gain_margin[1]:.2f}), phase margin "
                    f"{cart.phase_margin_deg:.0f} deg, disk margin {cart.disk_margin:.2f}"],
    }
    for text, expected in quotes.items():
        for quoted in expected:
            assert quoted in text, f"should quote {quoted!r} for the demo rigs as they are now"
