r"""Flow-pattern classification of a batch of gas-liquid pipe-flow states.

Two published mechanistic maps, evaluated in dimensional form so that they use whatever
closure produced the stratified equilibrium:

* **Taitel & Dukler (1976)**, AIChE J. 22(1):47-55, doi:10.1002/aic.690220105 (TD76), for
  horizontal, downward and mildly upward flow (theta < ``theta_steep``). Every criterion is
  evaluated at the stratified equilibrium *of the closure* (``strat.state``: u_L, u_G, A_G,
  S_i = dA_L/dh, h/D; ``strat.friction.f_wl``). With the TD76 Blasius closure and a smooth
  interface this is the published map; a learned closure moves its boundaries through the
  equilibrium it predicts. TD76 wrote the criteria with dimensionless groups (F, K, T against
  X); the dimensional forms below are the same inequalities before non-dimensionalisation, with
  g cos(theta) in every gravity term as TD76 do for near-horizontal pipes.
* **Taitel, Barnea & Dukler (1980)**, AIChE J. 26(3):345-354, doi:10.1002/aic.690260304
  (TBD80), for steep upward flow (theta >= ``theta_steep``), with the sin(theta) factor of the
  bubble rise velocity in the bubble-to-slug line as generalised by Barnea (1987),
  Int. J. Multiphase Flow 13(1):1-12 (from memory). Churn flow counts as ``intermittent``.

Decision tree (codes from :data:`closure_nn.physics.vocabulary.CODE`):

1. vsg <= 0 -> ``single_phase_liquid`` (also when both rates are zero); vsl <= 0 < vsg ->
   ``single_phase_gas``.
2. theta >= theta_steep (default 20 deg, our choice), or no stratified equilibrium was found
   (``strat.found`` False): TBD80 criteria only, which need no equilibrium --
   annular if :func:`tbd_annular_vsg` is reached; else dispersed bubble if u_M reaches
   :func:`tbd_dispersed_vm` and the no-slip void vsg/u_M < 0.52; else bubble if the pipe is
   wide enough (:func:`tbd_bubble_min_diameter`), theta >= ``theta_bubble`` and the void
   fraction is below 0.25 (:func:`tbd_bubble_slug_vsl`); else intermittent.
   Choosing an angle threshold is ours: Barnea (1987) found stratified flow only at small
   upward inclinations (from memory), and the TD76 criteria lose their meaning as
   cos(theta) -> 0. Bubble flow needs steep pipes because bubbles otherwise migrate to the top
   wall and coalesce (TBD80/Barnea 1987, qualitative, from memory); we require
   theta >= 60 deg (our choice) instead of Barnea's migration criterion.
3. Otherwise TD76: stratified if Kelvin-Helmholtz stable (:func:`kh_gas_velocity`), then
   wavy or smooth by Jeffreys' sheltering (:func:`wavy_gas_velocity`); if unstable,
   h/D >= 0.5 -> intermittent unless dispersed bubble (:func:`td_dispersed_liquid_velocity`),
   h/D < 0.5 -> annular. Downward flow uses the same TD76 criteria with the inclination in the
   equilibrium and cos(theta) in the gravity terms; TD76 intended them for small angles only.

Validity: TD76 near-horizontal pipes, Newtonian fluids, the mechanistic assumptions of the
paper (long-wave inviscid Kelvin-Helmholtz, sheltering coefficient s = 0.01); TBD80 vertical
upward air-water-like systems, D ~ 2.5-5 cm in their data (from memory).
"""
from __future__ import annotations

import math

import torch

from .conditions import Conditions
from .geometry import STRATIFIED
from .holdup_roots import SeparatedSolution
from .local_state import LocalState
from .vocabulary import (
    ANNULAR, BUBBLE, CODE, DISPERSED_BUBBLE, INTERMITTENT, SINGLE_PHASE_GAS, SINGLE_PHASE_LIQUID,
    STRATIFIED_SMOOTH, STRATIFIED_WAVY,
)

#: inclination [rad] from which upward flow is classified by TBD80 (our choice, see module doc)
THETA_STEEP = math.radians(20.0)
#: smallest inclination [rad] at which the bubble pattern is allowed (our choice)
THETA_BUBBLE = math.radians(60.0)
#: Jeffreys sheltering coefficient used by TD76 for the smooth/wavy transition [-]
S_WAVE_TD76 = 0.01
_TINY = 1e-300


