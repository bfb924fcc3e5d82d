"""Base loads against the mount's ratings: statics of the load model, the bound at the mount, the budget lines,
their verdicts in ``upswing verify`` and the swing-up verification, and the hazard note."""

from __future__ import annotations

import json
import tomllib
from dataclasses import replace

import numpy as np
import pytest
from conftest import SCENARIOS
from rigs import random_rig

from upswing.cli import main
from upswing.model.dynamics import model_for
from upswing.model.equilibria import equilibrium_state
from upswing.model.rig import Rig, rig_from_table
from upswing.safety import STANDARDS
from upswing.verification.budgets import (
    BASE_LOAD_LINES,
    MOUNT_RATING,
    Budget,
    base_load_lines,
    mount_moment_bound,
    ranked_budgets,
    tightest_budget,
)
from upswing.verification.hazards import base_load_note

G = 9.80665


def with_mount(name: str, mount: dict | None) -> Rig:
    """A demo rig with its [mount] table replaced (None removes it), through the loader."""
    table = tomllib.loads((SCENARIOS / f"{name}.toml").read_text())
    table.pop("mount", None)
    if mount is not None:
        table["mount"] = mount
    return rig_from_table(table, source=f"{name}-mount.toml")


def weight(rig: Rig) -> float:
    return (rig.link1.mass + rig.link2.mass + (rig.cart.mass if rig.cart else 0.0)) * rig.gravity


# ----------------------------------------------------------------------------------------------------------------
# Statics of the load model (closed form)


@pytest.mark.parametrize("family", ["acrobot", "pendubot", "fully actuated"])
def test_hanging_at_rest_loads_the_base_with_the_weight_and_no_moment(family):
    # Statics (common practice): a body at rest is held by a support force equal and opposite to its weight; hanging
    # straight down, the weight passes through the shoulder axis, so no moment. The base feels the weight: (0, -W).
    rig = random_rig(21, family)
    model = model_for(rig)
    load = np.array(model.base_load(equilibrium_state(rig, "hanging"), np.zeros(rig.n_inputs),
                                    rig.parameter_vector())).ravel()
    np.testing.assert_allclose(load, [0.0, -weight(rig), 0.0], atol=1e-12 * weight(rig))  # round-off only


def test_horizontal_links_held_by_torques_load_the_base_with_the_weight_and_sum_m_g_c():
    # Textbook statics (common practice): links held straight and horizontal by joint torques. The shoulder must
    # carry the gravity moment of everything beyond it, tau1 = g (m1 c1 + m2 (l1 + c2)), the elbow tau2 = g m2 c2;
    # with theta1 = +pi/2 (links pointing left, docs/conventions.md) gravity turns them further counter-clockwise,
    # so both holding torques are clockwise (negative). Nothing accelerates, so the base carries the weight
    # (0, -W) and the shoulder passes the reaction -tau1 = +g sum m c to the base.
    rig = random_rig(5, "fully actuated")
    model = model_for(rig)
    p = rig.parameter_vector()
    l1, l2 = rig.link1, rig.link2
    tau1 = -G * (l1.mass * l1.com + l2.mass * (l1.length + l2.com))
    tau2 = -G * l2.mass * l2.com
    x = np.array([np.pi / 2, 0.0, 0.0, 0.0])
    u = np.array([tau1, tau2])
    scale = abs(tau1)
    np.testing.assert_allclose(model.rhs(x, u, p)[2:], 0.0, atol=1e-10 * scale)  # it is an equilibrium
    load = np.array(model.base_load(x, u, p)).ravel()
    np.testing.assert_allclose(load, [0.0, -weight(rig), -tau1], atol=1e-10 * scale)  # round-off only
    # The bound at a mount h below and d beside the shoulder, |M| + h |F_x| + d |F_y|, against the moment about a
    # rated point on the far side from the links, r = (-d, h) from it to the shoulder: M + r_x F_y - r_y F_x.
    h, d = 0.3, 0.05
    bound = mount_moment_bound(with_mount("arm-2dof", {"moment": 100.0, "safety_factor": 2.0,
                                                       "shoulder_height": h, "shoulder_offset": d}),
                               load[:1], load[1:2], load[2:], np.zeros(1))
    exact = load[2] + (-d) * load[1] - h * load[0]
    assert bound[0] == pytest.approx(abs(exact), rel=1e-12)  # round-off only
    assert bound[0] == pytest.approx(abs(tau1) + d * weight(rig), rel=1e-12)


