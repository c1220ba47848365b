r"""Flow-pattern classification of a batch of gas-liquid pipe-flow states, -90 to +90 deg.

Published mechanistic criteria, evaluated in dimensional form; those about a stratified layer
use whatever closure produced the stratified equilibrium:

* **Taitel & Dukler (1976)**, AIChE J. 22(1):47-55, doi:10.1002/aic.690220105 (TD76):
  Kelvin-Helmholtz stability of the stratified layer (:func:`kh_gas_velocity`), smooth/wavy
  (:func:`wavy_gas_velocity`), and, near horizontal, intermittent vs annular by the level
  h/D = 0.5 and dispersed bubble by turbulence (:func:`td_dispersed_liquid_velocity`). Every
  criterion is evaluated at the stratified equilibrium *of the closure* (``strat.state``: u_L,
  u_G, A_G, S_i = dA_L/dh, h/D; ``strat.friction.f_wl``), with g cos(theta) in every gravity term
  as TD76 do. With the TD76 Blasius closure and a smooth interface this is the published map.
  Barnea, Shoham, Taitel & Dukler (1980), Int. J. Multiphase Flow 6:217-225, compared it with
  air-water data in horizontal and inclined pipes up to +-10 deg and found it good (from memory).
* **Taitel, Barnea & Dukler (1980)**, AIChE J. 26(3):345-354, doi:10.1002/aic.690260304
  (TBD80), vertical upflow, extended to inclined upflow by Barnea, Shoham, Taitel & Dukler
  (1985), Chem. Eng. Sci. 40(1):131-136 with the sin(theta) factor of the bubble rise velocity in
  the bubble-to-slug line (BSTD85, from memory): the smallest pipe with bubble flow, the
  bubble/slug line (void 0.25) and the annular line are used in steep upflow; TBD80's dispersed
  line (:func:`tbd_dispersed_vm`) is kept as a published vertical reference only (Barnea's 1986
  dispersed-bubble criterion replaces it at every inclination, as in B87). Churn counts as
  ``intermittent``.
* **Barnea (1986, 1987)** and **Barnea, Shoham & Taitel (1982)** (BST82), the unified criteria
  and downward flow: :mod:`closure_nn.physics.transitions_unified` (dispersed bubble, annular film
  stability and blockage, bubble migration, stratified to annular and smooth to wavy in downward
  pipes).

Decision tree (codes from :data:`closure_nn.physics.vocabulary.CODE`; theta + upward). Every
criterion is applied only inside the inclinations its source covers:

1. vsg <= 0 -> ``single_phase_liquid`` (also when both rates are zero); vsl <= 0 < vsg ->
   ``single_phase_gas``.
2. **Dispersed bubble**: Barnea (1986) (bubbles that turbulence keeps smaller than both the
   deforming size and the size that migrates to the upper wall, no-slip void < 0.52) at every
   inclination outside the TD76 band of step 4, where TD76's turbulence criterion on a
   Kelvin-Helmholtz-unstable layer decides instead (it moves with the closure's f_wl; B86 there
   lowered the agreement with the horizontal maps of TD76 and of Mandhane et al. 1974 by about
   one point on the states of benchmarks/bench_pattern_map.py).
3. **Stratified**, theta < ``theta_steep`` (20 deg; stratified upflow exists only at small upward
   angles, Barnea et al. 1985 and B87, from memory: above it the closure's thinnest layer is not
   asked, and with the Andritsos-Hanratty interface it would call thin layers under 15-25 m/s of
   gas stratified at 30-50 deg) with a stratified equilibrium of the closure: Kelvin-Helmholtz
   stable (TD76, g cos theta, the form B87 uses at every angle) -> stratified, unless in a
   downward pipe (theta < 0) the layer is fast enough to throw drops onto the upper wall (BST82,
   :func:`~closure_nn.physics.transitions_unified.bst_annular_liquid_velocity`), which makes it
   non-stratified (step 5 decides). Wavy if wind makes waves (TD76 Jeffreys criterion) or, for
   theta < 0, if gravity does (BST82 Froude number >= 1.5,
   :func:`~closure_nn.physics.transitions_unified.bst_wavy_froude`; B87 uses only the latter
   below 0 deg: we keep both mechanisms, either one makes waves); else smooth.
4. **Non-stratified near horizontal**, ``theta_down`` (-10 deg) <= theta < ``theta_steep``, with
   an equilibrium and not thrown by BST82: TD76 -- h/D >= 0.5 -> intermittent (dispersed bubble
   by TD76's turbulence criterion too), h/D < 0.5 -> annular. TD76 was compared with data to
   +-10 deg by Barnea, Shoham, Taitel & Dukler (1980) and used for low upward angles by BSTD85
   (from memory).
5. **Non-stratified elsewhere.** Steep upflow, theta >= ``theta_steep`` (BSTD85's extension of
   TBD80 to inclined upflow, from memory): annular if vsg reaches TBD80's Kutateladze line
   (:func:`tbd_annular_vsg`). Steep downflow (theta < -10 deg), layers thrown by BST82 and states
   without an equilibrium: annular if the film of Barnea's (1986) film equation is thinner than
   blockage (H_LF < 0.24) and stable. Otherwise, in upflow, ``bubble`` if the pipe is wider than
   TBD80's smallest bubble-flow pipe (:func:`tbd_bubble_min_diameter`), bubbles do not migrate
   to the upper wall (:func:`~closure_nn.physics.transitions_unified.bubble_migration_allowed`,
   B87; replaces the fixed 60 deg of earlier versions) and the void is below 0.25
   (:func:`tbd_bubble_slug_vsl`); else ``intermittent``. At -90 deg the Kelvin-Helmholtz limit is
   zero (cos theta = 0), so vertical downflow is annular (falling film), intermittent or
   dispersed bubble, as BST82 observed. B86's film criterion is not used in steep upflow: in a
   51 mm vertical air-water pipe it puts annular flow at v_SG ~ 22-24 m/s against TBD80's
   14.6 m/s, and TBD80's line is the one its authors checked against vertical data.

Interface law and the pattern decision. The Kelvin-Helmholtz limit, the smooth/wavy line, the
TD76 level and turbulence criteria and the BST82 layer velocity are all evaluated at the
closure's own stratified equilibrium, so the interfacial factor decides where stratified flow
ends: a rougher interface drags the liquid faster, the layer thins and stays stable to higher gas
rates (Andritsos & Hanratty 1987 make the same point). A learned closure therefore moves these
boundaries, and pattern observations can train it (``closure_nn.training.loss``, term
``pattern``). The baseline closure's default interface is Andritsos & Hanratty (1987), chosen for
its holdup and pressure gradient in wavy stratified flow; TD76 built their map with a smooth
interface (f_i = f_G), so the baseline's Kelvin-Helmholtz line sits at somewhat higher gas rates
than the published map. We keep one closure for holdup, pressure gradient and pattern, so the
pattern is consistent with the equilibrium the solver reports; ``BaselineClosure(interface=
'smooth')`` reproduces the TD76 map. The unified criteria of steps 2 and 5 use fixed published
friction laws and do not move with the closure; the BST82 criteria of step 3 use the closure's
layer and f_wl, so they move with it.

Validity: TD76 near-horizontal pipes (+-10 deg, BSTD80), Newtonian fluids, long-wave inviscid
Kelvin-Helmholtz, sheltering coefficient s = 0.01; TBD80/BSTD85 upward air-water-like systems,
D ~ 2.5-5 cm (from memory); Barnea (1986, 1987) and BST82 air-water, D ~ 2.5-5 cm, the whole
range of inclinations (from memory).
"""
from __future__ import annotations

