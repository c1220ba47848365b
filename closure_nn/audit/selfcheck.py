r"""An invented loop campaign with known corrupted rows, to measure how well the audit finds them.

Invented scenario (ours, not a real facility): air-water tests in a 2-inch and a 3-inch steel
loop (roughness 50 um) at 1-3 bar, inclinations -5 to +5 deg. "Measurements" are the
point-solver answers of a reference closure (``REFERENCE_CLOSURE``: Churchill 1977 walls,
Andritsos-Hanratty interface with coefficient 25) plus Gaussian noise: holdup sd 0.01 absolute
and pgrad sd 2.5 % by default (i.e. +-0.02 and +-5 % at two standard deviations). Some rows
lack a pattern label, a holdup or a pgrad, as lab tables do.

Then a handful of rows are corrupted the way lab tables get corrupted (``CORRUPTIONS``):

* ``column_swap`` - holdup and pgrad columns swapped in a sheet that kept pgrad in kPa/m
  (the swapped values still pass validation: holdup in [0, 1], a plausible pgrad).
* ``diameter_in_as_cm`` - a 2-inch pipe entered as "2" in a cm column: D = 0.02 m instead
  of 0.0508 m (validation cannot see it: 2 cm is a legal pipe).
* ``pgrad_mmH2O`` - pgrad read from a water manometer in mm H2O/m and typed as Pa/m (a factor
  9.80665 too small). (kPa/km typed as Pa/m would be no slip at all: 1 kPa/km = 1 Pa/m.)
* ``theta_sign`` - inclination sign flipped (upward test logged as downward or back).
* ``pgrad_sign`` - pressure gradient sign flipped (dp/dx logged instead of -dp/dx).

:func:`corrupted_campaign` returns the table and the truth list (run_id, kind, description), the
same columns as ``data_demo/lab_campaign_corruptions.csv``.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import torch

from ..closures.baseline import BaselineClosure
from ..physics.conditions import make_conditions
from ..physics.point import solve_points
from ..physics.vocabulary import PATTERNS

#: the closure that "generated" the invented measurements
REFERENCE_CLOSURE = dict(wall="churchill", interface="andritsos_hanratty", interface_kwargs={"coef": 25.0})
MMH2O = 9.80665  # Pa per mm of water column (standard gravity, 1000 kg/m3; NIST SP 811 B.8)
INCH = 0.0254  # m (exact)
CORRUPTIONS: dict[str, str] = {
    "column_swap": "holdup and pgrad columns swapped (pgrad kept in kPa/m)",
    "diameter_in_as_cm": "2-inch pipe diameter typed as 2 cm",
    "pgrad_mmH2O": "pgrad in mm H2O/m typed as Pa/m",
    "theta_sign": "inclination sign flipped",
    "pgrad_sign": "pgrad sign flipped (dp/dx instead of -dp/dx)",
}


def clean_campaign(n: int = 120, seed: int = 0, holdup_noise: float = 0.01, pgrad_noise: float = 0.025,
                   closure=None, missing: float = 0.08) -> pd.DataFrame:
    """The invented campaign without corruptions: ``n`` rows, SI schema columns.

    ``holdup_noise`` is the absolute holdup sd [-], ``pgrad_noise`` the relative pgrad sd [-];
    ``missing`` the share of rows without a pattern label, and likewise without a holdup and
    without a pgrad. Both noises of 0 give the exact answers of ``closure``.
    """
    rng = np.random.default_rng(seed)
    closure = closure or BaselineClosure(**REFERENCE_CLOSURE)
    m = 3 * n  # oversample, keep two-phase rows with finite answers
    D = rng.choice([2 * INCH, 3 * INCH], m)
    theta = np.radians(rng.choice([-5.0, -2.0, -1.0, 0.0, 0.0, 1.0, 2.0, 5.0], m))
    vsl = 10 ** rng.uniform(math.log10(0.005), math.log10(0.3), m)
    vsg = 10 ** rng.uniform(math.log10(0.5), math.log10(20.0), m)
    rhog = 1.2 * rng.choice([1.0, 2.0, 3.0], m)
    cond = make_conditions(vsl=vsl, vsg=vsg, D=D, theta=theta, roughness=5e-5, rhog=rhog)
    with torch.no_grad():
        r = solve_points(cond, closure)
    H, P = r.holdup.numpy(), r.pgrad.total.numpy()
    keep = np.flatnonzero(np.isfinite(H) & np.isfinite(P))[:n]
    df = pd.DataFrame({k: v.numpy()[keep] for k, v in cond.as_dict().items() if k != "g"})
    H, P = H[keep], P[keep]
    k = len(keep)
    df["holdup"] = np.clip(H + holdup_noise * rng.standard_normal(k), 1e-3, 0.999)
    df["pgrad"] = P * (1 + pgrad_noise * rng.standard_normal(k))
    df["pattern"] = [PATTERNS[int(c)] for c in r.pattern.numpy()[keep]]
    df["holdup_sd"] = max(holdup_noise, 1e-4)
    df["pgrad_sd"] = np.maximum(pgrad_noise * np.abs(P), 0.05)
    drop = rng.random((k, 3)) < missing
    df.loc[drop[:, 0], "pattern"] = ""
    df.loc[drop[:, 1] & ~drop[:, 2], ["holdup", "holdup_sd"]] = np.nan
    df.loc[drop[:, 2] & ~drop[:, 1], ["pgrad", "pgrad_sd"]] = np.nan
    df["source"] = "lab"
    df["campaign"] = "selfcheck-loop"
    df["run_id"] = [f"R{i + 1:03d}" for i in range(k)]
    return df


def corrupt(df: pd.DataFrame, per_kind: int = 2, seed: int = 1) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Corrupt ``per_kind`` rows per kind of :data:`CORRUPTIONS`; return (table, truth).

    Only rows with every measurement are corrupted, each row at most once, and only rows where
    the slip changes something (a sign flip needs a non-zero value, the inch slip a 2-inch pipe).
    """
    rng = np.random.default_rng(seed)
    out = df.copy()
    full = out["holdup"].notna() & out["pgrad"].notna()
    used: set[int] = set()
    rows: list[dict] = []

    def pick(mask: pd.Series) -> list[int]:
        cand = [i for i in np.flatnonzero((mask & full).to_numpy()) if i not in used]
        chosen = list(rng.choice(cand, size=min(per_kind, len(cand)), replace=False)) if cand else []
        used.update(int(i) for i in chosen)
        return [int(i) for i in chosen]

    P, sdP = out["pgrad"], out["pgrad_sd"]
    for i in pick((P.abs() < 900) & (P > 0)):
        h, p = out.at[i, "holdup"], out.at[i, "pgrad"]
        out.at[i, "holdup"], out.at[i, "pgrad"] = p / 1000.0, h * 1000.0
        rows.append({"run_id": out.at[i, "run_id"], "kind": "column_swap", "description": CORRUPTIONS["column_swap"]})
    for i in pick(np.isclose(out["D"], 2 * INCH)):
        out.at[i, "D"] = 0.02
        rows.append({"run_id": out.at[i, "run_id"], "kind": "diameter_in_as_cm",
                     "description": CORRUPTIONS["diameter_in_as_cm"]})
    for i in pick(P.abs() > 10 * sdP):
        out.at[i, "pgrad"] = out.at[i, "pgrad"] / MMH2O
        rows.append({"run_id": out.at[i, "run_id"], "kind": "pgrad_mmH2O", "description": CORRUPTIONS["pgrad_mmH2O"]})
    for i in pick(out["theta"].abs() > math.radians(0.5)):
        out.at[i, "theta"] = -out.at[i, "theta"]
        rows.append({"run_id": out.at[i, "run_id"], "kind": "theta_sign", "description": CORRUPTIONS["theta_sign"]})
    for i in pick(P.abs() > 10 * sdP):
        out.at[i, "pgrad"] = -out.at[i, "pgrad"]
        rows.append({"run_id": out.at[i, "run_id"], "kind": "pgrad_sign", "description": CORRUPTIONS["pgrad_sign"]})
    return out, pd.DataFrame(rows, columns=["run_id", "kind", "description"])


def corrupted_campaign(n: int = 120, seed: int = 0, per_kind: int = 2, **noise) -> tuple[pd.DataFrame, pd.DataFrame]:
    """:func:`clean_campaign` then :func:`corrupt`: (table, truth list)."""
    return corrupt(clean_campaign(n, seed, **noise), per_kind=per_kind, seed=seed + 1)
