"""Shared fixtures: the demo rigs and a generator of random valid rig tables."""

from __future__ import annotations

import pytest
from rigs import SCENARIOS

from upswing.model.rig import Rig, load_rig


@pytest.fixture(params=SCENARIOS, ids=lambda p: p.stem)
def demo_rig(request) -> Rig:
    return load_rig(request.param)