import math

import torch

from .conditions import Conditions
from .geometry import STRATIFIED
from .holdup_roots import SeparatedSolution
from .local_state import LocalState
from .transitions_unified import (
    FROUDE_WAVY, barnea_annular_ok, barnea_dispersed, bst_annular_liquid_velocity, bst_wavy_froude,
    bubble_migration_allowed,
)
from .vocabulary import (
    ANNULAR, BUBBLE, CODE, DISPERSED_BUBBLE, INTERMITTENT, SINGLE_PHASE_GAS, SINGLE_PHASE_LIQUID,
    STRATIFIED_SMOOTH, STRATIFIED_WAVY,
)

#: upward inclination [rad] from which no stratified layer is considered and the steep-upflow
#: rules apply (module doc, steps 3 and 5)
THETA_STEEP = math.radians(20.0)
#: steepest downward inclination [rad] still classified by TD76 when not stratified (step 4)
THETA_DOWN = math.radians(-10.0)
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


def _bubble_rows(cond: Conditions, theta_bubble: float | None) -> torch.Tensor:
    """True where upflow bubble flow exists at these rates (module docstring, step 5): a pipe wide
    enough (TBD80), bubbles kept off the upper wall (B87, or a fixed angle ``theta_bubble``), and
    the void below 0.25 (TBD80/BSTD85)."""
    no_wall = bubble_migration_allowed(cond) if theta_bubble is None else cond.theta >= theta_bubble
    wide = cond.D > tbd_bubble_min_diameter(cond)
    return (cond.theta > 0) & wide & no_wall & (cond.vsl >= tbd_bubble_slug_vsl(cond))


def _on_rows(fn, cond: Conditions, rows: torch.Tensor) -> torch.Tensor:
    """``fn(cond)`` (a bool criterion) evaluated only on the ``rows`` of the batch; False elsewhere."""
    out = torch.zeros(rows.numel(), dtype=torch.bool)
    idx = rows.reshape(-1).nonzero(as_tuple=True)[0]
    if idx.numel():
        out[idx] = fn(cond.map(lambda t: t.reshape(-1)[idx]))
    return out.reshape(rows.shape)


