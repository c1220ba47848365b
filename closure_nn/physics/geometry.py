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
    """Cross section of separated flow (shape ``(*batch)``), stored dimensionless: areas as shares
    of the pipe area A, perimeters per unit diameter D. A level-only quantity (``a_L``, ``s_L``...)
    keeps the shape of ``frac``, so a grid of trial levels shared by many states is computed once
    and broadcast against the states' D.

    Dimensional areas [m2], perimeters [m] and hydraulic diameters [m] are derived on first use and
    cached."""

    kind: str
    frac: torch.Tensor  # h/D (stratified) or delta/D (annular) [-]
    D: torch.Tensor  # pipe diameter [m]
    a_L: torch.Tensor  # A_L / A [-]
    a_G: torch.Tensor  # A_G / A [-]
    s_L: torch.Tensor  # S_L / D [-]
    s_G: torch.Tensor  # S_G / D [-]
    s_i: torch.Tensor  # S_i / D [-]

    @cached_property
    def area(self) -> torch.Tensor:
        """Pipe cross-section A = pi D^2 / 4 [m2]."""
        return torch.pi * self.D**2 / 4

    @cached_property
    def A_L(self) -> torch.Tensor:
        """Liquid layer or film area [m2]."""
        return self.area * self.a_L

    @cached_property
    def A_G(self) -> torch.Tensor:
        """Gas (core) area [m2]."""
        return self.area * self.a_G

    @cached_property
    def S_L(self) -> torch.Tensor:
        """Liquid-wetted perimeter [m]."""
        return self.D * self.s_L

    @cached_property
    def S_G(self) -> torch.Tensor:
        """Gas-wetted perimeter [m]."""
        return self.D * self.s_G

    @cached_property
    def S_i(self) -> torch.Tensor:
        """Interface width (stratified) or perimeter (annular) [m]."""
        return self.D * self.s_i

    @cached_property
    def d_L(self) -> torch.Tensor:
        """Liquid hydraulic diameter per pipe diameter, D_L / D = pi a_L / s_L [-]."""
        return torch.pi * self.a_L / self.s_L

    @cached_property
    def d_G(self) -> torch.Tensor:
        """Gas hydraulic diameter per pipe diameter, D_G / D = pi a_G / (s_G + s_i) [-]."""
        return torch.pi * self.a_G / (self.s_G + self.s_i)

    @cached_property
    def D_L(self) -> torch.Tensor:
        """Liquid hydraulic diameter 4 A_L / S_L [m]."""
        return self.D * self.d_L

    @cached_property
    def D_G(self) -> torch.Tensor:
        """Gas hydraulic diameter 4 A_G / (S_G + S_i) [m]."""
        return self.D * self.d_G

    @property
    def liquid_fraction(self) -> torch.Tensor:
        """Share of the cross section occupied by the liquid layer or film, A_L / A [-]."""
        return self.a_L

    @property
    def dAL_dh(self) -> torch.Tensor:
        """d A_L / d h = S_i [m] (h the layer height or film thickness)."""
        return self.S_i


def stratified(h_D: torch.Tensor, D: torch.Tensor) -> SeparatedGeometry:
    """Stratified geometry from the liquid height ratio h/D in (0, 1) [-] and diameter D [m].

    Source: Taitel & Dukler (1976), AIChE J. 22(1):47-55, Appendix (A_L/A = (beta - sin beta) / (2 pi),
    S_L/D = beta/2, S_i/D = sin(beta/2)).

    >>> g = stratified(torch.tensor(0.5, dtype=torch.float64), torch.tensor(1.0, dtype=torch.float64))
    >>> round(float(g.A_L / g.area), 12), round(float(g.S_i), 12), round(float(g.S_L), 12)
    (0.5, 1.0, 1.570796326795)
    """
    beta = 2 * torch.acos((1 - 2 * h_D).clamp(-1.0, 1.0))
    a_L = (beta - torch.sin(beta)) / (2 * torch.pi)
    s_L = beta / 2
    return SeparatedGeometry(
        kind=STRATIFIED, frac=h_D, D=D, a_L=a_L, a_G=1 - a_L, s_L=s_L,
        s_G=torch.pi - s_L, s_i=torch.sin(s_L),
    )


def annular(delta_D: torch.Tensor, D: torch.Tensor) -> SeparatedGeometry:
    """Uniform annular-film geometry from delta/D in (0, 1/2) [-] and diameter D [m].

    Source: Wallis (1969), *One-dimensional Two-phase Flow*, McGraw-Hill, sec. 11.

    >>> g = annular(torch.tensor(0.05, dtype=torch.float64), torch.tensor(0.1, dtype=torch.float64))
    >>> round(float(g.A_L / g.area), 6)  # 1 - (1 - 2*0.05)^2 = 0.19
    0.19
    """
    core = 1 - 2 * delta_D
    a_G = core**2
    return SeparatedGeometry(
        kind=ANNULAR, frac=delta_D, D=D, a_L=1 - a_G, a_G=a_G, s_L=torch.full_like(core, torch.pi),
        s_G=torch.zeros_like(core), s_i=torch.pi * core,
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
