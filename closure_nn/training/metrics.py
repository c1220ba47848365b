"""Accuracy of a closure on a table: holdup and pressure-gradient errors of its equilibrium (no Lightning).

For every separated-flow row with a measured target the closure's equilibrium is solved
(:func:`~closure_nn.physics.holdup_roots.solve_separated`, kind from the pattern) and compared:

* ``holdup_rmse``, ``holdup_mae`` [-]: absolute holdup errors,
* ``pgrad_rel_rmse`` [-]: RMS of (predicted / measured - 1) over rows with |pgrad| >= 1 Pa/m,
* ``n_rows`` rows compared, ``n_no_root`` rows without an equilibrium (left out of the errors).
"""
from __future__ import annotations

import math

import torch

from ..data.features import KIND_CODE, KINDS
from ..physics.holdup_roots import solve_separated
from .loss import batch_conditions

PGRAD_FLOOR = 1.0  # Pa/m: rows with a smaller |pgrad| are left out of the relative error


def predict_rows(closure, t: dict[str, torch.Tensor], select: str = "thinnest") -> dict[str, torch.Tensor]:
    """Predicted ``holdup``, ``pgrad`` and ``found`` ``(N,)`` for the separated rows of ``t`` (NaN elsewhere)."""
    n = t["vsl"].shape[0]
    hold = torch.full((n,), float("nan"), dtype=torch.float64)
    pg = torch.full_like(hold, float("nan"))
    found = torch.zeros(n, dtype=torch.bool)
    with torch.no_grad():
        for kind in KINDS:
            sel = t["kind"] == KIND_CODE[kind]
            if sel.any():
                sol = solve_separated(batch_conditions(t, sel), closure, kind, select=select)
                hold[sel] = torch.where(sol.found, sol.holdup, torch.nan)
                pg[sel] = torch.where(sol.found, sol.pgrad.total, torch.nan)
                found[sel] = sol.found
    return {"holdup": hold, "pgrad": pg, "found": found}


def accuracy(closure, t: dict[str, torch.Tensor], select: str = "thinnest") -> dict[str, float]:
    """Holdup and pgrad errors of ``closure`` on the tensor table ``t`` (see module docstring)."""
    pred = predict_rows(closure, t, select)
    sep = t["kind"] >= 0
    has_h, has_p = torch.isfinite(t["holdup"]) & sep, torch.isfinite(t["pgrad"]) & sep
    rows = has_h | has_p
    ok = pred["found"]
    eh = (pred["holdup"] - t["holdup"])[has_h & ok]
    use_p = has_p & ok & (t["pgrad"].abs() >= PGRAD_FLOOR)
    ep = pred["pgrad"][use_p] / t["pgrad"][use_p] - 1

    def rms(x: torch.Tensor) -> float:
        return float(torch.sqrt((x**2).mean())) if x.numel() else math.nan

    return {"holdup_rmse": rms(eh), "holdup_mae": float(eh.abs().mean()) if eh.numel() else math.nan,
            "pgrad_rel_rmse": rms(ep), "n_rows": int(rows.sum()), "n_no_root": int((rows & ~ok).sum())}
