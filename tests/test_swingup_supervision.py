"""Stop conditions of a verified swing-up (upswing.verification.supervision) and their export for firmware."""

from __future__ import annotations

import dataclasses
import json
import math
import shutil
import subprocess

import numpy as np
import pytest
from rigs import ROOT

from upswing.export.swingup_files import C_HEADER_NAME, write_swingup_files
from upswing.model.rig import load_rig
from upswing.synthesis.swingup.tracking import handover_rule, tvlqr_from_samples
from upswing.verification.supervision import DEADLINE_MARGIN, SPEED_MARGIN, derive_supervision


def test_limits_follow_their_definition_and_are_checked_on_other_runs():
    # Six runs by hand: even rows derive, odd rows check (the module's stated split).
    rig = load_rig(ROOT / "scenarios" / "acrobot.toml")
    caught = np.array([True, True, True, False, True, False])
    level = np.array([2.0, 2.1, 2.2, np.nan, 1.9, 2.05])
    speed = np.array([[10.0, 20.0], [10.5, 20.0], [12.0, 21.0], [30.0, 40.0], [11.0, 30.0], [5.0, 10.0]])
    rail = np.zeros(6)
    sup = derive_supervision(rig, caught=caught, level_times=level, peak_speed=speed, peak_rail=rail,
                             duration=3.0, catch_level=100.0)
    # derived from rows 0, 2, 4 (all caught): deadline = 2.2 + 0.1 * 3 s; shoulder window 1.15 * 12; the elbow's
    # 1.15 * 30 = 34.5 is capped at its max_speed (26 rad/s)
    assert sup.derived_from == 3 and sup.checked_on == 3
    assert sup.catch_deadline == pytest.approx(2.2 + DEADLINE_MARGIN * 3.0)
    limits = {j: v for j, v, _ in sup.speed_limits}
    assert limits["shoulder"] == pytest.approx((1 + SPEED_MARGIN) * 12.0)
    assert limits["elbow"] == rig.actuator("elbow").max_speed
    # checked rows 1, 3, 5: row 1 caught and inside every window (no nuisance stop); row 3 missed, never reached
    # the level and too fast (stopped); row 5 missed but reached the level in time at low speed (not stopped)
    assert sup.false_trips == 0 and sup.missed == 2 and sup.missed_stopped == 1
    assert "2.500 s" in sup.rule and "shoulder" in sup.rule
    # nothing caught: nothing to supervise, and the rule says so
    none = derive_supervision(rig, caught=np.zeros(6, dtype=bool), level_times=level, peak_speed=speed,
                              peak_rail=rail, duration=3.0, catch_level=100.0)
    assert math.isnan(none.catch_deadline) and "no run was caught" in none.rule


@pytest.mark.skipif(shutil.which("gcc") is None, reason="gcc is not installed")
def test_c_header_carries_the_handover_rule_and_stop_conditions(tmp_path):
    # A C program built from the header alone computes the hand-over level x' P x for a state; reference: numpy on
    # the rule's own P in double precision (the header stores float32: agreement to float32 rounding, 1e-6).
    rig = load_rig(ROOT / "scenarios" / "cart-double.toml")
    N = 10
    rng = np.random.default_rng(3)
    table = tvlqr_from_samples(rig, np.arange(N) / rig.balance.sample_rate,
                               rng.normal(scale=0.05, size=(N, rig.n_states)), np.zeros((N, rig.n_inputs)))
    rule = handover_rule(rig, 40.0)
    speed = np.array([[1.0, 10.0, 20.0]] * 4)
    sup = derive_supervision(rig, caught=np.ones(4, dtype=bool), level_times=np.full(4, 2.0), peak_speed=speed,
                             peak_rail=np.full(4, 0.3), duration=3.0, catch_level=rule.rho_in)
    # the stale-reading stop condition, as the drop-out study sets it (upswing.verification.swingup_dropout)
    sup = dataclasses.replace(sup, stale_reading_samples=5, stale_reading_ms=10.0)
    files = write_swingup_files(tmp_path, rig, table, handover=rule, supervision=sup)
    x = rng.normal(scale=0.1, size=rig.n_states)
    (tmp_path / "data.c").write_text(f'#define UPSWING_SWINGUP_TABLE_DEFINE\n#include "{C_HEADER_NAME}"\n')
    (tmp_path / "main.c").write_text(f"""#include <stdio.h>
#include "{C_HEADER_NAME}"
int main(void)
{{
    const double x[UPSWING_SWINGUP_STATES] = {{{", ".join(repr(float(v)) for v in x)}}};
    double level = 0.0;
    for (int i = 0; i < UPSWING_SWINGUP_STATES; ++i)
        for (int j = 0; j < UPSWING_SWINGUP_STATES; ++j)
            level += (x[i] - upswing_handover_x_eq[i]) * upswing_handover_P[i][j] * (x[j] - upswing_handover_x_eq[j]);
    const int stale = UPSWING_STOP_STALE_READING_SAMPLES; /* a whole number: a sample counter compares with it */
    printf("%.9g %.9g %.9g %.9g %.9g %.9g %d %.9g\\n", level, (double)UPSWING_HANDOVER_RHO_IN,
           (double)UPSWING_STOP_CATCH_DEADLINE_S, (double)UPSWING_STOP_SPEED_CART, (double)UPSWING_STOP_SPEED_ELBOW,
           (double)UPSWING_STOP_RAIL_M, stale, (double)UPSWING_STOP_STALE_READING_MS);
    return 0;
}}
""")
    exe = tmp_path / "level"
    subprocess.run(["gcc", "-std=c99", "-Wall", "-Wextra", "-Werror", "-o", str(exe), "main.c", "data.c"],
                   cwd=tmp_path, check=True, capture_output=True, timeout=120)
    out = [float(v) for v in subprocess.run([str(exe)], check=True, capture_output=True, text=True,
                                            timeout=30).stdout.split()]
    e = x - rule.x_eq  # states near upright: no angle wrap needed
    assert out[0] == pytest.approx(float(e @ rule.P @ e), rel=1e-6)
    assert out[1] == pytest.approx(40.0, rel=1e-7)
    assert out[2] == pytest.approx(sup.catch_deadline, rel=1e-7)
    assert out[3] == pytest.approx((1 + SPEED_MARGIN) * 1.0, rel=1e-7)
    assert out[4] == pytest.approx((1 + SPEED_MARGIN) * 20.0, rel=1e-7)  # passive on a cart rig: no rating cap
    assert out[5] == pytest.approx(min((1 + SPEED_MARGIN) * 0.3, rig.cart.travel), rel=1e-7)
    assert out[6] == 5 and out[7] == pytest.approx(10.0, rel=1e-7)
    obj = json.loads(files.json.read_text())
    assert np.allclose(np.array(obj["handover"]["P"]), rule.P, rtol=1e-15, atol=0)
    assert obj["supervision"]["catch_deadline_s"] == sup.catch_deadline
    assert obj["supervision"]["stale_reading_samples"] == 5 and obj["supervision"]["stale_reading_ms"] == 10.0
    assert "no fresh encoder reading has arrived for 10 ms (5 control samples)" in obj["supervision"]["rule"]
