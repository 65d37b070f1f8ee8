"""The structured derivatives (core/derivatives.py) against CasADi's own automatic
differentiation of the whole NLP graph (reference: CasADi's nlpsol, which differentiates the
NLP it is given), at a perturbed guess and random multipliers, on templates that cover impacts,
boxes, bars, reach goals and a second robot."""
from __future__ import annotations

import casadi as ca
import numpy as np
import pytest

from kipup.core.derivatives import structured_derivatives, whole_graph_derivatives
from kipup.core.guess import initial_guess
from kipup.core.templates import load_template
from kipup.core.transcription import TrickProblem
from kipup.core.trick import Bar

def _outputs(fn: ca.Function, args: tuple) -> list[np.ndarray]:
    out = fn(*args)
    out = out if isinstance(out, (list, tuple)) else [out]
    return [ca.DM(o).full() for o in out]


@pytest.mark.parametrize("name", ["backflip", "reach_jump", "box_jump+bar", "quadruped_jump"])
def test_structured_derivatives_match_casadi_ad(name):
    trick, robot = load_template(name.split("+")[0])
    if name.endswith("+bar"):  # demo obstacle over the flight path
        trick.terrain.bars.append(Bar("rod", 0.3, 1.3, 0.03))
    prob = TrickProblem(trick, robot)
    ours = structured_derivatives(prob)
    reference = whole_graph_derivatives(prob)
    rng = np.random.default_rng(1)
    x = initial_guess(prob, trick) * (1 + 0.1 * rng.standard_normal(prob.x.n)) + 0.01 * rng.standard_normal(prob.x.n)
    p = prob.parameters(trick)
    lam_g = rng.standard_normal(int(prob.nlp["g"].numel()))
    for key, args in (("grad_f", (x, p)), ("jac_g", (x, p)), ("hess_lag", (x, p, 0.7, lam_g))):
        ref_fn = reference[key]
        assert ours[key].name_in() == ref_fn.name_in() and ours[key].name_out() == ref_fn.name_out()
        for got, want in zip(_outputs(ours[key], args), _outputs(ref_fn, args)):
            assert got.shape == want.shape
            np.testing.assert_allclose(got, want, rtol=1e-9, atol=1e-9 * max(1.0, np.abs(want).max()),
                                       err_msg=key)
