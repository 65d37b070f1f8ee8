"""Recording from the workbench: the Record tab and :meth:`RecordMixin.record`.

The motion on screen is drawn offscreen by :mod:`kipup.core.render` (matplotlib Agg) in a thread
of its own, so the kernel stays free; the file is written atomically (``render_video`` /
``render_strobe`` write a temporary file and rename it), next to the trick file unless a folder or
file is given, and then shown inline (an ``ipywidgets.Video`` for MP4, an ``ipywidgets.Image`` for
GIF and PNG, holding the file's bytes) with its path.

A mixin of :class:`kipup.widgets.workbench.Workbench`; it works on the workbench's attributes.
"""
from __future__ import annotations

import math
import os
from pathlib import Path
from typing import Any

import ipywidgets as W

from .wb_common import STATUS_INTERVAL, BackgroundTask, _html, _Throttle, run_in_thread

#: format -> (file suffix, words for people)
RECORD_FORMATS: dict[str, tuple[str, str]] = {
    "mp4": (".mp4", "MP4 video"),
    "gif": (".gif", "GIF animation"),
    "png": (".png", "strobe still (PNG)"),
}
RECORD_FPS = {"mp4": 30.0, "gif": 15.0}   #: frames per second of the file
RECORD_SIZE = (960, 540)                  #: px, width x height of a video frame
RECORD_SPEEDS = [("real time", 1.0), ("1/2 speed", 0.5), ("1/4 speed", 0.25), ("1/10 speed", 0.1)]


