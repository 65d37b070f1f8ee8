"""Reference dynamics of a kipup robot computed by the Pinocchio library (``pin`` on PyPI).

Not a test file: the tests import :class:`PinocchioReference` to compare kipup's own
planar algorithms against an independent, widely used 3D rigid-body library.

The Pinocchio model is a chain of joints built from a :class:`kipup.core.robot.Robot`:

* ``base_x`` (JointModelPX) and ``base_z`` (JointModelPZ) with massless bodies, then
  ``base_pitch`` (JointModelRY) carrying the base link;
* one JointModelRY per kipup joint, placed at ``(origin[0], 0, origin[1])`` in its parent
  joint frame with identity rotation;
* each link's spatial inertia is ``Inertia(mass, [cx, 0, cz], diag(Ixx, Iyy, Izz))`` with
  ``Iyy`` the kipup inertia about y and arbitrary positive ``Ixx``/``Izz`` (they cannot
  matter for motions in the x-z plane, which is part of what the comparison checks);
* named points are operational frames (OP_FRAME) at ``(x, 0, z)`` on their link's joint.

Every Pinocchio joint here has nq = nv = 1 and the first three are the base coordinates, so
the Pinocchio ``q`` holds the same entries as kipup's (x, z, pitch, joints). Pinocchio
however needs its joints numbered depth-first (the subtree of a joint must be a contiguous
range of indices: its CRBA and Jacobians rely on that), while kipup only asks for
parent-before-child order. So the joints are added in depth-first order and every method
here takes and returns vectors in *kipup's* order, permuting on the way in and out; for a
robot already in depth-first order the permutation is the identity.

Pinocchio's rotation about +y maps body (x, z) to parent (c x + s z, -s x + c z), which is
kipup's ``E(theta)``, so angles need no sign change either.
"""
from __future__ import annotations

import numpy as np
import pinocchio as pin

from kipup.core.robot import Robot

#: Inertias about the link's own x and z axes (kg m^2): arbitrary and positive.
DEFAULT_IXX = 0.37
DEFAULT_IZZ = 0.21


