r"""The local state of separated flow at a trial liquid level or film thickness.

A :class:`LocalState` bundles conditions, cross-section geometry and the in-situ phase
velocities and Reynolds numbers at one value of ``frac`` (h/D or delta/D). Closures receive it,
so they can be evaluated for ANY trial holdup inside the root finder, not only a measured one.

In-situ velocities (mass conservation, e.g. Taitel & Dukler 1976, eq. 2):

.. math:: u_L = \frac{(1-E)\,v_{SL} A}{A_L},\qquad u_G = \frac{(v_{SG} + E\,v_{SL}) A}{A_G}

with E the entrained liquid fraction (annular flow only; droplets travel with the gas at no
slip, so the core density is :math:`\rho_C = (\rho_G v_{SG} + \rho_L E v_{SL})/(v_{SG} + E v_{SL})`).
For stratified flow E = 0 and rho_C = rho_G.

Phase Reynolds numbers on hydraulic diameters (Taitel & Dukler 1976, eqs. 5-6):
:math:`Re_L = \rho_L u_L D_L/\mu_L`, :math:`Re_G = \rho_C u_G D_G/\mu_G`.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import torch

from .conditions import Conditions, broadcast_shape
from .geometry import ANNULAR, SeparatedGeometry, separated

_TINY = 1e-300


@dataclass(frozen=True)
class LocalState:
    """Conditions + geometry + in-situ kinematics at one trial ``frac``.

    Level-dependent fields (``u_L``, ``u_G``, Reynolds numbers) have the broadcast shape of the
    conditions and ``frac``; ``q_L``, ``q_G`` and ``rho_core`` depend on the conditions only and keep
    their shape, so that a residual on a grid of levels does per-state arithmetic once per state.
    """

    cond: Conditions
    geom: SeparatedGeometry
    entrainment: torch.Tensor  # E [-], 0 for stratified
    q_L: torch.Tensor  # superficial velocity of the liquid layer or film, (1 - E) v_SL [m/s]
    q_G: torch.Tensor  # superficial velocity of the gas (core), v_SG + E v_SL [m/s]
    u_L: torch.Tensor  # in-situ liquid (film) velocity q_L / (A_L/A) [m/s]
    u_G: torch.Tensor  # in-situ gas (core) velocity q_G / (A_G/A) [m/s]
    rho_core: torch.Tensor  # gas or gas-droplet core density [kg/m3]

    @property
    def kind(self) -> str:
        return self.geom.kind

    @cached_property
    def Re_L_parts(self) -> tuple[torch.Tensor, torch.Tensor]:
        """Liquid Reynolds number on D_L as a per-state and a per-level factor [-]:
        (rho_L q_L D / mu_L) and (D_L/D) / (A_L/A)."""
        c, g = self.cond, self.geom
        return c.rhol * c.D / c.mul * self.q_L, g.d_L / g.a_L

    @cached_property
    def Re_G_parts(self) -> tuple[torch.Tensor, torch.Tensor]:
        """Gas (core) Reynolds number on D_G as a per-state and a per-level factor [-]:
        (rho_C q_G D / mu_G) and (D_G/D) / (A_G/A)."""
        c, g = self.cond, self.geom
        return self.rho_core * c.D / c.mug * self.q_G, g.d_G / g.a_G

    @cached_property
    def Re_L(self) -> torch.Tensor:
        """Liquid Reynolds number on D_L [-], rho_L u_L D_L / mu_L."""
        state, level = self.Re_L_parts
        return state * level

    @cached_property
    def Re_G(self) -> torch.Tensor:
        """Gas (core) Reynolds number on D_G [-], rho_C u_G D_G / mu_G."""
        state, level = self.Re_G_parts
        return state * level

    @property
    def holdup(self) -> torch.Tensor:
        """Liquid holdup H_L [-]: layer or film area fraction plus entrained liquid in the core."""
        core_liquid = self.cond.rhol * 0  # zero tensor of the right shape
        if self.kind == ANNULAR:
            q_e = self.entrainment * self.cond.vsl
            core_liquid = q_e / (self.cond.vsg + q_e).clamp_min(_TINY)
        return self.geom.liquid_fraction + (1 - self.geom.liquid_fraction) * core_liquid


def local_state(cond: Conditions, frac: torch.Tensor, kind: str, entrainment: torch.Tensor | float = 0.0) -> LocalState:
    """Build the :class:`LocalState` at ``frac`` (h/D or delta/D, broadcastable to cond).

    ``entrainment`` E [-] is only used for ``kind == 'annular'``.
    """
    geom = separated(kind, frac, cond.D)
    E = torch.as_tensor(entrainment, dtype=torch.float64)
    if kind == ANNULAR:
        # terms that do not depend on frac are computed on the conditions' shape, once per state
        q_e = E * cond.vsl  # entrained liquid flux, m/s superficial
        q_L = cond.vsl - q_e
        q_G = cond.vsg + q_e
        rho_core = (cond.rhog * cond.vsg + cond.rhol * q_e) / q_G.clamp_min(_TINY)
        rho_core = torch.where(q_G > 0, rho_core, cond.rhog * torch.ones_like(rho_core))
    else:  # stratified: no entrainment, the gas alone above the layer
        E = torch.zeros((), dtype=torch.float64).expand(E.shape)
        q_L, q_G, rho_core = cond.vsl, cond.vsg, cond.rhog
    E = E.expand(broadcast_shape(E.shape, frac.shape))
    return LocalState(cond=cond, geom=geom, entrainment=E, q_L=q_L, q_G=q_G, u_L=q_L / geom.a_L,
                      u_G=q_G / geom.a_G, rho_core=rho_core)
