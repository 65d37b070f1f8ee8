"""The lumping rule: a left/right pair of limbs becomes one sagittal limb.

A robot file describes each side of a mirror-image pair of limbs once (values *per side*)
and gives the pair's ``lateral_offset`` ``w`` (m): the two sides sit at ``y = +w`` (left)
and ``y = -w`` (right). kipup models motions in the sagittal (x-z) plane in which both
sides move together, so the two sides act as a single rigid link:

* **mass** ``2 m``: the two bodies move as one.
* **COM** unchanged, in the link frame (x, z): the sides are mirror images about the
  sagittal plane, so their COMs differ only in y, and the combined COM's (x, z) is the
  same as each side's.
* **inertia about y** ``2 I``: by the parallel-axis theorem, the inertia of a body about
  an axis parallel to y through a point offset by ``d`` from its COM grows by
  ``m * (d_x**2 + d_z**2)``, where ``d_x``, ``d_z`` are the offsets *perpendicular* to y.
  Moving a side by ``+-w`` along y changes neither ``d_x`` nor ``d_z``, so each side
  contributes its own ``I`` about the lumped COM's y axis and the pair has ``2 I``.
* **actuator**: the two joint motors push together, so ``peak_torque``, ``stall_torque``
  and ``viscous_friction`` double. ``no_load_speed``, ``gear_ratio`` and the joint's
  position and velocity limits are unchanged (both sides turn at the same rate).
* **joint origin**, **capsule** and **points** unchanged: a point on a paired link stands
  for both sides' points (``toe`` is both toes), and the capsule is drawn on both sides.
* **sides** ``(+w, -w)``: the lateral offsets at which the link is drawn in 3D. A centre
  (unpaired) link has ``sides = (0.0,)``.

Doubling is exact in binary floating point, so :func:`unlump_pair` recovers the per-side
values bit for bit and a robot file survives a load/save round trip unchanged.
"""
from __future__ import annotations

from dataclasses import replace

from .robot import Actuator, Joint, Link

__all__ = ["lump_pair", "unlump_pair", "is_paired", "lateral_offset"]


def lump_pair(per_side_link: Link, per_side_joint: Joint, lateral_offset: float) -> tuple[Link, Joint]:
    """Lump one side of a left/right pair into the sagittal link and joint that stand for both.

    ``per_side_link``/``per_side_joint`` hold one side's constants (kg, m, kg m^2, N m,
    N m s/rad; link frame); ``lateral_offset`` (m, > 0) is each side's distance from the
    sagittal plane. Returns ``(link, joint)`` with ``link.sides == (+w, -w)``.
    """
    w = float(lateral_offset)
    if not w > 0.0:
        raise ValueError(f"lateral_offset must be > 0 m, got {lateral_offset!r}")
    link = replace(
        per_side_link,
        mass=2.0 * per_side_link.mass,
        inertia=2.0 * per_side_link.inertia,
        sides=(w, -w),
    )
    act = per_side_joint.actuator
    actuator = Actuator(
        peak_torque=2.0 * act.peak_torque,
        gear_ratio=act.gear_ratio,
        stall_torque=2.0 * act.stall_torque,
        no_load_speed=act.no_load_speed,
        viscous_friction=2.0 * act.viscous_friction,
    )
    return link, replace(per_side_joint, actuator=actuator)


def is_paired(link: Link) -> bool:
    """True if ``link`` is a lumped left/right pair, i.e. ``link.sides == (+w, -w)`` with w > 0."""
    sides = tuple(link.sides)
    return len(sides) == 2 and sides[0] > 0.0 and sides[1] == -sides[0]


def lateral_offset(link: Link) -> float:
    """The per-side lateral offset ``w`` (m) of a paired link; raises ValueError for other links."""
    if not is_paired(link):
        raise ValueError(f"link {link.name!r} is not a left/right pair (sides={tuple(link.sides)!r})")
    return float(link.sides[0])


def unlump_pair(link: Link, joint: Joint) -> tuple[Link, Joint, float]:
    """Inverse of :func:`lump_pair`: the per-side link and joint and the lateral offset (m).

    Used when saving a robot file, which stores per-side values. ``link.sides`` of the
    returned per-side link is reset to ``(0.0,)`` (the offset is returned separately).
    """
    w = lateral_offset(link)
    side_link = replace(link, mass=link.mass / 2.0, inertia=link.inertia / 2.0, sides=(0.0,))
    act = joint.actuator
    side_act = Actuator(
        peak_torque=act.peak_torque / 2.0,
        gear_ratio=act.gear_ratio,
        stall_torque=act.stall_torque / 2.0,
        no_load_speed=act.no_load_speed,
        viscous_friction=act.viscous_friction / 2.0,
    )
    return side_link, replace(joint, actuator=side_act), w
