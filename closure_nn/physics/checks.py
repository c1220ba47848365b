"""Input checks for conditions: one-line errors that name the field, value and expected range.

The ranges catch values that are non-physical or look like a unit slip (a diameter of 50 "m",
a viscosity in cP typed as Pa s). They are deliberately wide; the data layer applies the same
table to tabular input.
"""
from __future__ import annotations

import math

import torch

from .conditions import Conditions


class InputError(ValueError):
    """A user-input problem; the CLI prints its message on one line, without a traceback."""


#: field -> (min, max, unit, note). Open lower bound where min is given as (value, False).
RANGES: dict[str, tuple[float, float, str, str]] = {
    "vsl": (0.0, 50.0, "m/s", "counter-current flow (negative velocity) is out of scope"),
    "vsg": (0.0, 300.0, "m/s", "counter-current flow (negative velocity) is out of scope"),
    "D": (1e-3, 3.0, "m", "a diameter this large looks like a unit slip: mm or in typed as m?"),
    "theta": (-math.pi / 2, math.pi / 2, "rad", "inclination must lie in [-90, 90] degrees"),
    "roughness": (0.0, 0.01, "m", "roughness above 10 mm looks like a unit slip"),
    "rhol": (100.0, 3000.0, "kg/m3", ""),
    "rhog": (0.01, 500.0, "kg/m3", ""),
    "mul": (1e-5, 10.0, "Pa s", "above 10 Pa s looks like cP typed as Pa s"),
    "mug": (1e-7, 1e-3, "Pa s", ""),
    "sigma": (1e-4, 0.5, "N/m", ""),
    "g": (0.1, 30.0, "m/s2", ""),
}
POSITIVE = {"D", "rhol", "rhog", "mul", "mug", "sigma", "g"}
#: fields whose note explains the LOW side of the range (for the others it explains the high side)
LOW_NOTE = {"vsl", "vsg", "theta"}
HIGH_NOTE = {"D", "theta", "roughness", "mul"}


def check_range(name: str, values: torch.Tensor, where: str = "") -> None:
    """Raise :class:`InputError` for the first value of ``name`` that is NaN or out of range."""
    lo, hi, unit, note = RANGES[name]
    v = torch.as_tensor(values, dtype=torch.float64).reshape(-1)
    bad = ~torch.isfinite(v) | (v < lo) | (v > hi) | ((v <= 0) if name in POSITIVE else torch.zeros_like(v, dtype=torch.bool))
    if bool(bad.any()):
        i = int(bad.nonzero()[0])
        x = float(v[i])
        loc = f"{where}, " if where else ""
        row = f"row {i}, " if v.numel() > 1 else ""
        show = (x < lo and name in LOW_NOTE) or (x > hi and name in HIGH_NOTE)
        extra = f" ({note})" if note and show else ""
        what = "is not a number" if math.isnan(x) else "is out of range"
        raise InputError(f"{loc}{row}{name} = {x:.6g} {unit} {what}; expected {lo:g} to {hi:g} {unit}{extra}")


def check_conditions(cond: Conditions, where: str = "") -> None:
    """Validate every field of ``cond``; raises :class:`InputError` on the first problem.

    Also rejects rhog >= rhol (the gas must be the lighter phase).
    """
    for name, t in cond.as_dict().items():
        check_range(name, t, where)
    heavy = cond.rhog >= cond.rhol
    if bool(heavy.any()):
        i = int(heavy.reshape(-1).nonzero()[0])
        raise InputError(f"{where + ', ' if where else ''}row {i}: rhog = {float(cond.rhog.reshape(-1)[i]):g} kg/m3 "
                         f"is not below rhol = {float(cond.rhol.reshape(-1)[i]):g} kg/m3")
