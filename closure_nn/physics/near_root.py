r"""The thinnest equilibrium root found from a guess: a cheap solve for the training loop.

The all-roots solver (:func:`~closure_nn.physics.holdup_roots.solve_separated`) evaluates the
closure on a 40-point bracketing grid for every state. In training the closure is a network and
each row has a good guess of its root (the level at the measured holdup), so we evaluate the
combined momentum residual F (Taitel & Dukler 1976, AIChE J. 22(1):47-55, eq. 3;
:func:`~closure_nn.physics.momentum.combined_residual`) only on a 9-point stencil around the
guess x0:

.. math:: \{x_{lo},\ x_0 e^{-0.8},\ x_0 e^{-0.2},\ x_0 e^{-0.05},\ x_0,\ x_0 e^{0.05},\ x_0 e^{0.2},
          \ x_0 e^{0.8},\ x_{hi}\}

clipped to [x_lo, x_hi] = [1e-7, 1 - 1e-7] frac_max (the ends of the all-roots grid). F < 0 at
x_lo and F > 0 at x_hi for positive phase rates (F -> -inf as the layer thins, +inf as the gas
space closes), so the stencil always holds a sign change; its leftmost one is refined by
Chandrupatla's (1997) method to ``xtol``, exactly as in the all-roots solver. The stencil is
evaluated from the left in two blocks, the second only for rows without a sign change in the
first (up to one point right of the guess): the same leftmost cell, with 6 instead of 9
closure evaluations per row when the root is near the guess (benchmarks/README.md). Rows without a finite
guess inside (x_lo, x_hi), or whose stencil shows no sign change (non-finite residuals), are solved
by the all-roots solver.

What it does not do: it counts no roots and searches no turns between stencil points. The
leftmost sign change of the stencil is the thinnest root unless a root pair lies left of it or
inside one stencil cell; there the result is a thicker root than ``select='thinnest'`` would give.
Rows solved from the stencil report ``n_roots = 1`` (the root refined). Use it where a rare
thicker root costs little (a training misfit term); the point solver and every result that feeds
design use the all-roots solver. benchmarks/README.md gives the share of rows where the two
differ on the training benchmark.

Gradients: the returned ``frac`` carries implicit-function-theorem gradients, as in the
all-roots solver (:mod:`closure_nn.physics.implicit`).
"""
from __future__ import annotations

from typing import Callable

import torch

from .conditions import Conditions
from .geometry import FRAC_MAX, STRATIFIED
from .holdup_roots import (MAX_ROOTS, RootSet, SeparatedSolution, _chandrupatla, _subset_fn, find_roots,
                           residual_fn, select_root, separated_solution)

#: log offsets of the stencil points around the guess (both sides)
STENCIL = (0.05, 0.2, 0.8)
#: points of the stencil's first block: its lower end, the three points left of the guess, the guess
#: and the first point right of it
_FIRST_BLOCK = 6
_EDGE = 1e-7  # stencil ends at _EDGE and 1 - _EDGE of frac_max (the ends of the all-roots grid)


def stencil_roots(cond: Conditions, closure: Callable, kind: str, guess: torch.Tensor, entrainment=0.0,
                  n_grid: int = 40, xtol: float = 1e-12, max_iter: int = 100) -> RootSet:
    """Roots of a flat batch ``(B,)``: the leftmost sign change of the stencil around ``guess`` (B,)
    [-] refined (``n_roots`` 1), or all roots (all-roots solver) where the stencil cannot be used.
    No gradients are tracked."""
    with torch.no_grad():
        B = cond.shape[0]
        fmax = FRAC_MAX[kind]
        lo, hi = _EDGE * fmax, (1 - _EDGE) * fmax
        E = torch.as_tensor(entrainment, dtype=torch.float64).expand(cond.shape)
        g = guess.detach().to(torch.float64)
        use = torch.isfinite(g) & (g > lo) & (g < hi)
        x0 = torch.where(use, g, torch.full_like(g, 0.5 * fmax))
        c = torch.tensor(STENCIL, dtype=torch.float64)
        offsets = torch.cat([-c.flip(0), torch.zeros(1, dtype=torch.float64), c])
        pts = (x0[:, None] * torch.exp(offsets)).clamp(lo, hi)
        ends = torch.ones(B, 1, dtype=torch.float64)
        pts = torch.cat([lo * ends, pts, hi * ends], dim=1)
        F, first = _leftmost_change(cond, E, closure, kind, pts, use)
        has = first >= 0
        roots = torch.full((B, MAX_ROOTS), float("nan"), dtype=torch.float64)
        n_roots = torch.zeros(B, dtype=torch.int64)
        unresolved = torch.zeros(B, dtype=torch.bool)
        rows = has.nonzero(as_tuple=True)[0]
        if rows.numel():
            k = first[rows]
            a, b = pts[rows, k], pts[rows, k + 1]
            roots[rows, 0] = _chandrupatla(_subset_fn(cond[rows], E[rows], closure, kind), a, b,
                                           F[rows, k], F[rows, k + 1], xtol, max_iter)
            n_roots[rows] = 1
        rest = (~has).nonzero(as_tuple=True)[0]
        if rest.numel():
            rs = find_roots(cond[rest], closure, kind, E[rest], n_grid, xtol, max_iter)
            roots[rest], n_roots[rest], unresolved[rest] = rs.roots, rs.n_roots, rs.unresolved
    return RootSet(roots=roots, n_roots=n_roots, unresolved=unresolved)