class RecordMixin:
    """The Record tab: format, slow motion, Record button, inline result."""

    def _build_record_tab(self) -> W.Widget:
        self.record_format = W.ToggleButtons(options=[("MP4", "mp4"), ("GIF", "gif"), ("strobe PNG", "png")],
                                             value="mp4", description="format",
                                             style={"button_width": "96px", "description_width": "50px"})
        self.record_speed = W.Dropdown(options=RECORD_SPEEDS, value=1.0, description="speed",
                                       style={"description_width": "50px"}, layout=W.Layout(width="210px"))
        self.record_folder = W.Text(value="", placeholder="folder (default: next to the trick file)",
                                    description="to", style={"description_width": "50px"},
                                    layout=W.Layout(width="98%"))
        self.record_button = W.Button(description="Record", icon="video-camera", button_style="danger")
        self.record_button.add_class("kipup-record")
        self.record_status = W.HTML(value="")
        self.record_status.add_class("kipup-record-status")
        self.record_view = None            # the inline Video / Image once something was recorded
        self.record_out = W.VBox([], layout=W.Layout(width="100%"))
        self.record_out.add_class("kipup-recording")
        self.record_task: BackgroundTask | None = None
        self._record_throttle = _Throttle(STATUS_INTERVAL, trailing=False)
        self.record_button.on_click(lambda _: self._record_clicked())
        self.record_format.observe(lambda ch: setattr(self.record_speed, "disabled", ch["new"] == "png"),
                                   names="value")
        return W.VBox([self.record_format, self.record_speed, self.record_folder, self.record_button,
                       self.record_status, self.record_out])

    def _record_clicked(self) -> None:
        try:
            self.record(self.record_folder.value.strip() or None, fmt=self.record_format.value,
                        slow=float(self.record_speed.value))
        except (ValueError, OSError, RuntimeError) as exc:
            self._record_says(f"<b>Not recorded</b>: {_html(str(exc))}")

    def _record_says(self, html: str) -> None:
        self.record_status.value = f"<div class='kipup-wrap'>{html}</div>"

    def record_target(self, path: str | os.PathLike | None = None, fmt: str | None = None,
                      slow: float = 1.0) -> tuple[Path, str]:
        """Where :meth:`record` would write and in which format, after checking both.

        path: a file (its suffix picks the format), an existing folder (or one ending in ``/``),
        or None for the trick file's folder. The file name in a folder is the trick's name, plus
        ``_slowX`` for slow motion and ``_strobe`` for a still. Raises ``ValueError`` naming the
        argument, ``OSError`` when the folder is missing or not writable.
        """
        if fmt is not None and fmt not in RECORD_FORMATS:
            raise ValueError(f"fmt must be one of {', '.join(map(repr, RECORD_FORMATS))}; got {fmt!r}")
        if isinstance(slow, bool) or not isinstance(slow, (int, float)) or not math.isfinite(slow) or slow <= 0:
            raise ValueError(f"slow must be a positive number (1 = real time, 0.25 = quarter speed); got {slow!r}")
        if path is None:
            if self.path is None:
                raise ValueError("path: this workbench has no trick file to record next to; pass a folder or "
                                 "a file, e.g. record('videos/') or record('jump.mp4')")
            folder, name = self.path.parent, None
        else:
            text = os.fspath(path)
            p = Path(text)
            if p.is_dir() or text.endswith(("/", os.sep)):
                folder, name = p, None
            else:
                folder, name = p.parent, p.name
        if name is not None:
            suffix = Path(name).suffix.lower()
            by_suffix = {s: f for f, (s, _) in RECORD_FORMATS.items()}
            if suffix not in by_suffix:
                raise ValueError(f"path: {name!r} must end in {', '.join(by_suffix)} (or name a folder)")
            if fmt is not None and by_suffix[suffix] != fmt:
                raise ValueError(f"path: {name!r} is a {suffix} file but fmt is {fmt!r}")
            fmt = by_suffix[suffix]
        fmt = fmt or "mp4"
        if name is None:
            speed = "" if fmt == "png" or slow == 1 else f"_slow{slow:g}"
            name = f"{self.trick.name}{'_strobe' if fmt == 'png' else speed}{RECORD_FORMATS[fmt][0]}"
        folder = folder if str(folder) else Path(".")
        if not folder.exists():
            raise FileNotFoundError(f"cannot record into {folder}: the folder does not exist")
        if not folder.is_dir():
            raise NotADirectoryError(f"cannot record into {folder}: it is not a folder")
        if not os.access(folder, os.W_OK | os.X_OK):
            raise PermissionError(f"cannot record into {folder}: the folder is not writable")
        target = folder / name
        if target.is_dir():
            raise IsADirectoryError(f"cannot record to {target}: it is a folder")
        return target, fmt

    def record(self, path: str | os.PathLike | None = None, fmt: str | None = None, slow: float = 1.0, *,
               size: tuple[int, int] = RECORD_SIZE, fps: float | None = None) -> BackgroundTask:
        """Record the motion on screen to a file in the background and show it inline when done.

        fmt: 'mp4' (H.264), 'gif' or 'png' (a strobe still); default from ``path``'s suffix, else
        'mp4'. slow: playback speed of a video (0.25 = quarter speed). path: see
        :meth:`record_target` (default: next to the trick file). size: (width, height) px of a video
        frame; fps: frames per second (default 30 for MP4, 15 for GIF).

        Returns the :class:`BackgroundTask` (``wait()``, then ``result`` is the Path written, or
        ``error`` says why nothing was). Raises ``ValueError`` / ``OSError`` at once, writing
        nothing, when there is no motion, a recording is running, or the path or an argument is bad.
        """
        motion = self.motion
        if motion is None:
            raise ValueError("there is no motion to record yet: solve the trick first")
        if self.record_task is not None and not self.record_task.done:
            raise RuntimeError(f"a recording is running ({self.record_task.describe}); wait for it to finish")
        target, fmt = self.record_target(path, fmt, slow)
        fps = float(RECORD_FPS.get(fmt, 30.0) if fps is None else fps)
        with self._lock:
            trick = self.trick.copy()
        robot, count = self.robot, self.motion_count
        task = BackgroundTask("record", f"recording motion #{count} to {target.name}")
        self.record_task = task
        self.record_button.disabled = True
        self._record_says(f"{_html(task.describe)} ...")
        if not self.busy():
            self._set_status(task.describe, busy=False)

        def progress(done: int, total: int) -> None:  # in the render thread
            self._record_throttle(self._record_says, f"{_html(task.describe)}: frame {done} of {total}")

        def work() -> Path:
            from kipup.core.render import render_strobe, render_video

            if fmt == "png":
                return render_strobe(motion, robot, trick, target)
            return render_video(motion, robot, trick, target, fps=fps, slow=float(slow), size=tuple(size),
                                progress=progress)

        run_in_thread(task, work, lambda t: self._record_done(t, fmt, count), "kipup-workbench-record")
        return task

    def _record_done(self, task: BackgroundTask, fmt: str, count: int) -> None:
        self.record_button.disabled = False
        if not task.ok:
            self._record_says(f"<b>Recording failed</b>, nothing was written: {_html(task.error)}")
            if not self.busy():
                self._set_status(f"recording failed: {task.error}", busy=False)
            return
        path: Path = task.result
        data = path.read_bytes()
        if fmt == "mp4":
            view: Any = W.Video(value=data, format="mp4", autoplay=True, loop=True, controls=True,
                                layout=W.Layout(width="100%"))
        else:
            view = W.Image(value=data, format=fmt, layout=W.Layout(width="100%"))
        view.add_class("kipup-record-view")
        old = self.record_out.children
        self.record_view = view
        size = f"{len(data) / 1e6:.2f} MB" if len(data) >= 1e6 else f"{len(data) / 1e3:.0f} kB"
        full = path.resolve()
        folder = _html(str(full.parent).rstrip("/\\") + os.sep).replace(_html(os.sep), _html(os.sep) + "<wbr>")
        caption = W.HTML(f"<div class='kipup-wrap'>motion #{count}, {RECORD_FORMATS[fmt][1]}, {size}:<br>"
                         f"<code class='kipup-record-file' title='{_html(str(full))}'>{folder}"
                         f"<b>{_html(full.name)}</b></code></div>")
        caption.add_class("kipup-record-path")
        self.record_out.children = (view, caption)
        for w in old:
            w.close()
        self._record_says(f"recorded in {task.elapsed:.1f} s")
        if not self.busy():
            self._set_status(f"recorded {path.name} ({size})", busy=False)