def kh_gas_velocity(cond: Conditions, s: LocalState) -> torch.Tensor:
    r"""Gas velocity at which a stratified layer becomes Kelvin-Helmholtz unstable [m/s].

    .. math::
        u_{G,KH} = \left(1 - \frac{h}{D}\right)
        \sqrt{\frac{(\rho_L - \rho_G)\, g\cos\theta\, A_G}{\rho_G\, dA_L/dh}}

    Stratified flow is stable while u_G < u_G,KH (u_G the in-situ gas velocity of the
    equilibrium). Source: Taitel & Dukler (1976), the finite-wave Kelvin-Helmholtz criterion
    with the empirical factor C_2 = 1 - h/D; equivalent to their F^2 [u_G~^2 dA_L~/dh~ /
    (C_2^2 A_G~)] >= 1. cos(theta) is clamped at zero. Validity: near-horizontal stratified
    flow. Shapes: ``(*batch)``.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> from closure_nn.physics.local_state import local_state
    >>> c = make_conditions(vsl=0.01, vsg=1.0, D=0.05)
    >>> u = kh_gas_velocity(c, local_state(c, torch.tensor(0.5, dtype=torch.float64), 'stratified'))
    >>> round(float(u), 3)  # 0.5 * sqrt(996.8 g (A/2) / (1.2 D))
    6.324
    """
    cos = torch.cos(cond.theta).clamp_min(0.0)
    drho = (cond.rhol - cond.rhog).clamp_min(0.0)
    ratio = drho * cond.g * cos * s.geom.A_G / (cond.rhog * s.geom.dAL_dh.clamp_min(_TINY))
    return (1 - s.geom.frac) * torch.sqrt(ratio)


def wavy_gas_velocity(cond: Conditions, s: LocalState, s_wave: float = S_WAVE_TD76) -> torch.Tensor:
    r"""Gas velocity above which wind generates waves on a stratified layer [m/s].

    .. math::
        u_{G,w} = \sqrt{\frac{4\,\mu_L (\rho_L - \rho_G)\, g\cos\theta}{s\,\rho_L\,\rho_G\,u_L}}

    Wavy when u_G >= u_G,w. Source: Taitel & Dukler (1976), Jeffreys' sheltering mechanism
    with sheltering coefficient s = 0.01 (their value); dimensionless form K >= 2 /
    (sqrt(u_L~) u_G~ sqrt(s)). u_L, u_G are the in-situ velocities of the equilibrium.
    Validity: stratified flow, low-viscosity liquids (TD76). Shapes ``(*batch)``.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> from closure_nn.physics.local_state import local_state
    >>> c = make_conditions(vsl=0.05, vsg=1.0, D=0.05)
    >>> s = local_state(c, torch.tensor(0.5, dtype=torch.float64), 'stratified')  # u_L = 0.1 m/s
    >>> round(float(wavy_gas_velocity(c, s)), 3)  # sqrt(4e-3 * 996.8 g / (0.01 * 998 * 1.2 * 0.1))
    5.714
    """
    cos = torch.cos(cond.theta).clamp_min(0.0)
    drho = (cond.rhol - cond.rhog).clamp_min(0.0)
    num = 4 * cond.mul * drho * cond.g * cos
    den = s_wave * cond.rhol * cond.rhog * s.u_L.abs().clamp_min(_TINY)
    return torch.sqrt(num / den)


def td_dispersed_liquid_velocity(cond: Conditions, s: LocalState, f_wl: torch.Tensor) -> torch.Tensor:
    r"""Liquid velocity above which turbulence disperses the gas into bubbles [m/s] (TD76).

    .. math::
        u_{L,DB} = \sqrt{\frac{4\,A_G\, g\cos\theta\,(1 - \rho_G/\rho_L)}{S_i\, f_{WL}}}

    Dispersed bubble when u_L >= u_L,DB. Derivation (Taitel & Dukler 1976): turbulent
    fluctuations :math:`\tfrac12\rho_L v'^2 S_i` with :math:`v' = u_L\sqrt{f_{WL}/2}` overcome
    buoyancy :math:`(\rho_L - \rho_G) g\cos\theta A_G` per unit length; their dimensionless
    form is T^2 >= 8 A_G~ / (S_i~ u_L~^2 (u_L~ D_L~)^-n). f_WL is the closure's Fanning liquid
    wall factor at the equilibrium, so a learned closure moves this boundary. Validity: applied
    only where h/D >= 0.5 (TD76). Shapes ``(*batch)``.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> from closure_nn.physics.local_state import local_state
    >>> c = make_conditions(vsl=1.0, vsg=1.0, D=0.05)
    >>> s = local_state(c, torch.tensor(0.5, dtype=torch.float64), 'stratified')
    >>> round(float(td_dispersed_liquid_velocity(c, s, torch.tensor(0.005, dtype=torch.float64))), 3)
    12.404
    """
    cos = torch.cos(cond.theta).clamp_min(0.0)
    buoy = (1 - cond.rhog / cond.rhol).clamp_min(0.0)
    num = 4 * s.geom.A_G * cond.g * cos * buoy
    return torch.sqrt(num / (s.geom.S_i * f_wl).clamp_min(_TINY))


