"""The rig-file reference (``docs/rig-file.md``), generated from :data:`upswing.model.schema.TABLES`.

Every key's type, unit, accepted range, default and meaning come from the schema, so the reference cannot drift
from what the loader accepts: a key added to the schema appears here on the next regeneration, and
``tests/test_docs.py`` fails until ``docs/rig-file.md`` is regenerated. The few rules that tie two keys together
(``com <= length``, ``continuous <= peak``, ...) are enforced in :mod:`upswing.model.rig`; they are listed in
:data:`CROSS_KEY_RULES` and the tests check that the loader enforces each one.

Regenerate the file from the repository root with::

    PYTHONPATH=src python -m upswing.report.rig_reference docs/rig-file.md
"""

from __future__ import annotations

import re
import sys
from dataclasses import dataclass
from pathlib import Path

from upswing.model import schema
from upswing.model.rig import PARAMETER_NAMES
from upswing.model.schema import REQUIRED, Key, Table

REGENERATE = "PYTHONPATH=src python -m upswing.report.rig_reference docs/rig-file.md"

_KINDS = {"float": "number", "int": "integer", "str": "text", "bool": "true / false", "floats": "list of numbers",
          "strs": "list of text"}


@dataclass(frozen=True)
class CrossKeyRule:
    """A rule the loader enforces between keys (or tables), which a single key's range cannot express.

    Attributes
    ----------
    table : str
        Schema table name the rule belongs to (``""`` for the top level, ``"link1"`` for both links).
    key : str
        Key inside that table the rule constrains, or ``""`` for a rule about the table itself.
    text : str
        The rule in words, as the reference prints it.
    """

    table: str
    key: str
    text: str


CROSS_KEY_RULES: tuple[CrossKeyRule, ...] = (
    CrossKeyRule("", "actuated", 'Names at least one joint, none twice. "cart" is allowed only with base = "cart". '
                 "The order written does not matter: inputs always come in the order cart, shoulder, elbow."),
    CrossKeyRule("link1", "com", "com <= length (a point mass at the tip has com = length)."),
    CrossKeyRule("link1", "inertia", "When absent, the uniform-rod value mass * length^2 / 12 is used; the loader "
                 "warns when com is more than 0.15 * length away from length / 2, where that value is a poor guess."),
    CrossKeyRule("cart", "", 'The `[cart]` table is required when base = "cart" and an error when base = "fixed".'),
    CrossKeyRule("actuator.<joint>", "", "Exactly one `[actuator.<joint>]` table per actuated joint; a table for a "
                 "joint that is not in `actuated` is an error."),
    CrossKeyRule("actuator.<joint>", "continuous", "continuous <= peak."),
    CrossKeyRule("actuator.<joint>", "stall", "stall and no_load_speed come together (a motor line) or not at all."),
    CrossKeyRule("balance", "q", "q has one entry per state (4 on a fixed base, 6 on a cart); r has one entry per "
                 "input; give both q and r or neither (then Bryson's rule sets both, see docs/theory.md)."),
    CrossKeyRule("balance", "effort_noise", "effort_noise has one entry per input, in input order (cart, shoulder, "
                 "elbow), like r."),
    CrossKeyRule("balance", "velocity_cutoff", "velocity_cutoff < sample_rate / 2 (below the Nyquist frequency)."),
    CrossKeyRule("balance", "cart_process_noise", 'cart_process_noise is an error when base = "fixed".'),
    CrossKeyRule("uncertainty", "", "`[uncertainty.cart]` is an error on a fixed base."),
    CrossKeyRule("mount", "", "`[mount]` needs at least one of horizontal_force, vertical_force, moment, and then "
                 "safety_factor; without `[mount]` the base loads are reported but not judged."),
)

