r"""Flow-pattern transitions of the unified model (Barnea 1986, 1987) and of downward flow (BST82).

Criteria valid over the whole range of inclinations, used by
:func:`closure_nn.physics.patterns.classify` (its module docstring has the decision tree): the
annular film and dispersed bubble need no stratified equilibrium; the BST82 criteria of a downward
layer are evaluated at the closure's own equilibrium. Every function is plain vectorised float64
torch over any batch shape ``(*batch)``; SI units; theta in rad, + upward.

Sources (the equations are written from memory of the papers, each docstring says so; the forms
of the film equation, film instability, blockage, dispersed-bubble diameters, bubble migration and
both BST82 criteria were compared, when written, with independent open implementations of B87 and
agree; tests/test_transitions_sources.py checks each against a published point, limit or line):

* Barnea, D. (1986), "Transition from annular flow and from dispersed bubble flow - unified
  models for the whole range of pipe inclinations", Int. J. Multiphase Flow 12(5):733-744,
  doi:10.1016/0301-9322(86)90048-0 (B86): annular film equation, film instability, liquid
  blockage, dispersed-bubble transition with the bubble-migration diameter.
* Barnea, D. (1987), "A unified model for predicting flow-pattern transitions for the whole range
  of pipe inclinations", Int. J. Multiphase Flow 13(1):1-12, doi:10.1016/0301-9322(87)90002-4
  (B87): the assembly of the criteria, and the existence of bubble flow in inclined upflow
  (bubbles that reach the upper wall coalesce).
* Barnea, D., Shoham, O. & Taitel, Y. (1982), "Flow pattern transition for downward inclined two
  phase flow; horizontal to vertical", Chem. Eng. Sci. 37(5):735-740, and "... for vertical
  downward two phase flow", Chem. Eng. Sci. 37(5):741-744 (BST82): stratified to annular flow in
  downward pipes when drops torn from the fast liquid layer reach the upper wall; the falling film
  of vertical downflow bridging the pipe at high liquid rates.

Superficial pressure gradients (B86), with the Fanning factor of Taitel & Dukler (1976)
:math:`f = \max(16/Re, 0.046\,Re^{-0.2})` (:func:`closure_nn.physics.friction.fanning_blasius_td`):

.. math::
    P_{SL} = \frac{2 f_{SL}\rho_L v_{SL}^2}{D},\quad P_{SG} = \frac{2 f_{SG}\rho_G v_{SG}^2}{D},\quad
    X^2 = \frac{P_{SL}}{P_{SG}},\quad Y = \frac{(\rho_L - \rho_G)\,g\sin\theta}{P_{SG}}
"""
from __future__ import annotations

import math

import torch

from .conditions import Conditions
from .friction import fanning_blasius_td
from .local_state import LocalState

#: film holdup at which the annular film bridges the pipe (B86: half of the smallest slug-body
#: holdup 0.48, from memory) [-]
H_BLOCKAGE = 0.24
#: closest packing of bubbles: no dispersed bubble flow at a no-slip void above this (TBD80, B86) [-]
VOID_PACKING = 0.52
#: bubble lift coefficient C_L and distortion coefficient gamma of the bubble-migration criterion
#: (B87; gamma 1.1-1.5 in the paper, from memory; we take the upper end, the widest bubble band)
LIFT_COEF, GAMMA_BUBBLE = 0.8, 1.5
#: Froude number u_L / (g h_L)^(1/2) above which a downward stratified layer is wavy (BST82) [-]
FROUDE_WAVY = 1.5
_TINY = 1e-300


def superficial_gradients(cond: Conditions) -> tuple[torch.Tensor, torch.Tensor]:
    r"""Frictional -dp/dx of each phase flowing alone, (P_SL, P_SG) [Pa/m] (module docstring).

    >>> from closure_nn.physics.conditions import make_conditions
    >>> psl, psg = superficial_gradients(make_conditions(vsl=0.1, vsg=15.0, D=0.05))
    >>> round(float(psl), 2), round(float(psg), 1)  # Re_SL 4990, Re_SG 50000 (Blasius)
    (3.34, 57.1)
    """
    re_l = cond.rhol * cond.vsl.abs() * cond.D / cond.mul
    re_g = cond.rhog * cond.vsg.abs() * cond.D / cond.mug
    psl = 2 * fanning_blasius_td(re_l.clamp_min(1e-12)) * cond.rhol * cond.vsl**2 / cond.D
    psg = 2 * fanning_blasius_td(re_g.clamp_min(1e-12)) * cond.rhog * cond.vsg**2 / cond.D
    return psl, psg


def _film_residual(H: torch.Tensor, psl, psg, buoy) -> torch.Tensor:
    """B86 film equation times H^3 P_SG (finite for P_SG -> 0): see :func:`barnea_film_holdup`."""
    return (1 + 75 * H) * H**2 / (1 - H) ** 2.5 * psg - psl - buoy * H**3


