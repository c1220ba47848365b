r"""Steady, fully developed two-fluid momentum balances of separated flow.

Sign convention: x along the pipe in the flow direction, inclination theta positive upward,
stresses positive when they oppose the flow of the phase they act on; the interfacial stress
tau_i is positive when the gas drags the liquid forward (u_G > u_L). ``pgrad`` denotes
-dp/dx [Pa/m], positive when pressure falls along the flow.

Phase balances (Taitel & Dukler 1976, AIChE J. 22(1):47-55, eqs. 1-2):

.. math::
    \text{liquid:}\quad -A_L\frac{dp}{dx} - \tau_{WL} S_L + \tau_i S_i - \rho_L A_L g\sin\theta = 0

    \text{gas:}\quad -A_G\frac{dp}{dx} - \tau_{WG} S_G - \tau_i S_i - \rho_G A_G g\sin\theta = 0

Eliminating dp/dx gives the combined equation (ibid., eq. 3) whose roots in h/D are the
equilibrium liquid levels. Shear stresses come from Fanning friction factors (ibid., eq. 4).
"""
from __future__ import annotations

from typing import NamedTuple

import torch

from .local_state import LocalState


class FrictionFactors(NamedTuple):
    """Fanning friction factors of a separated-flow state [-], each shaped ``(*batch)``."""

    f_wl: torch.Tensor
    f_wg: torch.Tensor
    f_i: torch.Tensor


class Stresses(NamedTuple):
    """Wall and interfacial shear stresses [Pa]."""

    tau_wl: torch.Tensor
    tau_wg: torch.Tensor
    tau_i: torch.Tensor


def shear_stresses(s: LocalState, f: FrictionFactors) -> Stresses:
    r"""Shear stresses from friction factors (Taitel & Dukler 1976, eq. 4):

    .. math::
        \tau_{WL} = \tfrac12 f_{WL}\rho_L u_L|u_L|,\quad
        \tau_{WG} = \tfrac12 f_{WG}\rho_G u_G|u_G|,\quad
        \tau_i = \tfrac12 f_i \rho_G (u_G - u_L)|u_G - u_L|

    rho_G is the core density in annular flow with entrainment. Units: [Pa].
    """
    # u|u| = q|q| / a^2: per-state and per-level factors multiplied once each
    du = s.u_G - s.u_L
    g = s.geom
    return Stresses(
        tau_wl=f.f_wl * (0.5 * s.cond.rhol * s.q_L * s.q_L.abs()) * g.a_L.pow(-2),
        tau_wg=f.f_wg * (0.5 * s.rho_core * s.q_G * s.q_G.abs()) * g.a_G.pow(-2),
        tau_i=f.f_i * (0.5 * s.rho_core) * (du * du.abs()),
    )


def liquid_terms(s: LocalState, tau: Stresses, pgrad: torch.Tensor) -> tuple[torch.Tensor, ...]:
    r"""The four signed terms of the liquid momentum balance [N/m], in the order of
    :func:`liquid_residual`: pressure, wall shear, interfacial shear, gravity."""
    c, g = s.cond, s.geom
    return g.A_L * pgrad, -tau.tau_wl * g.S_L, tau.tau_i * g.S_i, -c.rhol * g.A_L * c.g * torch.sin(c.theta)


def liquid_residual(s: LocalState, tau: Stresses, pgrad: torch.Tensor) -> torch.Tensor:
    r"""Liquid momentum residual per unit length [N/m3 x m2 = N/m]:

    .. math:: R_L = A_L\,\mathrm{pgrad} - \tau_{WL} S_L + \tau_i S_i - \rho_L A_L g\sin\theta

    with pgrad = -dp/dx [Pa/m]. Zero at a consistent state. Source: Taitel & Dukler (1976), eq. 1.
    """
    return sum(liquid_terms(s, tau, pgrad))


def gas_terms(s: LocalState, tau: Stresses, pgrad: torch.Tensor) -> tuple[torch.Tensor, ...]:
    r"""The four signed terms of the gas (core) momentum balance [N/m], in the order of
    :func:`gas_residual`: pressure, wall shear, interfacial shear, gravity."""
    c, g = s.cond, s.geom
    return g.A_G * pgrad, -tau.tau_wg * g.S_G, -tau.tau_i * g.S_i, -s.rho_core * g.A_G * c.g * torch.sin(c.theta)


