"""Named-fluid properties through CoolProp (optional extra ``closure-nn[coolprop]``).

CoolProp (Bell, Wronski, Quoilin & Lemort 2014, Ind. Eng. Chem. Res. 53(6):2498-2508) gives
density, viscosity and compressibility of pure fluids and predefined mixtures from reference
equations of state. This module is a thin, scalar-friendly wrapper used at the edges (CLI,
line definitions, data preparation); the physics core only sees the resulting numbers.

CoolProp is optional: it is imported inside the functions that call it, so closure_nn works
without it and only a line or point that names a CoolProp fluid needs it.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .physics.checks import InputError


def coolprop_available() -> bool:
    """True when the CoolProp package can be imported."""
    try:
        import CoolProp.CoolProp  # noqa: F401
    except ImportError:
        return False
    return True


@dataclass(frozen=True)
class PhaseProperties:
    """Density [kg/m3], dynamic viscosity [Pa s], compressibility factor Z [-], molar mass [kg/mol]."""

    rho: np.ndarray
    mu: np.ndarray
    Z: np.ndarray
    molar_mass: float


def props_si(fluid: str, alternative: str = "or give densities and viscosities directly"):
    """CoolProp's ``PropsSI`` (the one wrapper of the optional CoolProp package); without it an
    :class:`InputError` naming the extra to install and the ``alternative``."""
    try:
        from CoolProp.CoolProp import PropsSI
    except ImportError:  # pragma: no cover - depends on the environment
        raise InputError(f"fluid {fluid!r} needs CoolProp: install the extra with "
                         f"`pip install 'closure-nn[coolprop]'`, {alternative}") from None
    return PropsSI


def named_fluid(fluid: str, p, T) -> PhaseProperties:
    """Properties of the CoolProp fluid ``fluid`` (e.g. 'Methane', 'Nitrogen', 'Air', 'Water')
    at absolute pressure p [Pa] and temperature T [K] (scalars or arrays, broadcast).

    >>> props = named_fluid("Water", 101325.0, 293.15)
    >>> round(float(props.rho), 1)
    998.2
    """
    PropsSI = props_si(fluid)
    p, T = np.broadcast_arrays(np.asarray(p, dtype=float), np.asarray(T, dtype=float))
    try:
        M = float(PropsSI("M", fluid))
        rho = np.vectorize(lambda pp, tt: PropsSI("D", "P", pp, "T", tt, fluid))(p, T)
        mu = np.vectorize(lambda pp, tt: PropsSI("V", "P", pp, "T", tt, fluid))(p, T)
        Z = np.vectorize(lambda pp, tt: PropsSI("Z", "P", pp, "T", tt, fluid))(p, T)
    except ValueError as exc:
        raise InputError(f"CoolProp could not evaluate fluid {fluid!r} at p = {p.ravel()[0]:g} Pa, "
                         f"T = {T.ravel()[0]:g} K: {str(exc).splitlines()[0]}") from None
    return PhaseProperties(rho=rho, mu=mu, Z=Z, molar_mass=M)


def surface_tension(fluid: str, T) -> np.ndarray:
    """Saturated-liquid surface tension [N/m] of a pure CoolProp fluid at T [K]."""
    import CoolProp.CoolProp as CP

    T = np.asarray(T, dtype=float)
    return np.vectorize(lambda tt: CP.PropsSI("I", "T", tt, "Q", 0, fluid))(T)
