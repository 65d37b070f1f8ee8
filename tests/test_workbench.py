"""Headless tests of kipup.widgets.Workbench: the widget models and the Python side of every
interaction, driven through the same traits and methods the browser's pickers and bqplot marks
use. No browser (tests/browser/ does that).

Solves use the box_jump template with coarser time grids (16/12/10 knots instead of 32/24/20)
so each takes well under a second here; one solved workbench is shared by the tests that need a
motion, and each of them leaves it idle again. Run with OMP_NUM_THREADS=1 on shared machines.
"""
from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np
import pytest

from kipup.core.ik import point_positions
from kipup.core.kinematics import link_poses
from kipup.core.templates import load_template
from kipup.core.trick import Costs
from kipup.core.trick_file import TrickFileError, load_trick, trick_to_dict
from kipup.widgets.robot_view import pitch_quaternion, to_three
from kipup.widgets.workbench import MOTION_FILE, Workbench, _Throttle

TIMEOUT = 180.0  # s: generous, the machine is shared


def coarse_box_jump():
    trick, robot = load_template("box_jump")
    for phase, knots in zip(trick.phases, (16, 12, 10)):
        phase.knots = knots
    return trick, robot


@pytest.fixture(scope="module")
def wb():
    trick, robot = coarse_box_jump()
    bench = Workbench(trick, robot, solve_now=True)
    assert bench.wait(TIMEOUT), "the first solve did not finish"
    assert bench.motion is not None, bench.status_text
    yield bench
    bench.close()


def idle(bench):
    assert bench.wait(TIMEOUT), f"still busy: {bench.state()}"


def all_widgets(root):
    out, todo = [], [root]
    while todo:
        w = todo.pop()
        out.append(w)
        todo.extend(getattr(w, "children", ()) or ())
    return out


# ----- construction ------------------------------------------------------------------------
def test_construct_from_template_without_solving():
    bench = Workbench.from_template("box_jump", solve_now=False)
    try:
        assert bench.trick.name == "box_jump" and bench.robot.name == "tumbli"
        assert bench.motion is None and bench.solves == [] and not bench.busy()
        ws = all_widgets(bench.widget)
        assert bench.renderer in ws and bench.timeline in ws
        assert "kipup-view3d" in bench.renderer._dom_classes
        assert "kipup-workbench" in bench.widget._dom_classes
        assert set(bench.weight_sliders) == set(Costs.names())
        # a handle for every joint and the base; point handles not sitting on a joint
        assert {f"joint:{j}" for j in bench.robot.joint_names} | {"base"} <= set(bench.handles)
        assert "point:hand" in bench.handles and "point:toe" in bench.handles
        assert "point:knee" not in bench.handles  # the knee point is on the knee joint
        # the pickers: mousedown on the handles, move/up on the drag plane, after the orbit controls
        assert bench.renderer.controls[0] is bench.orbit
        assert bench._pick_down.controlling is bench.handles_root and bench._pick_down.event == "mousedown"
        assert bench._pick_move.controlling is bench.drag_plane and bench._pick_move.event == "mousemove"
        assert bench._pick_up.event == "mouseup"
        # boxes of the terrain are in the scene
        assert [c.name for c in bench.terrain_root.children if c.name.startswith("box:")] == ["box:box"]
        # the first keyframe is selected, its ghost and handles shown
        assert bench.selected == 0 and bench.ghost_root.visible and bench.handles_root.visible
        assert bench.state()["state"] == "idle"
    finally:
        bench.close()


def test_ghost_handles_sit_on_the_ghost_and_project_into_the_view(wb):
    wb.select_keyframe("tuck")
    q = wb.keyframe_q()
    kf = wb.trick.keyframes[wb.selected]
    for name, value in kf.pose.items():
        assert q[wb.robot.coord_index(name)] == pytest.approx(value)
    hand = point_positions(wb.robot, q, ["hand"])["hand"]
    assert np.allclose(wb.handle_position("point:hand"), hand)
    # each carrier group carries its link's pose, so a handle's world position is the carrier's
    for link, (x, z, th) in zip(wb.robot.links, link_poses(wb.robot, q)):
        assert np.allclose(wb._carriers[link.name].position, to_three((x, z)))
        assert np.allclose(wb._carriers[link.name].quaternion, pitch_quaternion(th))
    screen = wb.handle_screen_positions()
    assert set(screen) == set(wb.handles)
    for u, v in screen.values():
        assert 0 <= u <= wb.renderer.width and 0 <= v <= wb.renderer.height
    # higher in the world is higher on the screen (smaller y); forward is to the right
    assert screen["point:head"][1] < screen["joint:hip"][1]
    assert screen["point:toe"][0] > screen["point:heel"][0]


