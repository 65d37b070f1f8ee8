"""The compile cache for the per-knot derivative functions (core/jit.py): compiled functions
give the same numbers as the SX ones (reference: CasADi's SX virtual machine evaluating the
same expressions), a background compile fills the cache for the next build, and every failure
(no compiler, compiler error, damaged library) falls back to the SX functions."""
from __future__ import annotations

import casadi as ca
import numpy as np
import pytest

from kipup.core import jit
from kipup.core.derivatives import structured_derivatives
from kipup.core.guess import initial_guess
from kipup.core.solver import TrickSolver
from kipup.core.templates import load_template
from kipup.core.transcription import TrickProblem


@pytest.fixture(scope="module")
def quadruped():
    trick, robot = load_template("quadruped_jump")
    return trick, robot, TrickProblem(trick, robot)


@pytest.fixture(scope="module")
def filled_cache(tmp_path_factory, quadruped):
    """A cache directory holding the quadruped jump's compiled knot functions."""
    directory = tmp_path_factory.mktemp("compiled")
    cache = jit.CompileCache(directory, mode="wait")
    assert cache.compiler is not None, "the optimizer's compiled derivatives need a C compiler (gcc)"
    structured_derivatives(quadruped[2], cache)
    assert cache.compiled_now and cache.loaded, cache.error
    return directory


def _evaluate(fns, prob, trick):
    rng = np.random.default_rng(3)
    x = initial_guess(prob, trick) * (1 + 0.05 * rng.standard_normal(prob.x.n))
    p = prob.parameters(trick)
    lam = rng.standard_normal(int(prob.nlp["g"].numel()))
    out = []
    for key, args in (("grad_f", (x, p)), ("jac_g", (x, p)), ("hess_lag", (x, p, 1.3, lam))):
        res = fns[key](*args)
        out += [ca.DM(r).full() for r in (res if isinstance(res, (list, tuple)) else [res])]
    return out


def test_compiled_derivatives_equal_the_sx_ones(filled_cache, quadruped):
    trick, robot, prob = quadruped
    assert jit.CompileCache(filled_cache, mode="never")([prob.knot_terms[0].function]) is None
    cache = jit.CompileCache(filled_cache, mode="auto")
    compiled = structured_derivatives(prob, cache)
    assert cache.loaded and not cache.compiled_now and cache.thread is None  # a cache hit
    for got, want in zip(_evaluate(compiled, prob, trick), _evaluate(structured_derivatives(prob), prob, trick)):
        np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-12 * max(1.0, np.abs(want).max()))


def test_a_solve_with_compiled_derivatives_reaches_the_same_optimum(filled_cache, quadruped, monkeypatch):
    trick, robot, _ = quadruped
    monkeypatch.setenv("KIPUP_CACHE", str(filled_cache))
    fast = TrickSolver(trick, robot, compile="auto")
    a = fast.solve(trick)
    assert fast.compiled.loaded
    b = TrickSolver(trick, robot, compile="never").solve(trick)
    assert a.success and b.success
    assert a.objective == pytest.approx(b.objective, rel=1e-6)
    np.testing.assert_allclose(a.x, b.x, atol=1e-5)


def test_auto_compiles_in_the_background_for_the_next_build(tmp_path, quadruped):
    prob = quadruped[2]
    first = jit.CompileCache(tmp_path, mode="auto")
    assert structured_derivatives(prob, first) is not None and not first.loaded  # SX meanwhile
    assert first.thread is not None
    first.wait(120)
    assert first.error is None and list(tmp_path.glob("kipup_*.so"))
    later = jit.CompileCache(tmp_path, mode="auto")
    structured_derivatives(prob, later)
    assert later.loaded and later.thread is None


def test_a_damaged_library_is_dropped_and_the_sx_functions_used(tmp_path, filled_cache, quadruped):
    prob = quadruped[2]
    for lib in filled_cache.glob("kipup_*.so"):
        (tmp_path / lib.name).write_bytes(b"not a shared library")
    cache = jit.CompileCache(tmp_path, mode="auto")
    fns = structured_derivatives(prob, cache)
    assert not cache.loaded and "could not load" in cache.error
    assert not list(tmp_path.glob("kipup_*.so"))  # removed, so the next build recompiles
    assert np.all(np.isfinite(_evaluate(fns, prob, quadruped[0])[1]))


def test_a_failing_or_missing_compiler_keeps_the_sx_functions(tmp_path, quadruped, monkeypatch):
    prob = quadruped[2]
    cache = jit.CompileCache(tmp_path, mode="wait")
    cache.compiler = "false"  # exits 1 without output
    structured_derivatives(prob, cache)
    assert not cache.loaded and cache.error and not list(tmp_path.glob("kipup_*.so"))
    monkeypatch.setattr(jit, "find_compiler", lambda: None)
    none = jit.CompileCache(tmp_path, mode="wait")
    structured_derivatives(prob, none)
    assert none.compiler is None and not none.loaded and none.thread is None


def test_an_unknown_mode_names_the_setting(monkeypatch):
    monkeypatch.setenv("KIPUP_COMPILE", "sometimes")
    with pytest.raises(ValueError, match="KIPUP_COMPILE"):
        jit.CompileCache()
