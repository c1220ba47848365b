r"""All equilibrium roots of the combined two-fluid momentum equation, vectorised.

For each state of a batch we find every root of F(frac) = 0 (:func:`combined_residual`) in
the open interval (0, frac_max): frac = h/D for stratified flow (frac_max = 1) or delta/D for
annular flow (frac_max = 1/2).

Method
------
The batch is solved in chunks of ``chunk`` states, the bracketing grid in smaller chunks of
``grid_chunk`` states and the refinement in pieces of ``REFINE_CHUNK`` brackets (memory bounded
for any batch size); within a chunk:

1. Bracket: evaluate F on a fixed grid of ``n_grid`` points (log-spaced near the wall, cosine-
   clustered towards both ends) for all states at once; each sign change is a bracket.
2. Turns: a pair of roots closer than one grid cell shows no sign change, but F turns towards
   zero there. Every interior grid point where F keeps its sign on both neighbours and
   ``|F|`` is a local minimum is searched (golden-section search with parabolic steps, Brent
   1973, ch. 5) on its two cells for the extremum of F. If F changes sign at the extremum, the
   pair is bracketed on both sides of it; if the extremum stays within ``1e-9`` of the
   neighbours' ``|F|`` of zero (a tangency: two roots may exist or not within rounding), or the
   search does not settle, the state is marked ``unresolved``.
   Not covered: a pair whose whole excursion (both turns of F) lies between two grid points
   while F is monotone on the grid; the test on stored hard states bounds how often that
   happens for random states.
3. Refine: Chandrupatla's (1997) hybrid of inverse quadratic interpolation and bisection,
   vectorised over all brackets of all states, to ``xtol`` relative to the root (a film of
   h/D = 3e-4 as precise as a level of 0.5, which matters to its pressure gradient); only brackets not yet
   converged are evaluated in each iteration.
4. Select one root per state (``select``):

   * ``'thinnest'`` (default) - the smallest liquid level. In upward inclined flow with three
     roots, Barnea & Taitel (1992, Int. J. Multiphase Flow 18(6):847-857) found the thinnest-
     film solution to be the stable one; the middle root is always unstable.
   * ``'thickest'`` - the largest level.

5. Attach implicit gradients (:mod:`closure_nn.physics.implicit`): the selected root carries
   d frac / d p = -F_p / F_frac for every tensor p the closure and conditions depend on.

No root (``found = False``) happens when the grid shows no sign change, e.g. a zero phase
rate. Such states are flagged, never filled with a silent NaN: their ``frac`` holds a finite
placeholder (0.5 of frac_max) so downstream arithmetic stays finite; callers must use ``found``.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import torch

from .conditions import Conditions
from .geometry import FRAC_MAX, STRATIFIED
from .implicit import attach_implicit_grad
from .local_state import LocalState, local_state
from .momentum import FrictionFactors, PressureGradient, Stresses, combined_residual, pressure_gradient, shear_stresses

SELECT_RULES = ("thinnest", "thickest")
MAX_ROOTS = 3
#: states per chunk of the root finder (turn search and refinement vectorised over a chunk):
#: 65,536 solves 1e5 states about 1.5x faster than 16,384 with 2 threads (torch splits an
#: operation over threads above 32,768 elements) and keeps a 1e6-state all-roots solve under
#: 450 MB peak (benchmarks/README.md, 2026-12-04)
DEFAULT_CHUNK = 65536
#: brackets refined at a time: a chunk of 65,536 states has ~72,000 brackets, whose refinement
#: held ~60 MB at once (the residual's temporaries and the iteration's state); in pieces of 49,152
#: each operation still splits over 2 threads (above 32,768 elements) (benchmarks/README.md, 2026-12-04)
REFINE_CHUNK = 49152
#: states per chunk of the bracketing grid: a chunk's (GRID_CHUNK, n_grid) temporaries stay in
#: cache (benchmarks/README.md)
GRID_CHUNK = 4096
_TURN_XTOL = 1e-11  # search tolerance in frac for the extremum of a turn
_TURN_MAX_ITER = 80
_TANGENT_RTOL = 1e-9  # extremum within this fraction of its neighbours' |F| of zero: unresolved
_INV_PHI2 = (3 - math.sqrt(5)) / 2  # golden-section fraction 0.381966...


@dataclass(frozen=True)
class SeparatedSolution:
    """Solved separated-flow states (batch shape ``(B,)``)."""

    frac: torch.Tensor  # selected h/D or delta/D [-], differentiable
    roots: torch.Tensor  # (B, MAX_ROOTS) all roots ascending, NaN-padded beyond n_roots [-]
    n_roots: torch.Tensor  # (B,) int64 number of roots found (may exceed MAX_ROOTS)
    found: torch.Tensor  # (B,) bool, a root exists
    state: LocalState  # at the selected root
    friction: FrictionFactors
    stresses: Stresses
    pgrad: PressureGradient  # -dp/dx [Pa/m]
    unresolved: torch.Tensor | None = None  # (B,) bool, a root pair may hide at a tangency

    @property
    def holdup(self) -> torch.Tensor:
        """Liquid holdup H_L [-] at the selected root."""
        return self.state.holdup


@dataclass(frozen=True)
class RootSet:
    """All roots of a batch ``(B,)``: ``roots`` (B, MAX_ROOTS) ascending NaN-padded [-],
    ``n_roots`` (B,) int64, ``unresolved`` (B,) bool (a pair may hide at a tangency)."""

    roots: torch.Tensor
    n_roots: torch.Tensor
    unresolved: torch.Tensor


def frac_grid(kind: str, n_grid: int, dtype=torch.float64) -> torch.Tensor:
    """The bracketing grid in (0, frac_max): 4 log-spaced points near the wall + cosine spacing."""
    fmax = FRAC_MAX[kind]
    t = torch.linspace(0, 1, n_grid - 4, dtype=dtype)
    lo, hi = 1e-3 * fmax, fmax * (1 - 1e-7)
    body = lo + (hi - lo) * (1 - torch.cos(torch.pi * t)) / 2
    wall = fmax * torch.tensor([1e-7, 1e-6, 1e-5, 1e-4], dtype=dtype)
    return torch.cat([wall, body])


def residual_fn(cond: Conditions, closure: Callable, kind: str, entrainment) -> Callable[[torch.Tensor], torch.Tensor]:
    """F(frac) for fixed conditions: the combined momentum residual [Pa/m]."""

    def F(frac: torch.Tensor) -> torch.Tensor:
        s = local_state(cond, frac, kind, entrainment)
        return combined_residual(s, shear_stresses(s, closure(s)))

    return F


def _subset_fn(cond: Conditions, E: torch.Tensor, closure: Callable, kind: str) -> Callable:
    """F(idx, frac): the residual of states ``idx`` (LongTensor) of a flat batch ``(n,)`` at ``frac``.

    The conditions of the last ``idx`` are kept: an iteration whose active set did not change
    (the same tensor object) gathers nothing."""
    last: dict = {}

    def F(idx: torch.Tensor, frac: torch.Tensor) -> torch.Tensor:
        if last.get("idx") is not idx:
            last.update(idx=idx, F=residual_fn(cond[idx], closure, kind, E.index_select(0, idx)))
        return last["F"](frac)

    return F


def _chandrupatla(F: Callable, a: torch.Tensor, b: torch.Tensor, fa: torch.Tensor, fb: torch.Tensor,
                  xtol: float, max_iter: int) -> torch.Tensor:
    """Vectorised Chandrupatla (1997) bracketing root finder on [a, b] with fa * fb < 0.

    ``F(idx, x)`` evaluates the residual of brackets ``idx`` at ``x``. Inverse quadratic
    interpolation where it is safe, bisection otherwise; the bracket always holds the root.
    Source: Chandrupatla, T.R. (1997), Adv. Eng. Software 28(3):145-149. A bracket leaves the
    iteration once it is narrower than ``xtol`` times the root (plus rounding); the others are
    kept compact, so each iteration evaluates and updates only brackets still open.
    """
    eps = torch.finfo(a.dtype).eps
    out = torch.empty_like(a)
    # Chandrupatla's naming: a = newest point, b = its bracket partner, c = previous point
    b, fb, a, fa = a, fa, b, fb
    c, fc = b, fb
    t = torch.full_like(a, 0.5)
    xm = torch.where(fa.abs() < fb.abs(), a, b)
    act = torch.arange(a.numel())  # positions of the open brackets
    for _ in range(max_iter):
        xt = a + t * (b - a)
        ft = F(act, xt)
        same = torch.signbit(ft) == torch.signbit(fa)
        c, fc = torch.where(same, a, b), torch.where(same, fa, fb)
        b, fb = torch.where(same, b, a), torch.where(same, fb, fa)
        a, fa = xt, ft
        a_best = fa.abs() < fb.abs()
        xm = torch.where(a_best, a, b)
        fm = torch.where(a_best, fa, fb)
        tol = (2 * eps + xtol) * xm.abs()  # relative: a thin film's root as precise as a thick one's
        tlim = tol / (b - a).abs().clamp_min(1e-300)
        done = (tlim > 0.5) | (fm == 0)
        xi = (a - b) / (c - b)
        phi = (fa - fb) / (fc - fb)
        iqi = (phi**2 < xi) & ((1 - phi) ** 2 < 1 - xi)
        t_iqi = fa / (fb - fa) * fc / (fb - fc) + (c - a) / (b - a) * fa / (fc - fa) * fb / (fc - fb)
        t = torch.where(iqi & torch.isfinite(t_iqi), t_iqi, torch.full_like(t, 0.5))
        t = torch.minimum(1 - tlim, torch.maximum(tlim, t)).clamp(0.0, 1.0)
        if bool(done.any()):
            # positions gathered with index_select: a boolean mask per tensor (its own nonzero each)
            # costs ~15x more per value (benchmarks/bench_op_costs.py)
            fin, keep = done.nonzero().squeeze(1), (~done).nonzero().squeeze(1)
            out.index_put_((act.index_select(0, fin),), xm.index_select(0, fin))
            act, a, fa, b, fb, c, fc, t, xm = (v.index_select(0, keep) for v in (act, a, fa, b, fb, c, fc, t, xm))
            if act.numel() == 0:
                break
    out[act] = xm  # brackets still open after max_iter: their best point
    return out


def _turn_search(F: Callable, a: torch.Tensor, m: torch.Tensor, c: torch.Tensor, ga: torch.Tensor,
                 gm: torch.Tensor, gc: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor, torch.Tensor, torch.Tensor]:
    """Minimise g = s F on [a, c] from a triple with g(m) <= g(a), g(c), all g > 0.

    Golden-section search with parabolic steps (Brent 1973, *Algorithms for Minimization
    without Derivatives*, ch. 5), vectorised; ``F(idx, x)`` returns g for candidates ``idx``.
    A candidate stops as soon as g <= 0 (a sign change: the pair is bracketed by [a, u] and
    [u, c]); or, after at least 4 steps, when the smallest g has settled (changed by < 1e-3 of
    itself in the last step) and the parabola through the triple predicts no minimum below
    0.9 of it (a true extremum, no root); or when c - a < ``_TURN_XTOL``.

    Returns ``(status, a, u, c)``: status 1 = pair bracketed at u, 0 = a true extremum with
    g > 0 (no root here), -1 = tangency or no convergence (unresolved).
    """
    n = a.numel()
    a, m, c, ga, gm, gc = (v.clone() for v in (a, m, c, ga, gm, gc))
    g0 = torch.maximum(ga, gc)
    status = torch.full((n,), -1, dtype=torch.int64)
    u_found = m.clone()
    act = torch.arange(n)
    for k in range(_TURN_MAX_ITER):
        A, M, C, GA, GM, GC = a[act], m[act], c[act], ga[act], gm[act], gc[act]
        # vertex of the parabola through the triple: P(x) = GA + d1 (x - A) + q (x - A)(x - M)
        d1 = (GM - GA) / (M - A)
        q = ((GC - GM) / (C - M) - d1) / (C - A)
        u = 0.5 * (A + M) - 0.5 * d1 / q
        width = C - A
        right = (C - M) > (M - A)
        golden = torch.where(right, M + _INV_PHI2 * (C - M), M - _INV_PHI2 * (M - A))
        ok = torch.isfinite(u) & (u > A + 0.01 * width) & (u < C - 0.01 * width) & ((u - M).abs() > 0.01 * width)
        u = torch.where(ok & torch.tensor(k % 3 != 2), u, golden)
        gu = F(act, u)
        hit = gu <= 0
        better = gu < GM
        left = u < M
        # keep a bracketing triple around the smallest g
        nA = torch.where(better, torch.where(left, A, M), torch.where(left, u, A))
        nC = torch.where(better, torch.where(left, M, C), torch.where(left, C, u))
        nGA = torch.where(better, torch.where(left, GA, GM), torch.where(left, gu, GA))
        nGC = torch.where(better, torch.where(left, GM, GC), torch.where(left, GC, gu))
        nM, nGM = torch.where(better, u, M), torch.where(better, gu, GM)
        for full, part in ((a, nA), (m, nM), (c, nC), (ga, nGA), (gm, nGM), (gc, nGC)):
            full[act] = torch.where(hit, full[act], part)
        u_found[act] = torch.where(hit, u, u_found[act])
        status[act[hit]] = 1
        # a settled extremum clearly above zero: no root pair here
        d1 = (nGM - nGA) / (nM - nA)
        q = ((nGC - nGM) / (nC - nM) - d1) / (nC - nA)
        p_min = nGA - (d1 - q * (nM - nA)) ** 2 / (4 * q)
        settled = ((k >= 3) & (GM - nGM <= 1e-3 * nGM) & (p_min >= 0.9 * nGM)
                   & (nGM > _TANGENT_RTOL * g0[act]))
        status[act[~hit & settled]] = 0
        narrow = ~hit & ~settled & ((nC - nA) < _TURN_XTOL)
        idx = act[narrow]
        status[idx] = torch.where(gm[idx] > _TANGENT_RTOL * g0[idx], 0, -1)
        act = act[~(hit | settled | narrow)]
        if act.numel() == 0:
            break
    return status, a, u_found, c


def _grid_pass(cond: Conditions, E: torch.Tensor, closure: Callable, kind: str, grid: torch.Tensor):
    """Steps 1-2 setup for a flat batch ``(b,)``: sign-change brackets and turn candidates.

    Returns ``(rows, lo, hi, flo, fhi)`` of the brackets and ``(t_rows, j)`` of the turns (grid
    index of the middle point) with ``(Fa, Fm, Fc)`` at grid points j-1, j, j+1.
    """
    b = cond.shape[0]
    # the grid as one row (1, n_grid): the geometry of the levels is computed once per chunk
    Fg = residual_fn(cond.unsqueeze(-1), closure, kind, E.unsqueeze(-1))(grid.unsqueeze(0)).expand(b, -1)
    flip = torch.signbit(Fg[:, 1:]) ^ torch.signbit(Fg[:, :-1])  # the sign differs across the cell
    valid = torch.isfinite(Fg)
    change = flip & valid[:, 1:] & valid[:, :-1]
    rows, cells = change.nonzero(as_tuple=True)
    # sign-preserving local minima of |F| on the grid: a root pair may sit between the neighbours
    # (a NaN or infinite middle value fails the comparisons, so needs no mask of its own)
    absF = Fg.abs()
    mid = absF[:, 1:-1]
    turn = (~(flip[:, :-1] | flip[:, 1:]) & valid[:, :-2] & valid[:, 2:] & (mid < absF[:, :-2])
            & (mid <= absF[:, 2:]))
    t_rows, t_j = turn.nonzero(as_tuple=True)
    j = t_j + 1
    return ((rows, grid[cells], grid[cells + 1], Fg[rows, cells], Fg[rows, cells + 1]),
            (t_rows, j, Fg[t_rows, j - 1], Fg[t_rows, j], Fg[t_rows, j + 1]))


def _roots_batch(cond: Conditions, E: torch.Tensor, closure: Callable, kind: str, grid: torch.Tensor,
                 xtol: float, max_iter: int, grid_chunk: int) -> RootSet:
    """:func:`find_roots` for one batch ``(b,)``, under ``torch.no_grad``: the grid pass in
    chunks of ``grid_chunk`` states, then the turn search and refinement on the whole batch."""
    b = cond.shape[0]
    if b == 0:
        return RootSet(torch.empty(0, MAX_ROOTS, dtype=torch.float64), torch.empty(0, dtype=torch.int64),
                       torch.empty(0, dtype=torch.bool))
    br, tu = [], []
    for i in range(0, b, grid_chunk):
        x, y = _grid_pass(cond[i:i + grid_chunk], E[i:i + grid_chunk], closure, kind, grid)
        br.append((x[0] + i, *x[1:]))
        tu.append((y[0] + i, *y[1:]))
    rows, lo, hi, flo, fhi = (torch.cat(v) for v in zip(*br))
    t_rows, j, Fa, Fm, Fc = (torch.cat(v) for v in zip(*tu))
    n_roots = torch.bincount(rows, minlength=b)
    unresolved = torch.zeros(b, dtype=torch.bool)

    if t_rows.numel():
        s = torch.where(torch.signbit(Fm), -1.0, 1.0).to(Fm.dtype)
        F_sub = _subset_fn(cond[t_rows], E[t_rows], closure, kind)
        status, pa, pu, pc = _turn_search(lambda idx, x: s[idx] * F_sub(idx, x), grid[j - 1], grid[j], grid[j + 1],
                                          s * Fa, s * Fm, s * Fc)
        pair = status == 1
        if bool(pair.any()):
            pi = pair.nonzero(as_tuple=True)[0]
            pr = t_rows[pi]
            fu = F_sub(pi, pu[pi])
            rows = torch.cat([rows, pr, pr])
            lo = torch.cat([lo, pa[pi], pu[pi]])
            hi = torch.cat([hi, pu[pi], pc[pi]])
            flo = torch.cat([flo, F_sub(pi, pa[pi]), fu])
            fhi = torch.cat([fhi, fu, F_sub(pi, pc[pi])])
            n_roots = n_roots + 2 * torch.bincount(pr, minlength=b)
        unresolved[t_rows[status < 0]] = True

    # the first MAX_ROOTS brackets of each state in ascending order
    order = torch.sort(lo, stable=True).indices
    order = order[torch.sort(rows[order], stable=True).indices]
    rows, lo, hi, flo, fhi = rows[order], lo[order], hi[order], flo[order], fhi[order]
    counts = torch.bincount(rows, minlength=b)
    rank = torch.arange(rows.numel()) - (torch.cumsum(counts, 0) - counts)[rows]
    keep = rank < MAX_ROOTS
    rows, rank, lo, hi, flo, fhi = rows[keep], rank[keep], lo[keep], hi[keep], flo[keep], fhi[keep]
    roots = torch.full((b, MAX_ROOTS), float("nan"), dtype=torch.float64)
    for i in range(0, rows.numel(), REFINE_CHUNK):  # brackets refine independently: pieces give the same roots
        r, piece = rows[i:i + REFINE_CHUNK], slice(i, i + REFINE_CHUNK)
        F_br = _subset_fn(cond[r], E[r], closure, kind)
        roots[r, rank[piece]] = _chandrupatla(F_br, lo[piece], hi[piece], flo[piece], fhi[piece], xtol, max_iter)
    return RootSet(roots=roots, n_roots=n_roots, unresolved=unresolved)


def find_roots(
    cond: Conditions, closure: Callable, kind: str = STRATIFIED, entrainment=0.0,
    n_grid: int = 40, xtol: float = 1e-12, max_iter: int = 100, chunk: int = DEFAULT_CHUNK,
    grid_chunk: int = GRID_CHUNK,
) -> RootSet:
    """All roots of a flat batch ``(B,)`` (see module docstring).

    States are solved ``chunk`` at a time (turn search and refinement vectorised over a chunk),
    the bracketing grid ``grid_chunk`` states at a time, so memory is bounded for any B.
    Results do not depend on either size. No gradients are tracked.
    """
    with torch.no_grad():
        B = cond.shape[0]
        grid = frac_grid(kind, n_grid)
        E = torch.as_tensor(entrainment, dtype=torch.float64).expand(cond.shape)
        if B <= chunk:
            return _roots_batch(cond, E, closure, kind, grid, xtol, max_iter, grid_chunk)
        out = RootSet(torch.empty(B, MAX_ROOTS, dtype=torch.float64), torch.empty(B, dtype=torch.int64),
                      torch.empty(B, dtype=torch.bool))
        for i in range(0, B, chunk):
            part = _roots_batch(cond[i:i + chunk], E[i:i + chunk], closure, kind, grid, xtol, max_iter, grid_chunk)
            for k in ("roots", "n_roots", "unresolved"):
                getattr(out, k)[i:i + chunk] = getattr(part, k)
        return out


def find_all_roots(
    cond: Conditions, closure: Callable, kind: str = STRATIFIED, entrainment=0.0,
    n_grid: int = 40, xtol: float = 1e-12, max_iter: int = 100, chunk: int = DEFAULT_CHUNK,
) -> tuple[torch.Tensor, torch.Tensor]:
    """All roots (B, MAX_ROOTS) ascending NaN-padded, and the count of roots found (B,).

    ``cond`` has batch shape ``(B,)``. No gradients are tracked. See :func:`find_roots`.
    """
    r = find_roots(cond, closure, kind, entrainment, n_grid, xtol, max_iter, chunk)
    return r.roots, r.n_roots


def select_root(roots: torch.Tensor, rule: str = "thinnest") -> tuple[torch.Tensor, torch.Tensor]:
    """Pick one root per state: (frac (B,), found (B,)). See module docstring for rules."""
    if rule not in SELECT_RULES:
        raise ValueError(f"unknown root selection rule {rule!r}; known: {', '.join(SELECT_RULES)}")
    found = torch.isfinite(roots[:, 0])
    if rule == "thinnest":
        pick = roots[:, 0]
    else:
        pick = torch.where(torch.isfinite(roots), roots, torch.full_like(roots, -1.0)).max(dim=1).values
    return pick, found


def solve_separated(
    cond: Conditions, closure: Callable, kind: str = STRATIFIED, entrainment=0.0,
    select: str = "thinnest", n_grid: int = 40, xtol: float = 1e-12, chunk: int = DEFAULT_CHUNK,
) -> SeparatedSolution:
    """Solve the separated-flow equilibrium for a batch ``(B,)`` of conditions.

    Returns the selected root with implicit gradients, all roots, counts, flags and the
    state, friction factors, stresses and pressure gradient (-dp/dx, friction + gravity) there.
    ``chunk`` bounds the root finder's memory (states per chunk); results do not depend on it.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> from closure_nn.closures.baseline import BaselineClosure
    >>> sol = solve_separated(make_conditions(vsl=[0.01], vsg=[1.0], D=0.05), BaselineClosure())
    >>> int(sol.n_roots[0]), bool(sol.found[0]), 0 < float(sol.frac[0]) < 0.5
    (1, True, True)
    """
    rs = find_roots(cond, closure, kind, entrainment, n_grid, xtol, chunk=chunk)
    pick, found = select_root(rs.roots, select)
    return separated_solution(cond, closure, kind, entrainment, pick, found, rs)


def _tracks_grad(cond: Conditions, closure: Callable, entrainment) -> bool | None:
    """True when the residual of these conditions and closure depends on a tensor that requires
    grad (a condition, the entrainment or a parameter of the closure); None when that is not
    known (a closure may hold such tensors outside its parameters)."""
    if any(t.requires_grad for t in cond.as_dict().values()) or (
            isinstance(entrainment, torch.Tensor) and entrainment.requires_grad):
        return True
    params = closure.parameters() if isinstance(closure, torch.nn.Module) else ()
    return True if any(p.requires_grad for p in params) else None


def separated_solution(cond: Conditions, closure: Callable, kind: str, entrainment, pick: torch.Tensor,
                       found: torch.Tensor, rs: RootSet) -> SeparatedSolution:
    """The :class:`SeparatedSolution` at the chosen roots ``pick`` (B,) [-]: implicit gradients
    attached, state, friction, stresses and pgrad evaluated there (a finite placeholder, 0.5 of
    frac_max, where ``found`` is False)."""
    pick = torch.where(found, pick, torch.full_like(pick, 0.5 * FRAC_MAX[kind]))
    frac = attach_implicit_grad(pick, residual_fn(cond, closure, kind, entrainment),
                                needs_grad=_tracks_grad(cond, closure, entrainment))
    s = local_state(cond, frac, kind, entrainment)
    f = closure(s)
    tau = shear_stresses(s, f)
    return SeparatedSolution(frac=frac, roots=rs.roots, n_roots=rs.n_roots, found=found, state=s,
                             friction=f, stresses=tau, pgrad=pressure_gradient(s, tau), unresolved=rs.unresolved)