def barnea_film_holdup(cond: Conditions, n_grid: int = 160, n_bisect: int = 60) -> torch.Tensor:
    r"""Liquid holdup H_LF [-] of the annular film, the thinnest root of Barnea's film equation.

    .. math::
        Y = \frac{1 + 75 H_{LF}}{(1 - H_{LF})^{5/2}\,H_{LF}} - \frac{X^2}{H_{LF}^3}

    The film and core momentum balances with the film wall factor of the superficial liquid flow
    (the film's hydraulic diameter H_LF D gives Re_film = Re_SL), a core of diameter
    D (1 - H_LF)^(1/2), and Wallis's (1969) interfacial factor f_i = f_SG (1 + 300 delta/D) with
    delta/D ~ H_LF / 4. Source: Barnea (1986), the dimensionless annular-film equation (from
    memory; the derivation was redone here from the two balances and gives the same form). Solved
    multiplied by H^3 P_SG, so it stays finite at zero gas rate: F(H) = (1 + 75 H) H^2 (1 - H)^-5/2
    P_SG - P_SL - (rho_L - rho_G) g sin(theta) H^3, F(0) = -P_SL < 0 and F -> +inf as H -> 1, so a
    root always exists; the smallest is taken (grid of ``n_grid`` log-spaced points, then
    bisection). Upward flow (Y > 0) thickens the film, downward flow (Y < 0) thins it.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> c = make_conditions(vsl=0.1, vsg=20.0, D=0.05, theta=math.pi / 2)
    >>> round(float(barnea_film_holdup(c)), 3)  # vertical upflow, 5 cm air-water
    0.131
    """
    psl, psg = superficial_gradients(cond)
    buoy = (cond.rhol - cond.rhog) * cond.g * torch.sin(cond.theta)
    grid = torch.logspace(-6, math.log10(0.999), n_grid, dtype=torch.float64)
    ex = lambda t: t.unsqueeze(-1)  # noqa: E731
    F = _film_residual(grid, ex(psl), ex(psg), ex(buoy))
    pos = F > 0
    # first grid node where F > 0 (always exists: the last node is close to H = 1)
    first = torch.where(pos.any(-1), pos.to(torch.int64).argmax(-1), torch.full(psl.shape, n_grid - 1))
    first = first.clamp_min(1)
    lo, hi = grid[first - 1], grid[first]
    for _ in range(n_bisect):
        mid = 0.5 * (lo + hi)
        up = _film_residual(mid, psl, psg, buoy) > 0
        hi, lo = torch.where(up, mid, hi), torch.where(up, lo, mid)
    return 0.5 * (lo + hi)


def barnea_film_unstable(cond: Conditions, H: torch.Tensor) -> torch.Tensor:
    r"""True where the annular film of holdup H is unstable (Barnea 1986 film-instability criterion).

    .. math:: Y \ge \frac{2 - \tfrac32 H_{LF}}{H_{LF}^3\,(1 - \tfrac32 H_{LF})}\,X^2

    The film cannot be carried upward steadily: part of the liquid falls back and bridges the
    pipe. Source: Barnea (1986) (from memory). The right-hand side is the locus dY/dH = 0 of the
    film equation with the simplified core term (1 - H)^(-1/2) (checked by hand here), i.e. the
    turning point beyond which no thin film solution exists. Evaluated multiplied by H^3 P_SG.
    In downward flow (Y < 0) it never holds; there the film leaves annular flow by blockage only
    (:data:`H_BLOCKAGE`). Shapes ``(*batch)``.
    """
    psl, psg = superficial_gradients(cond)
    buoy = (cond.rhol - cond.rhog) * cond.g * torch.sin(cond.theta)
    thin = H < 2.0 / 3.0
    rhs = (2 - 1.5 * H) / (1 - 1.5 * H).clamp_min(1e-12) * psl
    return thin & (buoy * H**3 >= rhs)


def barnea_annular_ok(cond: Conditions) -> torch.Tensor:
    r"""True where annular flow is possible: a stable film thinner than blockage (Barnea 1986).

    Annular -> intermittent when the film's holdup reaches :data:`H_BLOCKAGE` = 0.24 (enough
    liquid to bridge the pipe: half the smallest slug-body holdup, 0.48) or the film is unstable
    (:func:`barnea_film_unstable`). Source: Barnea (1986); the unified model of Barnea (1987)
    uses it at every inclination (from memory). Shapes ``(*batch)``.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> c = make_conditions(vsl=[0.01, 1.0], vsg=[5.0, 5.0], D=0.05, theta=-math.pi / 2)
    >>> barnea_annular_ok(c).tolist()  # vertical downflow: falling film at low liquid rate only
    [True, False]
    """
    H = barnea_film_holdup(cond)
    return (H < H_BLOCKAGE) & ~barnea_film_unstable(cond, H)


