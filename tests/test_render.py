"""Offscreen rendering (kipup.core.render and ``kipup render``): videos, strobe stills and plots.

The ``reach_jump`` template is solved once for the module. Videos are rendered small and at a low
frame rate to keep the tests quick. A few pictures are saved under ``test-artifacts/render/`` for
people to look at.
"""
from __future__ import annotations

import copy
import math
import os
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("matplotlib")
pytest.importorskip("imageio_ffmpeg")

import imageio.v2 as imageio_v2  # noqa: E402
from matplotlib.colors import to_rgb  # noqa: E402
from PIL import Image  # noqa: E402

from kipup.core import render  # noqa: E402
from kipup.core.cli import HARDWARE_CAUTION, main  # noqa: E402
from kipup.core.optimize import optimize  # noqa: E402
from kipup.core.robot_file import load_bundled  # noqa: E402
from kipup.core.templates import load_template, template_path  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
ARTIFACTS = ROOT / "test-artifacts" / "render"
SMALL = (480, 270)
NEAR = np.array([0xEE, 0x8A, 0x3C])  # fill of the near (right) limbs, render.LIMB_COLOURS["near"]
FAR = np.array([0x3C, 0x6E, 0x9E])   # fill of the far (left) limbs


@pytest.fixture(scope="module")
def solved():
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    trick, robot = load_template("reach_jump")
    motion, _ = optimize(trick, robot)
    # drawing does not need a converged solve (the status is drawn nowhere), only finite values
    assert np.isfinite(motion.q).all() and np.isfinite(motion.forces).all(), motion.status
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    return motion, robot, trick


def expected_frames(motion, fps, slow) -> int:
    """Frames at t0 + i slow / fps up to the end, plus the end itself when it is off that grid."""
    x = round(motion.duration * fps / slow, 9)
    return math.floor(x) + 1 + (0 if x == math.floor(x) else 1)


def mask_of(img: np.ndarray, colour: np.ndarray, tol: float = 40.0) -> np.ndarray:
    return np.linalg.norm(img[..., :3].astype(float) - colour, axis=-1) < tol


def centroid(mask: np.ndarray) -> np.ndarray:
    rows, cols = np.nonzero(mask)
    assert rows.size > 50, "no robot pixels found"
    return np.array([cols.mean(), rows.mean()])


def gif_frames(path: Path) -> tuple[list[np.ndarray], list[int]]:
    frames, durations = [], []
    with Image.open(path) as im:
        for i in range(im.n_frames):
            im.seek(i)
            frames.append(np.asarray(im.convert("RGB")))
            durations.append(im.info["duration"])
    return frames, durations


def no_temp_files(folder: Path) -> bool:
    return not [p for p in folder.iterdir() if p.name.startswith(".")]


# ----- frame times ---------------------------------------------------------------------------------
def test_frame_times_follow_fps_and_slow(solved):
    motion, _, _ = solved
    for fps, slow in ((10, 1.0), (30, 0.25), (24, 2.0)):
        t = render.frame_times(motion, fps, slow)
        assert len(t) == expected_frames(motion, fps, slow)
        assert t[0] == motion.t0 and t[-1] == motion.tend
        assert np.allclose(np.diff(t)[:-1], slow / fps)
        assert 0 < t[-1] - t[-2] <= slow / fps + 1e-12
    with pytest.raises(ValueError, match="slow"):
        render.frame_times(motion, 30, 0.0)
    with pytest.raises(ValueError, match="fps"):
        render.frame_times(motion, -1, 1.0)


# ----- videos ---------------------------------------------------------------------------------------
def test_gif_frames_count_content_and_motion(solved, tmp_path):
    motion, robot, trick = solved
    fps, slow = 10, 1.0
    path = render.render_video(motion, robot, trick, tmp_path / "jump.gif", fps=fps, slow=slow, size=SMALL)
    assert path == tmp_path / "jump.gif" and no_temp_files(tmp_path)
    frames, durations = gif_frames(path)
    assert len(frames) == expected_frames(motion, fps, slow)
    assert frames[0].shape == (SMALL[1], SMALL[0], 3)
    # playback lasts duration / slow (GIF delays are in 1/100 s)
    assert sum(durations) == pytest.approx(len(frames) * 1000 / fps, abs=10)
    for f in frames:
        assert f.std() > 10, "a blank frame"
    # the robot goes up: the near limbs' centroid at the apex is far above the one at the start
    apex = int(np.argmin([centroid(mask_of(f, NEAR))[1] for f in frames]))
    start, top = centroid(mask_of(frames[0], NEAR)), centroid(mask_of(frames[apex], NEAR))
    assert start[1] - top[1] > 0.08 * SMALL[1], (start, top)
    assert 0 < apex < len(frames) - 1
    assert np.abs(frames[0].astype(int) - frames[-1].astype(int)).max() > 0
    Image.fromarray(frames[apex]).save(ARTIFACTS / "gif_apex_frame.png")


