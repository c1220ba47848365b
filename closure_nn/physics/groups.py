r"""Dimensionless groups of a local separated-flow state: the inputs of closures.

All groups are computed from a :class:`LocalState`, i.e. at any trial h/D (or delta/D), so a
learned closure can be evaluated inside the holdup root finder, not only at a measured state.

=============  ====================================================================  =========
name           definition                                                            source
=============  ====================================================================  =========
log10_Re_L     log10(rho_L u_L D_L / mu_L)                                            TD76 eq.5
log10_Re_G     log10(rho_G u_G D_G / mu_G)                                            TD76 eq.6
frac           h/D (stratified) or delta/D (annular)                                  TD76
Fr_L           u_L / sqrt(g D)                                                        (a)
Fr_G           sqrt(rho_G/(rho_L - rho_G)) u_G / sqrt(g D)  (densimetric)             TD76 eq.25
asinh_We_slip  asinh((u_G - u_L) sqrt(rho_G D / sigma)), i.e. asinh(+-We^1/2)          (a), (b)
log10_rho_ratio  log10(rho_G / rho_L)                                                 (a)
log10_mu_ratio   log10(mu_G / mu_L)                                                   (a)
rel_rough      roughness / D                                                          (a)
sin_theta      sin(theta)                                                             (a)
annular        1 for an annular-film state, 0 for stratified                          --
=============  ====================================================================  =========

(a) standard definitions, common practice. (b) the Weber number of the slip, We = rho_G (u_G -
u_L)^2 D / sigma, through its square root signed by the slip direction (the interfacial shear
reverses with it: a fast liquid film under slow gas, as on a steep downhill, must not look like
fast gas over a slow film), in asinh: logarithmic for large We (asinh y ~ ln 2y), analytic and of
nonzero slope at zero slip, so the closure has no kink or plateau inside the root finder there.
TD76 = Taitel & Dukler (1976), AIChE J. 22(1):47-55.
Logs use a floor of 1e-30 on their argument so that zero velocities stay finite.
"""
from __future__ import annotations

import torch

from .conditions import Conditions, broadcast_shape
from .friction import fanning_blasius_td
from .geometry import ANNULAR
from .local_state import LocalState

FEATURE_NAMES: tuple[str, ...] = (
    "log10_Re_L", "log10_Re_G", "frac", "Fr_L", "Fr_G", "asinh_We_slip",
    "log10_rho_ratio", "log10_mu_ratio", "rel_rough", "sin_theta", "annular",
)
_FLOOR = 1e-30


def _log10(x: torch.Tensor) -> torch.Tensor:
    return torch.log10(x.abs().clamp_min(_FLOOR))


def closure_features(s: LocalState) -> torch.Tensor:
    """Stack the groups of :data:`FEATURE_NAMES` into a tensor ``(*batch, len(FEATURE_NAMES))``."""
    c = s.cond
    gD = torch.sqrt(c.g * c.D)
    drho = (c.rhol - s.rho_core).clamp_min(_FLOOR)
    cols = [
        _log10(s.Re_L),
        _log10(s.Re_G),
        s.geom.frac,
        s.u_L / gD,
        torch.sqrt(s.rho_core / drho) * s.u_G / gD,
        torch.asinh((s.u_G - s.u_L) * torch.sqrt(s.rho_core * c.D / c.sigma)),
        _log10(s.rho_core / c.rhol),
        _log10(c.mug / c.mul),
        c.roughness / c.D,
        torch.sin(c.theta),
        torch.full_like(c.D, 1.0 if s.kind == ANNULAR else 0.0),
    ]
    shapes = {x.shape for x in cols}
    if len(shapes) > 1:  # a field given as a scalar or a smaller shape
        shape = broadcast_shape(*shapes)
        cols = [torch.broadcast_to(x, shape) for x in cols]
    return torch.stack(cols, dim=-1)


def superficial_pgrad(rho: torch.Tensor, mu: torch.Tensor, vs: torch.Tensor, D: torch.Tensor) -> torch.Tensor:
    r"""Frictional -dp/dx of one phase flowing alone [Pa/m]: :math:`2 f \rho v_S^2 / D`, f by
    Taitel & Dukler (1976) Blasius constants (:func:`fanning_blasius_td`)."""
    f = fanning_blasius_td(rho * vs * D / mu)
    return 2 * f * rho * vs**2 / D


def lockhart_martinelli(c: Conditions) -> tuple[torch.Tensor, torch.Tensor]:
    r"""Lockhart-Martinelli parameters X and Y as defined by Taitel & Dukler (1976), eqs. 9-10:

    .. math::
        X^2 = \frac{(dp/dx)_{SL}}{(dp/dx)_{SG}},\qquad
        Y = \frac{(\rho_L - \rho_G) g \sin\theta}{(dp/dx)_{SG}}

    with superficial frictional gradients from :func:`superficial_pgrad`. Returns (X, Y) [-].
    """
    sl = superficial_pgrad(c.rhol, c.mul, c.vsl, c.D)
    sg = superficial_pgrad(c.rhog, c.mug, c.vsg, c.D).clamp_min(_FLOOR)
    return torch.sqrt(sl / sg), (c.rhol - c.rhog) * c.g * torch.sin(c.theta) / sg
