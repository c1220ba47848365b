"""Observed flow patterns per inclination band: scores and a figure of one panel per band.

:func:`band_accuracy` solves every observation at its own conditions with the point solver
(:func:`closure_nn.physics.point.solve_points`, so the closure's equilibrium decides the
stratified boundaries) and counts the observed patterns it reproduces in each band of
:data:`BANDS`. :func:`plot_pattern_bands` draws (our own layout) one panel per band: the closure's
map (:func:`closure_nn.report.pattern_map.compute_pattern_map`) at the band's median inclination and
diameter, filled; the band's observations by observed pattern (the markers of
:data:`closure_nn.report.pattern_map.MARKERS`); a black ring around each observation the closure
gets wrong at its own conditions; the band's score in the panel title; the caution as a footnote.

matplotlib is imported inside the drawing functions (with the file-only Agg backend): commands
that do not draw never load it, and importing this module never switches a user's backend.
"""
from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import torch

from ..caution import CAUTION
from ..physics.conditions import make_conditions
from ..physics.point import solve_points
from ..physics.vocabulary import PATTERNS
from .line_plots import PATTERN_COLOURS
from .pattern_map import AIR_WATER, MARKERS, compute_pattern_map, short

#: inclination bands [deg] of the scores and panels: steep and moderate downflow, near horizontal
#: (the Taitel & Dukler 1976 band), moderate and steep upflow (our choice of limits)
BANDS: tuple[tuple[float, float], ...] = ((-90.0, -30.0), (-30.0, -10.0), (-10.0, 10.0), (10.0, 30.0), (30.0, 90.0))


def _nice(name: str) -> str:
    return name.replace("_", " ")


def band_index(theta_deg: np.ndarray, bands=BANDS) -> np.ndarray:
    """Index of the band of each inclination [deg] (bands closed below, the last one also above; -1: none).

    >>> band_index(np.array([-90.0, -30.0, 0.0, 10.0, 90.0])).tolist()
    [0, 1, 2, 3, 4]
    """
    idx = np.full(len(theta_deg), -1)
    for k, (lo, hi) in enumerate(bands):
        top = theta_deg <= hi if k == len(bands) - 1 else theta_deg < hi
        idx[(theta_deg >= lo) & top & (idx < 0)] = k
    return idx


def predicted_patterns(closure, data, solver: dict | None = None) -> np.ndarray:
    """Pattern names the point solver gives ``closure`` at each row of ``data`` (SI columns vsl, vsg,
    D, theta [rad]; roughness and fluid properties where given, else smooth air-water)."""
    cols = {k: data[k].to_numpy(np.float64).copy() for k in ("vsl", "vsg", "D", "theta")}
    for k in ("roughness", *AIR_WATER):
        cols[k] = data[k].to_numpy(np.float64).copy() if k in data else AIR_WATER.get(k, 0.0)
    with torch.no_grad():
        res = solve_points(make_conditions(**cols), closure, **(solver or {}))
    return np.array([PATTERNS[int(c)] for c in res.pattern], dtype=object)


def band_accuracy(closure, data, bands=BANDS, solver: dict | None = None) -> list[dict]:
    """Share of observed patterns the closure reproduces, per band: ``[{band: (lo, hi) [deg], n,
    correct, accuracy}]`` (accuracy NaN for an empty band). Rows whose ``pattern`` is not a
    vocabulary name (not recorded) are left out."""
    keep = data["pattern"].astype(str).isin(PATTERNS).to_numpy()
    d = data.loc[keep]
    pred = predicted_patterns(closure, d, solver) if len(d) else np.array([], dtype=object)
    ok = pred == d["pattern"].astype(str).to_numpy()
    band = band_index(np.degrees(d["theta"].to_numpy(np.float64)), bands)
    out = []
    for k, b in enumerate(bands):
        m = band == k
        n = int(m.sum())
        out.append({"band": b, "n": n, "correct": int(ok[m].sum()), "accuracy": float(ok[m].mean()) if n else float("nan")})
    return out