def tbd_bubble_min_diameter(cond: Conditions) -> torch.Tensor:
    r"""Smallest pipe diameter in which bubble flow exists in vertical upflow [m] (TBD80).

    .. math:: D_{min} = 19\sqrt{\frac{(\rho_L - \rho_G)\,\sigma}{\rho_L^2\, g}}

    Below it the Taylor bubble rises slower than small bubbles, which catch up and coalesce.
    Source: Taitel, Barnea & Dukler (1980). About 5.2 cm for air-water (doctest).

    >>> from closure_nn.physics.conditions import make_conditions
    >>> round(float(tbd_bubble_min_diameter(make_conditions(vsl=1.0, vsg=0.1, D=0.1))), 4)
    0.0515
    """
    drho = (cond.rhol - cond.rhog).clamp_min(0.0)
    return 19 * torch.sqrt(drho * cond.sigma / (cond.rhol**2 * cond.g))


def tbd_bubble_slug_vsl(cond: Conditions) -> torch.Tensor:
    r"""Superficial liquid velocity above which the flow stays bubbly, void < 0.25 [m/s].

    .. math::
        v_{SL,BS} = 3\,v_{SG} - 1.15\left[\frac{g(\rho_L - \rho_G)\sigma}{\rho_L^2}\right]^{1/4}\sin\theta

    Bubble when vsl >= v_SL,BS. From u_G = u_L + u_0 with the Harmathy (1960) rise velocity
    u_0 = 1.53 [g Drho sigma / rho_L^2]^(1/4) and transition at void 0.25 (0.75 x 1.53 = 1.15).
    Source: Taitel, Barnea & Dukler (1980); the sin(theta) factor as in Barnea (1987)
    (from memory). Validity: upward flow, D above :func:`tbd_bubble_min_diameter`.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> c = make_conditions(vsl=1.0, vsg=0.1, D=0.1, theta=torch.pi / 2)
    >>> round(float(tbd_bubble_slug_vsl(c)), 4)  # 0.3 - 1.15 (g 0.072 / 998)^0.25
    0.1125
    """
    drho = (cond.rhol - cond.rhog).clamp_min(0.0)
    u = (cond.g * drho * cond.sigma / cond.rhol**2) ** 0.25
    return 3.0 * cond.vsg - 1.15 * u * torch.sin(cond.theta)


def tbd_dispersed_vm(cond: Conditions) -> torch.Tensor:
    r"""Mixture velocity above which turbulence keeps the gas finely dispersed [m/s] (TBD80).

    .. math::
        v_{SL} + v_{SG} = 4.0\,\frac{D^{0.429}\,(\sigma/\rho_L)^{0.089}}{\nu_L^{0.072}}
        \left(\frac{g(\rho_L - \rho_G)}{\rho_L}\right)^{0.446}

    The exponents are dimensionally consistent (m/s) only with the gravity group in the
    numerator. Dispersed bubble also needs a void fraction below 0.52 (closest packing of the
    bubbles), checked in :func:`classify`. Source: Taitel, Barnea & Dukler (1980), from a
    Hinze (1955) maximum stable bubble size in turbulence; about 3.5 m/s for air-water in a
    5 cm pipe (doctest). Validity: vertical upflow, low-viscosity liquids.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> round(float(tbd_dispersed_vm(make_conditions(vsl=1.0, vsg=0.1, D=0.05))), 2)
    3.54
    """
    drho = (cond.rhol - cond.rhog).clamp_min(0.0)
    nu = cond.mul / cond.rhol
    return (4.0 * cond.D**0.429 * (cond.sigma / cond.rhol) ** 0.089 / nu**0.072
            * (cond.g * drho / cond.rhol) ** 0.446)


def tbd_annular_vsg(cond: Conditions) -> torch.Tensor:
    r"""Superficial gas velocity above which the gas lifts the largest droplets: annular [m/s].

    .. math:: v_{SG,A} = 3.1\,\frac{\left[\sigma g (\rho_L - \rho_G)\right]^{1/4}}{\sqrt{\rho_G}}

    Annular when vsg >= v_SG,A. Source: Taitel, Barnea & Dukler (1980) (Kutateladze number
    3.1); about 15 m/s for air-water at 1 atm (doctest). Validity: vertical upflow; applied
    unchanged in steep inclined upflow (our choice).

    >>> from closure_nn.physics.conditions import make_conditions
    >>> round(float(tbd_annular_vsg(make_conditions(vsl=0.1, vsg=10.0, D=0.05))), 2)
    14.58
    """
    drho = (cond.rhol - cond.rhog).clamp_min(0.0)
    return 3.1 * (cond.sigma * cond.g * drho) ** 0.25 / torch.sqrt(cond.rhog)