@pytest.mark.parametrize("family", ["pendubot", "cart"])
def test_mount_moment_bound_covers_the_moment_about_the_rated_point(family):
    # Definition of a moment (statics, common practice): a force F acting at the shoulder and a couple M there give
    # M + r x F about a point at -r from the shoulder. Here the rated point lies h below the shoulder's home and d
    # to either side, and the cart (if any) moves the shoulder by x; the bound must cover both sides, for any state.
    rig = random_rig(8, family)
    h, d = 0.35, 0.12
    mount_rig = replace(rig, mount=with_mount("pendubot", {
        "moment": 50.0, "safety_factor": 2.0, "shoulder_height": h, "shoulder_offset": d}).mount)
    model = model_for(rig)
    rng = np.random.default_rng(4)
    X = rng.normal(size=(200, rig.n_states)) * 2.0
    U = rng.normal(size=(200, rig.n_inputs)) * 3.0
    loads = np.array([np.array(model.base_load(x, u, rig.parameter_vector())).ravel() for x, u in zip(X, U,
                                                                                                          strict=True)])
    cart_x = X[:, 0] if rig.cart is not None else np.zeros(len(X))
    bound = mount_moment_bound(mount_rig, loads[:, 0], loads[:, 1], loads[:, 2], cart_x)
    for side in (-1.0, 1.0):
        rx, ry = cart_x + side * d, np.full(len(X), h)  # from the rated point to the shoulder
        exact = loads[:, 2] + rx * loads[:, 1] - ry * loads[:, 0]
        assert np.all(np.abs(exact) <= bound * (1 + 1e-12))
    # ... and it is reached when the terms line up (same signs): the bound is not loose by construction.
    assert np.max(np.maximum(*(np.abs(loads[:, 2] + (cart_x + s * d) * loads[:, 1] - h * loads[:, 0])
                               for s in (-1.0, 1.0))) / bound) > 0.5


# ----------------------------------------------------------------------------------------------------------------
# Budget lines and ranking


def test_base_load_lines_get_rating_over_safety_factor_and_are_judged():
    strong = with_mount("pendubot", {"horizontal_force": 90.0, "vertical_force": 600.0, "moment": 30.0,
                                     "safety_factor": 3.0})
    data = [np.array([10.0, 20.0]), np.array([5.0, 8.0]), np.array([11.0, 21.0]), np.array([1.0, 2.5]),
            np.zeros(2)]
    lines = {b.name: b for b in base_load_lines(strong, *data)}
    assert tuple(lines) == BASE_LOAD_LINES
    assert lines["base.peak_force_x"].limit == pytest.approx(30.0) and lines["base.peak_force_x"].ok is True
    assert lines["base.peak_force_y"].limit == pytest.approx(200.0)
    assert lines["base.peak_mount_moment"].limit == pytest.approx(10.0)
    assert lines["base.peak_force"].limit is None and lines["base.peak_moment"].limit is None  # reported only
    weak = with_mount("pendubot", {"horizontal_force": 45.0, "safety_factor": 3.0})  # allows 15 N: 20 N fails
    lines = {b.name: b for b in base_load_lines(weak, *data)}
    assert lines["base.peak_force_x"].ok is False and lines["base.peak_force_x"].value == 20.0
    assert lines["base.peak_force_y"].limit is None and lines["base.peak_mount_moment"].limit is None
    bare = {b.name: b for b in base_load_lines(with_mount("pendubot", None), *data)}
    assert all(b.limit is None and b.ok is None for b in bare.values())  # no [mount]: today's behaviour
    assert bare["base.peak_mount_moment"].value == bare["base.peak_moment"].value == 2.5  # h = d = 0


def test_ranking_is_one_rule():
    # Peak effort is clamped by the actuator (reaching 100 % is saturation, not a broken limit): never ranked.
    lines = (Budget("elbow.peak_effort", 1.9, 1.9, "N m", True, 1.0, ""),
             Budget("elbow.rms_effort", 0.3, 0.75, "N m", True, 0.2, ""),
             Budget("base.peak_force_x", 12.0, 15.0, "N", True, 8.0, ""),
             Budget("tip.peak_speed", 3.0, None, "m/s", None, 1.0, ""))
    assert [b.name for b in ranked_budgets(lines)] == ["elbow.rms_effort", "base.peak_force_x"]
    assert tightest_budget(lines).name == "base.peak_force_x"  # 80 % beats 40 %
    assert tightest_budget(lines[:1]) is None


