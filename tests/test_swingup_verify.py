"""verify_swingup: the whole manoeuvre (tracked swing-up, catch, balance) on the demo rigs under their uncertainty.

One optimized plan per demo rig is shared by the module (module-scoped fixture; a plan costs 1-3 s). The Monte
Carlo runs use 64 rollouts: enough that a 95 % Wilson interval separates "almost always" from "often" (at 64/64 the
lower end is 0.944, at 44/64 it is 0.57; Wilson 1927), while the batch engine needs well under a second for them.
The frozen-reading study that verify_swingup runs by default is tested in test_swingup_dropout.py and switched off
here, where it would only add a dozen reruns per call.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from rigs import ROOT

from upswing.errors import RequestError
from upswing.model.rig import Uncertainty, load_rig
from upswing.synthesis.swingup import plan_swingup
from upswing.verification.manoeuvre import verify_swingup
from upswing.verification.stats import wilson_interval

ROLLOUTS = 64


@pytest.fixture(scope="module")
def acrobot():
    rig = load_rig(ROOT / "scenarios" / "acrobot.toml")
    return rig, plan_swingup(rig).require_success()


@pytest.fixture(scope="module")
def cart():
    rig = load_rig(ROOT / "scenarios" / "cart-double.toml")
    return rig, plan_swingup(rig).require_success()


def _common_checks(rig, v):
    # The reported interval is the Wilson score interval of the reported count (Wilson 1927, the published
    # formula, implemented and checked against it in tests/verification/test_verdict.py).
    assert v.success_interval == pytest.approx(wilson_interval(v.successes, v.rollouts), abs=1e-12)
    assert v.successes == v.outcomes["caught and held"] and sum(v.outcomes.values()) == v.rollouts
    ok = v.handover_times[~np.isnan(v.handover_times)]
    # A hand-over happens within the run, and for tracking no later than the table's last row (the CSV contract).
    assert np.all((ok >= 0) & (ok <= v.table.end_time + 1e-9))
    peak = {b.name: b for b in v.budgets}[f"{rig.input_names[0]}.peak_effort"]
    assert peak.value <= rig.peak_inputs[0] * (1 + 1e-12)  # the applied input never exceeds peak (saturation)
    assert any(h.topic == "swing-up speed and energy" for h in v.hazards)
    assert any("Local codes" in c for c in v.cautions)


def test_cart_rig_tracked_swingup_is_caught_under_uncertainty(cart):
    rig, plan = cart
    v = verify_swingup(rig, plan=plan, rollouts=ROLLOUTS, seed=1, dropout_study=False)
    _common_checks(rig, v)
    # Measured: 200 of 200 rollouts caught and held (`upswing swingup scenarios/cart-double.toml`, seed 0). The
    # test asks for a Wilson lower end of at least 0.9, i.e. at most one miss in 64: a regression to "often" fails.
    assert v.success_interval[0] >= 0.9
    assert v.nominal.caught and math.isfinite(v.nominal.handover_time)
    assert v.nominal.handover_time <= plan.duration + 1e-9


def test_acrobot_tracked_swingup_success_rate(acrobot):
    rig, plan = acrobot
    # 150 runs: the fewest for which a miss or two still lets the 95 % Wilson lower bound reach 0.95.
    v = verify_swingup(rig, plan=plan, rollouts=150, seed=1, dropout_study=False)
    _common_checks(rig, v)
    # Measured with the demo rig's measurement-grade spreads (mass 1 %, com 2 %, inertia 6 %, uniform): 300 of 300
    # caught (seed 0), elbow speed at most 24.2 rad/s, RMS over the swing-up 0.51 N m. The test states: the
    # nominal plant is caught, at least 98 % of the runs are, and the verdict is a pass.
    assert v.nominal.caught
    assert v.success_rate >= 0.98
    assert v.verdict == "pass", v.reasons
    # stop conditions derived from half the runs make no nuisance stop on the other half (measured: 0 of 75)
    assert v.supervision.false_trips == 0 and v.supervision.checked_on == 75


def test_looser_spreads_cost_catch_rate_and_the_misses_name_the_parameter(acrobot):
    # The same plan on the same rig, with the spreads of a loosely measured rig (com +-5 %, inertia +-15 %):
    # measured 257 of 300 caught (seed 0); the misses follow link 2's centre of mass (r = -0.21, point-biserial).
    # The verification must say so rather than pass, and name the parameter to measure better.
    rig, plan = acrobot
    loose = dataclasses.replace(rig, uncertainty=Uncertainty("uniform", (
        ("link1.mass", 0.03), ("link1.com", 0.05), ("link1.inertia", 0.15), ("link2.mass", 0.03),
        ("link2.com", 0.05), ("link2.inertia", 0.15))))
    v = verify_swingup(loose, plan=plan, rollouts=150, seed=0, dropout_study=False)
    assert 0.5 <= v.success_rate < 0.95
    assert v.verdict == "fail" and any("success rate" in r for r in v.reasons)
    top = v.correlations[0]
    assert top.notable and top.parameter.endswith(".com")
    # the stop conditions stop the missed catches they were not derived from (measured: 10 of 10, with 1
    # nuisance stop among the 65 caught checked runs, seed 0)
    sup = v.supervision
    assert sup.missed > 0 and sup.missed_stopped >= 0.8 * sup.missed


def test_handover_level_from_the_region_of_attraction_or_the_caller(cart):
    rig, plan = cart
    v = verify_swingup(rig, plan=plan, rollouts=4, seed=0, handover_level=50.0, dropout_study=False)
    assert v.rho_in == 50.0 and v.rho_out == pytest.approx(50.0 * rig.swingup.release_factor)
    assert "caller" in v.rho_source


def test_bad_requests_are_refused(cart):
    rig, plan = cart
    for kwargs in (dict(method="bogus"), dict(rollouts=0), dict(seed=-1), dict(settle=0.5),
                   dict(required_success=1.5), dict(measurement="radar")):
        with pytest.raises(RequestError):
            verify_swingup(rig, plan=plan, **kwargs)
    arm = load_rig(ROOT / "scenarios" / "arm-2dof.toml")
    with pytest.raises(RequestError, match="optimal"):  # no energy law for a fully actuated arm, and it says why
        verify_swingup(arm, method="energy", rollouts=4)


def test_acrobot_energy_law_in_the_batch_engine():
    """The energy-based law (Spong 1995/1996) through the same catch: it swings up and is caught sometimes, and the
    verification says how often rather than promising a catch (energy.py documents the tilted equilibria)."""
    rig = load_rig(ROOT / "scenarios" / "acrobot.toml")
    # Exact state and rho_in = 2000: the settings of tests/test_swingup_energy.py and benchmarks/energy_swingup.py
    # (7 of 8 caught within 20 s from small offsets, nominal plant). Measured here under the rig's uncertainty:
    # 23 of 64 caught within 25 s (36 %), hand-overs from 5.8 s to 22.6 s.
    v = verify_swingup(rig, method="energy", rollouts=32, seed=0, measurement="state", handover_level=2000.0)
    assert v.table is None and v.plan is None and "collocated energy shaping" in v.law
    assert v.horizon_s == pytest.approx(25.0, abs=1e-9)
    assert v.successes >= 1  # the law does swing up and hand over...
    assert v.success_interval[1] < 0.95 and v.verdict == "fail"  # ...but is not a reliable swing-up on this rig
    caught = v.handover_times[~np.isnan(v.handover_times)]
    # A hand-over within the first second would mean the rule engaged near hanging (x'Px there is ~1e4 times rho_in).
    assert np.all(caught > 1.0)
