"""Fluid properties of the INVENTED demo flow-loop campaign (:mod:`closure_nn.data.demo_campaign`).

Water and air are fits from memory of handbook values; the light oil is invented. Temperatures
in degC, results in SI.
"""
from __future__ import annotations

import numpy as np

M_AIR = 28.96  # g/mol, dry air (handbook value, from memory)


def water_density(T_c: np.ndarray) -> np.ndarray:
    """Water density [kg/m3], quadratic through 999.1 / 998.2 / 997.0 at 15 / 20 / 25 degC (from memory)."""
    return 998.2 - 0.21 * (T_c - 20.0) - 0.0042 * (T_c - 20.0) ** 2


def water_viscosity(T_c: np.ndarray) -> np.ndarray:
    """Water viscosity [Pa s], Vogel form 2.414e-5 * 10**(247.8 / (T - 140)) with T in K (from memory)."""
    return 2.414e-5 * 10.0 ** (247.8 / (T_c + 273.15 - 140.0))


def water_surface_tension(T_c: np.ndarray) -> np.ndarray:
    """Water-air surface tension [N/m], linear 0.0728 - 1.5e-4 (T - 20 degC) (from memory)."""
    return 0.0728 - 1.5e-4 * (T_c - 20.0)


def air_viscosity(T_c: np.ndarray) -> np.ndarray:
    """Air viscosity [Pa s], Sutherland's law, mu0 = 1.716e-5 Pa s at 273.15 K, S = 110.4 K (from memory)."""
    T = T_c + 273.15
    return 1.716e-5 * (T / 273.15) ** 1.5 * (273.15 + 110.4) / (T + 110.4)


def oil_properties(T_c: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The invented light oil: density [kg/m3], viscosity [Pa s], surface tension vs air [N/m]."""
    return 832.0 - 0.65 * (T_c - 20.0), 2.6e-3 * np.exp(-0.025 * (T_c - 20.0)), 0.0280 - 8e-5 * (T_c - 20.0)
