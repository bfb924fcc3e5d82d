"""The verdict rule, the settling definition a held rollout must meet, and the hazard notes' keep-out wording."""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import rig

from upswing.errors import RequestError
from upswing.model.derived import derived_quantities
from upswing.verification.budgets import Budget, compute_budgets
from upswing.verification.controllers import balance_controller
from upswing.verification.hazards import hazard_notes
from upswing.verification.simulate import NOT_SETTLED, Settling, SimulationSetup, simulate
from upswing.verification.stats import trials_to_show, wilson_interval
from upswing.verification.verdict import decide

Z = 1.959963984540054  # 97.5 % normal quantile (Abramowitz & Stegun 1964, Table 26.1)


def _budget(name: str, value: float, limit: float | None) -> Budget:
    ok = None if limit is None else value <= limit
    return Budget(name=name, value=value, limit=limit, unit="N m", ok=ok, median=value, meaning="test line")


BUDGETS = (_budget("elbow.peak_effort", 1.9, 1.9), _budget("elbow.rms_effort", 0.3, 0.75),
           _budget("base.peak_force", 40.0, None))


def test_one_rare_fall_in_a_thousand_passes():
    # 999 of 1000: the Wilson lower end (Wilson, 1927) is well above 0.95, so the rule passes where "every rollout
    # held" would fail. Expected lower end from the formula written out.
    d = decide(999, 1000, BUDGETS, 0.95, outcomes={"held": 999, "fell": 1})
    p, n = 0.999, 1000
    low = (p + Z * Z / (2 * n) - Z * math.sqrt(p * (1 - p) / n + Z * Z / (4 * n * n))) / (1 + Z * Z / n)
    assert d.verdict == "pass" and d.reasons == ()
    assert d.success_lower_bound == pytest.approx(low, abs=1e-12)  # same formula, round-off only
    assert d.success_lower_bound > 0.99
    # A pass still names what binds: the success bound and the closest rated budget (peak effort is a clamp, not
    # a budget that can be broken, so the RMS line is the closest here: 0.3 / 0.75 = 40 %).
    assert d.limited_by[0].startswith("success-rate bound")
    assert "elbow.rms_effort" in d.limited_by[1] and "40%" in d.limited_by[1]


def test_a_success_rate_not_shown_fails_and_says_so():
    # 955 of 1000: the point estimate is above 0.95 but the Wilson lower end (~0.940) is not.
    d = decide(955, 1000, BUDGETS, 0.95, outcomes={"held": 955, "not settled": 41, "fell": 4})
    assert wilson_interval(955, 1000)[0] < 0.95 < 955 / 1000
    assert d.verdict == "fail" and d.limited_by == ("success-rate bound",)
    assert "not settled: 41, fell: 4" in d.reasons[0] and "lower end below 95.0%" in d.reasons[0]


def test_too_few_rollouts_cannot_pass_and_the_reason_says_how_many_are_needed():
    # With s = n the Wilson lower end is n / (n + z^2) (Wilson, 1927, at p = 1): 73 rollouts are the fewest that
    # can show 0.95 (72 / (72 + z^2) = 0.9493), 381 the fewest for 0.99.
    assert trials_to_show(0.95) == 73 and trials_to_show(0.99) == 381
    assert wilson_interval(72, 72)[0] < 0.95 <= wilson_interval(73, 73)[0]
    assert wilson_interval(73, 73)[0] == pytest.approx(73 / (73 + Z * Z), abs=1e-12)
    d = decide(40, 40, BUDGETS, 0.95)
    assert d.verdict == "fail" and "run at least 73" in d.reasons[0]
    assert decide(73, 73, BUDGETS, 0.95).verdict == "pass"


def test_a_broken_budget_fails_with_all_held_and_is_named():
    over = (*BUDGETS, _budget("elbow.saturation_time", 0.9, 0.5))
    d = decide(1000, 1000, over, 0.95)
    assert d.verdict == "fail" and d.limited_by == ("budget elbow.saturation_time",)
    assert d.reasons == ("budget elbow.saturation_time = 0.9 N m exceeds its limit 0.5 N m",)


def test_required_success_must_be_a_fraction():
    for bad in (0.0, 1.0, 1.5, -0.1):
        with pytest.raises(RequestError, match=r"must be a fraction in \(0, 1\)"):
            decide(10, 10, BUDGETS, bad)


def test_the_cart_speed_is_a_finding_not_a_failure_but_the_position_box_still_binds():
    # Coulomb friction on the cart (0.9 N) makes the balance loop hunt: the cart keeps moving at a few cm/s to
    # tenths of m/s in the final second. By default that is held (links up, cart inside a quarter of its travel);
    # a tight cart-speed bound, or a tiny position box, turns the same runs into "not settled".
    r = rig("cart-double")
    controller = balance_controller(r)
    x0 = np.zeros((8, r.n_states))
    x0[:, 1] = np.linspace(-0.02, 0.02, 8)
    base = SimulationSetup(horizon=3.0)
    held = simulate(r, controller, x0, setup=base)
    assert held.held.all()
    assert np.min(held.hold_error[:, 3]) > 0.01  # the cart really still moves [m/s]
    assert np.max(held.hold_error[:, 0]) < 0.25 * r.cart.travel
    strict_speed = simulate(r, controller, x0, setup=SimulationSetup(horizon=3.0,
                                                                       settling=Settling(cart_rate=0.01)))
    assert np.all(strict_speed.status == NOT_SETTLED)
    tiny_box = simulate(r, controller, x0, setup=SimulationSetup(horizon=3.0, settling=Settling(cart=1e-4)))
    assert np.all(tiny_box.status == NOT_SETTLED)


def _notes(name: str):
    r = rig(name)
    res = simulate(r, balance_controller(r), np.zeros((2, r.n_states)), setup=SimulationSetup(horizon=1.5))
    budgets = compute_budgets(r, res, 1.5)
    notes = hazard_notes(r, budgets, rho_summary="test", success_rate=1.0, dropout_ms=100.0,
                         dropout_tested_ms=(2.0, 100.0))
    return r, {n.topic: n.text for n in notes}


def test_keep_out_is_measured_from_the_shoulder_on_a_fixed_base():
    r, notes = _notes("acrobot")
    reach = r.link1.length + r.link2.length  # 0.28 + 0.33 m; keep-out = reach + 0.5 m (derived.keep_out_radius)
    assert f"at least {reach + 0.5:.2f} m from the shoulder axis" in notes["swept zone"]
    assert "rail" not in notes["swept zone"]


def test_keep_out_is_measured_from_the_rail_centre_on_a_cart():
    # The shoulder rides along the rail, so the links reach travel + reach from the rail's centre: 0.41 + 0.48 m,
    # plus the 0.5 m margin = 1.39 m, measured from the rail's centre, not from the (moving) shoulder axis.
    r, notes = _notes("cart-double")
    assert derived_quantities(r).keep_out_half_width == pytest.approx(0.41 + 0.22 + 0.26, abs=1e-12)
    assert "at least 1.39 m from the rail's centre" in notes["swept zone"]
    assert "from the shoulder axis" not in notes["swept zone"]
    assert "the cart by up to" in notes["residual motion"]
    assert "longer ones were not tested" in notes["sensor drop-out"]
