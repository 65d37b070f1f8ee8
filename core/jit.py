"""Compiled copies of small CasADi SX functions, cached on disk under the hash of their C code.

Used for the optimizer's per-knot derivative functions (:mod:`kipup.core.derivatives`): compiled
with the system C compiler they evaluate about 5x faster than CasADi's SX virtual machine, and
the NLP calls them at every IPOPT iteration. Compiling takes seconds, so it never blocks a
solve: the first build of a trick structure starts the compile in a background thread (the
compiler is a separate process, so Python keeps running) and goes on with the SX functions; a
later build of the same structure finds the library in the cache and loads it in milliseconds.

Modes (``KIPUP_COMPILE`` or the ``mode`` argument):
``auto`` (default) as above; ``wait`` compiles in the foreground when the cache misses;
``never`` keeps the SX functions. With no C compiler on the machine, ``auto`` and ``wait``
behave as ``never``.

The cache directory is ``KIPUP_CACHE``, else ``$XDG_CACHE_HOME/kipup/compiled``, else
``~/.cache/kipup/compiled``. Entries are named by the SHA-256 of the functions' serialized
form, the compiler flags and the CasADi version, so a changed function never loads a stale
library.
"""
from __future__ import annotations

import hashlib
import os
import shutil
import subprocess
import tempfile
import threading
from pathlib import Path

import casadi as ca

FLAGS = ["-O1", "-shared", "-fPIC"]  # -O1: 0.9 s per knot Hessian and as fast as -O2 (measured)
MODES = ("auto", "wait", "never")


def default_cache_dir() -> Path:
    env = os.environ.get("KIPUP_CACHE")
    if env:
        return Path(env)
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "kipup" / "compiled"


def find_compiler() -> str | None:
    """Path of the C compiler (``CC``, else gcc, cc, clang), or None."""
    for name in (os.environ.get("CC"), "gcc", "cc", "clang"):
        if name and shutil.which(name):
            return shutil.which(name)
    return None


class CompileCache:
    """Replaces SX functions by compiled ones from the cache; compiles on a miss (see module)."""

    def __init__(self, directory: Path | str | None = None, mode: str | None = None) -> None:
        self.directory = Path(directory) if directory is not None else default_cache_dir()
        mode = mode or os.environ.get("KIPUP_COMPILE", "auto")
        if mode not in MODES:
            raise ValueError(f"KIPUP_COMPILE / mode: {mode!r} is not one of {', '.join(MODES)}")
        self.mode = mode
        self.compiler = find_compiler()
        self.thread: threading.Thread | None = None
        self.error: str | None = None  # the compiler's message if a compile failed
        self.loaded = False  # True when the last call returned compiled functions
        self.compiled_now = False  # True when the last call compiled in the foreground

    def __call__(self, functions: list[ca.Function]) -> list[ca.Function] | None:
        """Compiled functions with the same names and signatures, or None (use the SX ones)."""
        self.loaded = self.compiled_now = False
        if self.mode == "never" or self.compiler is None or not functions:
            return None
        key = _key(functions)
        lib = self.directory / f"kipup_{key}.so"
        if not lib.exists():
            code = _c_code(functions)
            if self.mode == "auto":
                # not a daemon: a process that ends meanwhile (kipup solve) waits for the
                # compiler, a few seconds, instead of leaving a half-built entry behind
                self.thread = threading.Thread(target=self._compile, args=(code, lib), name="kipup-compile")
                self.thread.start()
                return None
            self._compile(code, lib)
            self.compiled_now = True
            if not lib.exists():
                return None
        try:
            out = [ca.external(f.name(), str(lib)) for f in functions]
        except RuntimeError as exc:  # a damaged cache entry: drop it, use the SX functions
            self.error = f"could not load {lib}: {exc}"
            lib.unlink(missing_ok=True)
            return None
        self.loaded = True
        return out

    def wait(self, timeout: float | None = None) -> None:
        """Wait for a background compile started by the last call, if any."""
        if self.thread is not None:
            self.thread.join(timeout)

    def _compile(self, code: str, lib: Path) -> None:
        try:
            self.directory.mkdir(parents=True, exist_ok=True)
            with tempfile.TemporaryDirectory(dir=self.directory, prefix=".build-") as tmp:
                src = Path(tmp) / "lib.c"
                src.write_text(code)
                out = Path(tmp) / "lib.so"
                res = subprocess.run([self.compiler, *FLAGS, str(src), "-o", str(out)],
                                     capture_output=True, text=True)
                if res.returncode != 0 or not out.exists():
                    self.error = (res.stderr or res.stdout or "compiler failed").strip()[-2000:]
                    return
                os.replace(out, lib)  # atomic: a reader sees no library or a whole one
        except OSError as exc:  # read-only or full disk: stay with the SX functions
            self.error = f"compile cache {self.directory}: {exc}"


def _key(functions: list[ca.Function]) -> str:
    """Cache key: the functions' serialized form (what the C code is generated from; a third of
    the time of generating the code), the compiler flags and the CasADi version."""
    h = hashlib.sha256(" ".join(FLAGS + [ca.__version__]).encode())
    for f in functions:
        h.update(f.serialize().encode())
    return h.hexdigest()[:24]


def _c_code(functions: list[ca.Function]) -> str:
    cg = ca.CodeGenerator("lib.c", {"with_header": False})
    for f in functions:
        cg.add(f)
    return cg.dump()
