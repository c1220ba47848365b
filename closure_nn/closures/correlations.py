r"""Published wall and interfacial friction correlations, selectable by name.

Wall correlations take the local state and a phase ('liquid' or 'gas') and return the Fanning
factor on that phase's hydraulic-diameter Reynolds number. Interfacial correlations take the
local state and the gas wall factor f_WG.
"""
from __future__ import annotations

from typing import Callable

import torch

from ..physics.friction import fanning_blasius_td, fanning_churchill
from ..physics.local_state import LocalState


def _re_eD(s: LocalState, phase: str) -> tuple[tuple[torch.Tensor, torch.Tensor], torch.Tensor]:
    """The phase's Reynolds number as (per-state, per-level) factors and roughness / D_h [-]."""
    rough = s.cond.roughness / s.cond.D
    if phase == "liquid":
        return s.Re_L_parts, rough * (1 / s.geom.d_L)
    return s.Re_G_parts, rough * (1 / s.geom.d_G)


def wall_taitel_dukler(s: LocalState, phase: str) -> torch.Tensor:
    """Taitel & Dukler (1976) smooth-wall Blasius constants, see :func:`fanning_blasius_td`. Ignores roughness."""
    return fanning_blasius_td(s.Re_L_parts if phase == "liquid" else s.Re_G_parts)


def wall_churchill(s: LocalState, phase: str) -> torch.Tensor:
    """Churchill (1977) all-regime rough wall, roughness relative to the phase hydraulic diameter."""
    Re, eD = _re_eD(s, phase)
    return fanning_churchill(Re, eD)


WALL: dict[str, Callable[[LocalState, str], torch.Tensor]] = {
    "taitel_dukler": wall_taitel_dukler,
    "churchill": wall_churchill,
}


def interface_smooth(s: LocalState, f_wg: torch.Tensor) -> torch.Tensor:
    r"""Smooth interface, :math:`f_i = f_G` (Taitel & Dukler 1976, p. 48). Stratified smooth flow."""
    return f_wg


def interface_andritsos_hanratty(
    s: LocalState, f_wg: torch.Tensor, coef: float = 15.0, u_t: float = 5.0, rhog_ref: float = 1.2
) -> torch.Tensor:
    r"""Wavy stratified interface, Andritsos & Hanratty (1987):

    .. math::
        \frac{f_i}{f_G} = 1 + 15\sqrt{h/D}\left(\frac{v_{SG}}{v_{SG,t}} - 1\right)
        \ \text{for}\ v_{SG} > v_{SG,t},\qquad v_{SG,t} = 5\ \mathrm{m/s}\,\sqrt{\rho_{G,ref}/\rho_G}

    and f_i = f_G below. Source: Andritsos, N. & Hanratty, T.J. (1987), AIChE J. 33(3):444-454
    (constants 15 and 5 m/s from memory of their eq. for f_i; rho_G,ref the gas density at
    atmospheric pressure, 1.2 kg/m3 for air). Validity: stratified flow, D = 0.025-0.095 m,
    mul 1-80 mPa s, near-atmospheric pressure. ``coef``, ``u_t`` and ``rhog_ref`` are exposed
    so that a reference closure with other constants can be built.
    """
    vt = u_t * torch.sqrt(rhog_ref / s.cond.rhog)
    excess = (s.cond.vsg / vt - 1).clamp_min(0.0)
    return f_wg * (1 + coef * torch.sqrt(s.geom.frac.clamp_min(0.0)) * excess)


def interface_wallis(s: LocalState, f_wg: torch.Tensor) -> torch.Tensor:
    r"""Annular interface, Wallis (1969): :math:`f_i = 0.005\,(1 + 300\,\delta/D)`.

    Source: Wallis, G.B. (1969), *One-dimensional Two-phase Flow*, McGraw-Hill, eq. 11.84
    (equation number from memory). Validity: annular flow with thin films, delta/D < ~0.04.
    For a stratified state ``frac`` is h/D, and the film-thickness analogue is used as is.
    """
    return 0.005 * (1 + 300 * s.geom.frac)


INTERFACE: dict[str, Callable[..., torch.Tensor]] = {
    "smooth": interface_smooth,
    "andritsos_hanratty": interface_andritsos_hanratty,
    "wallis": interface_wallis,
}


def lookup(table: dict, name: str, what: str):
    """Return ``table[name]`` or raise a ValueError listing the known names."""
    try:
        return table[name]
    except KeyError:
        raise ValueError(f"unknown {what} correlation {name!r}; known: {', '.join(sorted(table))}") from None
