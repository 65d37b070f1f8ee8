"""Test-wide settings.

The optimizer compiles its per-knot derivative functions in the background on a cache miss
(kipup.core.jit). Dozens of trick structures are built in the suite, and a compiler process
per structure would load the 2-core CI machine, so the suite keeps the SX functions
(KIPUP_COMPILE=never, inherited by the notebook kernels it starts); tests/test_jit.py sets
the mode it tests explicitly.
"""
import os

os.environ.setdefault("KIPUP_COMPILE", "never")
