"""Objective gradient, constraint Jacobian and Lagrangian Hessian of a trick's NLP, built from its
structure instead of by differentiating the whole graph.

The NLP (see :mod:`kipup.core.transcription`) is a sum of two kinds of parts:

* the knot functions: one small SX function per phase, mapped over its K knots, giving the
  knot constraints and a running cost weighted by the phase's step ``T / N``;
* the rest: integration defects, phase links, impacts, keyframes, goals, cost terms between
  knots. Cheap to differentiate whole.

The derivatives of a knot function are taken once per phase, on the knot's own variables
(``z = (q, v, a, tau, lam, anchor, T)``, a few dozen), mapped over the knots, and their
nonzeros scattered into the NLP's sparse matrices by a constant sparse matrix (one sparse
matrix-vector product per evaluation). The rest is expanded to SX and differentiated there.
The three functions have the signatures IPOPT's interface in CasADi expects
(``nlp_grad_f``, ``nlp_jac_g``, ``nlp_hess_l``) and go to ``nlpsol`` as its ``grad_f``,
``jac_g`` and ``hess_lag`` options.

Derivatives are with respect to the scaled decision vector ``x`` (the NLP's variable,
``x_physical = x * scale``): a gradient entry carries ``scale_i``, a Hessian entry
``scale_i * scale_j``.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import casadi as ca
import numpy as np
import scipy.sparse as sps

from .transcription import KnotTerm, TrickProblem


@dataclass
class _KnotDerivatives:
    """One phase's mapped derivative functions and where their nonzeros go."""

    K: int
    inputs: ca.MX  # z per knot (nz x K), physical units
    prm: ca.MX  # parameters per knot (nprm x K)
    weights: ca.DM  # trapezoidal weights (1 x K)
    lam_rows: np.ndarray  # global g rows of the knot constraints (ngk*K,), knot by knot
    index: np.ndarray  # global x index of z per knot (K x nz)
    grad: ca.Function  # one knot: (z, prm, w) -> (cost, d cost / dz)
    jac: ca.Function  # one knot: (z, prm) -> (G, nonzeros of dG/dz)
    hess: ca.Function  # one knot: (z, prm, lam, sigma, w) -> nonzeros of the knot Lagrangian's Hessian
    jac_rc: tuple[np.ndarray, np.ndarray]  # local (row, col) of the Jacobian nonzeros
    hess_rc: tuple[np.ndarray, np.ndarray]  # local (row, col) of the Hessian nonzeros


def _sparse_dm(rows: np.ndarray, cols: np.ndarray, vals: np.ndarray, shape: tuple[int, int]) -> ca.DM:
    """A CasADi DM from triplets (duplicates summed)."""
    m = sps.csc_matrix((vals, (rows, cols)), shape=shape)
    m.sum_duplicates()
    m.sort_indices()
    sp = ca.Sparsity(shape[0], shape[1], m.indptr.astype(np.int64).tolist(), m.indices.astype(np.int64).tolist())
    return ca.DM(sp, m.data)


def _rc(sp: ca.Sparsity) -> tuple[np.ndarray, np.ndarray]:
    r, c = sp.get_triplet()
    return np.asarray(r, dtype=np.int64), np.asarray(c, dtype=np.int64)


