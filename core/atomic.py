"""Atomic file writes: a temp file in the target's folder, written, flushed, fsynced, then
``os.replace``-d over the target, so readers see the old file or the new one, never half of one.

On any failure (including KeyboardInterrupt) the temp file is removed and the target is untouched.
"""
from __future__ import annotations

import os
from pathlib import Path
from typing import BinaryIO, Callable

__all__ = ["atomic_write", "atomic_write_text"]


def _create_temp(folder: Path, name: str) -> tuple[int, Path]:
    """Create a fresh ``.NAME.PID.RANDOM.tmp`` in ``folder``; the umask decides its mode, as for ``open(path, "w")``."""
    for _ in range(100):
        tmp = folder / f".{name}.{os.getpid()}.{os.urandom(4).hex()}.tmp"
        try:
            return os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_BINARY", 0), 0o666), tmp
        except FileExistsError:
            continue
    raise OSError(f"could not create a temporary file in {folder}")  # pragma: no cover


def atomic_write(path: str | os.PathLike[str], write: Callable[[BinaryIO], object], *,
                 keep_mode: bool = False) -> None:
    """Call ``write(f)`` on a binary temp file next to ``path``, then replace ``path`` with it.

    A new file gets the mode the umask gives; with ``keep_mode`` an existing target keeps its
    permission bits.
    """
    target = Path(path)
    fd, tmp = _create_temp(target.parent, target.name)
    try:
        with os.fdopen(fd, "wb") as f:
            write(f)
            f.flush()
            os.fsync(f.fileno())
        if keep_mode:
            try:
                os.chmod(tmp, target.stat().st_mode & 0o7777)
            except FileNotFoundError:
                pass
        os.replace(tmp, target)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def atomic_write_text(path: str | os.PathLike[str], text: str) -> None:
    """Write ``text`` as UTF-8 with ``\\n`` line ends at ``path`` atomically; an existing file keeps its mode."""
    atomic_write(path, lambda f: f.write(text.encode("utf-8")), keep_mode=True)
