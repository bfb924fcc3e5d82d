"""Rig-file validation: every bad input gets one clear error naming the file, the key and the accepted range."""

from __future__ import annotations

import copy
import hashlib
import math
import subprocess
import sys

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from rigs import random_rig_table

from upswing.errors import RigFileError
from upswing.model.rig import load_rig, rig_from_table


def valid_table() -> dict:
    return {
        "name": "test rig", "base": "fixed", "actuated": ["elbow"],
        "link1": {"mass": 0.5, "length": 0.3, "com": 0.15, "inertia": 0.004},
        "link2": {"mass": 0.2, "length": 0.3, "com": 0.15},
        "actuator": {"elbow": {"peak": 2.0, "continuous": 0.8, "max_speed": 20.0}},
        "balance": {"q": [10.0, 10.0, 1.0, 1.0], "r": [1.0], "sample_rate": 500.0},
    }


def edit(path: str, value):
    """A table with one key set (value = DELETE removes it)."""
    table = valid_table()
    *parents, last = path.split(".")
    node = table
    for p in parents:
        node = node.setdefault(p, {})
    if value is DELETE:
        del node[last]
    else:
        node[last] = value
    return table


DELETE = object()

BAD_INPUTS = [
    # (case id, table, key named in the message, words the message must contain)
    ("missing mass", edit("link1.mass", DELETE), "link1.mass", "is missing"),
    ("missing base", edit("base", DELETE), "base", "is missing"),
    ("missing link2", edit("link2", DELETE), "link2", "is missing"),
    ("typo lenght", edit("link1.lenght", 0.3), "link1.lenght", 'did you mean "length"'),
    ("unknown top key", edit("gravty", 9.8), "gravty", 'did you mean "gravity"'),
    ("mass as text", edit("link1.mass", "heavy"), "link1.mass", "must be a number"),
    ("actuated as text", edit("actuated", "elbow"), "actuated", "must be a list"),
    ("unknown joint", edit("actuated", ["elbw"]), "actuated", 'did you mean "elbow"'),
    ("bad base", edit("base", "wall"), "base", 'one of "fixed", "cart"'),
    ("mass nan", edit("link1.mass", math.nan), "link1.mass", "finite"),
    ("length inf", edit("link2.length", math.inf), "link2.length", "finite"),
    ("mass zero", edit("link1.mass", 0.0), "link1.mass", "(0, inf)"),
    ("length negative", edit("link2.length", -0.3), "link2.length", "(0, inf)"),
    ("com beyond length", edit("link1.com", 0.31), "link1.com", "(0, length] = (0, 0.3]"),
    ("com zero", edit("link2.com", 0.0), "link2.com", "(0, inf)"),
    ("negative inertia", edit("link1.inertia", -0.001), "link1.inertia", "[0, inf)"),
    ("negative damping", edit("link2.damping", -0.1), "link2.damping", "[0, inf)"),
    ("negative coulomb", edit("link1.coulomb", -0.1), "link1.coulomb", "[0, inf)"),
    ("actuated without table", edit("actuated", ["shoulder", "elbow"]), "actuator.shoulder", "is missing"),
    ("table for passive joint", edit("actuator.shoulder", {"peak": 1.0, "continuous": 0.5, "max_speed": 5.0}),
     "actuator.shoulder", "not in actuated"),
    ("cart on fixed base", edit("actuated", ["cart", "elbow"]), "actuated", 'base = "fixed" has no cart'),
    ("cart table on fixed base", edit("cart", {"mass": 1.0, "travel": 0.3}), "cart", 'base = "fixed"'),
    ("q wrong length", edit("balance.q", [1.0, 1.0, 1.0]), "balance.q", "4 states"),
    ("r wrong length", edit("balance.r", [1.0, 1.0]), "balance.r", "1 inputs"),
    ("negative weight", edit("balance.q", [1.0, -1.0, 1.0, 1.0]), "balance.q[1]", "[0, inf)"),
    ("zero r", edit("balance.r", [0.0]), "balance.r[0]", "(0, inf)"),
    ("zero sample rate", edit("balance.sample_rate", 0.0), "balance.sample_rate", "(0, inf)"),
    ("negative sample rate", edit("balance.sample_rate", -100.0), "balance.sample_rate", "(0, inf)"),
    ("continuous above peak", edit("actuator.elbow.continuous", 3.0), "actuator.elbow.continuous", "(0, peak]"),
    ("half a motor line", edit("actuator.elbow.stall", 3.0), "actuator.elbow", "needs both stall and no_load_speed"),
    ("no actuated joints", edit("actuated", []), "actuated", "at least one"),
    ("table as number", edit("link1", 3.0), "link1", "must be a table"),
    ("bad distribution", edit("uncertainty.distribution", "gauss"), "uncertainty.distribution", "one of"),
    ("negative spread", edit("uncertainty.link1", {"mass": -0.1}), "uncertainty.link1.mass", "[0, 0.9]"),
    ("unknown spread", edit("uncertainty.link1", {"mas": 0.1}), "uncertainty.link1.mas", 'did you mean "mass"'),
    ("encoder counts as float", edit("sensors.encoder_counts", 4096.5), "sensors.encoder_counts", "integer"),
    ("required success of one", edit("verification.required_success", 1.0), "verification.required_success",
     "(0, 1)"),
    ("required success zero", edit("verification.required_success", 0.0), "verification.required_success",
     "(0, 1)"),
    ("required success typo", edit("verification.required_sucess", 0.9), "verification.required_sucess",
     'did you mean "required_success"'),
    ("mount as number", edit("mount", 400.0), "mount", "must be a table"),
    ("mount without a rating", edit("mount", {"safety_factor": 2.0}), "mount", "at least one rating"),
    ("mount without safety factor", edit("mount", {"moment": 40.0}), "mount.safety_factor", "is missing"),
    ("safety factor below one", edit("mount", {"moment": 40.0, "safety_factor": 0.5}), "mount.safety_factor",
     "[1, 20]"),
    ("safety factor huge", edit("mount", {"moment": 40.0, "safety_factor": 25.0}), "mount.safety_factor",
     "[1, 20]"),
    ("zero horizontal rating", edit("mount", {"horizontal_force": 0.0, "safety_factor": 2.0}),
     "mount.horizontal_force", "(0, inf) N"),
    ("negative vertical rating", edit("mount", {"vertical_force": -300.0, "safety_factor": 2.0}),
     "mount.vertical_force", "(0, inf) N"),
    ("moment as text", edit("mount", {"moment": "40 Nm", "safety_factor": 2.0}), "mount.moment",
     "must be a number in (0, inf) N m"),
    ("moment nan", edit("mount", {"moment": math.nan, "safety_factor": 2.0}), "mount.moment", "finite"),
    ("negative lever arm", edit("mount", {"moment": 40.0, "safety_factor": 2.0, "shoulder_height": -0.2}),
     "mount.shoulder_height", "[0, inf) m"),
    ("mount key typo", edit("mount", {"moment": 40.0, "safety_factor": 2.0, "sholder_offset": 0.1}),
     "mount.sholder_offset", 'did you mean "shoulder_offset"'),
]


