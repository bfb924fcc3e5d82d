"""The header block every exported file starts with, and its renderings for CSV (``#`` lines) and C comments.

One block for every export (balance gains, swing-up trajectories, ...), so a file found on a lab computer months
later still says which rig file it came from (its SHA-256), which upswing made it, the sign conventions and units it
follows, and how to try it safely. Build it with :func:`export_header`, then render it with :func:`hash_comment`,
:func:`c_comment` or :func:`header_json`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from upswing import __version__
from upswing.model.rig import Rig
from upswing.safety import CAUTIONS, GOVERNING, STANDARDS

TRIAL_CAUTION = ("Try these values first at reduced actuator limits (e.g. a third of peak) with an emergency stop "
                 "within reach (ISO 13850).")
SIGN_CONVENTION = ("u = u_eq - K (x - x_eq); angles counter-clockwise positive viewed from the front; theta1 from "
                   "the upward vertical, theta2 relative to link 1; cart x positive to the right from the rail's "
                   "centre; angle errors wrapped to (-pi, pi].")


@dataclass(frozen=True)
class ExportHeader:
    """What every export file says about itself.

    Attributes
    ----------
    title : str
        What the file holds, e.g. ``"balance gains"``.
    rig_name, rig_source, rig_hash : str
        The rig's name, its file, and the SHA-256 of the file's bytes.
    tool_version : str
        upswing's version.
    sign_convention : str
    units : tuple of (str, str)
        (quantity, unit) pairs: every state and input, plus any the exporter adds.
    caution : str
        The short trial caution (:data:`TRIAL_CAUTION`).
    standards : tuple of str
        The cited standards, "number: subject".
    governing : str
        Local codes and licensed practice govern.
    notes : tuple of str
        Anything the exporter adds (design settings, warnings).
    """

    title: str
    rig_name: str
    rig_source: str
    rig_hash: str
    tool_version: str
    sign_convention: str
    units: tuple[tuple[str, str], ...]
    caution: str
    standards: tuple[str, ...]
    governing: str
    notes: tuple[str, ...] = ()


def export_header(rig: Rig, title: str, *, units: Sequence[tuple[str, str]] = (),
                  notes: Sequence[str] = ()) -> ExportHeader:
    """The header for a file exported from ``rig``: states and inputs with their units, then ``units``."""
    base_units = [*zip(rig.state_names, rig.state_units, strict=True),
                  *zip(rig.input_names, rig.input_units, strict=True)]
    return ExportHeader(
        title=title, rig_name=rig.name, rig_source=rig.source, rig_hash=rig.content_hash or "(not from a file)",
        tool_version=__version__, sign_convention=SIGN_CONVENTION, units=tuple(base_units) + tuple(units),
        caution=TRIAL_CAUTION, standards=tuple(f"{k}: {v}" for k, v in STANDARDS.items()), governing=GOVERNING,
        notes=tuple(notes),
    )


def header_lines(h: ExportHeader) -> list[str]:
    """The header as plain text lines (no comment markers)."""
    lines = [
        f"upswing {h.tool_version}: {h.title}",
        f"rig: {h.rig_name} ({h.rig_source})",
        f"rig file SHA-256: {h.rig_hash}",
        f"sign convention: {h.sign_convention}",
        "units: " + ", ".join(f"{q} [{u}]" for q, u in h.units),
        f"CAUTION: {h.caution}",
        "standards: " + "; ".join(h.standards),
        h.governing,
    ]
    return lines + list(h.notes)


def hash_comment(h: ExportHeader) -> str:
    """The header as ``# `` lines (for CSV and other line-oriented text), ending with a newline."""
    return "".join(f"# {line}\n" for line in header_lines(h))


def c_comment(h: ExportHeader) -> str:
    """The header as one C block comment, ending with a newline; ``*/`` inside the text is defused."""
    body = "".join(f" * {line.replace('*/', '* /')}\n" for line in header_lines(h))
    return f"/*\n{body} */\n"


def header_json(h: ExportHeader) -> dict[str, object]:
    """The header as a JSON-ready mapping."""
    return {
        "title": h.title, "rig": {"name": h.rig_name, "source": h.rig_source, "content_hash": h.rig_hash},
        "tool": {"name": "upswing", "version": h.tool_version}, "sign_convention": h.sign_convention,
        "units": dict(h.units), "caution": h.caution, "standards": list(h.standards), "governing": h.governing,
        "notes": list(h.notes),
    }


def rig_header(rig: Rig) -> dict[str, Any]:
    """Fields every JSON object starts with: tool, rig, names and units in the conventions' order."""
    return {
        "tool": {"name": "upswing", "version": __version__},
        "rig": {"name": rig.name, "source": rig.source, "content_hash": rig.content_hash, "family": rig.family,
                "base": rig.base},
        "state": list(rig.state_names),
        "inputs": list(rig.input_names),
        "units": {"state": list(rig.state_units), "inputs": list(rig.input_units), "time": "s",
                  "frequency": "Hz", "eigenvalues": "1/s"},
        "sign_convention": "u = u_eq - K (x - x_eq); angles counter-clockwise positive, theta1 from the upward "
                           "vertical, theta2 relative to link 1; angle errors wrapped to (-pi, pi]",
    }


def safety_block() -> dict[str, Any]:
    """The cautions and cited standards every JSON object a person acts on carries."""
    return {"cautions": list(CAUTIONS), "standards": dict(STANDARDS)}
