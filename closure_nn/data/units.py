r"""Field units in column headers, converted to SI on load.

Our convention: a column header is a canonical name (see :mod:`closure_nn.data.schema`),
optionally followed by a unit in square brackets::

    D [mm],  theta [deg],  p [bar],  mul [cP],  vsg [ft/s],  T [degC],  pgrad [psi/ft]

A bare name (``D``) means the SI unit of the glossary. Every conversion is affine,

.. math:: x_\mathrm{SI} = a \, x + b

with ``(a, b)`` from :data:`UNITS`; ``b`` is non-zero only for temperatures (degC, degF) and
gauge pressures (barg, psig).

Pressures: ``bar``, ``bara``, ``psi``, ``psia``, ``kPa``, ``MPa``, ``atm`` are all **absolute**
pressure. Gauge pressure must be marked ``barg`` or ``psig``; it is converted to absolute by adding
one standard atmosphere (101 325 Pa = 1.01325 bar), which is only right for a local atmospheric
pressure of 1 atm. Pressure *gradients* (``pgrad``) have no offset.

Conversion factors: NIST Special Publication 811 (2008 edition), Thompson & Taylor, "Guide for
the Use of the International System of Units (SI)", Appendix B.8 (factors in alphabetical order)
and B.9 (by kind of quantity). Units formed from two of them (psi/ft, lb/ft3...) are the quotient
of the listed factors. SI prefixes (mm, kPa, mN/m...) are exact decimal multiples.
"""
from __future__ import annotations

import difflib
import math
import re

import numpy as np

from ..physics.checks import InputError

# NIST SP 811 (2008) Appendix B.8 factors used below (exact unless marked):
_FT = 0.3048  # foot -> m (exact)
_IN = 0.0254  # inch -> m (exact)
_MIL = 2.54e-5  # mil (0.001 in) -> m (exact)
_PSI = 6.894757e3  # pound-force per square inch -> Pa (SP 811 gives 6.894 757 E+03)
_ATM = 1.01325e5  # standard atmosphere -> Pa (exact)
_BAR = 1.0e5  # bar -> Pa (exact)
_LB = 0.45359237  # pound (avoirdupois) -> kg (exact)
_DEG = math.pi / 180  # degree (of angle) -> rad (exact; SP 811: 1.745 329 E-02)
_CP = 1.0e-3  # centipoise -> Pa s (exact)
_DYNE_CM = 1.0e-3  # dyne per centimetre -> N/m (exact)

#: dimension -> unit spelling -> (a, b) with x_SI = a * x + b. The first unit is the SI one.
UNITS: dict[str, dict[str, tuple[float, float]]] = {
    "velocity": {"m/s": (1.0, 0.0), "mm/s": (1e-3, 0.0), "cm/s": (1e-2, 0.0), "ft/s": (_FT, 0.0),
                 "km/h": (1000.0 / 3600.0, 0.0)},
    "length": {"m": (1.0, 0.0), "mm": (1e-3, 0.0), "cm": (1e-2, 0.0), "um": (1e-6, 0.0),
               "in": (_IN, 0.0), "ft": (_FT, 0.0), "mil": (_MIL, 0.0)},
    "angle": {"rad": (1.0, 0.0), "deg": (_DEG, 0.0)},
    "density": {"kg/m3": (1.0, 0.0), "g/cm3": (1000.0, 0.0), "kg/L": (1000.0, 0.0),
                "lb/ft3": (_LB / _FT**3, 0.0)},
    "dynamic viscosity": {"Pa s": (1.0, 0.0), "mPa s": (1e-3, 0.0), "uPa s": (1e-6, 0.0),
                          "cP": (_CP, 0.0), "P": (0.1, 0.0)},
    "surface tension": {"N/m": (1.0, 0.0), "mN/m": (1e-3, 0.0), "dyn/cm": (_DYNE_CM, 0.0)},
    "pressure": {"Pa": (1.0, 0.0), "kPa": (1e3, 0.0), "MPa": (1e6, 0.0), "bar": (_BAR, 0.0),
                 "bara": (_BAR, 0.0), "mbar": (100.0, 0.0), "psi": (_PSI, 0.0), "psia": (_PSI, 0.0),
                 "atm": (_ATM, 0.0), "barg": (_BAR, _ATM), "psig": (_PSI, _ATM)},
    "temperature": {"K": (1.0, 0.0), "degC": (1.0, 273.15), "degF": (1.0 / 1.8, 459.67 / 1.8)},
    "molar mass": {"kg/mol": (1.0, 0.0), "g/mol": (1e-3, 0.0), "kg/kmol": (1e-3, 0.0),
                   "lb/lbmol": (1e-3, 0.0)},
    "pressure gradient": {"Pa/m": (1.0, 0.0), "kPa/m": (1e3, 0.0), "kPa/km": (1.0, 0.0),
                          "bar/m": (_BAR, 0.0), "bar/km": (_BAR / 1000.0, 0.0), "mbar/m": (100.0, 0.0),
                          "psi/ft": (_PSI / _FT, 0.0), "psi/100ft": (_PSI / (100 * _FT), 0.0)},
    "fraction": {"-": (1.0, 0.0), "%": (0.01, 0.0)},
    "dimensionless": {"-": (1.0, 0.0)},
    "none": {},
}