def barnea_bubble_diameters(cond: Conditions) -> tuple[torch.Tensor, torch.Tensor, torch.Tensor]:
    r"""(d_max, d_CD, d_CB) [m] of Barnea's (1986) dispersed-bubble transition.

    .. math::
        d_{max} = \left(0.725 + 4.15\sqrt{\tfrac{v_{SG}}{u_M}}\right)\left(\frac{\sigma}{\rho_L}\right)^{0.6}
                  \left(\frac{2 f_M u_M^3}{D}\right)^{-0.4}

        d_{CD} = 2\sqrt{\frac{0.4\,\sigma}{(\rho_L - \rho_G)\,g}},\qquad
        d_{CB} = \frac38\,\frac{\rho_L}{\rho_L - \rho_G}\,\frac{f_M u_M^2}{g\,|\cos\theta|}

    d_max: the largest bubble turbulence leaves unbroken (Hinze 1955 with the Calderbank factor
    for the gas fraction); d_CD: above it bubbles deform and coalesce (Brodkey); d_CB: above it
    buoyancy beats turbulence and bubbles migrate to the upper wall (matters near horizontal;
    infinite in vertical pipes). f_M: Fanning factor of :func:`fanning_blasius_td` at
    Re_M = rho_L u_M D / mu_L. Source: Barnea (1986), also Barnea (1987) (from memory).
    Shapes ``(*batch)``.
    """
    vm = cond.vm.clamp_min(_TINY)
    drho = (cond.rhol - cond.rhog).clamp_min(_TINY)
    f_m = fanning_blasius_td((cond.rhol * vm * cond.D / cond.mul).clamp_min(1e-12))
    d_max = ((0.725 + 4.15 * torch.sqrt(cond.vsg.clamp_min(0.0) / vm)) * (cond.sigma / cond.rhol) ** 0.6
             * (2 * f_m * vm**3 / cond.D) ** -0.4)
    d_cd = 2 * torch.sqrt(0.4 * cond.sigma / (drho * cond.g))
    cos = torch.cos(cond.theta).abs().clamp_min(1e-12)
    d_cb = 0.375 * cond.rhol / drho * f_m * vm**2 / (cond.g * cos)
    return d_max, d_cd, d_cb


def barnea_dispersed(cond: Conditions) -> torch.Tensor:
    r"""True where the flow is dispersed bubble by Barnea (1986), at any inclination.

    .. math:: d_{max} < \min(d_{CD}, d_{CB}) \quad\text{and}\quad v_{SG}/u_M < 0.52

    (:func:`barnea_bubble_diameters`; 0.52 the closest packing of bubbles, TBD80). Source: Barnea
    (1986) (from memory). Shapes ``(*batch)``.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> barnea_dispersed(make_conditions(vsl=[4.0, 0.3], vsg=[0.1, 1.0], D=0.05)).tolist()
    [True, False]
    """
    d_max, d_cd, d_cb = barnea_bubble_diameters(cond)
    void = cond.vsg / cond.vm.clamp_min(_TINY)
    return (d_max < torch.minimum(d_cd, d_cb)) & (void < VOID_PACKING)


def bubble_rise_velocity(cond: Conditions) -> torch.Tensor:
    r"""Rise velocity of small deformable bubbles in stagnant liquid, Harmathy (1960) [m/s]:

    .. math:: U_0 = 1.53\left[\frac{g(\rho_L - \rho_G)\sigma}{\rho_L^2}\right]^{1/4}

    About 0.25 m/s for air-water (doctest). Source: Harmathy, T.Z. (1960), AIChE J. 6(2):281-288.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> round(float(bubble_rise_velocity(make_conditions(vsl=1.0, vsg=0.1, D=0.1))), 3)
    0.249
    """
    drho = (cond.rhol - cond.rhog).clamp_min(0.0)
    return 1.53 * (cond.g * drho * cond.sigma / cond.rhol**2) ** 0.25