# ----- dragging ------------------------------------------------------------------------------
def test_drag_through_the_pickers_poses_the_keyframe_and_resolves(wb):
    idle(wb)
    wb.select_keyframe("tuck")  # a flight keyframe: the base stays where it is
    kf = wb.trick.keyframes[wb.selected]
    before_pose = dict(kf.pose)
    before_motion, before_count = wb.motion, wb.motion_count
    toe = wb.handle_position("point:toe")
    goal = toe + np.array([0.06, -0.05])

    wb._pick_down.object = wb.handles["point:toe"].mesh          # mousedown on the toe handle
    assert wb._drag is not None and wb._drag["handle"].name == "point:toe"
    assert wb.orbit.enabled is False and wb.drag_plane.visible is True
    assert wb._pick_down.object is None                            # reset, so the next pick is a change
    wb._pick_move.object = wb.drag_plane
    for s in (0.5, 1.0):                                           # mousemove on the plane
        wb._pick_move.point = list(to_three(toe + (goal - toe) * s))
        wb._drag_throttle.flush()
    assert np.linalg.norm(wb.handle_position("point:toe") - goal) < 2e-3   # the ghost follows
    assert wb.timings["drag_count"] >= 2 and wb.timings["drag_ms"] > 0
    wb._pick_up.point = list(to_three(goal))                       # mouseup
    assert wb._drag is None and wb.orbit.enabled is True and wb.drag_plane.visible is False

    assert kf.pose != before_pose
    assert set(kf.pose) == set(before_pose)            # the same coordinates: no rebuild needed
    assert {k for k in kf.pose if kf.pose[k] != before_pose[k]} <= {"hip", "knee", "ankle"}
    assert wb.busy(), "the edit did not start a re-solve"
    idle(wb)
    assert wb.motion_count == before_count + 1 and wb.motion is not before_motion
    rec = wb.solves[-1]
    assert rec.accepted and rec.warm and not rec.rebuilt and rec.status in ("solved", "acceptable")
    assert rec.generation == wb.state()["generation"] == wb.state()["solved_generation"]
    assert wb.timings["edit_to_motion_s"] == rec.edit_to_motion > 0
    assert not np.array_equal(wb.motion.q, before_motion.q)


def test_joint_handle_turns_the_joint_towards_the_drag_point(wb):
    idle(wb)
    wb.select_keyframe("tuck")
    q0 = wb.keyframe_q()
    knee = wb.handle_position("joint:knee")
    wb._on_handle_down("joint:knee")
    # straight below-forward of the knee: the shank (knee -> ankle) should point there
    target = knee + 0.2 * np.array([math.sin(0.3), -math.cos(0.3)])
    wb._on_drag(to_three(target))
    q = wb._drag["q"]
    ankle = wb.handle_position("joint:ankle")
    shank = (ankle - knee) / np.linalg.norm(ankle - knee)
    want = (target - knee) / np.linalg.norm(target - knee)
    k = wb.robot.coord_index("knee")
    lo, hi = wb.robot.joints[k - 3].lower, wb.robot.joints[k - 3].upper
    if lo < q[k] < hi:
        assert float(shank @ want) == pytest.approx(1.0, abs=1e-9)
    assert np.array_equal(np.delete(q, k), np.delete(q0, k))  # only the knee turned
    wb._drag = None  # abandon without committing
    wb.orbit.enabled = True
    wb.drag_plane.visible = False
    wb.select_keyframe("tuck")


def test_stance_keyframe_point_drag_keeps_the_feet(wb):
    idle(wb)
    wb.select_keyframe("crouch")  # in the push phase: toe and heel on the ground
    q0 = wb.keyframe_q()
    feet = point_positions(wb.robot, q0, ["toe", "heel"])
    head = wb.handle_position("point:head")
    wb._on_handle_down("point:head")
    wb._on_drag(to_three(head + np.array([0.0, -0.05])))   # push the head down: a deeper crouch
    q = wb._drag["q"]
    got = point_positions(wb.robot, q, ["toe", "heel", "head"])
    for name in ("toe", "heel"):
        assert np.linalg.norm(got[name] - feet[name]) < 1e-3, name
    assert got["head"][1] < head[1] - 0.03
    wb._drag = None
    wb.orbit.enabled = True
    wb.drag_plane.visible = False
    wb.select_keyframe("crouch")


# ----- the timeline ----------------------------------------------------------------------------
def test_moving_a_phase_boundary_changes_durations_and_resolves(wb):
    idle(wb)
    push, flight = wb.trick.phases[0], wb.trick.phases[1]
    d_push, d_flight = push.duration, flight.duration
    end_flight = d_push + d_flight
    count = wb.motion_count
    # as bqplot sends it when the boundary marker is dropped
    wb._tl_bounds._handle_custom_msgs(None, {"event": "drag_end", "point": {"x": d_push + 0.04, "y": 0.5},
                                             "index": 0})
    assert push.duration == pytest.approx(d_push + 0.04)
    assert flight.duration == pytest.approx(end_flight - push.duration)   # the next boundary stayed
    assert wb._tl_bounds.x[0] == pytest.approx(push.duration)   # the dropped marker stays where it was dropped
    idle(wb)
    assert wb.motion_count == count + 1
    assert wb.motion.phases[0].duration == pytest.approx(push.duration)  # the push phase is fixed
    # the re-solved motion's phases on the timeline, at their solved times
    assert np.allclose(wb._tl_bounds.x, [p.end for p in wb.motion.phases])
    # far beyond: the free flight phase stops at its minimum
    wb.auto_solve = False
    try:
        wb.move_boundary(0, 10.0)
        assert flight.duration == pytest.approx(flight.duration_min)
        assert push.duration == pytest.approx(end_flight - flight.duration_min)
        wb.move_boundary(0, d_push)  # back where it was
        assert push.duration == pytest.approx(d_push) and flight.duration == pytest.approx(d_flight)
    finally:
        wb.auto_solve = True
    idle(wb)


