"""Quantities derived from a rig's parameters that a person checks before anything else."""

from __future__ import annotations

from dataclasses import dataclass

from upswing.model.rig import Rig


@dataclass(frozen=True)
class DerivedQuantities:
    """Sizes and inertias of a rig.

    Attributes
    ----------
    total_mass : float
        Links plus cart [kg].
    moving_mass : float
        Links only [kg].
    inertia_about_pivot : float
        Both links, stretched straight, about the shoulder axis [kg m^2].
    reach : float
        Shoulder axis to the tip of link 2, stretched straight [m].
    swept_radius : float
        Radius of the circle the links can sweep about the shoulder [m] (= reach).
    keep_out_half_width : float
        Half-width of the region the links can reach, measured from the rail's centre [m]: reach on a fixed
        base, travel + reach on a cart.
    holding_torque : float
        Gravity torque at the shoulder with both links horizontal and straight [N m]: what a shoulder motor
        needs to hold the worst static pose.
    """

    total_mass: float
    moving_mass: float
    inertia_about_pivot: float
    reach: float
    swept_radius: float
    keep_out_half_width: float
    holding_torque: float


def derived_quantities(rig: Rig) -> DerivedQuantities:
    """Compute :class:`DerivedQuantities` from the rig's parameters (parallel-axis theorem for the inertias)."""
    l1, l2 = rig.link1, rig.link2
    moving = l1.mass + l2.mass
    inertia = (l1.inertia + l1.mass * l1.com**2 + l2.inertia + l2.mass * (l1.length + l2.com) ** 2)
    reach = l1.length + l2.length
    travel = rig.cart.travel if rig.cart is not None else 0.0
    holding = rig.gravity * (l1.mass * l1.com + l2.mass * (l1.length + l2.com))
    return DerivedQuantities(
        total_mass=moving + (rig.cart.mass if rig.cart is not None else 0.0),
        moving_mass=moving,
        inertia_about_pivot=inertia,
        reach=reach,
        swept_radius=reach,
        keep_out_half_width=travel + reach,
        holding_torque=holding,
    )


def keep_out_radius(rig: Rig, margin: float = 0.5) -> float:
    """Recommended keep-out distance from the swept region's edge [m]: reach plus a margin (default 0.5 m,
    common practice for arm-reach clearance; use ISO 13857's tables for the real guard layout)."""
    return derived_quantities(rig).keep_out_half_width + margin


def keep_out_origin(rig: Rig) -> str:
    """Where :func:`keep_out_radius` is measured from, in words: the shoulder axis on a fixed base; on a cart rig
    the rail's centre, because the shoulder rides along the rail and the links reach past the rail's ends."""
    return "the rail's centre (the links reach past the rail's ends)" if rig.cart is not None else "the shoulder axis"
