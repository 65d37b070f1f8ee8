"""``kipup render``: videos, strobe stills and plots of a motion file (see :mod:`kipup.core.render`)."""
from __future__ import annotations

import argparse
from pathlib import Path

from .motion import Motion

DESCRIPTION = (
    "Draw MOTION (a kipup-motion/1 .json or .npz file) on the robot and terrain of --trick, offscreen.\n"
    "The type of picture follows -o OUT:\n"
    "  OUT.mp4, OUT.gif   a video (H.264 MP4 or a looping GIF) with a fixed camera\n"
    "  OUT.png, OUT.svg   with --strobe: the robot at --n instants in one still;\n"
    "                     with --plots: torques, speeds, contact forces and base motion against the limits\n"
    "Exit status 0 when the file is written, 2 on invalid input or an unwritable output.")


def _size(text: str) -> tuple[int, int]:
    try:
        w, h = (int(v) for v in text.lower().split("x"))
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected WIDTHxHEIGHT in pixels, e.g. 1280x720; got {text!r}") from None
    return w, h


def _load_motion(path: str) -> Motion:
    if Path(path).suffix.lower() == ".npz":
        return Motion.from_npz(path)
    return Motion.from_json(path)


def cmd_render(args: argparse.Namespace) -> int:
    from tqdm import tqdm

    from . import render
    from .cli_solve import load_trick_or_report

    out = Path(args.output)
    suffix = out.suffix.lower()
    if suffix in render.STILL_SUFFIXES and not (args.strobe or args.plots):
        print(f"kipup render: {out}: a {suffix} output needs --strobe or --plots (or write .mp4 / .gif for a video)")
        return 2
    if suffix in render.VIDEO_SUFFIXES and (args.strobe or args.plots):
        print(f"kipup render: {out}: --strobe and --plots write .png or .svg, not {suffix}")
        return 2
    if suffix not in render.VIDEO_SUFFIXES + render.STILL_SUFFIXES:
        known = ", ".join(render.VIDEO_SUFFIXES + render.STILL_SUFFIXES)
        print(f"kipup render: {out}: unknown output type {out.suffix or '(no suffix)'!r}; use one of {known}")
        return 2
    loaded = load_trick_or_report(args.trick)
    if loaded is None:
        return 2
    trick, robot = loaded
    motions = []
    for label, path in (("motion", args.motion), ("ghost", args.ghost)):
        if path is None:
            motions.append(None)
            continue
        try:
            motions.append(_load_motion(path))
        except (OSError, ValueError) as exc:
            print(f"{path}: cannot read the {label}: {exc}")
            return 2
    motion, ghost = motions
    try:
        if args.plots:
            written = render.render_plots(motion, robot, out)
        elif args.strobe:
            written = render.render_strobe(motion, robot, trick, out, n=args.n, view=args.view)
        else:
            bar = tqdm(total=len(render.frame_times(motion, args.fps, args.slow)), desc=f"rendering {out.name}",
                       unit="frame", disable=args.quiet, leave=False)

            def progress(done: int, total: int) -> None:
                bar.update(done - bar.n)

            try:
                written = render.render_video(motion, robot, trick, out, fps=args.fps, slow=args.slow,
                                              view=args.view, ghost=ghost, size=args.size, progress=progress)
            finally:
                bar.close()
    except ModuleNotFoundError as exc:  # matplotlib, Pillow or imageio-ffmpeg missing
        print(f"kipup render: {exc}; install the render extra: pip install 'kipup[render]'")
        return 2
    except (ValueError, OSError) as exc:
        print(f"kipup render: {exc}")
        return 2
    print(f"wrote {written}")
    return 0


def add_parsers(sub, fmt, epilog: str) -> None:
    p = sub.add_parser("render", formatter_class=fmt, epilog=epilog,
                       help="draw a motion as a video, a strobe still or plots",
                       description=DESCRIPTION)
    p.add_argument("motion", metavar="MOTION.json", help="motion file (.json or .npz) from kipup solve")
    p.add_argument("--trick", required=True, metavar="TRICK.yaml", help="trick file: gives the robot and the terrain")
    p.add_argument("-o", "--output", required=True, metavar="OUT", help="OUT.mp4, OUT.gif, OUT.png or OUT.svg")
    kind = p.add_mutually_exclusive_group()
    kind.add_argument("--strobe", action="store_true", help="a still of the robot at several instants")
    kind.add_argument("--plots", action="store_true", help="plots of torques, speeds and forces against the limits")
    p.add_argument("--slow", type=float, default=1.0, metavar="FACTOR",
                   help="playback speed of a video: 0.25 is quarter speed (default 1)")
    p.add_argument("--fps", type=float, default=30.0, help="frames per second of a video (default 30)")
    p.add_argument("--size", type=_size, default=(1280, 720), metavar="WxH",
                   help="video size in pixels (default 1280x720)")
    p.add_argument("--view", choices=("side", "three_quarter"), default="side",
                   help="side: the sagittal plane; three_quarter: oblique, both legs visible (default side)")
    p.add_argument("--ghost", metavar="OTHER.json", default=None,
                   help="a second motion of the same robot (e.g. a simulation) drawn as a translucent robot")
    p.add_argument("--n", type=int, default=9, help="instants in a strobe still (default 9)")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=cmd_render)