def plot_pattern_bands(closure, data, path: str | Path, bands=BANDS, fluids: dict | None = None, n: int = 60,
                       title: str = "", data_note: str = "", solver: dict | None = None) -> Path:
    """Write the band figure (module docstring) to ``path`` (PNG). ``data``: DataFrame with vsl,
    vsg, D [m], theta [rad], pattern; ``fluids``: properties of the maps (default air-water)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.colors import BoundaryNorm, ListedColormap
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    cmap = ListedColormap([PATTERN_COLOURS[p] for p in PATTERNS])
    norm = BoundaryNorm(np.arange(len(PATTERNS) + 1) - 0.5, len(PATTERNS))
    deg = np.degrees(data["theta"].to_numpy(np.float64))
    band = band_index(deg, bands)
    pred = predicted_patterns(closure, data, solver)
    obs = data["pattern"].astype(str).to_numpy()
    vsl, vsg, dia = (data[k].to_numpy(np.float64) for k in ("vsl", "vsg", "D"))
    vsl_r = (max(1e-3, 0.5 * float(vsl.min())), 2.0 * float(vsl.max()))
    vsg_r = (max(1e-2, 0.5 * float(vsg.min())), 2.0 * float(vsg.max()))
    fig, axes = plt.subplots(1, len(bands), figsize=(3.3 * len(bands) + 1.8, 4.6), sharey=True, squeeze=False)
    fig.subplots_adjust(left=0.06, right=0.86, bottom=0.2, top=0.8, wspace=0.08)
    seen: set[str] = set()
    for k, (lo, hi) in enumerate(bands):
        ax = axes[0, k]
        m = band == k
        th = float(np.median(deg[m])) if m.any() else 0.5 * (lo + hi)
        D = float(np.median(dia[m])) if m.any() else float(np.median(dia))
        pm = compute_pattern_map(closure, D=D, theta_deg=th, fluids=fluids, vsl=vsl_r, vsg=vsg_r, n=n, solver=solver)
        ax.pcolormesh(pm.vsg, pm.vsl, pm.codes, cmap=cmap, norm=norm, shading="nearest", alpha=0.8)
        seen.update(PATTERNS[int(c)] for c in np.unique(pm.codes))
        ax.set_xscale("log")
        ax.set_yscale("log")
        for name in PATTERNS:
            sel = m & (obs == name)
            if sel.any():
                ax.scatter(vsg[sel], vsl[sel], marker=MARKERS[name], s=22, facecolor=PATTERN_COLOURS[name],
                           edgecolor="#000000", linewidth=0.6, zorder=4)
                seen.add(name)
        wrong = m & (obs != pred) & np.isin(obs, PATTERNS)
        ax.scatter(vsg[wrong], vsl[wrong], marker="o", s=95, facecolor="none", edgecolor="#000000", linewidth=1.1,
                   zorder=5)
        n_band = int((m & np.isin(obs, PATTERNS)).sum())
        acc = f"{1 - wrong.sum() / n_band:.0%} of {n_band} right" if n_band else "no points"
        ax.set_title(f"{lo:+g} to {hi:+g} deg: {acc}\nmap at {th:+.0f} deg, D {D * 1000:.0f} mm", fontsize=8.5)
        ax.set_xlabel("v_SG [m/s]", fontsize=8)
        ax.tick_params(labelsize=7)
        ax.set_xlim(*vsg_r)
        ax.set_ylim(*vsl_r)
    axes[0, 0].set_ylabel("v_SL [m/s]", fontsize=8)
    handles = [Patch(facecolor=PATTERN_COLOURS[p], edgecolor="#777777") for p in PATTERNS if p in seen]
    labels = [_nice(p) for p in PATTERNS if p in seen]
    handles.append(Line2D([], [], marker="o", ls="none", markersize=8, markerfacecolor="none", markeredgecolor="#000000"))
    labels.append("closure disagrees")
    fig.legend(handles, labels, loc="center left", bbox_to_anchor=(0.865, 0.5), fontsize=7.5, frameon=False)
    label = getattr(closure, "label", type(closure).__name__)
    fig.suptitle(title or f"Observed flow patterns by inclination band; regions: {short(label)}", fontsize=10)
    foot = (f"Regions: the point solver on a {n} x {n} grid at each band's median inclination and diameter; "
            "scores and rings: each point solved at its own conditions. " + (data_note + " " if data_note else "") + CAUTION)
    fig.text(0.01, 0.01, "\n".join(textwrap.wrap(foot, 200)), fontsize=6.5, color="#555555", va="bottom")
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return Path(path)
