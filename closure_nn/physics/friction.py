r"""Single-phase Fanning friction factors (f = tau_w / (rho u^2 / 2); Darcy factor = 4 f).

All functions take Reynolds number Re [-] and relative roughness eD = roughness / D_h [-] as
tensors (the two wall laws of the closures also Re as a tuple of factors whose product is Re) and
are smooth or continuous in Re, so a holdup root finder sees a continuous equation.
"""
from __future__ import annotations

import math

import torch

#: Taitel & Dukler (1976) Blasius-type constants: f = C Re^-n
TD_TURBULENT_C, TD_TURBULENT_N = 0.046, 0.2
TD_LAMINAR_C, TD_LAMINAR_N = 16.0, 1.0
_RE_FLOOR = 1e-8


def fanning_laminar(Re: torch.Tensor) -> torch.Tensor:
    r"""Hagen-Poiseuille laminar friction, :math:`f = 16/Re` (e.g. White, *Fluid Mechanics*, eq. 6.12 in Darcy form 64/Re)."""
    return 16.0 / Re.clamp_min(_RE_FLOOR)


def fanning_blasius_td(Re: torch.Tensor | tuple[torch.Tensor, ...]) -> torch.Tensor:
    r"""Taitel & Dukler (1976) wall friction: :math:`f = \max(16\,Re^{-1},\ 0.046\,Re^{-0.2})`.

    Source: Taitel & Dukler (1976), AIChE J. 22(1):47-55, eqs. (5)-(6) with C = 0.046,
    n = 0.2 for turbulent and C = 16, n = 1 for laminar flow. Taking the larger branch switches
    to laminar below Re ~ 1490 where the two curves cross, which keeps f continuous (our choice;
    the paper switches on flow regime). Validity: smooth pipes, turbulent branch Re ~ 3e3-1e5.
    ``Re`` as in :func:`fanning_churchill`: a tensor or a tuple of factors.

    >>> round(float(fanning_blasius_td(torch.tensor(1e5, dtype=torch.float64))), 6)
    0.0046
    """
    parts = _re_factors(Re)
    ln_inv = [-torch.log(p) for p in parts]
    return torch.maximum(_inv_power(parts, ln_inv, TD_LAMINAR_C, TD_LAMINAR_N),
                         _inv_power(parts, ln_inv, TD_TURBULENT_C, TD_TURBULENT_N))


def _re_factors(Re: torch.Tensor | tuple[torch.Tensor, ...]) -> tuple[torch.Tensor, ...]:
    """Re as a tuple of factors (one factor where they would not broadcast), the first floored."""
    parts = Re if isinstance(Re, tuple) else (Re,)
    if len(parts) > 1 and len({p.shape for p in parts}) == 1:  # no broadcast to spare: one factor
        parts = (math.prod(parts[1:], start=parts[0]),)
    return (parts[0].clamp_min(_RE_FLOOR),) + tuple(parts[1:])


def _inv_power(parts: tuple[torch.Tensor, ...], ln_inv: list[torch.Tensor], coef: float, k: float) -> torch.Tensor:
    """coef Re^-k = coef prod_j (1 / Re_j)^k on the factors Re_j of Re (``ln_inv`` = -ln Re_j):
    1/Re_j for k = 1, else exp(k ln(1/Re_j))."""
    terms = [1 / p for p in parts] if k == 1 else [torch.exp(k * q) for q in ln_inv]
    return math.prod(terms[1:], start=coef * terms[0])


def fanning_churchill(Re: torch.Tensor | tuple[torch.Tensor, ...], eD: torch.Tensor | float = 0.0) -> torch.Tensor:
    r"""Churchill (1977) all-regime friction factor, returned as Fanning f.

    .. math::
        f_D = 8\left[\left(\frac{8}{Re}\right)^{12} + (A + B)^{-3/2}\right]^{1/12},\quad
        A = \left[2.457\ln\frac{1}{(7/Re)^{0.9} + 0.27\,\epsilon/D}\right]^{16},\quad
        B = \left(\frac{37530}{Re}\right)^{16},\quad f = f_D/4

    Source: Churchill, S.W. (1977), Chem. Eng. 84(24):91-92. Smooth in Re across the laminar,
    transitional and fully rough regimes; Re > 0, eD = 0-0.05.

    ``Re`` is a tensor, or a tuple of tensors whose product is Re (a per-state and a per-level
    factor, as :attr:`LocalState.Re_L_parts <closure_nn.physics.local_state.LocalState.Re_L_parts>`
    gives them): the three powers of Re are then formed on the factors and multiplied once, which
    spares two transcendental functions per value on a grid of levels. A floor of 1e-8 applies
    to the first factor (a zero flow rate). The powers of 1/Re are formed as exp(k ln(1/Re)) per
    factor; (8/Re)^12 and (37530/Re)^16 stay within float64 for Re in 1e-8 to 1e18 and beyond
    (underflow to zero where the other term dominates).

    >>> round(float(4 * fanning_churchill(torch.tensor(1e5, dtype=torch.float64), 1e-4)), 5)
    0.01846
    """
    parts = _re_factors(Re)
    ln_inv = [-torch.log(p) for p in parts]

    def inv_power(c: float, k: float) -> torch.Tensor:  # (c / Re)^k
        return _inv_power(parts, ln_inv, c**k, k)

    # below Re ~ 10 the log turns negative: A -> 0 there, where (8/Re)^12 dominates anyway
    y = (-2.457 * torch.log(inv_power(7.0, 0.9) + 0.27 * eD)).clamp_min(0.0)
    y2 = y * y
    y4 = y2 * y2
    y8 = y4 * y4
    root = torch.rsqrt(y8 * y8 + inv_power(37530.0, 16.0))  # (A + B)^-1/2
    total = inv_power(8.0, 12.0) + root * root * root  # (8/Re)^12 + (A + B)^-3/2
    return 2.0 * torch.exp(torch.log(total) / 12)  # 8 * [...]^(1/12) / 4