def _leftmost_change(cond: Conditions, E: torch.Tensor, closure: Callable, kind: str, pts: torch.Tensor,
                     use: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
    """The residual on the stencil ``pts`` (B, P), evaluated from the left in two blocks (the points up
    to one step right of the guess, then the rest for the rows ``use`` whose sign change is not found
    yet); and each row's first cell k with a sign change between points k and k+1 (both finite, k+1
    right of k), -1 where none. The same cell as a whole-stencil evaluation gives; a root near the
    guess needs only the first block (6 of 9 points). Residuals not evaluated are NaN."""
    B, P = pts.shape
    F = torch.full((B, P), float("nan"), dtype=torch.float64)
    first = torch.full((B,), -1, dtype=torch.int64)
    rows = use.nonzero(as_tuple=True)[0]
    for k0, k1 in ((0, _FIRST_BLOCK), (_FIRST_BLOCK, P)):
        if rows.numel() == 0:
            break
        c = cond[rows].unsqueeze(-1)
        F[rows, k0:k1] = residual_fn(c, closure, kind, E[rows].unsqueeze(-1))(pts[rows, k0:k1])
        j = max(k0 - 1, 0)  # the cell across the blocks' border counts too
        f, x = F[rows, j:k1], pts[rows, j:k1]
        change = ((torch.signbit(f[:, 1:]) != torch.signbit(f[:, :-1])) & torch.isfinite(f[:, 1:])
                  & torch.isfinite(f[:, :-1]) & (x[:, 1:] > x[:, :-1]))
        has = change.any(dim=1)
        first[rows[has]] = j + change[has].to(torch.int8).argmax(dim=1)
        rows = rows[~has]
    return F, first


def solve_separated_near(cond: Conditions, closure: Callable, guess: torch.Tensor, kind: str = STRATIFIED,
                         entrainment=0.0, n_grid: int = 40, xtol: float = 1e-12) -> SeparatedSolution:
    """The separated-flow equilibrium of a batch ``(B,)`` from a guess of each root (see module
    docstring): the same :class:`~closure_nn.physics.holdup_roots.SeparatedSolution` as
    ``solve_separated(..., select='thinnest')``, with implicit gradients.

    Parameters
    ----------
    guess : tensor (B,)
        A guess of h/D (stratified) or delta/D (annular) [-], e.g. the level at the measured holdup;
        NaN where none (those rows get the all-roots solve).

    >>> from closure_nn.physics.conditions import make_conditions
    >>> from closure_nn.closures.baseline import BaselineClosure
    >>> from closure_nn.physics.holdup_roots import solve_separated
    >>> cond = make_conditions(vsl=[0.01, 0.1], vsg=[1.0, 3.0], D=0.05)
    >>> near = solve_separated_near(cond, BaselineClosure(), torch.tensor([0.2, float("nan")], dtype=torch.float64))
    >>> full = solve_separated(cond, BaselineClosure())
    >>> bool(torch.allclose(near.frac, full.frac, rtol=0, atol=1e-11))
    True
    """
    rs = stencil_roots(cond, closure, kind, guess, entrainment, n_grid, xtol)
    pick, found = select_root(rs.roots, "thinnest")
    return separated_solution(cond, closure, kind, entrainment, pick, found, rs)
