"""Quantities of a line YAML: ``"<number> <unit>"`` strings to SI, and flow rates to kg/s.

Numbers are SI; a string ``"<number> <unit>"`` gives a field unit (``"45 bara"``, ``"60 degC"``,
``"254 mm"``; units of :mod:`closure_nn.data.units`). Rates take the units of
:data:`RATE_UNITS`; gas volume rates are at standard conditions, 15 degC and 1.01325 bar (ISO
13443 reference conditions, common practice).
"""
from __future__ import annotations

import math
import re

from ..data.units import to_si
from ..physics.checks import InputError

#: standard reference conditions of gas volume rates: 15 degC, 1.01325 bar (ISO 13443)
T_STD = 288.15  # K
P_STD = 101325.0  # Pa
_DAY = 86400.0  # s
_BBL = 0.158987294928  # m3 per US oil barrel (exact; NIST SP 811 Appendix B.8)
#: rate unit -> (kind, factor to kg/s for 'mass' or to standard m3/s for 'volume')
RATE_UNITS: dict[str, tuple[str, float]] = {
    "kg/s": ("mass", 1.0), "kg/h": ("mass", 1 / 3600), "kg/d": ("mass", 1 / _DAY), "t/d": ("mass", 1000 / _DAY),
    "t/h": ("mass", 1000 / 3600), "Sm3/d": ("volume", 1 / _DAY), "Sm3/h": ("volume", 1 / 3600),
    "MSm3/d": ("volume", 1e6 / _DAY), "m3/d": ("volume", 1 / _DAY), "m3/h": ("volume", 1 / 3600),
    "bbl/d": ("volume", _BBL / _DAY),
}
_NUM_UNIT = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")


def parse_quantity(value, dimension: str, key: str, where: str = "") -> float:
    """A YAML number (SI) or ``"<number> <unit>"`` string -> float in SI.

    >>> parse_quantity("45 bara", "pressure", "pressure.outlet"), parse_quantity(0.25, "length", "D")
    (4500000.0, 0.25)
    """
    if isinstance(value, bool) or value is None:
        raise InputError(f"{where}: {key} = {value!r}; expected a number (SI) or '<number> <unit>'")
    if isinstance(value, (int, float)):
        return float(value)
    m = _NUM_UNIT.match(str(value))
    if m is None:
        raise InputError(f"{where}: {key} = {value!r}; expected a number (SI) or '<number> <unit>'")
    x, unit = float(m.group(1)), m.group(2)
    return float(to_si(x, unit, dimension, key, where)) if unit else x


def parse_rate(value, phase: str, rho_std: float, where: str = "") -> float:
    """A rate ``"<number> <unit>"`` (units of :data:`RATE_UNITS`; bare number = kg/s) -> kg/s.

    ``rho_std`` [kg/m3] converts volume rates: gas standard density, or the liquid density.

    >>> round(parse_rate("864 m3/d", "liquid", 800.0), 6)
    8.0
    """
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        m_dot = float(value)
    else:
        m = _NUM_UNIT.match(str(value))
        unit = m.group(2) if m else None
        if m is None or unit not in RATE_UNITS:
            raise InputError(f"{where}: rates.{phase} = {value!r}; expected '<number> <unit>' with a unit of "
                             f"{', '.join(RATE_UNITS)} (a bare number is kg/s)")
        kind, a = RATE_UNITS[unit]
        m_dot = float(m.group(1)) * a * (rho_std if kind == "volume" else 1.0)
    if not (math.isfinite(m_dot) and m_dot >= 0):
        raise InputError(f"{where}: rates.{phase} = {value!r} gives {m_dot:g} kg/s; rates must be >= 0")
    return m_dot