def _knot_derivatives(prob: TrickProblem, term: KnotTerm, g_offset: int) -> _KnotDerivatives:
    X = prob.x
    ph = prob.phases[term.phase]
    K, N = ph.K, ph.N
    F = term.function
    sizes = [F.size1_in(j) for j in range(6)]  # q, v, a, tau, lam, anchor
    nz = sum(sizes) + 1
    z = ca.SX.sym("z", nz)
    cuts = np.cumsum([0] + sizes)
    pieces = [z[int(cuts[j]):int(cuts[j + 1])] for j in range(6)]
    T = z[nz - 1]
    prm = ca.SX.sym("prm", F.size1_in(6))
    w = ca.SX.sym("w")
    lam = ca.SX.sym("lam", F.size1_out(0))
    sigma = ca.SX.sym("sigma")
    G, L = F(*pieces, prm)
    cost = T / N * w * L
    dG = ca.jacobian(G, z)
    H = ca.hessian(ca.dot(lam, G) + sigma * cost, z)[0]
    grad = ca.Function(f"knot{ph.index}_grad", [z, prm, w], [cost, ca.gradient(cost, z)])
    jac = ca.Function(f"knot{ph.index}_jac", [z, prm], [G, dG.nz[:]])
    hess = ca.Function(f"knot{ph.index}_hess", [z, prm, lam, sigma, w], [H.nz[:]])

    # global indices of z at every knot
    def cols(name: str, rows: int) -> np.ndarray:
        off = X.blocks[name].offset
        return off + np.arange(K)[:, None] * rows + np.arange(rows)[None, :]

    parts = [cols(f"q{ph.index}", sizes[0]), cols(f"v{ph.index}", sizes[1]),
             cols(f"a{ph.index}", sizes[2]), cols(f"tau{ph.index}", sizes[3])]
    if ph.nc:
        parts.append(cols(f"lam{ph.index}", sizes[4]))
        anchor = X.blocks[f"anchor{ph.index}"].offset + np.arange(sizes[5])
        parts.append(np.tile(anchor, (K, 1)))
    parts.append(np.full((K, 1), X.blocks[f"T{ph.index}"].offset))
    index = np.concatenate(parts, axis=1)

    ngk = F.size1_out(0)
    return _KnotDerivatives(
        K=K, inputs=term.inputs, prm=ca.repmat(term.prm, 1, K),
        weights=ca.DM(term.weights).T, lam_rows=g_offset + np.arange(ngk * K),
        index=index, grad=grad, jac=jac, hess=hess, jac_rc=_rc(dG.sparsity()), hess_rc=_rc(H.sparsity()))


def structured_derivatives(prob: TrickProblem,
                           replace: Callable[[list[ca.Function]], list[ca.Function] | None] | None = None,
                           ) -> dict[str, ca.Function]:
    """``grad_f``, ``jac_g`` and ``hess_lag`` for ``nlpsol`` over ``prob.nlp``.

    replace: given the per-knot SX functions (gradient, Jacobian, Hessian of every phase),
    returns functions with the same signatures to use instead (compiled ones,
    :mod:`kipup.core.jit`), or None to keep them. The rest stays SX: its functions take the
    whole decision vector and C compilers take minutes over them (4 MB of C for the backflip).
    """
    X = prob.x
    n = X.n
    scale = np.asarray(X.scale, float)
    xs, p = prob._xs, prob._p
    ng = int(prob.nlp["g"].numel())
    knot_labels = {t.g_label for t in prob.knot_terms}
    knots = [_knot_derivatives(prob, t, prob.g_offset(t.g_label)) for t in prob.knot_terms]

    # the rest, expanded to SX
    rest_parts = [(label, expr) for label, expr in prob.g_parts if label not in knot_labels]
    rest_rows = np.concatenate([prob.g_offset(label) + np.arange(int(expr.numel()))
                                for label, expr in rest_parts]) if rest_parts else np.zeros(0, np.int64)
    g_rest_mx = ca.vertcat(*[e for _, e in rest_parts]) if rest_parts else ca.MX(0, 1)
    rest = ca.Function("rest", [xs, p], [prob.f_rest, g_rest_mx]).expand()
    x_s, p_s = ca.SX.sym("x", n), ca.SX.sym("p", prob.p.n)
    f_r, g_r = rest(x_s, p_s)
    lam_r, sigma_s = ca.SX.sym("lam", g_r.numel()), ca.SX.sym("sigma")
    # The Jacobian part by part (same sparsity, measured: the reach jump 0.63 s whole against
    # 0.06 s by parts, the backflip 0.09 against 0.06): a whole-vector Jacobian is colored as one,
    # and a row that touches every knot of a phase (a point reaching a target at a free time)
    # makes every sweep run over the whole graph. The Hessian is no faster by parts.
    jac_blocks = []
    start = 0
    for _, expr in rest_parts:
        m = int(expr.numel())
        jac_blocks.append(ca.jacobian(g_r[start:start + m], x_s))
        start += m
    Jr = ca.vertcat(*jac_blocks) if jac_blocks else ca.SX(0, n)
    Hr = ca.triu(ca.hessian(sigma_s * f_r + ca.dot(lam_r, g_r), x_s)[0])
    rest_grad = ca.Function("rest_grad", [x_s, p_s], [f_r, ca.gradient(f_r, x_s)])
    rest_jac = ca.Function("rest_jac", [x_s, p_s], [g_r, Jr.nz[:]])
    rest_hess = ca.Function("rest_hess", [x_s, p_s, sigma_s, lam_r], [Hr.nz[:]])
    jr_r, jr_c = _rc(Jr.sparsity())
    hr_r, hr_c = _rc(Hr.sparsity())
    if replace is not None:
        new = replace([f for kd in knots for f in (kd.grad, kd.jac, kd.hess)])
        if new is not None:
            for i, kd in enumerate(knots):
                kd.grad, kd.jac, kd.hess = new[3 * i:3 * i + 3]

    lam_f = ca.MX.sym("lam_f")
    lam_g = ca.MX.sym("lam_g", ng)
    return {"grad_f": _gradient(xs, p, n, scale, knots, rest_grad),
            "jac_g": _jacobian(xs, p, n, ng, scale, knots, rest_jac, rest_rows, jr_r, jr_c),
            "hess_lag": _hessian(xs, p, lam_f, lam_g, n, scale, knots, rest_hess, rest_rows, hr_r, hr_c)}


