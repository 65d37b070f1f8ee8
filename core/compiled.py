"""CasADi Functions of a robot's dynamics, built once per robot from SX expressions and cached.

``functions_for(robot)`` returns a :class:`RobotFunctions` kept on the robot instance, so a
second call is free. Each Function takes and returns CasADi DM/SX/MX, and can be called with
NumPy arrays (returns DM; use ``.full()``). Pass ``jit=True`` to :class:`RobotFunctions` to
JIT-compile them with the system C compiler where one is present.
"""
from __future__ import annotations

import shutil
from functools import cached_property

import casadi as ca

from . import dynamics as dyn
from .robot import Robot


def has_c_compiler() -> bool:
    """True if CasADi's JIT can find a C compiler on this machine."""
    return shutil.which("gcc") is not None or shutil.which("cc") is not None


class RobotFunctions:
    """Cached CasADi Functions of one robot: rnea, crba, aba, bias, points, com, momentum."""

    def __init__(self, robot: Robot, jit: bool = False) -> None:
        self.robot = robot
        self.jit = bool(jit) and has_c_compiler()
        n = robot.nv
        self._q = ca.SX.sym("q", n)
        self._qd = ca.SX.sym("qd", n)
        self._qdd = ca.SX.sym("qdd", n)
        self._tau = ca.SX.sym("tau", n)

    def _fn(self, name: str, inputs: list, outputs: list, in_names: list, out_names: list) -> ca.Function:
        opts = {}
        if self.jit:
            opts = {"jit": True, "compiler": "shell", "jit_options": {"flags": ["-O2"], "verbose": False}}
        return ca.Function(name, inputs, outputs, in_names, out_names, opts)

    @cached_property
    def rnea(self) -> ca.Function:
        """tau = rnea(q, qd, qdd)"""
        r, q, qd, qdd = self.robot, self._q, self._qd, self._qdd
        return self._fn("rnea", [q, qd, qdd], [dyn.rnea(r, q, qd, qdd)], ["q", "qd", "qdd"], ["tau"])

    @cached_property
    def crba(self) -> ca.Function:
        """M = crba(q)"""
        return self._fn("crba", [self._q], [dyn.crba(self.robot, self._q)], ["q"], ["M"])

    @cached_property
    def aba(self) -> ca.Function:
        """qdd = aba(q, qd, tau)"""
        r, q, qd, tau = self.robot, self._q, self._qd, self._tau
        return self._fn("aba", [q, qd, tau], [dyn.aba(r, q, qd, tau)], ["q", "qd", "tau"], ["qdd"])

    @cached_property
    def bias(self) -> ca.Function:
        """h = bias(q, qd) = C(q, qd) qd + g(q)"""
        r, q, qd = self.robot, self._q, self._qd
        return self._fn("bias", [q, qd], [dyn.bias_forces(r, q, qd)], ["q", "qd"], ["h"])

    @cached_property
    def com(self) -> ca.Function:
        """(c, cd) = com(q, qd): COM position and velocity, world frame."""
        r, q, qd = self.robot, self._q, self._qd
        return self._fn("com", [q, qd], [dyn.center_of_mass(r, q), dyn.com_velocity(r, q, qd)],
                        ["q", "qd"], ["c", "cd"])

    @cached_property
    def momentum(self) -> ca.Function:
        """h = momentum(q, qd): (k about COM, px, pz)."""
        r, q, qd = self.robot, self._q, self._qd
        return self._fn("momentum", [q, qd], [dyn.centroidal_momentum(r, q, qd)], ["q", "qd"], ["h"])

    def point(self, name: str) -> ca.Function:
        """(p, v, J, Jdqd) = point(q, qd) for one named point, cached per name."""
        cache = self.__dict__.setdefault("_points", {})
        if name not in cache:
            r, q, qd = self.robot, self._q, self._qd
            cache[name] = self._fn(
                f"point_{name}", [q, qd],
                [dyn.point_position(r, q, name), dyn.point_velocity(r, q, qd, name),
                 dyn.point_jacobian(r, q, name), dyn.point_jdot_qdot(r, q, qd, name)],
                ["q", "qd"], ["p", "v", "J", "Jdqd"])
        return cache[name]


def functions_for(robot: Robot, jit: bool = False) -> RobotFunctions:
    """The cached :class:`RobotFunctions` of ``robot`` (built on first use, kept on the robot)."""
    key = "_kipup_functions_jit" if jit else "_kipup_functions"
    cached = robot.__dict__.get(key)
    if cached is None:
        cached = RobotFunctions(robot, jit=jit)
        object.__setattr__(robot, key, cached)
    return cached
