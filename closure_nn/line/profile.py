"""The profile CSV of a line: stations in flow order with distance, elevation and optional
segment-wise D, roughness or section, and station temperatures (format: :mod:`closure_nn.line.definition`)."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..data.units import parse_header, to_si
from ..physics.checks import InputError

#: profile column -> (dimension in closure_nn.data.units, required)
PROFILE_COLUMNS: dict[str, tuple[str, bool]] = {
    "distance": ("length", True), "elevation": ("length", True), "D": ("length", False),
    "roughness": ("length", False), "section": ("none", False), "T": ("temperature", False),
}


def read_profile(path: str | Path) -> dict[str, np.ndarray]:
    """Read and check a profile CSV (columns in the module docstring) -> SI arrays by name."""
    path = Path(path)
    try:
        df = pd.read_csv(path, comment="#", skipinitialspace=True)
    except FileNotFoundError:
        raise
    except Exception as exc:  # pandas raises several parser errors
        raise InputError(f"{path}: cannot read the profile as CSV ({str(exc).splitlines()[0]})") from None
    out: dict[str, np.ndarray] = {}
    for header in df.columns:
        name, unit = parse_header(header)
        if name not in PROFILE_COLUMNS:
            raise InputError(f"{path}: unknown profile column {header!r}; known: {', '.join(PROFILE_COLUMNS)}")
        dim, _ = PROFILE_COLUMNS[name]
        if name == "section":
            out[name] = df[header].astype(str).str.strip().to_numpy(dtype=object)
            continue
        if unit == "km" and dim == "length":
            vals = pd.to_numeric(df[header], errors="coerce").to_numpy(dtype=np.float64) * 1000.0
        else:
            vals = pd.to_numeric(df[header], errors="coerce").to_numpy(dtype=np.float64)
            vals = to_si(vals, unit, dim, header, str(path)) if unit else vals
        bad = ~np.isfinite(vals)
        if name in ("D", "roughness"):
            bad[-1] = False  # last row unused for segment-wise columns
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(f"{path}: data row {i + 1}, column {header!r}: {df[header].iloc[i]!r} is not a number")
        out[name] = vals
    for name, (_, required) in PROFILE_COLUMNS.items():
        if required and name not in out:
            raise InputError(f"{path}: the profile needs a column {name!r} [m]")
    s, z = out["distance"], out["elevation"]
    if len(s) < 2:
        raise InputError(f"{path}: a profile needs at least two stations, found {len(s)}")
    ds, dz = np.diff(s), np.diff(z)
    if (ds <= 0).any():
        i = int(np.flatnonzero(ds <= 0)[0])
        raise InputError(f"{path}: data row {i + 2}: distance {s[i + 1]:g} m does not rise above the previous "
                         f"row ({s[i]:g} m); stations must be in flow order, strictly rising")
    steep = np.abs(dz) > ds * (1 + 1e-12)
    if steep.any():
        i = int(np.flatnonzero(steep)[0])
        raise InputError(f"{path}: data rows {i + 1}-{i + 2}: elevation changes by {dz[i]:g} m over {ds[i]:g} m "
                         "of pipe; distance is measured along the pipe, so |elevation step| <= distance step")
    return out
