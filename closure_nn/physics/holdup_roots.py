r"""All equilibrium roots of the combined two-fluid momentum equation, vectorised.

For each state of a batch we find every root of F(frac) = 0 (:func:`combined_residual`) in
the open interval (0, frac_max): frac = h/D for stratified flow (frac_max = 1) or delta/D for
annular flow (frac_max = 1/2).

Method
------
1. Bracket: evaluate F on a fixed grid of ``n_grid`` points (log-spaced near the wall, cosine-
   clustered towards both ends) for all states at once; each sign change is a bracket. Two
   roots closer than one grid cell are not resolved (documented limitation).
2. Refine: Chandrupatla's (1997) hybrid of inverse quadratic interpolation and bisection,
   vectorised over all brackets of all states, to ``xtol`` in frac.
3. Select one root per state (``select``):

   * ``'thinnest'`` (default) - the smallest liquid level. In upward inclined flow with three
     roots, Barnea & Taitel (1992, Int. J. Multiphase Flow 18(6):847-857) found the thinnest-
     film solution to be the stable one; the middle root is always unstable.
   * ``'thickest'`` - the largest level.

4. Attach implicit gradients (:mod:`closure_nn.physics.implicit`): the selected root carries
   d frac / d p = -F_p / F_frac for every tensor p the closure and conditions depend on.

No root (``found = False``) happens when the grid shows no sign change, e.g. a zero phase
rate. Such states are flagged, never filled with a silent NaN: their ``frac`` holds a finite
placeholder (0.5 of frac_max) so downstream arithmetic stays finite; callers must use ``found``.
"""
from __future__ import annotations

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


@dataclass(frozen=True)
class SeparatedSolution:
    """Solved separated-flow states (batch shape ``(B,)``)."""

    frac: torch.Tensor  # selected h/D or delta/D [-], differentiable
    roots: torch.Tensor  # (B, MAX_ROOTS) all roots ascending, NaN-padded beyond n_roots [-]
    n_roots: torch.Tensor  # (B,) int64 number of sign changes found (may exceed MAX_ROOTS)
    found: torch.Tensor  # (B,) bool, a root exists
    state: LocalState  # at the selected root
    friction: FrictionFactors
    stresses: Stresses
    pgrad: PressureGradient  # -dp/dx [Pa/m]

    @property
    def holdup(self) -> torch.Tensor:
        """Liquid holdup H_L [-] at the selected root."""
        return self.state.holdup


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


def _chandrupatla(F: Callable, a: torch.Tensor, b: torch.Tensor, fa: torch.Tensor, fb: torch.Tensor,
                  xtol: float, max_iter: int) -> torch.Tensor:
    """Vectorised Chandrupatla (1997) bracketing root finder on [a, b] with fa * fb < 0.

    Inverse quadratic interpolation where it is safe, bisection otherwise; the bracket always
    holds the root. Source: Chandrupatla, T.R. (1997), Adv. Eng. Software 28(3):145-149.
    States that converged are frozen; iteration stops when all brackets are below ``xtol``.
    """
    eps = torch.finfo(a.dtype).eps
    # Chandrupatla's naming: a = newest point, b = its bracket partner, c = previous point
    b, fb, a, fa = a, fa, b, fb
    c, fc = b, fb
    t = torch.full_like(a, 0.5)
    done = torch.zeros_like(a, dtype=torch.bool)
    xm = torch.where(fa.abs() < fb.abs(), a, b)
    for _ in range(max_iter):
        xt = a + t * (b - a)
        ft = F(xt)
        same = torch.signbit(ft) == torch.signbit(fa)
        c_new = torch.where(same, a, b)
        fc_new = torch.where(same, fa, fb)
        b_new = torch.where(same, b, a)
        fb_new = torch.where(same, fb, fa)
        upd = ~done
        a, fa = torch.where(upd, xt, a), torch.where(upd, ft, fa)
        b, fb = torch.where(upd, b_new, b), torch.where(upd, fb_new, fb)
        c, fc = torch.where(upd, c_new, c), torch.where(upd, fc_new, fc)
        a_best = fa.abs() < fb.abs()
        xm = torch.where(a_best, a, b)
        fm = torch.where(a_best, fa, fb)
        tol = 2 * eps * xm.abs() + xtol
        width = (b - a).abs()
        tlim = tol / width.clamp_min(1e-300)
        done = done | (tlim > 0.5) | (fm == 0)
        if bool(done.all()):
            break
        xi = (a - b) / (c - b)
        phi = (fa - fb) / (fc - fb)
        iqi = (phi**2 < xi) & ((1 - phi) ** 2 < 1 - xi)
        t_iqi = fa / (fb - fa) * fc / (fb - fc) + (c - a) / (b - a) * fa / (fc - fa) * fb / (fc - fb)
        t = torch.where(iqi & torch.isfinite(t_iqi), t_iqi, torch.full_like(t, 0.5))
        t = torch.minimum(1 - tlim, torch.maximum(tlim, t)).clamp(0.0, 1.0)
    return xm