def test_moving_a_keyframe_in_time_sets_its_phase_fraction(wb):
    idle(wb)
    wb.auto_solve = False
    try:
        i = [k.name for k in wb.trick.keyframes].index("tuck")
        kf = wb.trick.keyframes[i]
        starts = wb._nominal_starts()
        flight = wb.motion.phase("flight")   # the timeline draws the phase at its solved time
        wb._tl_keys._handle_custom_msgs(None, {"event": "drag_end", "index": i,
                                               "point": {"x": flight.start + 0.25 * flight.duration, "y": 0.3}})
        assert kf.phase == "flight" and kf.time == pytest.approx(0.25)
        assert wb._tl_keys.x[i] == pytest.approx(flight.start + 0.25 * flight.duration)
        assert wb.selected == i
        wb.move_keyframe(i, starts[2] + 1.0)  # past its phase: clamped to the phase's end
        assert kf.time == 1.0
        wb.move_keyframe(i, starts[1] + 0.5 * (starts[2] - starts[1]))
        assert kf.time == pytest.approx(0.5)
    finally:
        wb.auto_solve = True
    idle(wb)


def test_add_and_remove_keyframe_at_the_playhead(wb):
    idle(wb)
    wb.auto_solve = False
    try:
        n = len(wb.trick.keyframes)
        t = 0.5 * (wb.motion.phases[1].start + wb.motion.phases[1].end)
        wb.set_playhead(t)
        i = wb.add_keyframe_at_playhead()
        kf = wb.trick.keyframes[i]
        assert len(wb.trick.keyframes) == n + 1 and wb.selected == i
        assert kf.phase == "flight" and kf.time == pytest.approx(0.5, abs=1e-9) and not kf.hard
        q = wb.motion.sample(t)["q"]
        assert kf.pose["knee"] == pytest.approx(q[wb.robot.coord_index("knee")])
        assert not wb.solver.fits(wb.trick)  # a new keyframe changes the structure
        wb.remove_selected_keyframe()
        assert len(wb.trick.keyframes) == n and kf.name not in [k.name for k in wb.trick.keyframes]
        assert wb.solver.fits(wb.trick)
    finally:
        wb.auto_solve = True
    idle(wb)


# ----- controls ------------------------------------------------------------------------------
def test_weight_slider_sets_the_weight_and_warm_resolves(wb):
    idle(wb)
    count, before = wb.motion_count, wb.motion
    old = wb.trick.costs.effort
    wb.weight_sliders["effort"].value = old * 4
    assert wb.trick.costs.effort == pytest.approx(old * 4)
    idle(wb)
    rec = wb.solves[-1]
    assert wb.motion_count == count + 1 and rec.accepted and rec.warm and not rec.rebuilt
    assert wb.motion.objective != before.objective
    wb.set_weight("effort", old)
    assert wb.trick.costs.effort == pytest.approx(old)
    wb.set_weight("work", 0.0)  # already 0: the check box is off
    assert wb.weight_on["work"].value is False and wb.trick.costs.work == 0.0
    idle(wb)


def test_a_newer_edit_supersedes_a_running_solve(wb):
    idle(wb)
    n = len(wb.solves)
    wb.solve(warm=False)                     # a cold solve: dozens of iterations
    assert wb.wait_for_progress(60), "the solve never reported an iteration"
    assert wb.state()["state"] == "solving"
    wb.weight_sliders["torque_rate"].value = wb.weight_sliders["torque_rate"].value * 2   # a newer edit
    idle(wb)
    first, last = wb.solves[n], wb.solves[-1]
    assert first.status == "cancelled" and not first.accepted
    assert last is not first and last.accepted and last.generation == wb.state()["generation"]
    assert wb.trick.costs.torque_rate == pytest.approx(wb.weight_sliders["torque_rate"].value)


def test_live_preview_draws_intermediate_iterates(wb):
    idle(wb)
    shown = wb.previews_shown
    wb.solve(warm=False)
    idle(wb)
    assert wb.previews_shown > shown
    assert wb._preview is None  # the finished motion is on screen again, not an iterate
    assert np.allclose(wb.view.q, wb.motion.sample(wb.playhead)["q"])


def test_an_infeasible_edit_keeps_the_last_good_motion_and_reports_in_words(wb):
    idle(wb)
    good, count = wb.motion, wb.motion_count
    height = wb.trick.terrain.boxes[0].height
    limit = wb.time_limit
    wb.time_limit = 3.0
    try:
        wb.set_goal(box=("box", 2.0))   # a 2 m box for a 1 m robot
        assert wb.trick.terrain.boxes[0].height == 2.0
        idle(wb)
        rec = wb.solves[-1]
        assert not rec.accepted and rec.status not in ("solved", "acceptable", "cancelled")
        assert wb.motion is good and wb.motion_count == count
        assert wb.last_failure is rec
        assert "limit violation" in wb.last_report or "No limit violations" in wb.last_report
        assert "stays on screen" in wb.status_text and rec.status in wb.status_text
        assert "the last good motion" in wb.message.value
    finally:
        wb.time_limit = limit
        wb.set_goal(box=("box", height))
    idle(wb)
    assert wb.solves[-1].accepted and wb.motion_count == count + 1


# ----- keeping work -------------------------------------------------------------------------
def test_save_and_reload_round_trip(wb, tmp_path):
    idle(wb)
    path = wb.save(tmp_path / "my_jump.yaml")
    assert path.is_file() and (tmp_path / MOTION_FILE).is_file()
    trick, _ = load_trick(path)
    assert trick_to_dict(trick) == trick_to_dict(wb.trick)
    again = Workbench.from_file(path, auto_solve=False)
    try:
        assert trick_to_dict(again.trick) == trick_to_dict(wb.trick)
        assert again.motion == wb.motion          # exact: the JSON round trip is exact
        assert again.path == path and not again.busy()
        assert again.clip is not None
    finally:
        again.close()
    # a save that would not load back writes nothing and keeps the old files
    before = path.read_text()
    wb.trick.keyframes[0].pose["no_such_joint"] = 0.0
    try:
        with pytest.raises(TrickFileError):
            wb.save(path)
    finally:
        del wb.trick.keyframes[0].pose["no_such_joint"]
    assert path.read_text() == before


