"""The workbench's 3D scene: camera, the static robot with contact markers and force arrows, the
playback copy, the keyframe ghost with its drag handles, the drag plane and the terrain.

A mixin of :class:`kipup.widgets.workbench.Workbench`; it works on the workbench's attributes.
"""
from __future__ import annotations

import math

import numpy as np
import pythreejs as three

from kipup.core.ik import point_positions
from kipup.core.motion import Motion
from .robot_view import RobotView, build_link_meshes, planar_link_poses, rot, to_three
from .wb_common import (
    COM_PATH_SAMPLES, _GHOST_COLOR, _HANDLE_COLORS, _LIT_COLOR, _UNLIT_COLOR, _FORCE_COLOR, _COM_COLOR,
    _safe_name, Handle,
)

FRAME_SAMPLES = 200    #: instants of a motion sampled for the camera's framing box
FRAME_MARGIN = 0.08    #: the camera's margin around that box, a fraction of its size on each side


class SceneMixin:
    """Builds the 3D scene and the terrain."""

    # ----- the 3D scene ----------------------------------------------------------------------
    def _build_scene(self) -> None:
        robot, scale = self.robot, self._scale
        self.view = RobotView(robot, self._rest_q, width=self._width, height=self._height)
        self.renderer, self.camera, self.orbit = self.view.renderer, self.view.camera, self.view.controls
        self.renderer.add_class("kipup-view3d")

        # side camera framing the robot standing (the first motion re-frames it, see frame_camera)
        self._camera_framed: tuple | None = None
        self.frame_camera()

        # static robot: the view's link groups + COM, contact markers, force arrows
        self._lit = three.MeshBasicMaterial(color=_LIT_COLOR)
        self._unlit = three.MeshStandardMaterial(color=_UNLIT_COLOR, roughness=0.8)
        marker_geo = three.SphereBufferGeometry(radius=0.02 * scale + 0.008, widthSegments=12, heightSegments=8)
        arrow_geo = three.CylinderBufferGeometry(radiusTop=0.0, radiusBottom=0.008 * scale + 0.006, height=1.0,
                                                 radialSegments=10)
        arrow_mat = three.MeshBasicMaterial(color=_FORCE_COLOR, transparent=True, opacity=0.85)
        self.contact_markers: dict[str, three.Mesh] = {}
        self.force_arrows: dict[str, three.Group] = {}
        for name in self._contact_capable:
            self.contact_markers[name] = three.Mesh(geometry=marker_geo, material=self._unlit,
                                                    name=f"contact:{name}")
            self.force_arrows[name] = three.Group(
                name=f"force:{name}", visible=False,
                children=[three.Mesh(geometry=arrow_geo, material=arrow_mat, position=(0.0, 0.5, 0.0))])
        self._build_sim_meshes()   # the simulated ghost: a static and an animated copy (wb_verify)
        self.static_root = three.Group(name="static", children=(
            *self.view.link_groups.values(), self.view.com_marker,
            *self.contact_markers.values(), *self.force_arrows.values(), self.sim_root))

        # COM path (fixed number of samples, updated in place)
        self._com_path_attr = three.BufferAttribute(array=np.zeros((COM_PATH_SAMPLES, 3), dtype=np.float32),
                                                    normalized=False)
        self.com_path = three.Line(geometry=three.BufferGeometry(attributes={"position": self._com_path_attr}),
                                   material=three.LineBasicMaterial(color=_COM_COLOR), name="com-path",
                                   visible=False)

        # playback copy of the robot, animated by the clip
        self._player = build_link_meshes(robot, group_name=lambda n: f"kp_{_safe_name(n)}", scale=scale)
        self._player_com = three.Mesh(
            geometry=three.SphereBufferGeometry(radius=0.025 * scale + 0.01, widthSegments=16, heightSegments=12),
            material=three.MeshBasicMaterial(color=_COM_COLOR, depthTest=False, transparent=True, opacity=0.9),
            name="kp_com", renderOrder=10)
        self._player_lit: dict[str, three.Mesh] = {}
        self._player_arrows: dict[str, three.Group] = {}
        for name in self._contact_capable:
            self._player_lit[name] = three.Mesh(geometry=marker_geo, material=self._lit,
                                                name=f"kp_lit_{_safe_name(name)}", scale=(1e-4, 1e-4, 1e-4))
            self._player_arrows[name] = three.Group(
                name=f"kp_force_{_safe_name(name)}", scale=(1e-4, 1e-4, 1e-4),
                children=[three.Mesh(geometry=arrow_geo, material=arrow_mat, position=(0.0, 0.5, 0.0))])
        self.player_root = three.Group(name="kp_player", visible=False, children=(
            *self._player.groups.values(), self._player_com, *self._player_lit.values(),
            *self._player_arrows.values(), self.sim_player_root))
        self._mixer = three.AnimationMixer(self.player_root)

        # ghost of the keyframe being edited, and its handles
        ghost_mat = three.MeshStandardMaterial(color=_GHOST_COLOR, transparent=True, opacity=0.35,
                                               depthWrite=False, roughness=0.7)
        self._ghost = build_link_meshes(robot, show_points=False, group_name=lambda n: f"ghost:{n}",
                                        material=lambda kind, side: ghost_mat, scale=scale)
        self.ghost_root = three.Group(name="ghost", visible=False, children=tuple(self._ghost.groups.values()))
        self.handles: dict[str, Handle] = {}
        self._handle_by_model: dict[str, str] = {}
        self._carriers: dict[str, three.Group] = {}
        r_handle = 0.014 * scale + 0.008
        handle_geo = three.SphereBufferGeometry(radius=r_handle, widthSegments=12, heightSegments=8)
        mats = {k: three.MeshBasicMaterial(color=c, depthTest=False, transparent=True, opacity=0.95)
                for k, c in _HANDLE_COLORS.items()}
        specs: list[Handle] = [Handle("base", "base", robot.links[0].name, tuple(robot.links[0].com), None)]
        joint_spots: dict[str, list[tuple[float, float]]] = {link.name: [] for link in robot.links}
        for joint in robot.joints:
            specs.append(Handle(f"joint:{joint.name}", "joint", joint.child, (0.0, 0.0), joint.name))
            joint_spots[joint.child].append((0.0, 0.0))
            joint_spots[joint.parent].append(tuple(joint.origin))
        for point in robot.points:
            if any(math.dist(point.position, s) < 0.015 for s in joint_spots[point.link]):
                continue  # on a joint: the joint handle is there
            specs.append(Handle(f"point:{point.name}", "point", point.link, tuple(point.position), point.name))
        by_link: dict[str, list] = {}
        for h in specs:
            h.mesh = three.Mesh(geometry=handle_geo, material=mats[h.kind], position=to_three(h.local),
                                name=f"handle:{h.name}", renderOrder=20)
            self.handles[h.name] = h
            self._handle_by_model[h.mesh.model_id] = h.name
            by_link.setdefault(h.link, []).append(h.mesh)
        for link in robot.links:
            self._carriers[link.name] = three.Group(name=f"handles:{link.name}",
                                                    children=tuple(by_link.get(link.name, [])))
        self.handles_root = three.Group(name="handles", visible=False, children=tuple(self._carriers.values()))

        self.drag_plane = three.Mesh(
            geometry=three.PlaneBufferGeometry(width=200.0, height=200.0),
            material=three.MeshBasicMaterial(color="#ffffff", transparent=True, opacity=0.0, depthWrite=False,
                                             side="DoubleSide"),
            name="drag-plane", visible=False)

        self.terrain_root = three.Group(name="terrain")
        self._rebuild_terrain()

        keep = [c for c in self.view.scene.children
                if c not in self.view.link_groups.values() and c is not self.view.com_marker]
        self.view.scene.children = tuple(keep) + (self.terrain_root, self.static_root, self.com_path,
                                                  self.player_root, self.ghost_root, self.handles_root,
                                                  self.drag_plane)

        self._pick_down = three.Picker(controlling=self.handles_root, event="mousedown")
        self._pick_move = three.Picker(controlling=self.drag_plane, event="mousemove")
        self._pick_up = three.Picker(controlling=self.drag_plane, event="mouseup")
        self.renderer.controls = [self.orbit, self._pick_down, self._pick_move, self._pick_up]
        self._pick_down.observe(self._picked_down, names="object")
        self._pick_move.observe(self._picked_move, names="point")
        self._pick_up.observe(self._picked_up, names="point")
        self.camera.observe(lambda _: self._publish_handles(), names=["position", "quaternion"])

    # ----- framing ----------------------------------------------------------------------------
    def motion_bounds(self, motion: Motion | None = None) -> tuple[np.ndarray, np.ndarray]:
        """World box ((x_lo, z_lo), (x_hi, z_hi)) (m) the camera frames: the robot's capsules over
        the whole motion (sampled; the rest pose without one), the ground under them, and the
        terrain features (boxes, targets, bars, the landing range) within half a robot size of it."""
        robot, scale = self.robot, self._scale
        if motion is not None:
            qs = motion.sample(np.linspace(motion.t0, motion.tend, FRAME_SAMPLES))["q"]
        else:
            qs = [self._rest_q]
        pts = []
        names = list(robot.point_names)
        for q in qs:
            if not np.all(np.isfinite(q)):
                continue
            if names:
                pts += list(point_positions(robot, q, names).values())
            for link, (p, th) in zip(robot.links, planar_link_poses(robot, q)):
                cap = link.capsule
                if cap is None:
                    pts.append(p)
                    continue
                R = rot(th)
                for end in (cap.start, cap.end):
                    c = p + R @ np.asarray(end, dtype=float)
                    pts += [c - cap.radius, c + cap.radius]
        pts = np.array(pts) if pts else np.zeros((1, 2))
        lo, hi = pts.min(axis=0), pts.max(axis=0)
        tr = self.trick.terrain
        ground = float(tr.ground)
        near_lo, near_hi = lo[0] - 0.5 * scale, hi[0] + 0.5 * scale
        extra = [(lo[0], ground)]
        for b in tr.boxes:
            if b.x_max >= near_lo and b.x_min <= near_hi:
                extra += [(max(b.x_min, near_lo), b.height), (min(b.x_max, near_hi), b.height)]
        extra += [(t.x, t.z) for t in tr.targets if near_lo <= t.x <= near_hi]
        extra += [(b.x, b.z) for b in tr.bars if near_lo <= b.x <= near_hi]
        if self.trick.goals.landing_x:
            extra += [(min(max(x, near_lo), near_hi), ground) for x in self.trick.goals.landing_x]
        allp = np.vstack([pts, np.array(extra, dtype=float)])
        return allp.min(axis=0), allp.max(axis=0)

    def frame_camera(self, motion: Motion | None = None) -> None:
        """Point the side camera at :meth:`motion_bounds` with a margin (FRAME_MARGIN of the box on
        each side, at least a tenth of the robot's size), the box centred in the view."""
        lo, hi = self.motion_bounds(motion)
        m = np.maximum(FRAME_MARGIN * (hi - lo), 0.1 * self._scale)
        lo, hi = lo - m, hi + m
        fov = 40.0
        aspect = self._width / self._height
        half_v = math.tan(math.radians(fov) / 2.0)
        # the near side's capsules stand in front of the sagittal plane: frame the plane from a
        # little further, by the robot's half width
        width = max(abs(s) for link in self.robot.links for s in link.sides) if self.robot.links else 0.0
        dist = max((hi[0] - lo[0]) / 2.0 / (half_v * aspect), (hi[1] - lo[1]) / 2.0 / half_v) + width
        cx, cy = float(lo[0] + hi[0]) / 2.0, float(lo[1] + hi[1]) / 2.0
        # the orbit's target first: the browser's OrbitControls turn the camera towards their target
        # whenever they update, so a camera moved before its target would end up looking at the old
        # one (a tilted view); lookAt at the end settles it whatever the order the browser applies
        self.orbit.target = (cx, cy, 0.0)
        with self.camera.hold_sync():
            self.camera.position = (cx, cy, float(dist))
            self.camera.quaternion = (0.0, 0.0, 0.0, 1.0)  # looking along -z: the identity for this camera
            self.camera.fov = fov
            self.camera.far = max(100.0, 4 * dist)
        self.camera.lookAt((cx, cy, 0.0))
        self._camera_framed = (tuple(self.camera.position), tuple(self.camera.quaternion), (lo, hi))

    def _frame_for_motion(self, motion: Motion) -> None:
        """Re-frame for a new motion unless the person moved the camera: always for the first one,
        later only when the motion leaves the framed box (small edits leave the camera still)."""
        framed = self._camera_framed
        if framed is None:
            return
        pos, quat, (lo, hi) = framed
        if not (np.allclose(self.camera.position, pos, atol=1e-6) and np.allclose(self.camera.quaternion, quat,
                                                                                  atol=1e-6)):
            self._camera_framed = None   # the person moved it: leave it where they put it
            return
        first = not getattr(self, "_framed_a_motion", False)
        b_lo, b_hi = self.motion_bounds(motion)
        if first or np.any(b_lo < lo - 1e-9) or np.any(b_hi > hi + 1e-9):
            self.frame_camera(motion)
        self._framed_a_motion = True

    def _rebuild_terrain(self) -> None:
        tr, scale = self.trick.terrain, self._scale
        ground_y = float(tr.ground)
        self.view.ground.position = (0.0, ground_y - 0.001, 0.0)
        self.view.grid.position = (0.0, ground_y, 0.0)
        depth = 0.6 * scale + 0.2
        children = []
        box_mat = three.MeshStandardMaterial(color="#b08968", roughness=0.9)
        for b in tr.boxes:
            h = max(b.height - ground_y, 1e-3)
            children.append(three.Mesh(
                geometry=three.BoxBufferGeometry(width=b.x_max - b.x_min, height=h, depth=depth),
                material=box_mat, position=((b.x_min + b.x_max) / 2.0, ground_y + h / 2.0, 0.0),
                name=f"box:{b.name}"))
        target_mat = three.MeshBasicMaterial(color="#e63946")
        for t in tr.targets:
            children.append(three.Mesh(geometry=three.SphereBufferGeometry(radius=0.02 * scale + 0.01),
                                       material=target_mat, position=(t.x, t.z, 0.0), name=f"target:{t.name}"))
        bar_mat = three.MeshStandardMaterial(color="#495057", metalness=0.4, roughness=0.4)
        for b in tr.bars:
            children.append(three.Mesh(
                geometry=three.CylinderBufferGeometry(radiusTop=b.radius, radiusBottom=b.radius, height=depth,
                                                      radialSegments=16),
                material=bar_mat, position=(b.x, b.z, 0.0),
                quaternion=(math.sin(math.pi / 4), 0.0, 0.0, math.cos(math.pi / 4)), name=f"bar:{b.name}"))
        lx = self.trick.goals.landing_x
        if lx is not None and self.trick.phases:
            last = self.trick.phases[-1]
            surface = last.contacts[0].surface if last.contacts else "ground"
            try:
                zs = tr.surface_height(surface)
            except KeyError:
                zs = ground_y
            children.append(three.Mesh(
                geometry=three.BoxBufferGeometry(width=max(lx[1] - lx[0], 1e-3), height=0.004, depth=depth * 0.9),
                material=three.MeshBasicMaterial(color="#52b788", transparent=True, opacity=0.6),
                position=((lx[0] + lx[1]) / 2.0, zs + 0.003, 0.0), name="landing-range"))
        self.terrain_root.children = tuple(children)
