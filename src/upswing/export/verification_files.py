"""Verification results as JSON (the fields of ``upswing verify --json``, :func:`verification_json`) and as CSV files
a spreadsheet or a script can read as they are.

Every file starts with the export header as ``# `` lines (rig hash, tool version, sign convention, units, cautions;
:mod:`upswing.export.header`), then one header row of plain column names:

``montecarlo.csv``
    one row per Monte Carlo rollout: ``rollout``, ``outcome``, ``held`` (1/0), ``end_time``, ``settle_time``, the
    start ``x0_<state>``, per input ``peak_<input>``, ``rms_<input>``, ``saturated_<input>``, per coordinate
    ``peak_speed_<coordinate>``, ``peak_rail`` (cart rigs), ``peak_base_force``, ``peak_base_moment``,
    ``peak_tip_speed``, ``peak_kinetic_energy``, then every physical parameter the rollout was drawn with, under its
    rig-file name (``link1.mass``, ...).
``swingup_montecarlo.csv``
    one row per tracked swing-up rollout (:func:`swingup_montecarlo_csv`): ``rollout``, ``outcome``, ``caught``
    (1/0), ``handover_time`` (empty if never), ``end_time``, per input ``peak_``/``rms_``/``saturated_<input>``, per
    coordinate ``peak_speed_<coordinate>``, ``peak_rail`` (cart rigs), ``peak_tip_speed``, then the parameters.
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
import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from upswing.export.header import export_header, hash_comment
from upswing.model.rig import PARAMETER_NAMES, Rig
from upswing.verification.budgets import Budget
from upswing.verification.montecarlo import MonteCarloResult
from upswing.verification.roa import RegionOfAttraction
from upswing.verification.simulate import STATUS
from upswing.verification.verdict import VERDICT_RULE, Verification

SWINGUP_MONTE_CARLO_CSV = "swingup_montecarlo.csv"
MONTE_CARLO_CSV = "montecarlo.csv"
ROA_SLICES_CSV = "roa_slices.csv"
BUDGETS_CSV = "budgets.csv"
RESPONSES_CSV = "balance_responses.csv"
TRAJECTORY_CSV = "trajectory.csv"

VERIFICATION_UNITS = {"budgets": "each line's unit", "rho": "cost-to-go (dimensionless mix of state units)",
                      "timing": "s", "success_rate": "fraction", "required_success": "fraction"}


def verification_json(v: Verification) -> dict[str, Any]:
    """The JSON fields of ``upswing verify`` (names fixed by the issue; more may be added, none renamed)."""
    mc, roa = v.monte_carlo, v.region
    return {
        "verdict": v.verdict,
        "reasons": list(v.reasons),
        "verdict_rule": VERDICT_RULE,
        "required_success": v.decision.required_success,
        "success_lower_bound": v.decision.success_lower_bound,
        "limited_by": list(v.decision.limited_by),
        "controller": v.controller,
        "measurement": v.measurement,
        "estimator": v.estimator,
        "estimator_kind": v.estimator_kind,
        "rollouts": mc.rollouts,
        "seed": mc.seed,
        "success_rate": mc.success_rate,
        "success_interval": list(mc.success_interval),
        "success_interval_method": "Wilson score interval, 95 %",
        "outcomes": mc.outcomes,
        "failure_correlations": [
            {"parameter": c.parameter, "r": c.r, "mean_deviation_failed": c.mean_deviation_failed,
             "mean_deviation_held": c.mean_deviation_held, "notable": c.notable} for c in mc.correlations],
        "uncertainty": {"distribution": mc.distribution, "clipped_draws": mc.clipped},
        "initial_offsets": {"angle": mc.offsets.angle, "rate": mc.offsets.rate, "cart": mc.offsets.cart,
                            "cart_rate": mc.offsets.cart_rate, "distribution": "uniform"},
        "budgets": [{"name": b.name, "value": b.value, "limit": b.limit, "unit": b.unit, "ok": b.ok,
                     "median": b.median, "meaning": b.meaning} for b in v.budgets],
        "region_of_attraction": {
            "rho": roa.rho, "samples": roa.samples, "samples_total": roa.samples_total, "rho_max": roa.rho_max,
            "level_set_extents": roa.level_set_extents,
            "axis_catch": {k: list(val) for k, val in roa.axis_catch.items()},
            "P": roa.P, "method": roa.method,
            "slices": [{"x_state": s.x_state, "y_state": s.y_state, "x_values": s.x_values, "y_values": s.y_values,
                        "held": s.held} for s in roa.slices]},
        "dropout": {"durations_ms": list(v.dropout.durations_ms), "held_fraction": list(v.dropout.held_fraction),
                    "longest_held_ms": v.dropout.longest_held_ms, "rollouts_each": v.dropout.rollouts_each},
        "hazards": [{"topic": h.topic, "text": h.text, "standards": list(h.standards)} for h in v.hazards],
        "integration": {"method": "classical RK4, fixed step, zero-order hold between samples",
                        "substeps": v.integration.substeps, "step_s": v.integration.step,
                        "error_estimate": v.integration.error_estimate, "tolerance": v.integration.tolerance,
                        "coulomb_sensitivity": v.integration.coulomb_sensitivity,
                        "error_units": "rad or m (angles and cart position)"},
        "timing": {"simulate_s": mc.simulate_s, "rollouts": mc.rollouts, "horizon_s": mc.horizon_s,
                   "region_s": roa.simulate_s, "total_s": v.total_s},
    }


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


def swingup_montecarlo_csv(rig: Rig, check: Any) -> str:
    """``swingup_montecarlo.csv``: one row per tracked swing-up rollout of
    :func:`upswing.verification.manoeuvre.verify_swingup` (``check``): outcome, caught (1/0), the hand-over time
    (empty when the balance loop never engaged), end time, peaks and RMS per input, peak speeds, and the drawn
    parameters."""
    r = check.results
    coords = _coordinates(rig)
    units = [("handover_time", "s"), ("end_time", "s")]
    for name, unit in zip(rig.input_names, rig.input_units, strict=True):
        units += [(f"peak_{name}", unit), (f"rms_{name}", unit), (f"saturated_{name}", "s")]
    units += [(f"peak_speed_{c}", "m/s" if c == "x" else "rad/s") for c in coords]
    if rig.cart is not None:
        units.append(("peak_rail", "m"))
    units += [("peak_tip_speed", "m/s"), *[(p, _parameter_unit(p)) for p in PARAMETER_NAMES]]
    low, high = check.success_interval
    notes = [f"swing-up Monte Carlo: {check.law}; {check.rollouts} rollouts of {check.horizon_s:.3g} s, seed "
             f"{check.seed}, {check.measurement}; hand-over at rho_in = {check.rho_in:.4g} ({check.rho_source})",
             f"{check.successes} caught and held ({check.success_rate:.4f}), 95 % Wilson interval {low:.4f} .. "
             f"{high:.4f}",
             "caught = 1 when the balance loop engaged and held the links in the settling box for the final second"]
    buf = io.StringIO()
    buf.write(hash_comment(export_header(rig, "Monte Carlo rollouts of the tracked swing-up with hand-over",
                                         units=units, notes=notes)))
    w = _writer(buf)
    w.writerow(["rollout", "outcome", "caught", *[u[0] for u in units]])
    for i in range(check.rollouts):
        handover = float(check.handover_times[i])
        row = [str(int(r.ids[i])), check.outcome_of(i), "1" if check.caught[i] else "0",
               _number(handover) if math.isfinite(handover) else "", _number(r.end_time[i])]
        for j in range(rig.n_inputs):
            row += [_number(r.peak_input[i, j]), _number(r.rms_input[i, j]), _number(r.saturated_time[i, j])]
        row += [_number(v) for v in r.peak_speed[i]]
        if rig.cart is not None:
            row.append(_number(r.peak_rail[i]))
        row += [_number(r.peak_monitors[i, 3]), *map(_number, check.parameters[i])]
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