def test_save_needs_a_path():
    bench = Workbench.from_template("box_jump", solve_now=False)
    try:
        with pytest.raises(ValueError):
            bench.save()
    finally:
        bench.close()


# ----- playback -------------------------------------------------------------------------------
def test_playback_clip_has_a_track_per_link_group_and_the_motion_duration(wb):
    idle(wb)
    m = wb.motion
    summary = wb.clip_summary()
    assert summary["duration"] == pytest.approx(m.duration)
    n_keys = int(math.ceil(m.duration * 60.0)) + 1
    node_names = set()
    for link in wb.robot.links:
        group = wb._player.groups[link.name]
        node_names.add(group.name)
        assert summary["tracks"][f"{group.name}.position"] == (n_keys, 3)
        assert summary["tracks"][f"{group.name}.quaternion"] == (n_keys, 4)
    # track names bind by node name: three.js needs names of letters, digits, _ and -
    assert all(name.replace("_", "").replace("-", "").isalnum() for name in node_names)
    # the clip's last key is the motion's final pose
    track = {t.name: t for t in wb.clip.tracks}
    q_end = m.sample(m.tend)["q"]
    for link, (x, z, th) in zip(wb.robot.links, link_poses(wb.robot, q_end)):
        name = wb._player.groups[link.name].name
        assert np.allclose(np.asarray(track[f"{name}.position"].values).reshape(-1, 3)[-1], (x, z, 0.0), atol=1e-6)
        assert np.allclose(np.asarray(track[f"{name}.quaternion"].values).reshape(-1, 4)[-1],
                           pitch_quaternion(th), atol=1e-6)
    assert float(np.asarray(track[f"{wb._player.groups[wb.robot.links[0].name].name}.position"].times)[-1]) == \
        pytest.approx(m.duration, abs=1e-6)
    # play / pause / stop switch between the browser-animated copy and the Python-posed robot
    assert wb.selected is not None and wb.ghost_root.visible and wb.handles_root.visible
    wb.play()
    assert wb._mode == "playing" and wb.player_root.visible and not wb.static_root.visible
    # the keyframe's ghost stands still in the middle of the played motion: hidden while playing
    assert not wb.ghost_root.visible and not wb.handles_root.visible
    # the browser's slider sends back the playhead values Python shows on it (snapped to its step,
    # sometimes late): that is no scrub and must not stop playback
    wb._set_scrubber(0.1234567)
    wb._set_scrubber(0.2)
    wb.scrubber.value = 0.123 + 1e-12      # a late, snapped echo of the first value
    assert wb._mode == "playing"
    wb.pause()
    assert wb._mode == "paused"
    wb.scrubber.value = 0.9 * m.tend       # the user scrubs: back to the Python-posed robot
    assert wb._mode == "static" and not wb.player_root.visible
    wb.play()
    wb.pause()
    wb.speed.value = 0.25
    assert wb.action.timeScale == pytest.approx(0.25)
    wb.stop()
    assert wb._mode == "static" and not wb.player_root.visible and wb.static_root.visible
    assert wb.ghost_root.visible and wb.handles_root.visible
    wb.speed.value = 1.0


def test_playhead_moves_robot_contacts_and_cursors(wb):
    idle(wb)
    m = wb.motion
    t = 0.5 * (m.phases[0].start + m.phases[0].end)   # mid push: feet on the ground
    wb.set_playhead(t)
    assert np.allclose(wb.view.q, m.sample(t)["q"])
    assert wb.contact_markers["toe"].material is wb._lit and wb.force_arrows["toe"].visible
    assert all(c.x[0] == pytest.approx(t) for c in wb._cursors)
    t = 0.5 * (m.phases[1].start + m.phases[1].end)   # mid flight: nothing in contact
    wb.set_playhead(t)
    assert wb.contact_markers["toe"].material is wb._unlit and not wb.force_arrows["toe"].visible


def test_timeline_scrubber_and_cursor_share_the_motions_time(wb):
    """The timeline's axis, the scrubber and the plots span the motion's time; the phases are drawn
    at their solved times (the free flight phase as long as the solver made it) and the timeline's
    cursor sits at the playhead anywhere in the motion."""
    idle(wb)
    m = wb.motion
    assert (wb._tl_x.min, wb._tl_x.max) == pytest.approx((m.t0, m.tend))
    assert wb.scrubber.max == pytest.approx(m.tend) and wb._px.max == pytest.approx(m.tend)
    assert np.allclose(wb._tl_bounds.x, [p.end for p in m.phases])
    bands = np.asarray(wb._tl_bands.x)
    assert np.allclose(bands[:, 0], [p.start for p in m.phases]) and np.allclose(bands[:, 2], [p.end for p in m.phases])
    assert np.allclose(wb._tl_keys.x, [wb.keyframe_time(k) for k in wb.trick.keyframes])
    assert "solved" in wb._tl_axis.label
    for t in (m.t0, m.phases[1].start + 0.3 * m.phases[1].duration, m.tend):
        wb.set_playhead(t)
        assert wb._tl_head.x[0] == pytest.approx(t) and wb.scrubber.value == pytest.approx(t, abs=1e-3)


