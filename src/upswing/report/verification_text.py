"""Readable text of ``upswing verify``: the verdict table, region of attraction, hazard notes."""

from __future__ import annotations

from upswing.model.rig import Rig
from upswing.report.text import cautions_text, table
from upswing.verification.verdict import VERDICT_RULE, Verification


def _number(x: float | None) -> str:
    return "-" if x is None else f"{x:.4g}"


def verification_text(rig: Rig, v: Verification) -> str:
    """What ``upswing verify`` prints."""
    mc, roa = v.monte_carlo, v.region
    low, high = mc.success_interval
    out = [f"{rig.name}  ({rig.source})  family: {rig.family}",
           f"controller: {v.controller}; measurement: {v.measurement} ({v.estimator})",
           f"VERDICT: {v.verdict.upper()}"]
    out += [f"  - {r}" for r in v.reasons]
    if v.verdict == "pass":
        out += [f"  - {what}" for what in v.decision.limited_by]
    out.append(f"  (rule: {VERDICT_RULE}; required success rate {v.decision.required_success:.1%})")
    out += ["", f"Monte Carlo: {mc.successes} of {mc.rollouts} rollouts held ({mc.success_rate:.1%}; 95 % Wilson "
                f"interval {low:.1%} .. {high:.1%}), seed {mc.seed}, {mc.distribution} parameter spreads, "
                f"{mc.horizon_s:g} s each",
            "  outcomes: " + ", ".join(f"{k} {n}" for k, n in mc.outcomes.items())]
    notable = [c for c in mc.correlations if c.notable]
    if notable:
        out.append("  failures follow: " + ", ".join(
            f"{c.parameter} (r = {c.r:+.2f}; failed runs {c.mean_deviation_failed:+.1%} vs held "
            f"{c.mean_deviation_held:+.1%})" for c in notable))
    rows = [[b.name, _number(b.value), _number(b.median), _number(b.limit), b.unit,
             "-" if b.ok is None else ("ok" if b.ok else "OVER")] for b in v.budgets]
    out += ["", "Budgets (worst over the rollouts that held):",
            table(rows, ["budget", "worst", "median", "limit", "unit", ""])]
    rows = [[s, f"{roa.level_set_extents[s]:.3g}", f"{lo:+.3g}", f"{hi:+.3g}"]
            for s, (lo, hi) in roa.axis_catch.items()]
    out += ["", f"Region of attraction ({roa.method}):",
            f"  rho = {roa.rho:.4g} (x'Px <= rho; {roa.samples} held starts inside, "
            f"{roa.samples_total} simulated)",
            table(rows, ["state", "level-set half-width", "caught from (axis)", "caught to (axis)"])]
    d = v.dropout
    out += ["", "Sensor drop-out (reading frozen at t = 1 s): " + ", ".join(
        f"{ms:g} ms {f:.0%} held" for ms, f in zip(d.durations_ms, d.held_fraction, strict=True))]
    i = v.integration
    out += [f"Integration: RK4, {i.substeps} steps per sample (h = {i.step * 1e3:.3g} ms), step-doubling error "
            f"estimate {i.error_estimate:.2g} rad (tolerance {i.tolerance:g}; without Coulomb friction), "
            f"{i.coulomb_sensitivity:.2g} rad with Coulomb friction's switching",
            f"Time: {mc.simulate_s:.1f} s for {mc.rollouts} Monte Carlo rollouts, {v.total_s:.1f} s in all", ""]
    out.append("Hazard notes:")
    for h in v.hazards:
        refs = f" [{', '.join(h.standards)}]" if h.standards else ""
        out.append(f"  - {h.topic}: {h.text}{refs}")
    out += ["", cautions_text()]
    return "\n".join(out)
