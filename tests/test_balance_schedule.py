"""Gain schedules over one rig parameter."""

from __future__ import annotations

import numpy as np
import pytest
from balance_helpers import rig

from upswing.errors import RequestError
from upswing.synthesis.balance import design_balance
from upswing.synthesis.schedule import gain_schedule, rig_at, with_tip_mass


def test_schedule_matches_point_designs_and_is_stable_at_home():
    # Plain reference: an independent design at each grid value.
    r = rig("acrobot")
    grid = np.linspace(0.0, 0.1, 5)
    s = gain_schedule(r, "link2.payload", grid)
    for j, v in enumerate(grid):
        d = design_balance(rig_at(r, "link2.payload", v))
        np.testing.assert_allclose(s.K_discrete[j], d.K_discrete, rtol=1e-12)  # same computation
        np.testing.assert_allclose(s.K[j], d.K, rtol=1e-12)
        assert s.stable[j, j]
        assert np.max(s.closed_loop_poles[j].real) < 0 and np.max(np.abs(s.closed_loop_poles_discrete[j])) < 1
        lo, hi = s.stabilizing_interval[j]
        assert lo <= v <= hi


def test_stabilizing_interval_is_bounded_by_unstable_neighbours():
    # Each gain's interval ends where the neighbouring grid plant is unstable under it (recomputed with numpy's
    # eigenvalues on independently designed plants) or at the grid's end.
    r = rig("cart-double")
    grid = np.linspace(0.02, 0.6, 9)
    s = gain_schedule(r, "link2.mass", grid)
    designs = [design_balance(rig_at(r, "link2.mass", v)) for v in grid]
    for j in range(grid.size):
        lo, hi = s.stabilizing_interval[j]
        i_lo, i_hi = np.searchsorted(grid, lo), np.searchsorted(grid, hi)
        for i in range(i_lo, i_hi + 1):
            Ai = designs[i].Ad - designs[i].Bd @ s.K_discrete[j]
            assert np.max(np.abs(np.linalg.eigvals(Ai))) < 1.0
        for i in (i_lo - 1, i_hi + 1):
            if 0 <= i < grid.size:
                Ai = designs[i].Ad - designs[i].Bd @ s.K_discrete[j]
                assert np.max(np.abs(np.linalg.eigvals(Ai))) >= 1.0
    # Not vacuous: over a 30x range of link-2 mass some gain must stop stabilizing somewhere.
    assert not s.stable.all()


def test_tip_mass_obeys_the_parallel_axis_theorem():
    # Steiner / parallel-axis theorem: the inertia about the link's proximal joint grows by m_p * length^2, and the
    # first moment about it by m_p * length.
    link = rig("acrobot").link2
    for m in (0.0, 0.05, 1.0):
        new = with_tip_mass(link, m)
        j_old = link.inertia + link.mass * link.com**2
        j_new = new.inertia + new.mass * new.com**2
        assert j_new == pytest.approx(j_old + m * link.length**2, rel=1e-12)
        assert new.mass * new.com == pytest.approx(link.mass * link.com + m * link.length, rel=1e-12)


@pytest.mark.parametrize(("parameter", "value", "message"), [
    ("link2.colour", 1.0, "must be one of"),
    ("link2.mass", -0.1, r"must be in \(0, inf\)"),
    ("link2.com", 0.5, "beyond link2.length"),
    ("cart.mass", 1.0, "needs a cart rig"),
    ("link2.payload", -0.01, r"must be in \[0, inf\)"),
])
def test_bad_schedule_requests(parameter, value, message):
    with pytest.raises(RequestError, match=message):
        gain_schedule(rig("acrobot"), parameter, [value])
