"""Cautions and standard references that travel with every result a person acts on.

The wording is ours. Standards are cited by number only; the user must read them and follow the local codes and
licensed practice that apply where the rig is run.
"""

from __future__ import annotations

STANDARDS: dict[str, str] = {
    "ISO 12100": "risk assessment and risk reduction for machinery",
    "IEC 60204-1": "electrical equipment of machines, including stop categories",
    "ISO 13850": "emergency stop function",
    "ISO 14120": "guards (fixed and movable)",
    "ISO 13857": "safety distances to keep limbs out of danger zones",
    "ISO 13849-1": "safety-related parts of control systems",
}

GOVERNING = ("Local codes, the rig owner's risk assessment and licensed professional practice govern; "
             "upswing's figures are model-based estimates, not a certification.")

CAUTIONS: tuple[str, ...] = (
    "Run every new gain set or trajectory first with the actuator limits reduced (e.g. to a third of peak) and "
    "an emergency stop (ISO 13850) within reach of the operator.",
    "Keep people outside the swept circle of the links (and the rail's ends) while the drive is enabled; guard "
    "the danger zone (ISO 14120, distances per ISO 13857).",
    "Check signs before closing the loop: push each link by hand with the drive disabled and confirm that the "
    "encoder readings follow docs/conventions.md (counter-clockwise positive, theta1 from the upward vertical).",
    GOVERNING,
)


def standards_text() -> str:
    """One line per cited standard: number and subject."""
    return "\n".join(f"{number}: {subject}" for number, subject in STANDARDS.items())