def _gradient(xs: ca.MX, p: ca.MX, n: int, scale: np.ndarray, knots: list[_KnotDerivatives],
              rest_grad: ca.Function) -> ca.Function:
    f, grad = rest_grad(xs, p)
    for kd in knots:
        cost, dz = kd.grad.map(kd.K, "serial")(kd.inputs, kd.prm, kd.weights)
        nz = kd.index.shape[1]
        gi = kd.index.reshape(-1)  # knot-major, like vec(dz)
        S = _sparse_dm(gi, np.arange(kd.K * nz), scale[gi], (n, kd.K * nz))
        f = f + ca.sum2(cost)
        grad = grad + ca.mtimes(S, ca.vec(dz))
    return ca.Function("nlp_grad_f", [xs, p], [f, grad], ["x", "p"], ["f", "grad_f_x"])


def _jacobian(xs: ca.MX, p: ca.MX, n: int, ng: int, scale: np.ndarray, knots: list[_KnotDerivatives],
              rest_jac: ca.Function, rest_rows: np.ndarray, jr_r: np.ndarray, jr_c: np.ndarray) -> ca.Function:
    g_r, jr_nz = rest_jac(xs, p)
    # global (row, col, coefficient, source) of every nonzero
    rows, cols, coef = [rest_rows[jr_r]], [jr_c], [np.ones(len(jr_c))]  # rest: already in x
    sources: list[ca.MX] = [jr_nz]
    g_terms = [(rest_rows, g_r)]
    for kd in knots:
        G, jnz = kd.jac.map(kd.K, "serial")(kd.inputs, kd.prm)
        lr, lc = kd.jac_rc
        ngk = G.shape[0]
        k = np.arange(kd.K)[:, None]
        grow = kd.lam_rows[0] + k * ngk + lr[None, :]
        gcol = kd.index[k, lc[None, :]]
        rows.append(grow.reshape(-1))
        cols.append(gcol.reshape(-1))
        coef.append(scale[gcol.reshape(-1)])
        sources.append(ca.vec(jnz))
        g_terms.append((kd.lam_rows, ca.vec(G)))
    jac = _scatter(rows, cols, coef, sources, (ng, n))
    g = 0
    for grows, expr in g_terms:
        P = _sparse_dm(grows, np.arange(len(grows)), np.ones(len(grows)), (ng, len(grows)))
        g = g + ca.mtimes(P, expr)
    g = ca.densify(g)
    return ca.Function("nlp_jac_g", [xs, p], [g, jac], ["x", "p"], ["g", "jac_g_x"])


