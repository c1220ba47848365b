r"""Gas properties along a line: density from the Z-form equation of state, viscosity.

.. math:: \rho_G = \frac{p\,M_G}{Z(p, T)\,R\,T}

(:func:`closure_nn.physics.conditions.gas_density`). Three ways to get Z and mu_G:

* constant ``Z`` and ``mug`` from the line YAML;
* a CoolProp fluid name (``fluid.coolprop``, optional dependency): Z and, where ``mug`` is not
  given, mu_G are tabulated once per line on a grid in (ln p, T) and interpolated bilinearly in
  torch, so the march never calls CoolProp per station;
* a fixed gas density ``rhog`` (no equation of state; used for checks).

Liquid properties are constant. No mass transfer between the phases along the line (the gas
and liquid mass rates are constant): a documented simplification.
"""
from __future__ import annotations

import math

import numpy as np
import torch

from ..physics.checks import InputError
from ..physics.conditions import gas_density
from ..fluid_properties import props_si
from .definition import FluidSpec

#: pressure range of the CoolProp table [Pa]
P_TABLE = (1.0e4, 5.0e7)


def _coolprop(fluid: str):
    return props_si(fluid, "or give fluid.Z and fluid.mug")


def coolprop_molar_mass(fluid: str) -> float:
    """Molar mass [kg/mol] of a CoolProp fluid."""
    PropsSI = _coolprop(fluid)
    try:
        return float(PropsSI("M", fluid))
    except ValueError as exc:
        raise InputError(f"fluid.coolprop = {fluid!r}: CoolProp does not know it ({str(exc).splitlines()[0]})") from None


class GasModel:
    """rho_G(p, T) and mu_G(p, T) as torch functions, elementwise on float64 tensors."""

    def __init__(self, f: FluidSpec, T_range: tuple[float, float], n_p: int = 80, n_T: int = 12) -> None:
        self.spec = f
        self.M = f.M_g
        self._tab = None
        if f.coolprop is not None and f.rhog is None:
            PropsSI = _coolprop(f.coolprop)
            if self.M is None:
                self.M = coolprop_molar_mass(f.coolprop)
            lnp = np.linspace(math.log(P_TABLE[0]), math.log(P_TABLE[1]), n_p)
            T = np.linspace(T_range[0] - 2.0, T_range[1] + 2.0, n_T)
            P, TT = np.meshgrid(np.exp(lnp), T, indexing="ij")
            try:
                Z = np.asarray(PropsSI("Z", "P", P.ravel(), "T", TT.ravel(), f.coolprop), dtype=np.float64).reshape(P.shape)
                mu = np.asarray(PropsSI("V", "P", P.ravel(), "T", TT.ravel(), f.coolprop), dtype=np.float64).reshape(P.shape)
            except ValueError as exc:
                raise InputError(f"fluid.coolprop = {f.coolprop!r}: CoolProp failed on the p-T table "
                                 f"({str(exc).splitlines()[0]})") from None
            if not (np.isfinite(Z).all() and np.isfinite(mu).all()):
                raise InputError(f"fluid.coolprop = {f.coolprop!r}: CoolProp returned non-finite Z or viscosity "
                                 f"for {P_TABLE[0]:g}-{P_TABLE[1]:g} Pa, {T[0]:.1f}-{T[-1]:.1f} K (two-phase region?)")
            self._tab = (torch.as_tensor(lnp), torch.as_tensor(T), torch.as_tensor(Z), torch.as_tensor(mu))

    def _interp(self, table: torch.Tensor, p: torch.Tensor, T: torch.Tensor) -> torch.Tensor:
        """Bilinear interpolation in (ln p, T), clamped to the table."""
        lnp, Tg = self._tab[0], self._tab[1]
        x = ((torch.log(p) - lnp[0]) / (lnp[1] - lnp[0])).clamp(0, len(lnp) - 1 - 1e-9)
        y = ((T - Tg[0]) / (Tg[1] - Tg[0])).clamp(0, len(Tg) - 1 - 1e-9)
        i, j = x.floor().long(), y.floor().long()
        fx, fy = x - i, y - j
        t00, t10 = table[i, j], table[i + 1, j]
        t01, t11 = table[i, j + 1], table[i + 1, j + 1]
        return (1 - fx) * ((1 - fy) * t00 + fy * t01) + fx * ((1 - fy) * t10 + fy * t11)

    def Z(self, p: torch.Tensor, T: torch.Tensor) -> torch.Tensor:
        """Compressibility factor [-]."""
        if self._tab is not None:
            return self._interp(self._tab[2], p, T)
        return torch.full_like(p, float(self.spec.Z))

    def density(self, p: torch.Tensor, T: torch.Tensor) -> torch.Tensor:
        """rho_G [kg/m3] at p [Pa], T [K]."""
        if self.spec.rhog is not None:
            return torch.full_like(p, float(self.spec.rhog))
        return gas_density(p, T, torch.as_tensor(self.M, dtype=torch.float64), self.Z(p, T))

    def viscosity(self, p: torch.Tensor, T: torch.Tensor) -> torch.Tensor:
        """mu_G [Pa s]."""
        if self.spec.mug is not None or self._tab is None:
            return torch.full_like(p, float(self.spec.mug))
        return self._interp(self._tab[3], p, T)

    def describe(self) -> dict:
        f = self.spec
        eos = "fixed rhog" if f.rhog is not None else (f"CoolProp {f.coolprop}" if f.coolprop else f"constant Z = {f.Z}")
        return {"gas_eos": eos, "M_g": self.M, "mug": f.mug if f.mug is not None else f"CoolProp {f.coolprop}"}
