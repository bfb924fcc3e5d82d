"""The `check` and `modes` commands: readable text, and JSON per docs/conventions.md."""

from __future__ import annotations

import json

import numpy as np
import pytest
from rigs import SCENARIOS

from upswing.cli import main
from upswing.model.linearize import linearize
from upswing.model.rig import load_rig


def run_json(capsys, *argv: str) -> dict:
    assert main([*argv, "--json"]) == 0
    out = capsys.readouterr().out
    return json.loads(out)  # exactly one JSON object on stdout


@pytest.mark.parametrize("path", SCENARIOS, ids=lambda p: p.stem)
def test_modes_json_has_the_contract_fields(capsys, path):
    data = run_json(capsys, "modes", str(path))
    rig = load_rig(path)
    assert data["state"] == list(rig.state_names) and data["inputs"] == list(rig.input_names)
    assert set(data["equilibria"]) == {"upright", "hanging", "down-up", "up-down"}
    for name, eq in data["equilibria"].items():
        lin = linearize(rig, name)
        np.testing.assert_allclose(eq["A"], lin.A)
        np.testing.assert_allclose(eq["B"], lin.B)
        pairs = np.array(eq["eigenvalues"])
        assert pairs.shape == (rig.n_states, 2)  # complex numbers as [re, im]
        np.testing.assert_allclose(np.sort_complex(pairs[:, 0] + 1j * pairs[:, 1]),
                                   np.sort_complex(np.linalg.eigvals(lin.A)), rtol=1e-9, atol=1e-9)
        assert eq["controllable"] is True
    assert data["equilibria"]["upright"]["growth_rates"]
    assert len(data["equilibria"]["hanging"]["modes"]) >= 2
    assert data["cautions"]


def test_modes_at_one_equilibrium(capsys):
    data = run_json(capsys, "modes", str(SCENARIOS[0]), "--at", "hanging")
    assert list(data["equilibria"]) == ["hanging"]


def test_modes_text_is_readable(capsys):
    assert main(["modes", str(SCENARIOS[0])]) == 0
    out = capsys.readouterr().out
    for words in ("== upright ==", "doubles every", "in-phase", "out-of-phase", "controllable with", "ISO 13850"):
        assert words in out


@pytest.mark.parametrize("path", SCENARIOS, ids=lambda p: p.stem)
def test_check_prints_derived_quantities(capsys, path):
    data = run_json(capsys, "check", str(path))
    rig = load_rig(path)
    d = data["derived"]
    assert d["reach"] == pytest.approx(rig.link1.length + rig.link2.length)
    # Parallel-axis theorem (textbook): I_pivot = I1 + m1 lc1^2 + I2 + m2 (l1 + lc2)^2 with the links straight.
    l1, l2 = rig.link1, rig.link2
    assert d["inertia_about_pivot"] == pytest.approx(
        l1.inertia + l1.mass * l1.com**2 + l2.inertia + l2.mass * (l1.length + l2.com) ** 2)
    assert data["valid"] is True


def test_missing_file_is_a_clean_error(capsys, tmp_path):
    assert main(["check", str(tmp_path / "nope.toml")]) == 2
    err = capsys.readouterr().err
    assert "nope.toml" in err and "cannot be read" in err and "Traceback" not in err


def test_bundled_demo_matches_the_scenario():
    from importlib.resources import files

    bundled = files("upswing").joinpath("demo/acrobot.toml").read_text()
    assert bundled == (SCENARIOS[0].parent / "acrobot.toml").read_text()