EXAMPLE = '''\
# An invented bench acrobot, written the way a rig file is built up from bench measurements.
name = "Example acrobot"
description = "Passive shoulder; elbow motor carried at the end of link 1"
base = "fixed"
actuated = ["elbow"]            # one motor, at the elbow: an acrobot

[link1]
mass = 0.58                     # kg: link plus the elbow motor it carries (scale)
length = 0.27                   # m: shoulder axis to elbow axis (calliper)
com = 0.183                     # m from the shoulder axis (balance point on a knife edge)
inertia = 0.0037                # kg m^2 about the centre of mass (compound pendulum, then parallel axis)
damping = 0.0007                # N m s/rad (run-down test, exponential part)
coulomb = 0.005                 # N m (run-down test, linear part)

[link2]
mass = 0.19
length = 0.31                   # m: elbow axis to tip
com = 0.16
inertia = 0.0018
damping = 0.0012
coulomb = 0.01

[actuator.elbow]
peak = 1.6                      # N m: drive current limit times torque constant times gear ratio
continuous = 0.6                # N m: thermal rating at the output shaft
max_speed = 24.0                # rad/s

[balance]
q = [36.0, 10.0, 1.0, 0.5]      # theta1, theta2, theta1_dot, theta2_dot
r = [2.0]                       # elbow
sample_rate = 500.0             # Hz

[sensors]
encoder_counts = 4096           # counts per revolution after quadrature
angle_noise = 0.0003            # rad

[uncertainty]
distribution = "uniform"
[uncertainty.link1]
inertia = 0.15                  # +-15 %: the least certain measurement
[uncertainty.link2]
inertia = 0.15
'''
"""A complete, valid rig file used as the worked example (``tests/test_docs.py`` loads it)."""

SCENARIOS = (
    ("scenarios/acrobot.toml", "acrobot with a motor line (stall, no_load_speed), explicit weights and "
                               "parameter spreads"),
    ("scenarios/pendubot.toml", "pendubot that leaves link2.inertia and the [balance] weights to their defaults"),
    ("scenarios/cart-double.toml", "two links on a cart: [cart] table, cart actuator, cart sensor keys"),
    ("scenarios/arm-2dof.toml", "fully actuated arm: two [actuator.*] tables, two input weights"),
)
"""Complete demo rig files the reference points to (``tests/test_docs.py`` checks that each exists and loads)."""


def _md(text: str) -> str:
    """Plain text made safe for Markdown: outside code spans, ``<name`` would start an HTML tag."""
    parts = text.split("`")
    for i in range(0, len(parts), 2):  # even parts lie outside code spans
        parts[i] = re.sub(r"<(?=[A-Za-z/])", "&lt;", parts[i])
    return "`".join(parts)


def _cell(text: str) -> str:
    """Text safe inside a Markdown table cell (``|`` would end the cell, even inside a code span)."""
    return _md(text).replace("|", "\\|")


def _heading(table: Table) -> str:
    if table.name == "":
        return "Top level (keys before any table header)"
    if table is schema.LINK:
        return "`[link1]` and `[link2]`"
    return f"`[{table.name}]`"


def _accepted(key: Key) -> str:
    if key.choices is not None:
        text = key.range_text()
        return f"each {text}" if key.kind == "strs" else text
    if key.kind == "str":
        return "any text"
    if key.kind == "bool":
        return "true or false"
    return f"each in {key.range_text()}" if key.kind == "floats" else key.range_text()


def _default(key: Key) -> str:
    if key.default is REQUIRED:
        return "required"
    if key.default is None:
        return "not set"
    if isinstance(key.default, str):
        return f'"{key.default}"' if key.default else '"" (empty)'
    if isinstance(key.default, bool):
        return "true" if key.default else "false"
    if isinstance(key.default, (list, tuple)):
        return "[" + ", ".join(f"{v:g}" for v in key.default) + "]"
    return f"{key.default:g}"


def _rules_for(table: Table) -> list[CrossKeyRule]:
    return [r for r in CROSS_KEY_RULES if r.table == table.name]


def _key_table(table: Table) -> list[str]:
    ruled = {r.key for r in _rules_for(table)}
    rows = ["| key | type | unit | accepted | default | bench range (warning outside) | meaning |",
            "|---|---|---|---|---|---|---|"]
    for key in table.keys:
        accepted = _accepted(key) + (" (and a rule below)" if key.name in ruled else "")
        bench = "" if key.plausible is None else f"[{key.plausible[0]:g}, {key.plausible[1]:g}]"
        rows.append("| " + " | ".join(_cell(c) for c in (
            f"`{key.name}`", _KINDS.get(key.kind, key.kind), key.unit, accepted, _default(key), bench, key.doc))
            + " |")
    return rows


