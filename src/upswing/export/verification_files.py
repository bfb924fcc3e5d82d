"""Verification results as CSV files a spreadsheet or a script can read as they are.

Every file starts with the export header as ``# `` lines (rig hash, tool version, sign convention, units, cautions;
:mod:`upswing.export.header`), then one header row of plain column names:

``montecarlo.csv``
    one row per Monte Carlo rollout: ``rollout``, ``outcome``, ``held`` (1/0), ``end_time``, ``settle_time``, the
    start ``x0_<state>``, per input ``peak_<input>``, ``rms_<input>``, ``saturated_<input>``, per coordinate
    ``peak_speed_<coordinate>``, ``peak_rail`` (cart rigs), ``peak_base_force``, ``peak_base_moment``,
    ``peak_tip_speed``, ``peak_kinetic_energy``, then every physical parameter the rollout was drawn with, under its
    rig-file name (``link1.mass``, ...).
``roa_slices.csv``
    one row per start of the region-of-attraction slice maps: ``slice`` (``<x_state>-<y_state>``), ``x_state``,
    ``y_state``, ``x_value``, ``y_value``, ``held`` (1/0); the other states at upright, nominal parameters.
``budgets.csv``
    ``stage``, ``name``, ``value``, ``limit``, ``unit``, ``ok`` (1/0, empty without a limit), ``median``,
    ``meaning``.
``balance_responses.csv``
    ``response`` (``offset`` or ``tap``), ``t``, the states, the applied inputs.
``trajectory.csv``
    the planned swing-up at the loop rate: ``t``, the states (the reference), the inputs (the feed-forward).
"""

from __future__ import annotations

import csv
import io
from collections.abc import Sequence

import numpy as np

from upswing.export.header import export_header, hash_comment
from upswing.model.rig import PARAMETER_NAMES, Rig
from upswing.verification.budgets import Budget
from upswing.verification.montecarlo import MonteCarloResult
from upswing.verification.roa import RegionOfAttraction
from upswing.verification.simulate import STATUS

MONTE_CARLO_CSV = "montecarlo.csv"
ROA_SLICES_CSV = "roa_slices.csv"
BUDGETS_CSV = "budgets.csv"
RESPONSES_CSV = "balance_responses.csv"
TRAJECTORY_CSV = "trajectory.csv"

PARAMETER_UNITS = {"mass": "kg", "length": "m", "com": "m", "inertia": "kg m^2", "gravity": "m/s^2"}


def _parameter_unit(name: str) -> str:
    kind = name.split(".")[-1]
    if kind in PARAMETER_UNITS:
        return PARAMETER_UNITS[kind]
    on_cart = name.startswith("cart.")
    if kind == "damping":
        return "N s/m" if on_cart else "N m s/rad"
    if kind == "coulomb":
        return "N" if on_cart else "N m"
    return "-"


def _number(value: float) -> str:
    return repr(float(value))


def _writer(buf: io.StringIO) -> csv.writer:
    return csv.writer(buf, lineterminator="\n")


def _coordinates(rig: Rig) -> tuple[str, ...]:
    return ("x", "theta1", "theta2") if rig.base == "cart" else ("theta1", "theta2")


