r"""Tables and summaries of line marches: per-station table, JSON summary, ensemble band.

Station values: station i < n carries the point solution at the START of segment i (the
segment's inclination); the outlet station carries the END evaluation of the last segment.
Integrals over the line use the same trapezoidal weights as the Heun step, so

.. math::
    \Delta p = \sum_j \tfrac{h_j}{2}\,(g_{j,start} + g_{j,end}) = \Delta p_{friction} + \Delta p_{gravity},
    \qquad V_L = \sum_j h_j A_j\,\tfrac12 (H_{j,start} + H_{j,end})

(liquid inventory V_L [m3]); the share of line length per pattern gives each segment's half
lengths to the patterns at its two ends.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd

from ..physics.vocabulary import PATTERNS
from .march import MarchResult

#: station table columns (SI; glossary names)
STATION_COLUMNS = ("closure", "role", "station", "profile_station", "distance", "elevation", "theta", "D", "T", "p",
                   "holdup", "pattern", "pgrad", "pgrad_friction", "pgrad_gravity", "vsg", "vsl", "rhog",
                   "in_domain", "in_measured_domain", "flags", "step_error")


def station_values(res: MarchResult, key: str) -> np.ndarray:
    """Station array (n+1,) of a LocalFlow field: segment starts + the end of the last segment."""
    return np.concatenate([res.start[key], res.end[key][-1:]])


def station_table(res: MarchResult, closure: str, role: str, in_domain: np.ndarray | None = None,
                  in_measured_domain: np.ndarray | None = None):
    """Per-station DataFrame of one march (columns :data:`STATION_COLUMNS`). A closure without a
    domain check gets True in ``in_domain`` / ``in_measured_domain`` (nothing to flag)."""
    m = res.mesh
    n = m.n
    sv = lambda k: station_values(res, k)  # noqa: E731
    seg_of = np.minimum(np.arange(n + 1), n - 1)
    theta = np.arcsin(np.clip(m.sin_theta.numpy(), -1, 1))[seg_of]
    df = pd.DataFrame({
        "closure": closure, "role": role, "station": np.arange(n + 1), "profile_station": ~m.inserted.numpy(),
        "distance": m.s.numpy(), "elevation": m.z.numpy(), "theta": theta, "D": m.D.numpy()[seg_of], "T": m.T.numpy(),
        "p": res.p, "holdup": sv("holdup"), "pattern": [PATTERNS[int(c)] for c in sv("pattern")], "pgrad": sv("pgrad"),
        "pgrad_friction": sv("friction"), "pgrad_gravity": sv("gravity"), "vsg": sv("vsg"), "vsl": sv("vsl"),
        "rhog": sv("rhog"), "in_domain": np.ones(n + 1, dtype=bool) if in_domain is None else in_domain,
        "in_measured_domain": np.ones(n + 1, dtype=bool) if in_measured_domain is None else in_measured_domain,
        "flags": sv("flags"), "step_error": np.concatenate([res.step_error, [np.nan]]),
    })
    return df[list(STATION_COLUMNS)]


def intervals(distance: np.ndarray, mask: np.ndarray) -> list[list[float]]:
    """Runs of consecutive True stations as [first, last] distances.

    >>> intervals(np.array([0., 1., 2., 3., 4.]), np.array([False, True, True, False, True]))
    [[1.0, 2.0], [4.0, 4.0]]
    """
    out, start = [], None
    for i, flag in enumerate(mask):
        if flag and start is None:
            start = i
        if start is not None and (not flag or i == len(mask) - 1):
            last = i if flag else i - 1
            out.append([float(distance[start]), float(distance[last])])
            start = None
    return out


def _outside(s: np.ndarray, inside: np.ndarray | None) -> dict:
    """Count and distance intervals [m] of the stations where ``inside`` is False."""
    if inside is None:
        return {"checked": False}
    bad = ~np.asarray(inside, dtype=bool)
    return {"checked": True, "stations": int(bad.sum()), "of": int(len(bad)), "intervals_m": intervals(s, bad)}


def summarise(res: MarchResult, in_domain: np.ndarray | None = None,
              in_measured_domain: np.ndarray | None = None) -> dict:
    """JSON-able summary of one march (pressures [Pa] and [bar], inventory [m3], shares [-]), with
    the stations outside the training domain (``out_of_domain``) and outside the measured-data
    domain (``out_of_measured_domain``)."""
    h = res.h
    A = math.pi * res.mesh.D.numpy() ** 2 / 4
    w = 0.5 * h
    dp_f = float(np.sum(w * (res.start["friction"] + res.end["friction"])))
    dp_g = float(np.sum(w * (res.start["gravity"] + res.end["gravity"])))
    inv = float(np.sum(h * A * 0.5 * (res.start["holdup"] + res.end["holdup"])))
    share: dict[str, float] = {}
    total = float(h.sum())
    for side in ("start", "end"):
        for code in np.unique(getattr(res, side)["pattern"]):
            sel = getattr(res, side)["pattern"] == code
            share[PATTERNS[int(code)]] = share.get(PATTERNS[int(code)], 0.0) + float(np.sum(w[sel])) / total
    p_in, p_out = float(res.p[0]), float(res.p[-1])
    s = res.mesh.s.numpy()
    out = {
        "p_inlet_Pa": p_in, "p_outlet_Pa": p_out, "p_inlet_bar": p_in / 1e5, "p_outlet_bar": p_out / 1e5,
        "dp_total_Pa": p_in - p_out, "dp_friction_Pa": dp_f, "dp_gravity_Pa": dp_g,
        "liquid_inventory_m3": inv, "pattern_share_of_length": dict(sorted(share.items(), key=lambda kv: -kv[1])),
        "march": res.diagnostics,
    }
    out["out_of_domain"] = _outside(s, in_domain)
    out["out_of_measured_domain"] = _outside(s, in_measured_domain)
    return out


def ensemble_band(results: list[MarchResult]):
    """Band over ensemble members at the profile stations: min, max, mean, sd of p and holdup.

    The sd uses N - 1 (sample standard deviation); mean +- 2 sd is written alongside.
    """
    if not results:
        return None
    base = results[0]
    keep0 = ~base.mesh.inserted.numpy()
    cols = {"distance": base.mesh.s.numpy()[keep0], "elevation": base.mesh.z.numpy()[keep0]}
    for key in ("p", "holdup"):
        rows = []
        for r in results:
            keep = ~r.mesh.inserted.numpy()
            rows.append(r.p[keep] if key == "p" else station_values(r, "holdup")[keep])
        x = np.vstack(rows)
        sd = x.std(axis=0, ddof=1) if len(results) > 1 else np.zeros(x.shape[1])
        mean = x.mean(axis=0)
        cols.update({f"{key}_min": x.min(axis=0), f"{key}_max": x.max(axis=0), f"{key}_mean": mean, f"{key}_sd": sd,
                     f"{key}_lo2sd": mean - 2 * sd, f"{key}_hi2sd": mean + 2 * sd})
    return pd.DataFrame(cols)


def ensemble_summary(summaries: list[dict]) -> dict:
    """Spread of the members' headline numbers (min, max, mean, sd with N - 1)."""
    out = {"members": len(summaries)}
    for key in ("p_inlet_Pa", "p_outlet_Pa", "dp_total_Pa", "liquid_inventory_m3"):
        x = np.array([s[key] for s in summaries], dtype=np.float64)
        out[key] = {"min": float(x.min()), "max": float(x.max()), "mean": float(x.mean()),
                    "sd": float(x.std(ddof=1)) if len(x) > 1 else 0.0}
    return out