def _uncertainty_parameters() -> list[str]:
    """The per-parameter spread sub-tables, whose allowed keys are the physical parameters."""
    key = schema.UNCERTAIN_PARAMETER
    groups: dict[str, list[str]] = {}
    for name in PARAMETER_NAMES:
        if "." in name:
            group, parameter = name.split(".", 1)
            groups.setdefault(group, []).append(parameter)
    lines = ["### Parameter spreads: " + ", ".join(f"`[uncertainty.{g}]`" for g in groups), "",
             f"{_md(key.doc)} Accepted: each in {key.range_text()}; default {_default(key)} (known exactly). "
             "Allowed keys in each sub-table:", ""]
    lines += [f"- `[uncertainty.{g}]`: " + ", ".join(f"`{p}`" for p in params) for g, params in groups.items()]
    return lines


def rig_file_reference() -> str:
    """The Markdown text of ``docs/rig-file.md``, built from :data:`upswing.model.schema.TABLES`.

    Returns
    -------
    str
        One section per schema table with a row per key (type, unit, accepted range, default, usual bench range,
        meaning), the rules across keys, the per-parameter uncertainty sub-tables and a worked example.
    """
    out = [
        "# Rig-file reference",
        "",
        "<!-- Generated from upswing.model.schema.TABLES by upswing/report/rig_reference.py: do not edit by hand.",
        f"     Regenerate with: {REGENERATE} -->",
        "",
        "A rig file is a TOML file that describes one double-pendulum rig: its geometry and masses, friction, "
        "which joints have motors and what those motors can do, the balance controller's settings, the sensors "
        "and how well each parameter is known. Units are SI throughout (m, kg, s, rad, N, N m); angles and "
        "coordinates follow [conventions.md](conventions.md). How to measure each number on a bench is in "
        "[user-guide.md](user-guide.md).",
        "",
        "How the loader treats a file:",
        "",
        "- A key that is not listed here is an error, with a \"did you mean\" hint for near misses (`lenght`).",
        "- A missing required key, a wrong type, NaN or infinity, or a value outside the accepted range is an "
        "error naming the file, the key, the accepted range and the value found; `upswing` then exits with code 2.",
        "- A value inside the accepted range but outside the usual bench range is accepted with a warning (a "
        "300 m link is most likely a file written in millimetres).",
        "- Ranges use interval notation: `(0, inf)` excludes 0, `[0, inf)` includes it.",
        "- Units written `N m | N` or `rad/s | m/s` mean: the first for a joint (shoulder, elbow), the second for "
        "the cart.",
        "- \"not set\" as a default means the key is optional and, when absent, a value is derived or the feature "
        "is off, as its meaning says.",
    ]
    for table in schema.TABLES:
        out += ["", f"## {_heading(table)}", "", _md(table.doc), "", *_key_table(table)]
        rules = _rules_for(table)
        if rules:
            out += ["", "Rules across keys:", ""]
            out += [f"- {'`' + r.key + '`: ' if r.key else ''}{_md(r.text)}" for r in rules]
        if table is schema.UNCERTAINTY:
            out += ["", *_uncertainty_parameters()]
    out += [
        "",
        "## Worked example",
        "",
        "A complete rig file for an invented bench acrobot. Each comment says where the number comes from; the "
        "user guide describes the measurements. `upswing check` validates such a file and prints the derived "
        "quantities; `upswing modes` analyses it at the four equilibria.",
        "",
        "```toml",
        EXAMPLE.rstrip("\n"),
        "```",
        "",
        "Complete demo rigs (all values invented) are in `scenarios/`:",
        "",
        *[f"- `{path}`: {what}." for path, what in SCENARIOS],
        "",
    ]
    return "\n".join(out)


def main(argv: list[str] | None = None) -> int:
    """Write the reference to the path given as the only argument, or to stdout without one."""
    args = sys.argv[1:] if argv is None else argv
    text = rig_file_reference()
    if not args:
        sys.stdout.write(text)
        return 0
    Path(args[0]).write_text(text, encoding="utf-8")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
