r"""Holdup and pressure gradient of the non-separated patterns: intermittent, dispersed bubble, bubble.

Each model takes a :class:`~closure_nn.physics.conditions.Conditions` batch ``(B,)`` and returns
``(holdup (B,), PressureGradient)`` with pgrad = -dp/dx [Pa/m] split into friction and
gravity (acceleration neglected, as in the separated balances). All are plain float64 torch,
vectorised, differentiable, and finite for non-negative rates.

Drift flux (Zuber & Findlay 1965, J. Heat Transfer 87(4):453-468): the gas travels at

.. math:: u_G = \frac{v_{SG}}{\alpha} = C_0\,u_M + u_d,\qquad H_L = 1 - \alpha = 1 - \frac{v_{SG}}{C_0 u_M + u_d}

with u_M = v_SL + v_SG. Where a negative drift (steep downward flow at low rates, outside the
data of the correlations) would make C_0 u_M + u_d <= v_SG, the gas velocity is floored at
v_SG + 0.1 v_SL (our numerical guard; it keeps 0 < H_L < 1 and is inactive in upward and
horizontal flow, where C_0 >= 1 and u_d >= 0).

Mixture friction (common practice): :math:`-dp/dx|_f = 2 f \rho u_M^2 / D` with the Fanning
factor of Churchill (1977, :func:`closure_nn.physics.friction.fanning_churchill`) at
Re = rho u_M D / mu, rho and mu weighted by the liquid fraction of the flowing mixture.
Gravity: :math:`\rho_m g\sin\theta` with :math:`\rho_m = \rho_L H_L + \rho_G (1 - H_L)`.
"""
from __future__ import annotations

import torch

from .conditions import Conditions
from .friction import fanning_churchill
from .momentum import PressureGradient

#: Bendiksen (1984) switch of the mixture Froude number u_M / sqrt(g D) [-]
FR_BENDIKSEN = 3.5
#: Gregory, Nicholson & Aziz (1978) velocity scale of slug-body holdup [m/s]
U_GREGORY, N_GREGORY = 8.66, 1.39
#: Zuber & Findlay (1965) distribution parameter of bubbly flow [-]
C0_BUBBLE = 1.2
_GUARD = 0.1
_TINY = 1e-300


def bendiksen_drift(cond: Conditions) -> tuple[torch.Tensor, torch.Tensor]:
    r"""Elongated-bubble (slug-front) velocity coefficients C_0 [-] and u_d [m/s].

    .. math::
        Fr_M = \frac{u_M}{\sqrt{gD}} < 3.5:\quad C_0 = 1.05 + 0.15\sin^2\theta,\quad
        u_d = \sqrt{gD}\,(0.35\sin\theta + 0.54\cos\theta)

        Fr_M \ge 3.5:\quad C_0 = 1.2,\quad u_d = 0.35\sqrt{gD}\,\sin\theta

    so the bubble travels at u_T = C_0 u_M + u_d. Source: Bendiksen, K.H. (1984), Int. J.
    Multiphase Flow 10(4):467-483 (coefficients as commonly quoted; from memory). Validity: his
    air-water data, D = 19-50 mm, inclinations -30 to +90 deg (from memory). The switch at
    Fr_M = 3.5 is a step, as published; gradients are piecewise. Shapes ``(*batch)``.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> C0, ud = bendiksen_drift(make_conditions(vsl=0.1, vsg=0.1, D=0.05))
    >>> round(float(C0), 3), round(float(ud / (9.80665 * 0.05) ** 0.5), 3)
    (1.05, 0.54)
    """
    sin, cos = torch.sin(cond.theta), torch.cos(cond.theta)
    gD = torch.sqrt(cond.g * cond.D)
    low = cond.vm / gD < FR_BENDIKSEN
    C0 = torch.where(low, 1.05 + 0.15 * sin**2, torch.full_like(sin, 1.2))
    ud = torch.where(low, gD * (0.35 * sin + 0.54 * cos), 0.35 * gD * sin)
    return C0, ud


def gregory_slug_holdup(u_M: torch.Tensor) -> torch.Tensor:
    r"""Liquid holdup of the slug body, Gregory, Nicholson & Aziz (1978):

    .. math:: H_{LS} = \frac{1}{1 + (u_M / 8.66\ \mathrm{m/s})^{1.39}}

    u_M [m/s] the mixture velocity; returns H_LS [-]. Source: Gregory, G.A., Nicholson, M.K. &
    Aziz, K. (1978), Can. J. Chem. Eng. 56:153-160. Validity: horizontal light oil-air slug
    flow, D = 25.8 and 51.2 mm (from memory); a dimensional correlation.

    >>> round(float(gregory_slug_holdup(torch.tensor(8.66, dtype=torch.float64))), 3)
    0.5
    """
    return 1.0 / (1.0 + (u_M.clamp_min(0.0) / U_GREGORY) ** N_GREGORY)


