r"""Single-phase Fanning friction factors (f = tau_w / (rho u^2 / 2); Darcy factor = 4 f).

All functions take Reynolds number Re [-] and relative roughness eD = roughness / D_h [-] as
tensors and are smooth or continuous in Re, so a holdup root finder sees a continuous equation.
"""
from __future__ import annotations

import math

import torch

#: Taitel & Dukler (1976) Blasius-type constants: f = C Re^-n
TD_TURBULENT_C, TD_TURBULENT_N = 0.046, 0.2
TD_LAMINAR_C, TD_LAMINAR_N = 16.0, 1.0
_RE_FLOOR = 1e-8
_LN7, _LN8, _LN37530 = math.log(7.0), math.log(8.0), math.log(37530.0)  # Churchill's constants, as logs


def fanning_laminar(Re: torch.Tensor) -> torch.Tensor:
    r"""Hagen-Poiseuille laminar friction, :math:`f = 16/Re` (e.g. White, *Fluid Mechanics*, eq. 6.12 in Darcy form 64/Re)."""
    return 16.0 / Re.clamp_min(_RE_FLOOR)


def fanning_blasius_td(Re: torch.Tensor) -> torch.Tensor:
    r"""Taitel & Dukler (1976) wall friction: :math:`f = \max(16\,Re^{-1},\ 0.046\,Re^{-0.2})`.

    Source: Taitel & Dukler (1976), AIChE J. 22(1):47-55, eqs. (5)-(6) with C = 0.046,
    n = 0.2 for turbulent and C = 16, n = 1 for laminar flow. Taking the larger branch switches
    to laminar below Re ~ 1490 where the two curves cross, which keeps f continuous (our choice;
    the paper switches on flow regime). Validity: smooth pipes, turbulent branch Re ~ 3e3-1e5.

    >>> round(float(fanning_blasius_td(torch.tensor(1e5, dtype=torch.float64))), 6)
    0.0046
    """
    Re = Re.clamp_min(_RE_FLOOR)
    return torch.maximum(TD_LAMINAR_C / Re, TD_TURBULENT_C * Re.pow(-TD_TURBULENT_N))


def fanning_churchill(Re: torch.Tensor, eD: torch.Tensor | float = 0.0) -> torch.Tensor:
    r"""Churchill (1977) all-regime friction factor, returned as Fanning f.

    .. math::
        f_D = 8\left[\left(\frac{8}{Re}\right)^{12} + (A + B)^{-3/2}\right]^{1/12},\quad
        A = \left[2.457\ln\frac{1}{(7/Re)^{0.9} + 0.27\,\epsilon/D}\right]^{16},\quad
        B = \left(\frac{37530}{Re}\right)^{16},\quad f = f_D/4

    Source: Churchill, S.W. (1977), Chem. Eng. 84(24):91-92. Smooth in Re across the laminar,
    transitional and fully rough regimes; Re > 0, eD = 0-0.05. Evaluated in log space so that
    the 16th powers neither overflow nor underflow in float64.

    >>> round(float(4 * fanning_churchill(torch.tensor(1e5, dtype=torch.float64), 1e-4)), 5)
    0.01846
    """
    ln_re = torch.log(Re.clamp_min(_RE_FLOOR))  # ln(c/Re) = ln c - ln Re: one log for the three powers of Re
    eD = torch.as_tensor(eD, dtype=ln_re.dtype)
    inner = torch.exp(0.9 * (_LN7 - ln_re)) + 0.27 * eD  # (7/Re)^0.9 + 0.27 eD
    # below Re ~ 10 the log turns negative: A -> 0 there, where (8/Re)^12 dominates anyway
    logA = 16 * torch.log((-2.457 * torch.log(inner)).clamp_min(1e-300))
    logB = 16 * (_LN37530 - ln_re)
    log_ab = torch.logaddexp(logA, logB)
    # (8/Re)^12 + (A+B)^-1.5 in log space
    log_sum = torch.logaddexp(12 * (_LN8 - ln_re), -1.5 * log_ab)
    return 2.0 * torch.exp(log_sum / 12)  # 8 * [...]^(1/12) / 4