def gas_residual(s: LocalState, tau: Stresses, pgrad: torch.Tensor) -> torch.Tensor:
    r"""Gas (core) momentum residual per unit length [N/m]:

    .. math:: R_G = A_G\,\mathrm{pgrad} - \tau_{WG} S_G - \tau_i S_i - \rho_G A_G g\sin\theta

    Source: Taitel & Dukler (1976), eq. 2.
    """
    return sum(gas_terms(s, tau, pgrad))


def phase_misfits(s: LocalState, tau: Stresses, pgrad: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
    r"""Both phase balances per unit phase area [Pa/m]: :math:`R_L/A_L` and :math:`R_G/A_G`, i.e. the
    given pgrad minus the pgrad that each phase balance implies with the stresses ``tau``. The
    residuals of the training loss, the metrics and the audit at a measured state."""
    return liquid_residual(s, tau, pgrad) / s.geom.A_L, gas_residual(s, tau, pgrad) / s.geom.A_G


def term_scale(terms: tuple[torch.Tensor, ...]) -> torch.Tensor:
    r"""The sum of the magnitudes of a balance's terms, :math:`\sum_k |t_k|`: the scale a residual
    is measured against (a residual much smaller than it is a balanced equation)."""
    return sum(t.abs() for t in terms)


def combined_terms(s: LocalState, tau: Stresses) -> tuple[torch.Tensor, ...]:
    r"""The four signed terms of :func:`combined_residual` [Pa/m], in its order.

    Per unit area S/A = (4 / (pi D)) (S/D) / (A/A_pipe): a per-state factor times a per-level one."""
    c, g = s.cond, s.geom
    per_area = 4 / (torch.pi * c.D)  # [1/m]
    return (tau.tau_wg * (per_area * (g.s_G / g.a_G)), -tau.tau_wl * (per_area * (g.s_L / g.a_L)),
            tau.tau_i * (per_area * (g.s_i * (1 / g.a_L + 1 / g.a_G))),
            -(c.rhol - s.rho_core) * c.g * torch.sin(c.theta))


def combined_residual(s: LocalState, tau: Stresses) -> torch.Tensor:
    r"""Combined momentum equation, pressure gradient eliminated [Pa/m]:

    .. math::
        F = \tau_{WG}\frac{S_G}{A_G} - \tau_{WL}\frac{S_L}{A_L}
            + \tau_i S_i\left(\frac{1}{A_L} + \frac{1}{A_G}\right) - (\rho_L - \rho_G) g \sin\theta

    Source: Taitel & Dukler (1976), eq. 3 (= R_L/A_L - R_G/A_G). Its roots in 0 < h/D < 1 are
    the equilibrium liquid levels. F -> -inf as h/D -> 0 and +inf as h/D -> 1 for positive
    rates, so an odd number of roots exists.
    """
    wall_g, wall_l, interface, gravity = combined_terms(s, tau)
    return wall_g + wall_l + interface + gravity


class PressureGradient(NamedTuple):
    """-dp/dx [Pa/m] and its parts (total = friction + gravity)."""

    total: torch.Tensor
    friction: torch.Tensor
    gravity: torch.Tensor


def pressure_gradient(s: LocalState, tau: Stresses) -> PressureGradient:
    r"""Pressure gradient of a solved separated state, split into friction and gravity.

    Adding the two phase balances (mixture momentum):

    .. math::
        -\frac{dp}{dx} = \underbrace{\frac{\tau_{WL} S_L + \tau_{WG} S_G}{A}}_{\text{friction}}
          + \underbrace{\frac{\rho_L A_L + \rho_G A_G}{A}\, g\sin\theta}_{\text{gravity}}

    Interfacial shear cancels. At a root of :func:`combined_residual` this equals each phase
    balance solved for dp/dx. Acceleration is neglected (steady, incompressible locally).
    """
    c, g = s.cond, s.geom
    fric = (tau.tau_wl * g.s_L + tau.tau_wg * g.s_G) * (4 / (torch.pi * c.D))  # S/A = 4 (S/D) / (pi D)
    grav = (c.rhol * g.a_L + s.rho_core * g.a_G) * c.g * torch.sin(c.theta)
    return PressureGradient(total=fric + grav, friction=fric, gravity=grav)
