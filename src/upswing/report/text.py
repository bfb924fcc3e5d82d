"""Readable terminal text for the analysis commands (the JSON forms live in each module of upswing.commands)."""

from __future__ import annotations

import math

import numpy as np

from upswing.model.derived import DerivedQuantities, keep_out_origin, keep_out_radius
from upswing.model.modes import EquilibriumReport
from upswing.model.rig import Rig
from upswing.safety import CAUTIONS


def table(rows: list[list[str]], header: list[str]) -> str:
    """Left-aligned plain-text table with a rule under the header."""
    widths = [max(len(str(r[i])) for r in [header, *rows]) for i in range(len(header))]
    line = "  ".join(h.ljust(w) for h, w in zip(header, widths, strict=True))
    rule = "  ".join("-" * w for w in widths)
    body = ["  ".join(str(c).ljust(w) for c, w in zip(r, widths, strict=True)) for r in rows]
    return "\n".join([line, rule, *body])


def complex_text(z: complex) -> str:
    if abs(z.imag) < 1e-12:
        return f"{z.real:+.4g}"
    return f"{z.real:+.4g} {'+' if z.imag >= 0 else '-'} {abs(z.imag):.4g}j"


def cautions_text() -> str:
    return "Cautions:\n" + "\n".join(f"  - {c}" for c in CAUTIONS)


def check_text(rig: Rig, derived: DerivedQuantities) -> str:
    """What ``upswing check`` prints."""
    rows = [
        ["family", rig.family, ""],
        ["base", rig.base, ""],
        ["inputs", ", ".join(rig.input_names), ""],
        ["total mass", f"{derived.total_mass:.4g}", "kg"],
        ["moving mass (links)", f"{derived.moving_mass:.4g}", "kg"],
        ["inertia about the pivot (straight)", f"{derived.inertia_about_pivot:.4g}", "kg m^2"],
        ["tip reach", f"{derived.reach:.4g}", "m"],
        ["swept-circle radius", f"{derived.swept_radius:.4g}", "m"],
        ["gravity torque at shoulder, links horizontal", f"{derived.holding_torque:.4g}", "N m"],
    ]
    if rig.cart is not None:
        rows.append(["reachable half-width from rail centre", f"{derived.keep_out_half_width:.4g}", "m"])
    for a in rig.actuators:
        unit = "N" if a.joint == "cart" else "N m"
        rows.append([f"{a.joint} peak / continuous", f"{a.peak:g} / {a.continuous:g}", unit])
    out = [f"{rig.name}  ({rig.source})", "", table(rows, ["quantity", "value", "unit"])]
    if rig.warnings:
        out += ["", "Warnings:", *[f"  - {w}" for w in rig.warnings]]
    out += ["", f"Keep-out: stay at least {keep_out_radius(rig):.2f} m from {keep_out_origin(rig)} while the drive "
                "is enabled (reach plus 0.5 m; lay out guards per ISO 13857).",
            "", cautions_text()]
    return "\n".join(out)


def modes_text(rig: Rig, reports: dict[str, EquilibriumReport]) -> str:
    """What ``upswing modes`` prints: one block per equilibrium."""
    out = [f"{rig.name}  ({rig.source})  family: {rig.family}, inputs: {', '.join(rig.input_names)}",
           f"states: {', '.join(rig.state_names)}"]
    for name, rep in reports.items():
        c = rep.controllability
        out += ["", f"== {name} ==",
                "eigenvalues [1/s]: " + ", ".join(complex_text(z) for z in rep.linear.eigenvalues)]
        if rep.growth_rates:
            out.append("unstable: " + ", ".join(
                f"growth {s:.3g} 1/s (doubles every {math.log(2) / s * 1000:.0f} ms)" for s in rep.growth_rates))
        else:
            out.append("stable (no eigenvalue with positive real part)")
        out.append(f"controllable with {', '.join(rig.input_names)}: {'yes' if c.controllable else 'NO'} "
                   f"(rank {c.rank}/{rig.n_states}, scaled PBH margin {c.pbh_margin:.3g})")
        if c.warning:
            out.append(f"warning: {c.warning}")
        out.append(f"observable from encoders ({', '.join(rep.measured)}): "
                   f"{'yes' if rep.observable else 'NO'} (rank {rep.observability_rank}/{rig.n_states})")
        if rep.modes:
            rows = [[m.kind, f"{m.frequency_hz:.4g}", f"{2 * np.pi * m.frequency_hz:.4g}",
                     f"{m.absolute_shape[0]:+.3f}", f"{m.absolute_shape[1]:+.3f}"] for m in rep.modes]
            out += ["small-oscillation modes (absolute link angles, largest generalized entry = 1):",
                    table(rows, ["mode", "f [Hz]", "w [rad/s]", "link 1", "link 2"])]
    out += ["", cautions_text()]
    return "\n".join(out)