def test_the_camera_frames_the_motion(wb):
    """The side camera frames the robot over the whole motion (and the terrain near it): the box
    is inside the view with a margin and fills most of it in one direction (no sky-filled view with
    a small robot in it)."""
    idle(wb)
    m = wb.motion
    lo, hi = wb.motion_bounds(m)
    # the box holds the robot at every instant and the box it lands on
    box = wb.trick.terrain.boxes[0]
    assert hi[1] >= box.height - 1e-9 and lo[1] <= wb.trick.terrain.ground + 1e-9
    for t in np.linspace(m.t0, m.tend, 9):
        p = np.array(list(point_positions(wb.robot, m.sample(t)["q"], wb.robot.point_names).values()))
        assert np.all(p >= lo - 0.03) and np.all(p <= hi + 0.03)   # sampled at 200 instants
    corners = wb.screen_points([(lo[0], lo[1]), (hi[0], hi[1]), (lo[0], hi[1]), (hi[0], lo[1])])
    w, h = wb.renderer.width, wb.renderer.height
    assert np.all(corners[:, 0] > 0.02 * w) and np.all(corners[:, 0] < 0.98 * w)
    assert np.all(corners[:, 1] > 0.02 * h) and np.all(corners[:, 1] < 0.98 * h)
    span = max(np.ptp(corners[:, 0]) / w, np.ptp(corners[:, 1]) / h)
    assert 0.7 < span < 0.95, f"the motion fills {span:.0%} of the view"
    # small edits leave the camera where it is; a camera the person moved is not moved back
    wb.frame_camera(m)
    pos = tuple(wb.camera.position)
    wb._frame_for_motion(m)
    assert tuple(wb.camera.position) == pos
    wb.camera.position = (pos[0] + 0.3, pos[1], pos[2])
    wb._frame_for_motion(m)
    assert tuple(wb.camera.position) == (pos[0] + 0.3, pos[1], pos[2])
    wb.frame_camera(m)
    assert tuple(wb.camera.position) == pytest.approx(pos)


def test_throttle_runs_the_last_call():
    calls = []
    th = _Throttle(10.0)
    assert th(calls.append, 1) is True
    assert th(calls.append, 2) is False and th(calls.append, 3) is False
    assert calls == [1]
    th.flush()
    assert calls == [1, 3]
    th.cancel()


def test_a_structure_edit_rebuilds_the_solver_in_the_background(wb):
    """Kept last: it leaves the shared workbench on a new solver."""
    idle(wb)
    old_solver, count = wb.solver, wb.motion_count
    flight = wb.trick.phase("flight")
    wb.set_phase("flight", knots=flight.knots + 2)       # through the Phase tab's widgets
    assert flight.knots == 14 and not old_solver.fits(wb.trick)
    idle(wb)
    rec = wb.solves[-1]
    assert rec.rebuilt and rec.accepted and wb.solver is not old_solver and wb.solver.fits(wb.trick)
    assert wb.motion_count == count + 1
    assert wb.motion.phase("flight").knots == flight.knots + 1   # intervals + 1 knots


# ----- recording -------------------------------------------------------------------------------
NEAR_LIMB = np.array([0xEE, 0x8A, 0x3C])  # kipup.core.render.LIMB_COLOURS["near"] fill: the right limbs


def robot_pixels(frame: np.ndarray, tol: int = 50) -> int:
    """How many pixels of an RGB frame have the near limbs' fill colour (the robot is drawn)."""
    return int((np.abs(frame[..., :3].astype(int) - NEAR_LIMB).max(axis=-1) <= tol).sum())