def bubble_migration_allowed(cond: Conditions, lift: float = LIFT_COEF, gamma: float = GAMMA_BUBBLE) -> torch.Tensor:
    r"""True where bubbles do not reach the upper wall, so bubble flow can exist (Barnea 1987).

    .. math::
        \frac{\cos\theta}{\sin^2\theta} \le \frac34\cos 45^\circ\,\frac{U_0^2}{g}\,\frac{C_L\gamma^2}{D}

    A bubble rising at U_0 along a zigzag path (45 deg) drifts across the pipe by buoyancy while
    the liquid's lift keeps it off the wall; a bubble at the upper wall coalesces into a Taylor
    bubble, so bubble flow needs a steep pipe. U_0 from :func:`bubble_rise_velocity`, lift
    coefficient C_L = 0.8, bubble distortion coefficient gamma (1.1-1.5 in B87; we take 1.5, the
    widest bubble band). Source: Barnea (1987), the bubble-migration criterion (from memory; the
    form, with the pipe diameter D in the denominator and no further factor, agrees with two
    independent open implementations of B87 read when this was written). The critical angle is
    about 77 deg for air-water in a 25 mm pipe, 83 deg at 51 mm and 87 deg at 100 mm (doctest):
    steeper in wider pipes. Only meaningful for upward flow (theta > 0); False for theta <= 0.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> deg = torch.tensor([60.0, 85.0, 87.0, 90.0], dtype=torch.float64)
    >>> bubble_migration_allowed(make_conditions(vsl=1.0, vsg=0.1, D=0.1, theta=torch.deg2rad(deg))).tolist()
    [False, False, True, True]
    """
    sin = torch.sin(cond.theta)
    lhs = torch.cos(cond.theta).clamp_min(0.0) / (sin**2).clamp_min(_TINY)
    rhs = 0.75 * math.cos(math.pi / 4) * bubble_rise_velocity(cond) ** 2 / cond.g * lift * gamma**2 / cond.D
    return (sin > 0) & (lhs <= rhs)


def bst_annular_liquid_velocity(cond: Conditions, s: LocalState, f_wl: torch.Tensor) -> torch.Tensor:
    r"""In-situ liquid velocity from which downward stratified flow turns annular [m/s] (BST82).

    .. math:: u_{L,A} = \sqrt{\frac{g D\,(1 - h_L/D)\cos\theta}{f_L}}

    At high liquid rates in downward pipes the layer is thin and fast; drops torn from its wavy
    surface by the liquid's turbulence cross the gas space, D - h_L, and wet the upper wall, and a
    film forms around the circumference. Annular when the stratified layer's u_L >= u_L,A. f_L is
    the closure's Fanning liquid wall factor at its stratified equilibrium (BST82 and B87 used
    Taitel & Dukler's 0.046 Re^-0.2), so a learned closure moves this boundary. Source: Barnea,
    Shoham & Taitel (1982), as used by Barnea (1987) (from memory; the form, gas-space height
    1 - h_L/D and Fanning f_L, agrees with an independent open implementation of B87 read when
    this was written; earlier versions had the buoyancy factor 1 - rho_G/rho_L in place of
    1 - h_L/D). Limits: u_L,A -> 0 as theta -> -90 deg (a vertical stratified layer is a falling
    film) and as h_L -> D. Applied only for theta < 0. Shapes ``(*batch)``.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> from closure_nn.physics.local_state import local_state
    >>> c = make_conditions(vsl=0.1, vsg=1.0, D=0.05, theta=-math.pi / 3)
    >>> s = local_state(c, torch.tensor(0.1, dtype=torch.float64), 'stratified')
    >>> round(float(bst_annular_liquid_velocity(c, s, torch.tensor(0.01, dtype=torch.float64))), 3)
    4.697
    """
    cos = torch.cos(cond.theta).clamp_min(0.0)
    gas_space = (1 - s.geom.frac).clamp_min(0.0)
    return torch.sqrt(cond.g * cond.D * gas_space * cos / f_wl.clamp_min(_TINY))


def bst_wavy_froude(cond: Conditions, s: LocalState) -> torch.Tensor:
    r"""Froude number of a downward stratified layer, Fr = u_L / (g h_L)^(1/2) [-] (BST82).

    .. math:: Fr = \frac{u_L}{\sqrt{g\,h_L}} \ge 1.5 \;\Rightarrow\; \text{stratified wavy}

    In downward pipes gravity, not wind, makes the waves: roll waves form on a fast thin layer
    once its Froude number exceeds about 1.5 (:data:`FROUDE_WAVY`). Source: Barnea, Shoham &
    Taitel (1982), used for theta < 0 by Barnea (1987) (from memory; the same form and 1.5 in an
    independent open implementation of B87). h_L = (h/D) D of the equilibrium. Shapes ``(*batch)``.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> from closure_nn.physics.local_state import local_state
    >>> c = make_conditions(vsl=0.05, vsg=1.0, D=0.05, theta=-0.1)
    >>> s = local_state(c, torch.tensor(0.5, dtype=torch.float64), 'stratified')  # u_L 0.1 m/s
    >>> round(float(bst_wavy_froude(c, s)), 4)  # 0.1 / (9.80665 * 0.025) ** 0.5
    0.202
    """
    h_l = (s.geom.frac * cond.D).clamp_min(_TINY)
    return s.u_L.abs() / torch.sqrt(cond.g * h_l)