def _tbd_codes(cond: Conditions, theta_bubble: float) -> torch.Tensor:
    """TBD80 upward-flow pattern codes (no equilibrium needed); see module docstring."""
    vm = cond.vm
    void_ns = cond.vsg / vm.clamp_min(_TINY)  # no-slip void fraction
    annular = cond.vsg >= tbd_annular_vsg(cond)
    dispersed = (vm >= tbd_dispersed_vm(cond)) & (void_ns < 0.52)
    bubble = ((cond.D > tbd_bubble_min_diameter(cond)) & (cond.theta >= theta_bubble)
              & (cond.vsl >= tbd_bubble_slug_vsl(cond)))
    code = torch.full(cond.shape, CODE[INTERMITTENT], dtype=torch.int64)
    code = torch.where(bubble, CODE[BUBBLE], code)
    code = torch.where(dispersed, CODE[DISPERSED_BUBBLE], code)
    return torch.where(annular, CODE[ANNULAR], code)


def _td_codes(cond: Conditions, strat: SeparatedSolution, s_wave: float) -> torch.Tensor:
    """TD76 codes at the closure's stratified equilibrium; see module docstring."""
    s = strat.state
    stable = s.u_G < kh_gas_velocity(cond, s)
    wavy = s.u_G >= wavy_gas_velocity(cond, s, s_wave)
    dispersed = s.u_L >= td_dispersed_liquid_velocity(cond, s, strat.friction.f_wl)
    thick = s.geom.frac >= 0.5
    non_strat = torch.where(thick, torch.where(dispersed, CODE[DISPERSED_BUBBLE], CODE[INTERMITTENT]),
                            torch.full_like(cond.vsl, CODE[ANNULAR], dtype=torch.int64))
    strat_code = torch.where(wavy, CODE[STRATIFIED_WAVY], CODE[STRATIFIED_SMOOTH])
    return torch.where(stable, strat_code, non_strat)


def classify(
    cond: Conditions, strat: SeparatedSolution, s_wave: float = S_WAVE_TD76,
    theta_steep: float = THETA_STEEP, theta_bubble: float = THETA_BUBBLE,
) -> torch.Tensor:
    """Flow-pattern code (int64, shape ``(B,)``) of every state; codes of ``vocabulary.CODE``.

    Parameters
    ----------
    cond : Conditions, batch ``(B,)``
    strat : SeparatedSolution
        The stratified (``kind='stratified'``) equilibrium of the closure for ``cond``, from
        :func:`closure_nn.physics.holdup_roots.solve_separated`. Where ``strat.found`` is False
        only the equilibrium-free TBD80 criteria are used (module docstring, step 2).
    s_wave : float
        Jeffreys sheltering coefficient [-] of the smooth/wavy transition (TD76: 0.01).
    theta_steep, theta_bubble : float
        Inclinations [rad] from which upward flow follows TBD80, and from which bubble flow is
        allowed (defaults 20 and 60 deg, our choices).

    The decision tree, equations and sources are in the module docstring. No gradients flow
    through the (discrete) result.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> from closure_nn.physics.holdup_roots import solve_separated
    >>> from closure_nn.closures.baseline import BaselineClosure
    >>> from closure_nn.physics.vocabulary import PATTERNS
    >>> c = make_conditions(vsl=[0.01, 0.3, 0.1, 4.0], vsg=[0.5, 1.0, 30.0, 0.1], D=0.05)
    >>> sol = solve_separated(c, BaselineClosure('taitel_dukler', 'smooth'))
    >>> [PATTERNS[int(k)] for k in classify(c, sol)]
    ['stratified_smooth', 'intermittent', 'annular', 'dispersed_bubble']
    """
    if strat.state.kind != STRATIFIED:
        raise ValueError(
            f"classify needs the stratified equilibrium (solve_separated(..., kind='stratified')), "
            f"got a {strat.state.kind!r} solution")
    if tuple(strat.frac.shape) != tuple(cond.shape):
        raise ValueError(f"conditions have batch shape {tuple(cond.shape)} but the separated "
                         f"solution has {tuple(strat.frac.shape)}")
    with torch.no_grad():
        code = torch.where(strat.found, _td_codes(cond, strat, s_wave), CODE[INTERMITTENT])
        use_tbd = (cond.theta >= theta_steep) | ~strat.found
        code = torch.where(use_tbd, _tbd_codes(cond, theta_bubble), code)
        code = torch.where((cond.vsl <= 0) & (cond.vsg > 0), CODE[SINGLE_PHASE_GAS], code)
        code = torch.where(cond.vsg <= 0, CODE[SINGLE_PHASE_LIQUID], code)
    return code.to(torch.int64)
