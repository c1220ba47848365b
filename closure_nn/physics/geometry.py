r"""Cross-section geometry of separated gas-liquid flow in a circular pipe.

Two configurations, both described by one dimensionless unknown ``frac``:

* **stratified** (Taitel & Dukler 1976, AIChE J. 22(1):47-55, Fig. 2 and Appendix):
  ``frac = h/D``, liquid layer of height h at the bottom, flat interface.
  With the wetted angle :math:`\beta = 2\arccos(1 - 2h/D)`:

  .. math::
     A_L = \tfrac{D^2}{8}(\beta - \sin\beta),\quad S_L = \tfrac{D\beta}{2},\quad
     S_i = D\sin\tfrac{\beta}{2},\quad A_G = A - A_L,\quad S_G = \pi D - S_L

* **annular** (uniform film, e.g. Wallis 1969, *One-dimensional Two-phase Flow*, ch. 11):
  ``frac = delta/D``, film of thickness delta on the whole wall, gas core of diameter D - 2 delta:

  .. math::
     A_L = \pi D^2(\tilde\delta - \tilde\delta^2),\quad A_G = \tfrac{\pi}{4}(D-2\delta)^2,\quad
     S_L = \pi D,\quad S_G = 0,\quad S_i = \pi (D - 2\delta)

Hydraulic diameters follow Agrawal et al. (1973) as used by Taitel & Dukler (1976):
D_L = 4 A_L / S_L (liquid as an open channel), D_G = 4 A_G / (S_G + S_i) (gas as a closed duct).
In both configurations dA_L/d(frac D) = S_i.

Units: D [m], areas [m2], perimeters [m].
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import torch

from .implicit import attach_implicit_grad
from .vocabulary import CONFIG_ANNULAR, CONFIG_STRATIFIED

#: the separated configurations (the one vocabulary in physics/vocabulary.py; the short names are
#: this module's, as the configuration ``kind`` of a geometry)
STRATIFIED = CONFIG_STRATIFIED
ANNULAR = CONFIG_ANNULAR
#: upper bound of ``frac`` for each configuration (h/D < 1, delta/D < 1/2)
FRAC_MAX = {STRATIFIED: 1.0, ANNULAR: 0.5}


@dataclass(frozen=True)
class SeparatedGeometry:
    """Areas [m2] and perimeters [m] of a separated-flow cross section (shape ``(*batch)``).

    Derived quantities (hydraulic diameters, area) are computed once per object and cached."""

    kind: str
    frac: torch.Tensor  # h/D (stratified) or delta/D (annular) [-]
    D: torch.Tensor
    A_L: torch.Tensor
    A_G: torch.Tensor
    S_L: torch.Tensor
    S_G: torch.Tensor
    S_i: torch.Tensor

    @cached_property
    def area(self) -> torch.Tensor:
        return self.A_L + self.A_G

    @cached_property
    def D_L(self) -> torch.Tensor:
        """Liquid hydraulic diameter 4 A_L / S_L [m]."""
        return 4 * self.A_L / self.S_L

    @cached_property
    def D_G(self) -> torch.Tensor:
        """Gas hydraulic diameter 4 A_G / (S_G + S_i) [m]."""
        return 4 * self.A_G / (self.S_G + self.S_i)

    @cached_property
    def liquid_fraction(self) -> torch.Tensor:
        """Share of the cross section occupied by the liquid layer or film, A_L / A [-]."""
        return self.A_L / self.area

    @property
    def dAL_dh(self) -> torch.Tensor:
        """d A_L / d h = S_i [m] (h the layer height or film thickness)."""
        return self.S_i


def stratified(h_D: torch.Tensor, D: torch.Tensor) -> SeparatedGeometry:
    """Stratified geometry from the liquid height ratio h/D in (0, 1) [-] and diameter D [m].

    Source: Taitel & Dukler (1976), AIChE J. 22(1):47-55, Appendix.

    >>> g = stratified(torch.tensor(0.5, dtype=torch.float64), torch.tensor(1.0, dtype=torch.float64))
    >>> round(float(g.A_L / g.area), 12), round(float(g.S_i), 12), round(float(g.S_L), 12)
    (0.5, 1.0, 1.570796326795)
    """
    beta = 2 * torch.acos((1 - 2 * h_D).clamp(-1.0, 1.0))
    A_L = D**2 / 8 * (beta - torch.sin(beta))
    A = torch.pi * D**2 / 4
    S_L = D * beta / 2
    return SeparatedGeometry(
        kind=STRATIFIED, frac=h_D, D=D, A_L=A_L, A_G=A - A_L, S_L=S_L,
        S_G=torch.pi * D - S_L, S_i=D * torch.sin(beta / 2),
    )


def annular(delta_D: torch.Tensor, D: torch.Tensor) -> SeparatedGeometry:
    """Uniform annular-film geometry from delta/D in (0, 1/2) [-] and diameter D [m].

    Source: Wallis (1969), *One-dimensional Two-phase Flow*, McGraw-Hill, sec. 11.

    >>> g = annular(torch.tensor(0.05, dtype=torch.float64), torch.tensor(0.1, dtype=torch.float64))
    >>> round(float(g.A_L / g.area), 6)  # 1 - (1 - 2*0.05)^2 = 0.19
    0.19
    """
    A = torch.pi * D**2 / 4
    core = 1 - 2 * delta_D
    A_G = A * core**2
    return SeparatedGeometry(
        kind=ANNULAR, frac=delta_D, D=D, A_L=A - A_G, A_G=A_G, S_L=torch.pi * D,
        S_G=torch.zeros_like(A), S_i=torch.pi * D * core,
    )


def separated(kind: str, frac: torch.Tensor, D: torch.Tensor) -> SeparatedGeometry:
    """Dispatch to :func:`stratified` or :func:`annular` by ``kind``."""
    if kind == STRATIFIED:
        return stratified(frac, D)
    if kind == ANNULAR:
        return annular(frac, D)
    raise ValueError(f"unknown separated-flow geometry {kind!r}; expected 'stratified' or 'annular'")


def _segment_fraction(beta: torch.Tensor) -> torch.Tensor:
    return (beta - torch.sin(beta)) / (2 * torch.pi)


def h_from_holdup(holdup: torch.Tensor) -> torch.Tensor:
    r"""Invert the stratified geometry: h/D [-] from the liquid area fraction A_L/A [-].

    Solves :math:`(\beta - \sin\beta)/(2\pi) = A_L/A` for the wetted angle by vectorised
    bisection (60 halvings of [0, 2 pi], error < 1e-16) and returns
    :math:`h/D = (1 - \cos(\beta/2))/2`. Differentiable through the implicit function theorem.

    >>> round(float(h_from_holdup(torch.tensor(0.5, dtype=torch.float64))), 12)
    0.5
    """
    H = holdup.detach().to(torch.float64)
    lo = torch.zeros_like(H)
    hi = torch.full_like(H, 2 * torch.pi)
    for _ in range(60):
        mid = (lo + hi) / 2
        below = _segment_fraction(mid) < H
        lo = torch.where(below, mid, lo)
        hi = torch.where(below, hi, mid)
    beta = attach_implicit_grad((lo + hi) / 2, lambda b: _segment_fraction(b) - holdup)
    return (1 - torch.cos(beta / 2)) / 2