def find_all_roots(
    cond: Conditions, closure: Callable, kind: str = STRATIFIED, entrainment=0.0,
    n_grid: int = 40, xtol: float = 1e-12, max_iter: int = 100,
) -> tuple[torch.Tensor, torch.Tensor]:
    """All roots (B, MAX_ROOTS) ascending NaN-padded, and the count of sign changes (B,).

    ``cond`` has batch shape ``(B,)``. No gradients are tracked.
    """
    with torch.no_grad():
        B = cond.shape[0]
        grid = frac_grid(kind, n_grid)
        E = torch.as_tensor(entrainment, dtype=torch.float64).expand(cond.shape)
        Fg = residual_fn(cond.unsqueeze(-1), closure, kind, E.unsqueeze(-1))(grid.expand(B, -1))
        sgn = torch.signbit(Fg)
        valid = torch.isfinite(Fg)
        change = (sgn[:, 1:] != sgn[:, :-1]) & valid[:, 1:] & valid[:, :-1]
        n_roots = change.sum(dim=1)
        # first MAX_ROOTS brackets of each state, in ascending order
        cell = torch.arange(n_grid - 1).expand(B, -1)
        key = torch.where(change, cell, torch.full_like(cell, n_grid))
        idx = key.sort(dim=1).values[:, :MAX_ROOTS]
        has = idx < n_grid
        rows, slots = has.nonzero(as_tuple=True)
        roots = torch.full((B, MAX_ROOTS), float("nan"), dtype=torch.float64)
        if rows.numel():
            j = idx[rows, slots]
            a, b = grid[j], grid[j + 1]
            fa, fb = Fg[rows, j], Fg[rows, j + 1]
            F_sub = residual_fn(cond[rows], closure, kind, E[rows])
            roots[rows, slots] = _chandrupatla(F_sub, a, b, fa, fb, xtol, max_iter)
    return roots, n_roots


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
    select: str = "thinnest", n_grid: int = 40, xtol: float = 1e-12,
) -> SeparatedSolution:
    """Solve the separated-flow equilibrium for a batch ``(B,)`` of conditions.

    Returns the selected root with implicit gradients, all roots, counts, flags and the
    state, friction factors, stresses and pressure gradient (-dp/dx, friction + gravity) there.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> from closure_nn.closures.baseline import BaselineClosure
    >>> sol = solve_separated(make_conditions(vsl=[0.01], vsg=[1.0], D=0.05), BaselineClosure())
    >>> int(sol.n_roots[0]), bool(sol.found[0]), 0 < float(sol.frac[0]) < 0.5
    (1, True, True)
    """
    roots, n_roots = find_all_roots(cond, closure, kind, entrainment, n_grid, xtol)
    pick, found = select_root(roots, select)
    pick = torch.where(found, pick, torch.full_like(pick, 0.5 * FRAC_MAX[kind]))
    frac = attach_implicit_grad(pick, residual_fn(cond, closure, kind, entrainment))
    s = local_state(cond, frac, kind, entrainment)
    f = closure(s)
    tau = shear_stresses(s, f)
    return SeparatedSolution(frac=frac, roots=roots, n_roots=n_roots, found=found, state=s,
                             friction=f, stresses=tau, pgrad=pressure_gradient(s, tau))