def harmathy_rise_velocity(cond: Conditions) -> torch.Tensor:
    r"""Terminal rise velocity of a distorted bubble in stagnant liquid [m/s]:

    .. math:: u_\infty = 1.53\left[\frac{g\,\sigma\,(\rho_L - \rho_G)}{\rho_L^2}\right]^{1/4}

    Source: Harmathy, T.Z. (1960), AIChE J. 6(2):281-288. Validity: bubbles in the distorted-
    ellipsoid regime (a few mm to ~2 cm for air-water, from memory); about 0.25 m/s for
    air-water (doctest).

    >>> from closure_nn.physics.conditions import make_conditions
    >>> round(float(harmathy_rise_velocity(make_conditions(vsl=1.0, vsg=0.1, D=0.1))), 3)
    0.249
    """
    drho = (cond.rhol - cond.rhog).clamp_min(0.0)
    return 1.53 * (cond.g * cond.sigma * drho / cond.rhol**2) ** 0.25


def drift_flux_holdup(cond: Conditions, C0: torch.Tensor, ud: torch.Tensor) -> torch.Tensor:
    r"""Liquid holdup from drift flux, :math:`H_L = 1 - v_{SG}/u_G`, :math:`u_G = C_0 u_M + u_d`.

    Zuber & Findlay (1965), J. Heat Transfer 87(4):453-468. u_G is floored at
    v_SG + 0.1 v_SL (module docstring). C0 [-], ud [m/s]; returns H_L [-], shape ``(*batch)``.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> c = make_conditions(vsl=1.0, vsg=1.0, D=0.05)
    >>> one = torch.tensor(1.0, dtype=torch.float64)
    >>> float(drift_flux_holdup(c, one, 0 * one))  # no slip: H_L = v_SL / u_M
    0.5
    """
    u_G = torch.maximum(C0 * cond.vm + ud, cond.vsg + _GUARD * cond.vsl)
    return 1.0 - cond.vsg / u_G.clamp_min(_TINY)


def mixture_friction(cond: Conditions, liquid_fraction: torch.Tensor) -> torch.Tensor:
    r"""Frictional -dp/dx of a gas-liquid mixture moving at u_M [Pa/m] (common practice):

    .. math::
        -\frac{dp}{dx}\Big|_f = \frac{2 f \rho u_M^2}{D},\quad
        \rho = \rho_L H + \rho_G (1 - H),\quad \mu = \mu_L H + \mu_G (1 - H),\quad
        f = f_{Churchill}\!\left(\frac{\rho u_M D}{\mu}, \frac{\epsilon}{D}\right)

    H [-] the liquid fraction of the mixture (no-slip, slug-body or in-situ holdup, as the
    caller decides). Churchill (1977) via :func:`~closure_nn.physics.friction.fanning_churchill`.
    With H = 1 this is single-phase Darcy-Weisbach.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> c = make_conditions(vsl=1.0, vsg=0.0, D=0.05)
    >>> round(float(mixture_friction(c, torch.tensor(1.0, dtype=torch.float64))), 1)  # Re = 49 900
    207.4
    """
    rho = cond.rhol * liquid_fraction + cond.rhog * (1 - liquid_fraction)
    mu = cond.mul * liquid_fraction + cond.mug * (1 - liquid_fraction)
    u = cond.vm
    f = fanning_churchill(rho * u * cond.D / mu, cond.roughness / cond.D)
    return 2 * f * rho * u * u.abs() / cond.D


def _with_gravity(cond: Conditions, holdup: torch.Tensor, fric: torch.Tensor) -> PressureGradient:
    rho_m = cond.rhol * holdup + cond.rhog * (1 - holdup)
    grav = rho_m * cond.g * torch.sin(cond.theta)
    return PressureGradient(total=fric + grav, friction=fric, gravity=grav)