@pytest.mark.parametrize(("table", "key", "words"), [c[1:] for c in BAD_INPUTS], ids=[c[0] for c in BAD_INPUTS])
def test_bad_input_gets_a_clear_error(table, key, words):
    with pytest.raises(RigFileError) as info:
        rig_from_table(table, source="bench.toml")
    message = str(info.value)
    assert info.value.key == key
    assert message.startswith(f"bench.toml: {key}")
    assert words in message


def test_verification_settings_default_and_load():
    assert rig_from_table(valid_table()).verification.required_success == 0.95
    assert rig_from_table(edit("verification.required_success", 0.99)).verification.required_success == 0.99
    assert any("verification.required_success" in w for w in
               rig_from_table(edit("verification.required_success", 0.2)).warnings)


def test_mount_ratings_load_and_their_limits_are_rating_over_safety_factor():
    rig = rig_from_table(edit("mount", {"horizontal_force": 450.0, "moment": 120.0, "safety_factor": 3.0,
                                        "shoulder_height": 0.4}), source="bench.toml")
    assert rig.mount.limit("horizontal_force") == pytest.approx(150.0)
    assert rig.mount.limit("moment") == pytest.approx(40.0)
    assert rig.mount.limit("vertical_force") is None  # not rated: reported, not judged
    assert rig.mount.shoulder_height == 0.4 and rig.mount.shoulder_offset == 0.0
    assert rig.warnings == ()
    assert rig_from_table(valid_table()).mount is None  # [mount] is optional
    # A factor above the usual bench range and a rating in millinewtons are accepted with a warning.
    odd = rig_from_table(edit("mount", {"moment": 120.0, "safety_factor": 12.0, "horizontal_force": 450000.0}),
                         source="bench.toml")
    assert any("mount.safety_factor" in w for w in odd.warnings)
    assert any("mount.horizontal_force" in w for w in odd.warnings)


def test_the_valid_table_loads():
    rig = rig_from_table(valid_table())
    assert rig.family == "acrobot" and rig.n_states == 4 and rig.n_inputs == 1
    assert rig.warnings == ()