class PinocchioReference:
    """A Pinocchio model and data for one kipup robot, with kipup-shaped outputs."""

    def __init__(self, robot: Robot, ixx: float = DEFAULT_IXX, izz: float = DEFAULT_IZZ) -> None:
        self.robot = robot
        model = pin.Model()
        model.name = robot.name
        model.gravity = pin.Motion(np.array([0.0, 0.0, -robot.gravity, 0.0, 0.0, 0.0]))
        eye = pin.SE3.Identity()
        jx = model.addJoint(0, pin.JointModelPX(), eye, "base_x")
        jz = model.addJoint(jx, pin.JointModelPZ(), eye, "base_z")
        jp = model.addJoint(jz, pin.JointModelRY(), eye, "base_pitch")
        joint_of_link = {robot.links[0].name: jp}
        self._append(model, jp, robot.links[0], ixx, izz)
        order = depth_first_joints(robot)
        for k in order:
            joint = robot.joints[k]
            placement = pin.SE3(np.eye(3), np.array([joint.origin[0], 0.0, joint.origin[1]]))
            jid = model.addJoint(joint_of_link[joint.parent], pin.JointModelRY(), placement, joint.name)
            link = robot.links[k + 1]
            joint_of_link[link.name] = jid
            self._append(model, jid, link, ixx, izz)
        #: perm[i] = the kipup coordinate held by Pinocchio's coordinate i
        self.perm = np.array([0, 1, 2] + [3 + k for k in order])
        self.frame_ids = {}
        for p in robot.points:
            placement = pin.SE3(np.eye(3), np.array([p.position[0], 0.0, p.position[1]]))
            self.frame_ids[p.name] = model.addFrame(
                pin.Frame(p.name, joint_of_link[p.link], placement, pin.FrameType.OP_FRAME))
        if model.nq != robot.nq or model.nv != robot.nv:
            raise AssertionError(f"Pinocchio model has nq={model.nq}, nv={model.nv}; kipup {robot.nq}")
        for i in range(robot.nv):  # joint i + 1 drives Pinocchio's q[i]
            assert model.joints[i + 1].idx_q == i and model.joints[i + 1].idx_v == i
        self.model = model
        self.data = model.createData()

    # ----- kipup order <-> Pinocchio order ---------------------------------------------
    def _in(self, v) -> np.ndarray:
        """A kipup-ordered vector in Pinocchio's order."""
        return np.asarray(v, dtype=float)[self.perm]

    def _out(self, v) -> np.ndarray:
        """A Pinocchio-ordered vector (or last axis of a matrix) in kipup's order."""
        v = np.asarray(v, dtype=float)
        out = np.empty_like(v)
        out[..., self.perm] = v
        return out

    @staticmethod
    def _append(model: pin.Model, jid: int, link, ixx: float, izz: float) -> None:
        lever = np.array([link.com[0], 0.0, link.com[1]])
        inertia = pin.Inertia(link.mass, lever, np.diag([ixx, link.inertia, izz]))
        model.appendBodyToJoint(jid, inertia, pin.SE3.Identity())

    # ----- dynamics ----------------------------------------------------------------
    def mass_matrix(self, q) -> np.ndarray:
        M = pin.crba(self.model, self.data, self._in(q)).copy()
        M = np.triu(M) + np.triu(M, 1).T  # crba fills the upper triangle only
        out = np.empty_like(M)
        out[np.ix_(self.perm, self.perm)] = M
        return out

    def bias(self, q, qd) -> np.ndarray:
        return self._out(pin.nonLinearEffects(self.model, self.data, self._in(q), self._in(qd)))

    def rnea(self, q, qd, qdd) -> np.ndarray:
        return self._out(pin.rnea(self.model, self.data, self._in(q), self._in(qd), self._in(qdd)))

    def aba(self, q, qd, tau) -> np.ndarray:
        return self._out(pin.aba(self.model, self.data, self._in(q), self._in(qd), self._in(tau)))

    # ----- points ---------------------------------------------------------------------
    def point_position(self, q, name: str) -> np.ndarray:
        pin.forwardKinematics(self.model, self.data, self._in(q))
        pin.updateFramePlacements(self.model, self.data)
        return self.data.oMf[self.frame_ids[name]].translation[[0, 2]].copy()

    def point_jacobian(self, q, name: str) -> np.ndarray:
        J = pin.computeFrameJacobian(self.model, self.data, self._in(q), self.frame_ids[name],
                                     pin.ReferenceFrame.LOCAL_WORLD_ALIGNED)
        return self._out(J[[0, 2], :])

    def point_jdot_qdot(self, q, qd, name: str) -> np.ndarray:
        """Classical (not spatial) acceleration of the point at qdd = 0, world axes, rows x, z."""
        qd = self._in(qd)
        pin.forwardKinematics(self.model, self.data, self._in(q), qd, np.zeros_like(qd))
        a = pin.getFrameClassicalAcceleration(self.model, self.data, self.frame_ids[name],
                                              pin.ReferenceFrame.LOCAL_WORLD_ALIGNED)
        return a.linear[[0, 2]].copy()

    # ----- whole body -------------------------------------------------------------------
    def com(self, q, qd) -> tuple[np.ndarray, np.ndarray]:
        pin.centerOfMass(self.model, self.data, self._in(q), self._in(qd))
        return self.data.com[0][[0, 2]].copy(), self.data.vcom[0][[0, 2]].copy()

    def centroidal_momentum(self, q, qd) -> np.ndarray:
        """(k_y, p_x, p_z): angular momentum about the COM (y) and linear momentum, world axes."""
        hg = pin.computeCentroidalMomentum(self.model, self.data, self._in(q), self._in(qd))
        return np.array([hg.angular[1], hg.linear[0], hg.linear[2]])

    def kinetic_energy(self, q, qd) -> float:
        return float(pin.computeKineticEnergy(self.model, self.data, self._in(q), self._in(qd)))

    def potential_energy(self, q) -> float:
        return float(pin.computePotentialEnergy(self.model, self.data, self._in(q)))


def depth_first_joints(robot: Robot) -> list[int]:
    """Indices into ``robot.joints`` in depth-first (pre-order) order from the base, children in file order."""
    children: dict[str, list[int]] = {link.name: [] for link in robot.links}
    for k, joint in enumerate(robot.joints):
        children[joint.parent].append(k)
    order: list[int] = []
    stack = list(reversed(children[robot.links[0].name]))
    while stack:
        k = stack.pop()
        order.append(k)
        stack.extend(reversed(children[robot.joints[k].child]))
    return order