def test_hazard_note_says_whether_the_base_loads_were_judged():
    data = [np.array([20.0]), np.array([8.0]), np.array([21.0]), np.array([2.5]), np.zeros(1)]
    bare = with_mount("pendubot", None)
    note = base_load_note(bare, base_load_lines(bare, *data))
    assert "not judged" in note.text and "[mount]" in note.text and "safety_factor" in note.text
    assert set(note.standards) <= set(STANDARDS) and "ISO 12100" in note.standards
    weak = with_mount("pendubot", {"horizontal_force": 45.0, "safety_factor": 3.0})
    note = base_load_note(weak, base_load_lines(weak, *data))
    assert "EXCEEDED: base.peak_force_x" in note.text
    assert "[mount].vertical_force" in note.text and "[mount].moment" in note.text  # what is still unjudged
    strong = with_mount("pendubot", {"horizontal_force": 90.0, "vertical_force": 600.0, "moment": 30.0,
                                     "safety_factor": 3.0})
    note = base_load_note(strong, base_load_lines(strong, *data))
    assert "within its limit" in note.text and "Not judged" not in note.text


# ----------------------------------------------------------------------------------------------------------------
# Verdicts: upswing verify and the swing-up verification judge the ratings


WEAK_ARM = """
[mount]
vertical_force = 12.0
safety_factor = 2.0
"""


def test_verify_fails_a_mount_rated_below_the_rigs_weight(tmp_path, capsys):
    # The arm weighs (0.74 + 0.23) kg * g = 9.5 N; a fixing allowed 12 N / 2 = 6 N vertically cannot even hold it
    # at rest (statics), so the verdict must fail on base.peak_force_y whatever the controller does. The same runs
    # with the demo's bolted tower pass (30 of 30 shows 30 / (30 + z^2) = 0.886 >= 0.85; Wilson 1927).
    text = (SCENARIOS / "arm-2dof.toml").read_text()
    weak = tmp_path / "arm-weak-mount.toml"
    weak.write_text(text[:text.index("[mount]")] + WEAK_ARM)
    common = ["--rollouts", "30", "--horizon", "2", "--roa-samples", "30", "--required-success", "0.85", "--json"]
    assert main(["verify", str(SCENARIOS / "arm-2dof.toml"), *common]) == 0
    strong = json.loads(capsys.readouterr().out)
    lines = {b["name"]: b for b in strong["budgets"]}
    rig = with_mount("arm-2dof", tomllib.loads(text)["mount"])
    for name, rating in MOUNT_RATING.items():
        assert lines[name]["limit"] == pytest.approx(getattr(rig.mount, rating) / rig.mount.safety_factor)
        assert lines[name]["ok"] is True
    assert main(["verify", str(weak), *common]) == 1
    data = json.loads(capsys.readouterr().out)
    lines = {b["name"]: b for b in data["budgets"]}
    assert lines["base.peak_force_y"]["limit"] == 6.0 and lines["base.peak_force_y"]["ok"] is False
    assert lines["base.peak_force_y"]["value"] >= 9.5  # at least the weight
    assert lines["base.peak_force_x"]["limit"] is None  # not rated in this file
    assert data["verdict"] == "fail" and "budget base.peak_force_y" in data["limited_by"]
    assert any(r.startswith("budget base.peak_force_y") for r in data["reasons"])
    note = next(h for h in data["hazards"] if h["topic"] == "base loads")
    assert "EXCEEDED: base.peak_force_y" in note["text"]


def test_swingup_verification_judges_the_mount():
    # The cart rig weighs (1.35 + 0.192 + 0.118) kg * g = 16.3 N: a rail fixing allowed 20 N / 2 = 10 N vertically
    # fails by statics alone, so the tracked swing-up's verdict must name base.peak_force_y.
    from upswing.synthesis.swingup import plan_swingup
    from upswing.verification.manoeuvre import verify_swingup

    rig = with_mount("cart-double", {"vertical_force": 20.0, "safety_factor": 2.0})
    v = verify_swingup(rig, plan=plan_swingup(rig).require_success(), rollouts=8, seed=0, roa_samples=60)
    line = {b.name: b for b in v.budgets}["base.peak_force_y"]
    assert line.limit == 10.0 and line.ok is False and line.value >= weight(rig)
    assert v.verdict == "fail" and any(r.startswith("budget base.peak_force_y") for r in v.reasons)