def test_inertia_defaults_to_a_uniform_rod():
    rig = rig_from_table(valid_table())
    assert rig.link2.inertia == pytest.approx(0.2 * 0.3**2 / 12)  # m l^2 / 12 (textbook rod about its centre)
    assert rig.link2.inertia_defaulted and not rig.link1.inertia_defaulted


def test_default_inertia_with_an_offset_com_warns():
    rig = rig_from_table(edit("link2.com", 0.28))
    assert any("link2.inertia" in w for w in rig.warnings)


def test_a_link_in_millimetres_warns():
    table = valid_table()
    table["link1"].update(length=300.0, com=150.0)
    rig = rig_from_table(table, source="mm.toml")
    assert any("link1.length" in w and "millimetres" in w for w in rig.warnings)


def test_inputs_come_in_canonical_order_whatever_the_file_says():
    table = random_rig_table(np.random.default_rng(0), "fully actuated")
    table["actuated"] = ["elbow", "shoulder"]
    assert rig_from_table(table).input_names == ("shoulder", "elbow")


def test_parameter_vector_round_trips():
    rig = rig_from_table(random_rig_table(np.random.default_rng(1), "cart"))
    p = rig.parameter_vector()
    assert np.array_equal(rig.with_parameters(p).parameter_vector(), p)
    assert rig.with_parameters(p * 1.1).link1.mass == pytest.approx(rig.link1.mass * 1.1)


def test_file_errors_name_the_file(tmp_path):
    path = tmp_path / "rig.toml"
    path.write_text("name = 'x'\nbase = \n")
    with pytest.raises(RigFileError, match=r"rig.toml: is not valid TOML"):
        load_rig(path)
    with pytest.raises(RigFileError, match="cannot be read"):
        load_rig(tmp_path / "absent.toml")


def test_loaded_rig_carries_its_hash_and_text(tmp_path):
    text = TOML_TEXT.replace("lenght", "length")
    path = tmp_path / "r.toml"
    path.write_text(text)
    rig = load_rig(path)
    assert rig.content_hash == hashlib.sha256(text.encode()).hexdigest()  # FIPS 180-4 digest via hashlib
    assert rig.text == text


TOML_TEXT = """name = "t"
base = "fixed"
actuated = ["shoulder"]
[link1]
mass = 0.4
length = 0.25
com = 0.12
[link2]
mass = 0.2
lenght = 0.3
com = 0.15
[actuator.shoulder]
peak = 1.0
continuous = 0.5
max_speed = 10.0
"""


def test_cli_reports_bad_input_in_one_line_without_traceback(tmp_path):
    path = tmp_path / "typo.toml"
    path.write_text(TOML_TEXT)
    result = subprocess.run([sys.executable, "-m", "upswing", "modes", str(path)], capture_output=True, text=True,
                            timeout=120)
    assert result.returncode == 2
    assert "Traceback" not in result.stderr
    assert f"{path}: link2.lenght is not a known key" in result.stderr
    assert 'did you mean "length"' in result.stderr
    assert result.stdout == ""


# ----------------------------------------------------------------------------------------------------------------
# Property test: random tables, valid or not, never produce anything but a Rig or a RigFileError.

values = st.one_of(st.floats(allow_nan=True, allow_infinity=True), st.integers(-5, 5), st.text(max_size=5),
                   st.booleans(), st.lists(st.floats(-10, 10), max_size=7), st.none())


@st.composite
def mutated_tables(draw):
    table = random_rig_table(np.random.default_rng(draw(st.integers(0, 2**16))),
                             draw(st.sampled_from(["acrobot", "pendubot", "cart", "fully actuated"])))
    for _ in range(draw(st.integers(0, 3))):
        section = draw(st.sampled_from(["", "link1", "link2", "cart", "balance", "sensors", "actuator", "mount"]))
        key = draw(st.sampled_from(["mass", "length", "com", "inertia", "damping", "travel", "q", "r",
                                    "sample_rate", "base", "actuated", "encoder_counts", "peak", "bogus",
                                    "moment", "safety_factor", "shoulder_height"]))
        value = draw(values)
        if value is None:
            continue
        node = table if not section else table.setdefault(section, {})
        if isinstance(node, dict):
            node[key] = copy.deepcopy(value)
    return table


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated_tables())
def test_random_tables_never_raise_anything_but_a_rig_file_error(table):
    try:
        rig = rig_from_table(table, source="random.toml")
    except RigFileError as exc:
        assert str(exc).startswith("random.toml")
    else:
        assert rig.n_states in (4, 6)
        assert np.all(np.isfinite(rig.parameter_vector()))