def _stratified_codes(cond: Conditions, strat: SeparatedSolution, s_wave: float) -> tuple[torch.Tensor, torch.Tensor, torch.Tensor]:
    """(stable, thrown, code) at the closure's stratified equilibrium: Kelvin-Helmholtz-stable
    layers (TD76) are stratified wavy or smooth (TD76 wind waves, or BST82 gravity waves below
    0 deg), but in downward pipes ``thrown`` ones wet the upper wall (BST82); module doc, step 3."""
    s = strat.state
    stable = strat.found & (s.u_G < kh_gas_velocity(cond, s))
    down = cond.theta < 0
    wavy = (s.u_G >= wavy_gas_velocity(cond, s, s_wave)) | (down & (bst_wavy_froude(cond, s) >= FROUDE_WAVY))
    code = torch.where(wavy, CODE[STRATIFIED_WAVY], CODE[STRATIFIED_SMOOTH])
    thrown = down & (s.u_L >= bst_annular_liquid_velocity(cond, s, strat.friction.f_wl))
    return stable, thrown, code


def _td_nonstratified_codes(cond: Conditions, strat: SeparatedSolution) -> torch.Tensor:
    """TD76 codes of a Kelvin-Helmholtz-unstable layer near horizontal; module docstring, step 4."""
    s = strat.state
    dispersed = s.u_L >= td_dispersed_liquid_velocity(cond, s, strat.friction.f_wl)
    thick = s.geom.frac >= 0.5
    return torch.where(thick, torch.where(dispersed, CODE[DISPERSED_BUBBLE], CODE[INTERMITTENT]),
                       torch.full_like(cond.vsl, CODE[ANNULAR], dtype=torch.int64))


def classify(
    cond: Conditions, strat: SeparatedSolution, s_wave: float = S_WAVE_TD76,
    theta_steep: float = THETA_STEEP, theta_bubble: float | None = None,
    theta_down: float = THETA_DOWN,
) -> torch.Tensor:
    """Flow-pattern code (int64, shape ``(B,)``) of every state; codes of ``vocabulary.CODE``.

    Parameters
    ----------
    cond : Conditions, batch ``(B,)``
    strat : SeparatedSolution
        The stratified (``kind='stratified'``) equilibrium of the closure for ``cond``, from
        :func:`closure_nn.physics.holdup_roots.solve_separated`. Where ``strat.found`` is False
        only the equilibrium-free criteria are used (module docstring, steps 2 and 5).
    s_wave : float
        Jeffreys sheltering coefficient [-] of the smooth/wavy transition (TD76: 0.01).
    theta_steep : float
        Upward inclination [rad] from which no stratified layer is considered and steep-upflow
        rules apply (default 20 deg).
    theta_bubble : float or None
        None (default): bubble flow where bubbles do not migrate to the upper wall (Barnea 1987,
        :func:`~closure_nn.physics.transitions_unified.bubble_migration_allowed`); an angle [rad]:
        the fixed threshold of earlier versions (60 deg), kept for comparisons.
    theta_down : float
        Steepest downward inclination [rad] at which a non-stratified state is classified by TD76
        (default -10 deg); below it the unified criteria of Barnea (1986, 1987) decide.

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
    >>> c = make_conditions(vsl=[0.01, 1.5, 3.0], vsg=[5.0, 1.0, 0.3], D=0.05, theta=-math.pi / 2)
    >>> [PATTERNS[int(k)] for k in classify(c, solve_separated(c, BaselineClosure()))]
    ['annular', 'intermittent', 'dispersed_bubble']
    """
    if strat.state.kind != STRATIFIED:
        raise ValueError(
            f"classify needs the stratified equilibrium (solve_separated(..., kind='stratified')), "
            f"got a {strat.state.kind!r} solution")
    if tuple(strat.frac.shape) != tuple(cond.shape):
        raise ValueError(f"conditions have batch shape {tuple(cond.shape)} but the separated "
                         f"solution has {tuple(strat.frac.shape)}")
    with torch.no_grad():
        steep_up = cond.theta >= theta_steep
        layer = strat.found & ~steep_up
        stable, thrown, strat_code = _stratified_codes(cond, strat, s_wave)
        thrown = layer & stable & thrown
        stable = layer & stable & ~thrown
        near = layer & ~thrown & (cond.theta >= theta_down)
        dispersed = barnea_dispersed(cond) & ~near  # step 2 (closed form; TD76's own near horizontal)
        unified = ~steep_up & ~near & ~stable & ~dispersed  # step 5; the film equation costs a solve
        film_ok = _on_rows(barnea_annular_ok, cond, unified)
        code = torch.where(_bubble_rows(cond, theta_bubble), CODE[BUBBLE], CODE[INTERMITTENT])
        code = torch.where(film_ok | (steep_up & (cond.vsg >= tbd_annular_vsg(cond))), CODE[ANNULAR], code)
        if bool(near.any()):
            code = torch.where(near, _td_nonstratified_codes(cond, strat), code)
        code = torch.where(stable, strat_code, code)
        code = torch.where(dispersed, CODE[DISPERSED_BUBBLE], code)
        code = torch.where((cond.vsl <= 0) & (cond.vsg > 0), CODE[SINGLE_PHASE_GAS], code)
        code = torch.where(cond.vsg <= 0, CODE[SINGLE_PHASE_LIQUID], code)
    return code.to(torch.int64)