def _hessian(xs: ca.MX, p: ca.MX, lam_f: ca.MX, lam_g: ca.MX, n: int, scale: np.ndarray,
             knots: list[_KnotDerivatives], rest_hess: ca.Function, rest_rows: np.ndarray,
             hr_r: np.ndarray, hr_c: np.ndarray) -> ca.Function:
    hr_nz = rest_hess(xs, p, lam_f, lam_g[rest_rows.tolist()] if len(rest_rows) else ca.MX(0, 1))
    rows, cols, coef, sources = [hr_r], [hr_c], [np.ones(len(hr_r))], [hr_nz]
    # the rest Hessian is taken in x already; knot Hessians in physical units
    for kd in knots:
        ngk = len(kd.lam_rows) // kd.K
        lam_k = ca.reshape(lam_g[kd.lam_rows[0]:kd.lam_rows[0] + len(kd.lam_rows)], ngk, kd.K)
        hnz = kd.hess.map(kd.K, "serial")(kd.inputs, kd.prm, lam_k, ca.repmat(lam_f, 1, kd.K), kd.weights)
        lr, lc = kd.hess_rc
        k = np.arange(kd.K)[:, None]
        gi, gj = kd.index[k, lr[None, :]], kd.index[k, lc[None, :]]
        keep = (gi <= gj).reshape(-1)
        src_idx = np.nonzero(keep)[0]
        gi, gj = gi.reshape(-1)[keep], gj.reshape(-1)[keep]
        rows.append(gi)
        cols.append(gj)
        coef.append(scale[gi] * scale[gj])
        sources.append(ca.vec(hnz)[src_idx.tolist()])
    H = _scatter(rows, cols, coef, sources, (n, n))
    return ca.Function("nlp_hess_l", [xs, p, lam_f, lam_g], [H],
                       ["x", "p", "lam_f", "lam_g"], ["triu_hess_gamma_x_x"])


def _scatter(rows: list[np.ndarray], cols: list[np.ndarray], coef: list[np.ndarray],
             sources: list[ca.MX], shape: tuple[int, int]) -> ca.MX:
    """The sparse matrix whose entry (rows[i][k], cols[i][k]) sums coef[i][k] * sources[i][k]."""
    rows_a, cols_a, coef_a = np.concatenate(rows), np.concatenate(cols), np.concatenate(coef)
    sp_m = sps.csc_matrix((np.ones(len(rows_a)), (rows_a, cols_a)), shape=shape)
    sp_m.sum_duplicates()
    sp_m.sort_indices()
    sp = ca.Sparsity(shape[0], shape[1], sp_m.indptr.tolist(), sp_m.indices.tolist())
    nzpos = _nz_positions(sp_m, rows_a, cols_a)
    S = _sparse_dm(nzpos, np.arange(len(rows_a)), coef_a, (sp_m.nnz, len(rows_a)))
    return ca.MX(sp, ca.densify(ca.mtimes(S, ca.vertcat(*sources))))


def _nz_positions(m: sps.csc_matrix, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """Position in ``m``'s nonzero list (CCS order) of each (row, col)."""
    key = cols.astype(np.int64) * m.shape[0] + rows
    r = m.indices.astype(np.int64)
    c = np.repeat(np.arange(m.shape[1], dtype=np.int64), np.diff(m.indptr))
    ref = c * m.shape[0] + r  # sorted, since CCS with sorted indices
    pos = np.searchsorted(ref, key)
    return pos


def whole_graph_derivatives(prob: TrickProblem) -> dict[str, ca.Function]:
    """The same three functions the way CasADi makes them by itself: ``nlpsol`` differentiates
    the whole MX graph and the results are expanded to SX. Slower to build (the backflip: about
    4x); kept as the reference for the tests and the benchmark's baseline."""
    probe = ca.nlpsol("kipup_reference", "ipopt", prob.nlp, {"print_time": False})
    return {name: probe.get_function(fn).expand()
            for name, fn in (("grad_f", "nlp_grad_f"), ("jac_g", "nlp_jac_g"), ("hess_lag", "nlp_hess_l"))}