#: other spellings people type -> the spelling used in :data:`UNITS` (after whitespace removal)
ALIASES: dict[str, str] = {
    "Pas": "Pa s", "Pa.s": "Pa s", "kg/(ms)": "Pa s", "mPas": "mPa s", "mPa.s": "mPa s",
    "uPas": "uPa s", "µPas": "uPa s", "μPas": "uPa s", "cp": "cP", "µm": "um", "μm": "um",
    "°": "deg", "degree": "deg", "degrees": "deg", "°C": "degC", "°F": "degF", "C": "degC",
    "F": "degF", "kg/m^3": "kg/m3", "kg/m³": "kg/m3", "g/cc": "g/cm3", "g/cm^3": "g/cm3",
    "lb/ft^3": "lb/ft3", "lbm/ft3": "lb/ft3", "dyne/cm": "dyn/cm", "ft/sec": "ft/s",
    "inch": "in", '"': "in", "1": "-", "": "-", "psi/100 ft": "psi/100ft", "g/gmol": "g/mol",
}

#: units worth naming when a value is out of range: "if the column were in X it would fit"
SLIP_HINTS: dict[str, tuple[str, ...]] = {
    "velocity": ("ft/s", "mm/s"),
    "length": ("mm", "in", "um"),
    "angle": ("deg",),
    "density": ("g/cm3", "lb/ft3"),
    "dynamic viscosity": ("cP", "mPa s"),
    "surface tension": ("mN/m", "dyn/cm"),
    "pressure": ("bar", "psi", "kPa"),
    "temperature": ("degC",),
    "molar mass": ("g/mol",),
    "pressure gradient": ("kPa/m", "bar/km", "psi/ft"),
    "fraction": ("%",),
}

_HEADER = re.compile(r"^\s*(?P<name>[^\[\]]*?)\s*\[(?P<unit>[^\[\]]*)\]\s*$")


def parse_header(header: str) -> tuple[str, str | None]:
    """Split ``'D [mm]'`` into ``('D', 'mm')``; a bare header gives ``(name, None)``.

    >>> parse_header("D [mm]"), parse_header(" vsl "), parse_header("mul [ mPa s ]")
    (('D', 'mm'), ('vsl', None), ('mul', 'mPa s'))
    """
    m = _HEADER.match(str(header))
    if m is None:
        return str(header).strip(), None
    return m.group("name"), m.group("unit").strip()


def canonical_unit(unit: str) -> str:
    """The spelling of ``unit`` used in :data:`UNITS` (aliases and spacing folded).

    >>> canonical_unit("Pa·s"), canonical_unit("kg/m^3"), canonical_unit("°C"), canonical_unit("psi/100 ft")
    ('Pa s', 'kg/m3', 'degC', 'psi/100ft')
    """
    squeezed = re.sub(r"[\s·*]+", "", unit.strip())
    if unit.strip() in ALIASES:
        return ALIASES[unit.strip()]
    if squeezed in ALIASES:
        return ALIASES[squeezed]
    for units in UNITS.values():
        for u in units:
            if re.sub(r"\s+", "", u) == squeezed:
                return u
    return unit.strip()


def dimension_of(unit: str) -> list[str]:
    """All dimensions whose table lists ``unit`` (``'-'`` is both fraction and dimensionless)."""
    u = canonical_unit(unit)
    return [dim for dim, units in UNITS.items() if u in units]


def factor(unit: str, dimension: str, column: str = "", where: str = "") -> tuple[float, float]:
    """``(a, b)`` such that ``x_SI = a * x + b`` for ``unit`` of ``dimension``.

    Raises :class:`InputError` naming the column for an unknown unit or a unit of another
    dimension (``mul [mm]``).

    >>> factor("ft/s", "velocity")
    (0.3048, 0.0)
    """
    u = canonical_unit(unit)
    known = UNITS[dimension]
    if u in known:
        return known[u]
    loc = f"{where}: " if where else ""
    col = f"column {column!r}" if column else "this column"
    if not known:
        raise InputError(f"{loc}{col} takes no unit, but the header gives [{unit}]; remove the brackets")
    listed = ", ".join(known)
    other = [d for d in dimension_of(unit) if d != dimension]
    if other:
        raise InputError(f"{loc}{col} holds a {dimension}, but [{unit}] is a unit of {other[0]}; "
                         f"use one of: {listed}")
    near = difflib.get_close_matches(u, list(known), n=1, cutoff=0.5)
    hint = f" Did you mean [{near[0]}]?" if near else ""
    raise InputError(f"{loc}unknown unit [{unit}] for {col} ({dimension}); known units: {listed}.{hint}")


def to_si(values, unit: str, dimension: str, column: str = "", where: str = "") -> np.ndarray:
    """Convert ``values`` given in ``unit`` to SI (float64 array).

    >>> float(to_si(50.0, "mm", "length")[()]), float(to_si(20.0, "degC", "temperature")[()])
    (0.05, 293.15)
    """
    a, b = factor(unit, dimension, column, where)
    x = np.asarray(values, dtype=np.float64)
    return x if (a == 1.0 and b == 0.0) else a * x + b


def from_si(values, unit: str, dimension: str) -> np.ndarray:
    """Inverse of :func:`to_si`: SI values expressed in ``unit``.

    >>> float(from_si(0.0254, "in", "length")[()])
    1.0
    """
    a, b = factor(unit, dimension)
    x = np.asarray(values, dtype=np.float64)
    return x if (a == 1.0 and b == 0.0) else (x - b) / a


def slip_hint(value: float, dimension: str, lo: float, hi: float) -> str:
    """Name the field units in which ``value`` would fall inside ``[lo, hi]`` (SI), if any.

    >>> slip_hint(50.0, "length", 1e-3, 3.0)
    "if the values are in mm or in, write the unit in the header, e.g. '[mm]'"
    """
    if not (isinstance(value, float) and math.isfinite(value)):
        return ""
    fits = []
    for u in SLIP_HINTS.get(dimension, ()):
        a, b = UNITS[dimension][u]
        if lo <= a * value + b <= hi:
            fits.append(u)
    if not fits:
        return ""
    return f"if the values are in {' or '.join(fits[:2])}, write the unit in the header, e.g. '[{fits[0]}]'"
