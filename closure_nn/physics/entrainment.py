r"""Fraction of the liquid entrained as droplets in the gas core of annular flow.

The entrained fraction E [-] = (droplet mass flow) / (total liquid mass flow) feeds the
annular local state (:func:`closure_nn.physics.local_state.local_state`, ``entrainment=E``).
"""
from __future__ import annotations

import torch

from .conditions import Conditions

#: upper clamp of E [-], so that a liquid film always remains in the annular balance
E_MAX = 0.99
_FLOOR = 1e-30


def ishii_mishima(cond: Conditions) -> torch.Tensor:
    r"""Fully developed entrained fraction of Ishii & Mishima (1989):

    .. math::
        E = \tanh\!\left(7.25\times10^{-7}\, We^{1.25} Re_f^{0.25}\right),\qquad
        We = \frac{\rho_G v_{SG}^2 D}{\sigma}\left(\frac{\rho_L - \rho_G}{\rho_G}\right)^{1/3},\qquad
        Re_f = \frac{\rho_L v_{SL} D}{\mu_L}

    clamped to [0, 0.99]. Source: Ishii, M. & Mishima, K. (1989), Int. J. Heat Mass Transfer
    32(10):1835-1846 (the correlation as commonly quoted; from memory). Validity (from memory):
    air-water near 1-4 bar, D ~ 9.5-32 mm, Re_f ~ 370-6400, v_SG up to ~100 m/s; the
    entrainment-inception criterion of the paper is not applied (E is simply small there).
    Inputs SI (vsg, vsl [m/s], D [m], sigma [N/m], densities [kg/m3], mul [Pa s]); returns
    E (*batch) [-], differentiable.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> E = ishii_mishima(make_conditions(vsl=[0.05, 0.05], vsg=[1.0, 40.0], D=0.05))
    >>> float(E[0]) < 1e-3, 0.5 < float(E[1]) < 0.99
    (True, True)
    """
    drho = (cond.rhol - cond.rhog).clamp_min(0.0)
    we = cond.rhog * cond.vsg**2 * cond.D / cond.sigma * (drho / cond.rhog) ** (1.0 / 3.0)
    re_f = cond.rhol * cond.vsl.clamp_min(0.0) * cond.D / cond.mul
    E = torch.tanh(7.25e-7 * we.clamp_min(_FLOOR) ** 1.25 * re_f.clamp_min(_FLOOR) ** 0.25)
    return E.clamp(0.0, E_MAX)