def test_slow_motion_has_more_frames(solved, tmp_path):
    motion, robot, trick = solved
    path = render.render_video(motion, robot, trick, tmp_path / "slow.gif", fps=5, slow=0.5, size=(320, 180))
    frames, _ = gif_frames(path)
    assert len(frames) == expected_frames(motion, 5, 0.5)
    assert len(frames) >= 2 * motion.duration * 5


def test_mp4_decodes(solved, tmp_path):
    motion, robot, trick = solved
    fps = 10
    path = render.render_video(motion, robot, trick, tmp_path / "jump.mp4", fps=fps, size=(481, 271))
    assert no_temp_files(tmp_path)
    reader = imageio_v2.get_reader(str(path), format="FFMPEG")
    try:
        meta = reader.get_meta_data()
        frames = [f for f in reader]
    finally:
        reader.close()
    assert meta["codec"] == "h264" and meta["pix_fmt"].startswith("yuv420p")
    assert meta["fps"] == pytest.approx(fps)
    assert meta["size"] == (482, 272)  # rounded up to even sizes for yuv420p
    assert len(frames) == expected_frames(motion, fps, 1.0)
    assert all(f.std() > 10 for f in frames)
    assert mask_of(frames[len(frames) // 2], NEAR, 50).sum() > 100


def test_three_quarter_view_shows_the_far_limbs(solved):
    motion, robot, trick = solved
    t = motion.t0  # standing: in the side view the left limbs hide behind the right ones
    side = render.render_frame(motion, robot, trick, t, size=(640, 360))
    oblique = render.render_frame(motion, robot, trick, t, size=(640, 360), view="three_quarter")
    far_side, far_oblique = mask_of(side, FAR, 30).sum(), mask_of(oblique, FAR, 30).sum()
    assert far_oblique > 2 * far_side > 0, (far_side, far_oblique)
    Image.fromarray(side).save(ARTIFACTS / "frame_side.png")
    Image.fromarray(oblique).save(ARTIFACTS / "frame_three_quarter.png")
    with pytest.raises(ValueError, match="view"):
        render.render_frame(motion, robot, trick, t, view="top")


def test_ghost_is_drawn(solved):
    motion, robot, trick = solved
    ghost = copy.deepcopy(motion)
    ghost.q[:, 0] += 0.25  # the same motion 25 cm further forward
    t = motion.phase("flight").start
    plain = render.render_frame(motion, robot, trick, t, size=(640, 360))
    with_ghost = render.render_frame(motion, robot, trick, t, size=(640, 360), ghost=ghost)
    # the ghost colour at its opacity over the sky
    tint = 255 * (0.33 * np.array(to_rgb(render.GHOST)) + 0.67 * np.array(to_rgb(render.SKY)))
    assert mask_of(with_ghost, tint, 12).sum() > 200
    assert mask_of(plain, tint, 12).sum() < 20
    Image.fromarray(with_ghost).save(ARTIFACTS / "frame_ghost.png")
    bad = copy.deepcopy(motion)
    bad.joint_names = [f"j{i}" for i in range(bad.nj)]
    bad.coord_names = list(bad.coord_names[:3]) + bad.joint_names
    with pytest.raises(ValueError, match="cannot draw the ghost"):
        render.render_frame(motion, robot, trick, t, ghost=bad)


# ----- stills -----------------------------------------------------------------------------------------
def test_strobe_png_and_svg(solved, tmp_path):
    motion, robot, trick = solved
    png = render.render_strobe(motion, robot, trick, tmp_path / "strobe.png", n=7, dpi=100, height=4.0)
    with Image.open(png) as im:
        im.load()
        assert im.format == "PNG"
        assert im.size[1] == 400 and im.size[0] >= 400
        img = np.asarray(im.convert("RGB"))
    assert img.std() > 10 and mask_of(img, NEAR).sum() > 500
    svg = render.render_strobe(motion, robot, trick, tmp_path / "strobe.svg", n=7)
    root = ET.parse(svg).getroot()
    assert root.tag == "{http://www.w3.org/2000/svg}svg"
    assert len(list(root.iter())) > 100
    assert no_temp_files(tmp_path)
    render.render_strobe(motion, robot, trick, ARTIFACTS / "strobe.png")


def test_strobe_titles_fit_a_narrow_picture(solved, tmp_path):
    """A narrow strobe (a robot that stays in place, a small spread, a long trick name): the title
    and the note are wrapped or shrunk inside the picture, none of their ink touches its right edge."""
    motion, robot, trick = solved
    long = copy.deepcopy(trick)
    long.name = "reach_jump_with_a_rather_long_name_for_so_narrow_a_picture"
    sky = np.array(to_rgb(render.SKY)) * 255
    for height, dpi in ((4.0, 100), (2.0, 100), (6.0, 60)):
        png = render.render_strobe(motion, robot, long, tmp_path / "narrow.png", n=3, spread=0.01, dpi=dpi,
                                   height=height)
        with Image.open(png) as im:
            img = np.asarray(im.convert("RGB")).astype(float)
        h, w = img.shape[:2]
        assert w < 1.3 * h, f"not a narrow picture: {w} x {h}"
        top = img[: h // 3]          # the titles, above the robot
        ink = np.linalg.norm(top - sky, axis=-1) > 60
        assert ink[:, : w // 2].sum() > 50, "no title drawn"
        edge = max(2, w // 100)
        assert not ink[:, w - edge:].any(), f"the titles run off the right edge at {w} x {h} px"
        if height == 4.0:
            Image.fromarray(img.astype(np.uint8)).save(ARTIFACTS / "strobe_narrow.png")


def test_plots_png_and_svg(solved, tmp_path):
    motion, robot, _ = solved
    png = render.render_plots(motion, robot, tmp_path / "plots.png", dpi=60)
    with Image.open(png) as im:
        im.load()
        assert im.format == "PNG" and im.size[0] == 720 and im.size[1] > 500
        assert np.asarray(im.convert("RGB")).std() > 10
    svg = render.render_plots(motion, robot, tmp_path / "plots.svg")
    assert ET.parse(svg).getroot().tag == "{http://www.w3.org/2000/svg}svg"
    assert no_temp_files(tmp_path)
    render.render_plots(motion, robot, ARTIFACTS / "plots.png")


# ----- errors ------------------------------------------------------------------------------------------
def test_unwritable_paths_give_clear_errors(solved, tmp_path):
    motion, robot, trick = solved
    missing = tmp_path / "no" / "such" / "folder" / "out.gif"
    with pytest.raises(FileNotFoundError, match="does not exist"):
        render.render_video(motion, robot, trick, missing, fps=5, size=SMALL)
    afile = tmp_path / "plain.txt"
    afile.write_text("x")
    with pytest.raises(NotADirectoryError, match="is not a folder"):
        render.render_strobe(motion, robot, trick, afile / "strobe.png")
    folder = tmp_path / "adir.png"
    folder.mkdir()
    with pytest.raises(IsADirectoryError, match="is a folder"):
        render.render_plots(motion, robot, folder)
    with pytest.raises(ValueError, match="unknown output type"):
        render.render_video(motion, robot, trick, tmp_path / "out.avi")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["adir.png", "plain.txt"]


@pytest.mark.parametrize("suffix", [".gif", ".mp4"])
def test_failed_render_leaves_nothing_behind(solved, tmp_path, suffix):
    motion, robot, trick = solved
    old = tmp_path / f"old{suffix}"
    old.write_bytes(b"previous file")

    def stop(done, total):
        if done == 3:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        render.render_video(motion, robot, trick, old, fps=5, size=SMALL, progress=stop)
    with pytest.raises(KeyboardInterrupt):
        render.render_video(motion, robot, trick, tmp_path / f"new{suffix}", fps=5, size=SMALL, progress=stop)
    assert old.read_bytes() == b"previous file"
    assert sorted(p.name for p in tmp_path.iterdir()) == [old.name]


def test_motion_robot_mismatch(solved, tmp_path):
    motion, _, trick = solved
    quad = load_bundled("quadruped")
    for call in (lambda: render.render_video(motion, quad, trick, tmp_path / "x.gif", fps=5, size=SMALL),
                 lambda: render.render_strobe(motion, quad, trick, tmp_path / "x.png"),
                 lambda: render.render_plots(motion, quad, tmp_path / "x.svg")):
        with pytest.raises(ValueError, match="does not fit robot 'skitter'"):
            call()
    assert list(tmp_path.iterdir()) == []


# ----- command line -------------------------------------------------------------------------------------
def test_cli_render(solved, tmp_path, capsys):
    motion, _, _ = solved
    mfile = tmp_path / "motion.json"
    motion.to_json(mfile)
    trick = str(template_path("reach_jump"))
    assert main(["render", str(mfile), "--trick", trick, "-o", str(tmp_path / "a.gif"), "--fps", "5",
                 "--size", "320x180", "--slow", "2", "-q"]) == 0
    frames, _ = gif_frames(tmp_path / "a.gif")
    assert len(frames) == expected_frames(motion, 5, 2.0)
    assert main(["render", str(mfile), "--trick", trick, "-o", str(tmp_path / "s.svg"), "--strobe", "--n", "4"]) == 0
    ET.parse(tmp_path / "s.svg")
    assert main(["render", str(mfile), "--trick", trick, "-o", str(tmp_path / "p.png"), "--plots"]) == 0
    out = capsys.readouterr().out
    assert f"wrote {tmp_path / 'p.png'}" in out
    # a still without --strobe/--plots, and an unwritable folder: exit 2 with a message, no file
    assert main(["render", str(mfile), "--trick", trick, "-o", str(tmp_path / "x.png")]) == 2
    assert "needs --strobe or --plots" in capsys.readouterr().out
    assert main(["render", str(mfile), "--trick", trick, "-o", str(tmp_path / "nope" / "x.gif")]) == 2
    assert "does not exist" in capsys.readouterr().out
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.gif", "motion.json", "p.png", "s.svg"]


def test_cli_render_help_ends_with_the_caution(capsys):
    assert main(["render", "--help"]) == 0
    assert capsys.readouterr().out.rstrip().endswith(HARDWARE_CAUTION)