def montecarlo_csv(rig: Rig, mc: MonteCarloResult) -> str:
    """``montecarlo.csv`` (module docstring)."""
    r = mc.results
    coords = _coordinates(rig)
    speed_units = ["m/s" if c == "x" else "rad/s" for c in coords]
    units = [("end_time", "s"), ("settle_time", "s"), *[(f"x0_{s}", u) for s, u in zip(rig.state_names,
                                                                                         rig.state_units, strict=True)]]
    for name, unit in zip(rig.input_names, rig.input_units, strict=True):
        units += [(f"peak_{name}", unit), (f"rms_{name}", unit), (f"saturated_{name}", "s")]
    units += [(f"peak_speed_{c}", u) for c, u in zip(coords, speed_units, strict=True)]
    if rig.cart is not None:
        units.append(("peak_rail", "m"))
    units += [("peak_base_force", "N"), ("peak_base_moment", "N m"), ("peak_tip_speed", "m/s"),
              ("peak_kinetic_energy", "J"), *[(p, _parameter_unit(p)) for p in PARAMETER_NAMES]]
    notes = [f"Monte Carlo: {mc.rollouts} rollouts of {mc.horizon_s:g} s, seed {mc.seed}, {mc.distribution} spreads; "
             f"{mc.successes} held ({mc.success_rate:.4f}), 95 % Wilson interval {mc.success_interval[0]:.4f} .. "
             f"{mc.success_interval[1]:.4f}",
             "outcome: " + ", ".join(STATUS) + "; held = 1 when the rollout stayed in the settling box for the "
             "final second"]
    buf = io.StringIO()
    buf.write(hash_comment(export_header(rig, "Monte Carlo rollouts of the balance loop", units=units, notes=notes)))
    w = _writer(buf)
    w.writerow(["rollout", "outcome", "held", *[u[0] for u in units]])
    for i in range(mc.rollouts):
        row = [str(int(r.ids[i])), STATUS[int(r.status[i])], "1" if r.held[i] else "0",
               _number(r.end_time[i]), _number(r.settle_time[i]), *map(_number, mc.initial_states[i])]
        for j in range(rig.n_inputs):
            row += [_number(r.peak_input[i, j]), _number(r.rms_input[i, j]), _number(r.saturated_time[i, j])]
        row += [_number(v) for v in r.peak_speed[i]]
        if rig.cart is not None:
            row.append(_number(r.peak_rail[i]))
        row += [_number(r.peak_force[i]), _number(r.peak_monitors[i, 2]), _number(r.peak_monitors[i, 3]),
                _number(r.peak_monitors[i, 4]), *map(_number, mc.parameters[i])]
        w.writerow(row)
    return buf.getvalue()


def roa_slices_csv(rig: Rig, region: RegionOfAttraction) -> str:
    """``roa_slices.csv`` (module docstring)."""
    buf = io.StringIO()
    notes = [f"region of attraction: {region.method}", f"rho = {region.rho!r} (x'Px <= rho), {region.samples} held "
             f"starts inside, {region.samples_total} simulated"]
    buf.write(hash_comment(export_header(rig, "region-of-attraction slice maps of the balance loop", notes=notes)))
    w = _writer(buf)
    w.writerow(["slice", "x_state", "y_state", "x_value", "y_value", "held"])
    for piece in region.slices:
        held = np.asarray(piece.held)
        for i, y in enumerate(piece.y_values):
            for j, x in enumerate(piece.x_values):
                w.writerow([f"{piece.x_state}-{piece.y_state}", piece.x_state, piece.y_state, _number(x), _number(y),
                            str(int(held[i, j]))])
    return buf.getvalue()


def budgets_csv(rig: Rig, budgets: Sequence[Budget]) -> str:
    """``budgets.csv`` (module docstring); a budget's stage is the first part of its name."""
    buf = io.StringIO()
    buf.write(hash_comment(export_header(rig, "budgets of the design run (worst over the rollouts that held)")))
    w = _writer(buf)
    w.writerow(["stage", "name", "value", "limit", "unit", "ok", "median", "meaning"])
    for b in budgets:
        w.writerow([b.name.partition(".")[0], b.name, _number(b.value), "" if b.limit is None else _number(b.limit),
                    b.unit, "" if b.ok is None else ("1" if b.ok else "0"), _number(b.median), b.meaning])
    return buf.getvalue()


def responses_csv(rig: Rig, responses: Sequence) -> str:
    """``balance_responses.csv`` (module docstring) from :class:`upswing.design.responses.Response` objects."""
    buf = io.StringIO()
    notes = [f"{r.name}: {r.description}; outcome {r.outcome}" for r in responses]
    notes.append("each input row is the effort applied from that sample to the next (zero-order hold)")
    buf.write(hash_comment(export_header(rig, "balance loop responses on the nonlinear model", units=[("t", "s")],
                                         notes=notes)))
    w = _writer(buf)
    w.writerow(["response", "t", *rig.state_names, *rig.input_names])
    for r in responses:
        for t, x, u in zip(r.t, r.X, r.U, strict=True):
            w.writerow([r.name, _number(t), *map(_number, x), *map(_number, u)])
    return buf.getvalue()


def trajectory_csv(rig: Rig, t: np.ndarray, X: np.ndarray, U: np.ndarray, notes: Sequence[str] = ()) -> str:
    """``trajectory.csv`` (module docstring): one row per sample."""
    buf = io.StringIO()
    buf.write(hash_comment(export_header(rig, "planned swing-up (reference states and feed-forward inputs)",
                                         units=[("t", "s")], notes=notes)))
    w = _writer(buf)
    w.writerow(["t", *rig.state_names, *rig.input_names])
    for tk, x, u in zip(t, X, U, strict=True):
        w.writerow([_number(tk), *map(_number, x), *map(_number, u)])
    return buf.getvalue()