def intermittent_flow(cond: Conditions) -> tuple[torch.Tensor, PressureGradient]:
    r"""Slug/elongated-bubble/churn flow: holdup from Bendiksen drift flux, slug-body friction.

    .. math::
        H_L = 1 - \frac{v_{SG}}{C_0 u_M + u_d},\qquad
        H_{LS}' = \max(H_{LS}, H_L),\qquad \beta = H_L / H_{LS}'

        -\frac{dp}{dx} = \beta\,\frac{2 f_S \rho_S u_M^2}{D} + \rho_m g\sin\theta

    C_0, u_d from :func:`bendiksen_drift` (Bendiksen 1984); H_LS from
    :func:`gregory_slug_holdup` (Gregory, Nicholson & Aziz 1978); f_S, rho_S from
    :func:`mixture_friction` with H = H_LS'. The slug-unit split is ours and simple: beta is
    the slug fraction of the unit if the film zone held no liquid (an upper bound of the true
    fraction), and the film zone's wall friction is neglected; the two approximations partly
    offset. H_LS is raised to H_L so that the slug body never holds less liquid than the unit
    average; then v_SG -> 0 gives single-phase liquid flow exactly. Validity: that of the two
    correlations (air-water/light oil, D up to ~5 cm in their data; from memory).

    Returns (holdup (B,), PressureGradient of (B,) tensors [Pa/m]).

    >>> from closure_nn.physics.conditions import make_conditions
    >>> H, dp = intermittent_flow(make_conditions(vsl=0.3, vsg=1.0, D=0.05))
    >>> 0.3 / 1.3 < float(H) < 1.0, float(dp.gravity)
    (True, 0.0)
    """
    C0, ud = bendiksen_drift(cond)
    H = drift_flux_holdup(cond, C0, ud)
    H_LS = torch.maximum(gregory_slug_holdup(cond.vm), H)
    beta = (H / H_LS.clamp_min(_TINY)).clamp(0.0, 1.0)
    return H, _with_gravity(cond, H, beta * mixture_friction(cond, H_LS))


def dispersed_bubble_flow(cond: Conditions) -> tuple[torch.Tensor, PressureGradient]:
    r"""Dispersed bubble flow as a homogeneous no-slip mixture (common practice):

    .. math::
        H_L = \lambda_L = \frac{v_{SL}}{u_M},\qquad
        -\frac{dp}{dx} = \frac{2 f \rho_{ns} u_M^2}{D} + \rho_{ns}\, g\sin\theta

    Small bubbles at high liquid rates barely slip, so Zuber & Findlay (1965) drift flux with
    C_0 = 1, u_d = 0. Friction from :func:`mixture_friction` at the no-slip fraction.
    Validity: dispersed bubble flow (void below ~0.52, TBD80), liquid-dominated turbulence.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> H, dp = dispersed_bubble_flow(make_conditions(vsl=4.0, vsg=1.0, D=0.05))
    >>> round(float(H), 3)
    0.8
    """
    lam = cond.vsl / cond.vm.clamp_min(_TINY)
    lam = torch.where(cond.vm > 0, lam, torch.ones_like(lam))
    return lam, _with_gravity(cond, lam, mixture_friction(cond, lam))


def bubble_flow(cond: Conditions) -> tuple[torch.Tensor, PressureGradient]:
    r"""Bubbly (upward) flow: Zuber & Findlay drift flux with a Harmathy rise velocity.

    .. math::
        H_L = 1 - \frac{v_{SG}}{1.2\,u_M + u_\infty \sin\theta},\qquad
        -\frac{dp}{dx} = \frac{2 f \rho_m u_M^2}{D} + \rho_m g\sin\theta

    C_0 = 1.2 (Zuber & Findlay 1965, for bubbly flow in round tubes), u_inf from
    :func:`harmathy_rise_velocity` (Harmathy 1960) projected on the pipe axis by sin(theta)
    (as in Barnea 1987, from memory; no swarm correction). Friction from
    :func:`mixture_friction` at the in-situ holdup. Validity: upward bubbly flow, void < 0.25
    (TBD80), D above the TBD80 minimum diameter.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> H, dp = bubble_flow(make_conditions(vsl=1.0, vsg=0.1, D=0.1, theta=torch.pi / 2))
    >>> round(float(H), 3)  # 1 - 0.1 / (1.2 * 1.1 + 0.25)
    0.936
    """
    C0 = torch.full_like(cond.vm, C0_BUBBLE)
    H = drift_flux_holdup(cond, C0, harmathy_rise_velocity(cond) * torch.sin(cond.theta))
    return H, _with_gravity(cond, H, mixture_friction(cond, H))
