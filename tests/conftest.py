"""Shared fixtures: the demo rigs and a generator of random valid rig tables."""

from __future__ import annotations

import os

# Small dense matrices dominate the tests; a multithreaded BLAS on 2 shared cores makes them 10-20x slower.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import pytest
from rigs import SCENARIOS

from upswing.model.rig import Rig, load_rig


@pytest.fixture(params=SCENARIOS, ids=lambda p: p.stem)
def demo_rig(request) -> Rig:
    return load_rig(request.param)