def test_record_writes_mp4_gif_and_png_and_shows_them_inline(wb, tmp_path, monkeypatch):
    import imageio.v2 as imageio_v2
    from PIL import Image

    from kipup.core.render import frame_times

    idle(wb)
    motion = wb.motion
    # MP4 at half speed into a folder
    task = wb.record(tmp_path, fmt="mp4", slow=0.5, size=(480, 270))
    assert task.wait(TIMEOUT) and task.ok, task
    path = task.result
    assert path == tmp_path / f"{wb.trick.name}_slow0.5.mp4" and path.is_file()
    n_expected = len(frame_times(motion, 30, 0.5))   # slow 0.5: twice the frames of real time
    reader = imageio_v2.get_reader(str(path), format="FFMPEG")
    try:
        meta = reader.get_meta_data()
        n, mid = 0, None
        for frame in reader:                          # keep one frame only: the machine is shared
            if n == n_expected // 2:
                mid = np.array(frame)
            n += 1
    finally:
        reader.close()
    assert meta["codec"] == "h264" and meta["size"] == (480, 270)
    assert n == n_expected and mid is not None
    assert mid.std() > 10 and robot_pixels(mid) > 100, "the recorded frame looks blank"
    assert wb.record_view.format == "mp4" and wb.record_view.value == path.read_bytes()
    assert wb.record_view in all_widgets(wb.widget)
    caption = wb.record_out.children[1].value
    assert f"motion #{wb.motion_count}" in caption
    assert caption_path(caption) == str(path.resolve())
    assert "recorded" in wb.record_status.value

    # GIF and strobe PNG next to the trick file (path=None)
    wb.path = tmp_path / "trick" / "jump.yaml"
    wb.path.parent.mkdir()
    task = wb.record(fmt="gif", slow=1.0, size=(320, 180))
    assert task.wait(TIMEOUT) and task.ok, task
    gif = task.result
    assert gif == wb.path.parent / f"{wb.trick.name}.gif"
    with Image.open(gif) as im:
        assert im.n_frames == len(frame_times(motion, 15, 1.0))
        im.seek(im.n_frames // 2)
        frame = np.asarray(im.convert("RGB"))
    assert frame.std() > 10 and robot_pixels(frame) > 30
    assert wb.record_view.format == "gif" and wb.record_view.value == gif.read_bytes()

    task = wb.record(fmt="png")
    assert task.wait(TIMEOUT) and task.ok, task
    png = task.result
    assert png.name == f"{wb.trick.name}_strobe.png"
    with Image.open(png) as im:
        still = np.asarray(im.convert("RGB"))
    assert still.std() > 10 and robot_pixels(still) > 100
    assert wb.record_view.format == "png" and wb.record_view.value == png.read_bytes()
    assert sorted(p.name for p in wb.path.parent.iterdir()) == sorted([gif.name, png.name])  # no temp files
    wb.path = None

    # a relative path: the caption names the file by its absolute path (folder, then file name)
    monkeypatch.chdir(tmp_path)
    task = wb.record("rel_strobe.png")
    assert task.wait(TIMEOUT) and task.ok, task
    assert task.result.resolve() == tmp_path.resolve() / "rel_strobe.png"
    caption = wb.record_out.children[1].value
    shown = caption_path(caption)
    assert Path(shown).is_absolute() and shown == str(tmp_path.resolve() / "rel_strobe.png"), caption
    assert f"<b>rel_strobe.png</b>" in caption and str(tmp_path.resolve()) in shown


def caption_path(html: str) -> str:
    """The path in a Record caption as the browser shows it (tags dropped, entities read)."""
    import html as html_lib
    import re

    code = re.search(r"<code[^>]*>(.*?)</code>", html, re.S)
    assert code, html
    return html_lib.unescape(re.sub(r"<[^>]+>", "", code.group(1)))


def test_record_refuses_bad_input_in_words_and_writes_nothing(wb, tmp_path):
    idle(wb)
    with pytest.raises(ValueError, match="fmt"):
        wb.record(tmp_path, fmt="avi")
    with pytest.raises(ValueError, match="slow"):
        wb.record(tmp_path, slow=0.0)
    with pytest.raises(ValueError, match="path.*'x.gif' is a .gif file but fmt is 'mp4'"):
        wb.record(tmp_path / "x.gif", fmt="mp4")
    with pytest.raises(ValueError, match="path.*no trick file"):
        wb.record()                                   # wb.path is None
    missing = tmp_path / "no" / "such"
    with pytest.raises(FileNotFoundError, match="does not exist"):
        wb.record(missing / "a.mp4")
    # the same from the Record button: the message names the folder, nothing is written
    wb.record_folder.value = str(missing) + "/"
    wb._record_clicked()
    assert "Not recorded" in wb.record_status.value and str(missing) in wb.record_status.value
    wb.record_folder.value = ""
    assert list(tmp_path.iterdir()) == [] and not wb.record_button.disabled

    bench = Workbench.from_template("box_jump", solve_now=False, auto_solve=False)
    try:
        with pytest.raises(ValueError, match="no motion to record"):
            bench.record(tmp_path)
        bench._record_clicked()
        assert "no motion to record" in bench.record_status.value
    finally:
        bench.close()


def test_a_recording_that_fails_midway_leaves_no_file(wb, tmp_path, monkeypatch):
    from kipup.core import render

    idle(wb)
    calls = {"n": 0}
    real = render._FrameRenderer.frame

    def failing(self, k):
        calls["n"] += 1
        if calls["n"] > 3:
            raise RuntimeError("disk on fire")
        return real(self, k)

    monkeypatch.setattr(render._FrameRenderer, "frame", failing)
    before = wb.record_view
    for fmt in ("mp4", "gif"):
        calls["n"] = 0
        task = wb.record(tmp_path, fmt=fmt, size=(320, 180))
        assert task.wait(TIMEOUT) and task.state == "failed" and "disk on fire" in task.error
        assert "Recording failed" in wb.record_status.value and "nothing was written" in wb.record_status.value
        assert list(tmp_path.iterdir()) == []            # neither the file nor a temporary one
    assert wb.record_view is before                      # the last good recording stays on show


# ----- simulation ghost and robustness -----------------------------------------------------------
def test_simulate_draws_a_ghost_in_the_playback_clip_and_says_the_verdict(wb, tmp_path):
    from kipup.core.motion import Motion
    from kipup.core.tracking import simulate
    from kipup.widgets.wb_verify import sim_q_at, takeoff_time

    idle(wb)
    motion = wb.motion
    task = wb.simulate(start="takeoff")
    assert task.wait(TIMEOUT) and task.ok, task
    sim = wb.sim
    assert sim is task.result and wb.current_sim() is sim
    # the workbench ran exactly what core's simulate gives for these settings: TV-LQR in flight
    assert sim.settings["lqr"] is not None and sim.settings["lqr"]["phase"] == "flight"
    again = simulate(motion, wb.robot, wb.trick.terrain, start_time=takeoff_time(motion), duration_after=1.0,
                     trick_name=wb.trick.name, lqr=True)
    assert again == sim

    # ghost meshes: a static copy (posed at the playhead) and an animated copy in the same clip
    assert wb.sim_root.visible and wb.sim_player_root.visible
    # told apart from the plan: a violet wireframe drawn over it (no translucent violet over orange,
    # which turns brown), and the keyframe's ghost out of the way while it is shown
    for mesh in wb._sim_static.capsules + wb._sim_player.capsules:
        mat = mesh.material
        assert mat.wireframe and not mat.transparent and not mat.depthTest and mesh.renderOrder > 0
        assert mat.color == "#7b2cbf"
    assert not wb.ghost_root.visible and not wb.handles_root.visible and not wb.keyframe_ghost_shown()
    assert wb.sim_root in wb.static_root.children and wb.sim_player_root in wb.player_root.children
    tracks = {tr.name: tr for tr in wb.clip.tracks}
    times = None
    for link in wb.robot.links:
        g = wb._sim_player.groups[link.name]
        assert g.name.startswith("ks_") and g in wb.sim_player_root.children
        assert f"{g.name}.position" in tracks and f"{g.name}.quaternion" in tracks
        times = np.asarray(tracks[f"{g.name}.position"].times)
    assert wb.clip.duration == pytest.approx(max(motion.duration, sim.t[-1] - motion.t0))
    # the timeline, the scrubber and the plots all run on to the simulation's end, and the timeline's
    # cursor follows the playhead past the planned end (it used to stick at the timeline's right end)
    sim_end = float(sim.t[-1])
    runs_on = sim_end > motion.tend + 1e-6   # up to 1 s past the plan; a fall can end it earlier
    end = max(motion.tend, sim_end)
    assert wb.scrubber.max == pytest.approx(end) and wb._tl_x.max == pytest.approx(end)
    assert wb._px.max == pytest.approx(end)
    assert ("simulation runs on" in list(wb._tl_labels.text)) == runs_on
    assert np.allclose(wb._tl_bounds.x, [p.end for p in motion.phases])   # the phases stay at their times
    t_late = motion.tend + 0.6 * (sim_end - motion.tend) if runs_on else 0.9 * motion.tend
    wb.set_playhead(t_late)
    assert wb._tl_head.x[0] == pytest.approx(t_late) and all(c.x[0] == pytest.approx(t_late) for c in wb._cursors)
    # the same with a simulation that surely runs on (this one's last state held for another second)
    extra = np.linspace(sim.t[-1], max(float(sim.t[-1]), motion.tend) + 1.0, 101)[1:]
    k = extra
    held = dataclasses.replace(sim, t=np.concatenate([sim.t, extra]),
                               **{a: np.concatenate([getattr(sim, a), np.repeat(getattr(sim, a)[-1:], k.size, axis=0)])
                                  for a in ("q", "qd", "q_plan", "tau", "forces")})
    with wb._lock:
        wb.sim = held
        wb._refresh_time_range()
        wb._build_clip(motion)
    end = float(held.t[-1])
    assert end > motion.tend + 0.9
    assert wb.scrubber.max == pytest.approx(end) and wb._tl_x.max == pytest.approx(end)
    assert wb.clip.duration == pytest.approx(end - motion.t0)
    assert "simulation runs on" in list(wb._tl_labels.text)
    t_late = motion.tend + 0.6 * (end - motion.tend)
    wb.set_playhead(t_late)
    assert wb._tl_head.x[0] == pytest.approx(t_late) and all(c.x[0] == pytest.approx(t_late) for c in wb._cursors)
    with wb._lock:
        wb.sim = sim
        wb._refresh_time_range()
        wb._build_clip(motion)
    # the track values are the simulated poses (not the plan's)
    k = len(times) * 3 // 4
    q_sim = sim_q_at(sim, motion, motion.t0 + np.array([times[k]]))[0]
    for i, (link, (x, z, th)) in enumerate(zip(wb.robot.links, link_poses(wb.robot, q_sim))):
        pos = np.asarray(tracks[f"{wb._sim_player.groups[link.name].name}.position"].values).reshape(-1, 3)
        assert pos[k] == pytest.approx([x, z, 0.0], abs=1e-4)
    torso = wb.robot.links[0].name
    planned = np.asarray(tracks[f"kp_{torso}.position"].values).reshape(-1, 3)
    simulated = np.asarray(tracks[f"ks_{torso}.position"].values).reshape(-1, 3)
    assert np.abs(planned[-1] - simulated[len(planned) - 1]).max() > 0.01  # the two robots part
    # paused: the static ghost sits at the simulated pose of the playhead
    t = float(sim.t[len(sim.t) // 2])
    wb.set_playhead(t)
    q = sim_q_at(sim, motion, np.array([t]))[0]
    x, z, th = link_poses(wb.robot, q)[0]
    assert np.allclose(wb._sim_static.groups[torso].position, (x, z, 0.0), atol=1e-6)
    assert np.allclose(wb._sim_static.groups[torso].quaternion, pitch_quaternion(th), atol=1e-6)

    # the verdict in words, from the SimResult
    v, text = sim.verdict, wb.verdict.value
    assert ("<b>yes</b>" if v.success else "<b>no</b>") in text
    if math.isfinite(v.pitch_error_at_touchdown):
        assert f"{v.pitch_error_at_touchdown:+.3f} rad" in text
    else:
        assert "n/a (no touchdown)" in text
    assert "standing still 1 s after the planned end" in text
    if v.diverged:
        assert f"fell or diverged at t = {v.diverged_time:.3f} s" in text
    else:
        assert f"{'yes' if v.stands_still else 'no'} (COM speed {v.com_speed_end:.3f} m/s" in text
    for e in sim.errors:
        if e.name in sim.joint_names:
            assert f"<td>{e.name}</td><td>{e.max:.3f}</td><td>{e.rms:.3f}</td>" in text

    # hiding the ghost takes its tracks out of the clip; showing it brings them back
    wb.sim_ghost_box.value = False
    assert not wb.sim_root.visible and not any(tr.name.startswith("ks_") for tr in wb.clip.tracks)
    assert wb.ghost_root.visible == (wb.selected is not None) and wb.keyframe_ghost_shown() == (wb.selected is not None)
    assert wb.clip.duration == pytest.approx(motion.duration)
    assert wb._tl_x.max == pytest.approx(motion.tend) and wb.scrubber.max == pytest.approx(motion.tend)
    assert "simulation runs on" not in list(wb._tl_labels.text)
    wb.sim_ghost_box.value = True
    assert any(tr.name.startswith("ks_") for tr in wb.clip.tracks)

    # a new motion on screen: the old simulation's ghost goes and its verdict says so
    motion.to_json(tmp_path / "m.json")
    with wb._lock:
        wb._show_new_motion(Motion.from_json(tmp_path / "m.json"))
    assert wb.current_sim() is None and not wb.sim_root.visible
    assert not any(tr.name.startswith("ks_") for tr in wb.clip.tracks)
    assert "no longer on screen" in wb.verdict.value
    wb.clear_simulation()
    assert wb.sim is None and "not simulated yet" in wb.verdict.value


def test_simulate_and_robustness_need_a_motion():
    bench = Workbench.from_template("box_jump", solve_now=False, auto_solve=False)
    try:
        with pytest.raises(ValueError, match="no motion to simulate"):
            bench.simulate()
        with pytest.raises(ValueError, match="no motion to sweep"):
            bench.robustness()
        bench._verify_clicked(bench.simulate)
        assert "no motion to simulate" in bench.message.value
    finally:
        bench.close()


def test_robustness_shows_the_sweep_summary(wb):
    idle(wb)
    with pytest.raises(ValueError, match="start"):
        wb.robustness(n=4, start="middle")
    task = wb.robustness(n=4, start="takeoff")
    assert task.wait(TIMEOUT) and task.ok, task
    sweep = wb.sweep
    assert sweep is task.result and sweep.n == 4 and not any(o.error for o in sweep.outcomes)
    rate = sum(o.success for o in sweep.outcomes) / 4          # counted here, not taken from the result
    text = wb.sweep_summary.value
    assert f"<tr><td>samples</td><td>4</td></tr>" in text
    assert f"<tr><td>success rate</td><td>{100 * rate:.0f} %</td></tr>" in text
    pitch = np.abs([o.pitch_error for o in sweep.outcomes if math.isfinite(o.pitch_error)])
    if pitch.size:
        assert f"median {np.median(pitch):.3f}" in text
    assert f"success {100 * rate:.0f} % of 4 samples" in wb.status_text


# ----- what the plots show -------------------------------------------------------------------
def test_nice_ticks_are_round_and_cover_the_data():
    from kipup.widgets.wb_plots import nice_ticks

    for lo, hi, pad in [(0.0, 1.18, 0.0), (-120.0, 120.0, 0.03), (0.0, 1.0, 0.03), (0.315, 0.86, 0.03), (-28.0, 28.0, 0.03),
                        (-812.0, 1003.0, 0.03), (0.0, 0.3, 0.0), (-3e-7, 2e-7, 0.03), (5.0, 5.0, 0.03)]:
        a, b, ticks, fmt = nice_ticks(lo, hi, 7, pad)
        assert 2 <= len(ticks) <= 7, (lo, hi, ticks)
        step = ticks[1] - ticks[0]
        assert np.allclose(np.diff(ticks), step)
        mant = step / 10.0 ** math.floor(math.log10(step) + 1e-9)
        assert any(math.isclose(mant, m, rel_tol=1e-9) for m in (1.0, 2.0, 2.5, 5.0)), (lo, hi, step)
        if pad > 0:   # bounds round out around the data, on ticks
            assert a <= min(lo, hi) and b >= max(lo, hi) and a < b
            assert math.isclose(ticks[0], a, abs_tol=1e-9 * step) and math.isclose(ticks[-1], b, abs_tol=1e-9 * step)
        else:         # bounds stay, ticks inside
            assert (a, b) == (lo, hi) and ticks[0] >= lo and ticks[-1] <= hi + 1e-12
        labels = [format(float(x), fmt) for x in ticks]   # the format shows every tick exactly
        assert all(abs(float(text) - x) < 1e-6 * step for text, x in zip(labels, ticks)), labels
    assert nice_ticks(0.0, 1.18, 7)[2].tolist() == [0.0, 0.2, 0.4, 0.6, 0.8, 1.0]


def test_plots_keep_their_keys_off_the_data_and_fit_their_axes(wb):
    idle(wb)
    wb._refresh_plots()
    for fig in wb.figures.values():
        assert not any(getattr(m, "display_legend", False) for m in fig.marks), fig.title
    cells = [c for c in all_widgets(wb.widget) if "kipup-plot-cell" in getattr(c, "_dom_classes", ())]
    assert len(cells) == 5 and all("kipup-key" in c.children[1].value for c in cells)
    # the time axes tick on round steps over the motion; the torque axis holds +-peak with room
    T = wb.motion.tend
    for axis in wb._t_axes:
        ticks = np.asarray(axis.tick_values)
        assert 3 <= ticks.size <= 7 and ticks[0] == 0.0 and ticks[-1] <= T + 1e-9
    peak = wb.robot.joints[wb._joint_index()].actuator.peak_torque
    y = wb._ax_tau.scale
    assert y.min < -peak and y.max > peak and np.asarray(wb._ax_tau.tick_values).size <= 8
    text = wb.metrics_html.value
    assert "friction margin" in text and "inf" not in text and "nan" not in text
    assert "kipup-tabs" in wb.tabs._dom_classes and len(wb.tabs.children) == 7
