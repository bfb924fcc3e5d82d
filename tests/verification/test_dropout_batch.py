"""A sensor drop-out that outlasts some rollouts of a batch: the batch must match the rollouts run one at a time."""

from __future__ import annotations

import dataclasses

import numpy as np
from conftest import rig

from upswing.verification.controllers import balance_controller
from upswing.verification.simulate import SimulationSetup, simulate


def test_rollouts_ending_during_a_dropout_match_single_runs():
    # An acrobot whose elbow can give only 0.05 N m cannot catch most starts, so rollouts end at different samples
    # while the reading is frozen (drop-out from t = 0 to 1 s): the batch compacts its frozen readings as they end.
    base = rig("acrobot")
    weak = dataclasses.replace(base, actuators=tuple(dataclasses.replace(a, peak=0.05, continuous=0.05, stall=0.05)
                                                     for a in base.actuators))
    controller = balance_controller(weak, measurement="encoders")
    setup = SimulationSetup(horizon=1.5, noise=False, dropout=(0.0, 1.0))  # no noise: runs are deterministic
    x0 = np.zeros((6, weak.n_states))
    x0[:, 0] = np.linspace(0.005, 0.06, 6)  # theta1 offsets from a catchable to a hopeless one
    batch = simulate(weak, controller, x0, setup=setup)
    assert len(set(np.round(batch.end_time, 6))) > 1  # rollouts did end at different times: the case under test
    # Plain reference: each rollout alone in its own batch of one.
    for i in range(x0.shape[0]):
        alone = simulate(weak, controller, x0[i:i + 1], setup=setup)
        assert alone.status[0] == batch.status[i]
        assert alone.end_time[0] == batch.end_time[i]
        # Same arithmetic on the same numbers, only the batch's width differs: agreement to rounding.
        np.testing.assert_allclose(alone.final_error[0], batch.final_error[i], rtol=0, atol=1e-9)
