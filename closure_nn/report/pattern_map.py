"""Flow-pattern map over superficial gas and liquid velocity (log-log), one or two closures.

:func:`compute_pattern_map` runs the point solver (:func:`closure_nn.physics.point.solve_points`)
on an ``n x n`` grid for given fluids, diameter and inclination; the pattern therefore comes from
the closure's own stratified equilibrium (Taitel & Dukler 1976 criteria, Taitel, Barnea & Dukler
1980 for steep upflow; see :mod:`closure_nn.physics.patterns`).

:func:`plot_pattern_map` draws (our own layout): the first closure's regions filled, each region
named in place; a second closure's boundaries as dark dashed lines over them; data points marked
by their observed pattern (shape and fill); the caution as a footnote. Colours are the project's
pattern palette (:data:`closure_nn.report.line_plots.PATTERN_COLOURS`).
"""
from __future__ import annotations

import math
import textwrap
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import torch

from ..caution import CAUTION
from ..physics.conditions import make_conditions
from ..physics.point import solve_points
from ..physics.vocabulary import CODE, PATTERNS
from .line_plots import PATTERN_COLOURS

#: observed-pattern markers of the data overlay (our choice)
MARKERS: dict[str, str] = {
    "stratified_smooth": "o", "stratified_wavy": "s", "intermittent": "^", "annular": "D",
    "dispersed_bubble": "v", "bubble": "P", "single_phase_liquid": "X", "single_phase_gas": "x",
}
AIR_WATER = dict(rhol=998.0, rhog=1.2, mul=1.0e-3, mug=1.8e-5, sigma=0.072)
BOUNDARY_COLOUR = "#1a1a1a"


def _nice(name: str) -> str:
    return name.replace("_", " ")


@dataclass(frozen=True)
class PatternMap:
    """Pattern codes ``(n_vsl, n_vsg)`` on the grid ``vsg (n_vsg,)`` x ``vsl (n_vsl,)`` [m/s]."""

    vsg: np.ndarray
    vsl: np.ndarray
    codes: np.ndarray
    label: str
    D: float
    theta_deg: float
    fluids: dict

    def pattern_at(self, vsl: float, vsg: float) -> str:
        """Pattern name at the grid node nearest (in log) to (vsl, vsg)."""
        i = int(np.argmin(np.abs(np.log(self.vsl) - math.log(vsl))))
        j = int(np.argmin(np.abs(np.log(self.vsg) - math.log(vsg))))
        return PATTERNS[int(self.codes[i, j])]


def compute_pattern_map(closure, D: float, theta_deg: float = 0.0, fluids: dict | None = None,
                        roughness: float = 0.0, vsl: tuple[float, float] = (1e-3, 10.0),
                        vsg: tuple[float, float] = (0.05, 100.0), n: int = 120,
                        solver: dict | None = None) -> PatternMap:
    """Flow patterns of ``closure`` on a log-spaced ``n x n`` grid (SI; inclination in degrees, + up).

    >>> from closure_nn.closures.baseline import BaselineClosure
    >>> m = compute_pattern_map(BaselineClosure(), D=0.05, n=12)
    >>> m.codes.shape
    (12, 12)
    """
    fl = {**AIR_WATER, **(fluids or {})}
    gs = np.logspace(math.log10(vsg[0]), math.log10(vsg[1]), n)
    ls = np.logspace(math.log10(vsl[0]), math.log10(vsl[1]), n)
    L, G = np.meshgrid(ls, gs, indexing="ij")
    cond = make_conditions(vsl=L.ravel(), vsg=G.ravel(), D=D, theta=math.radians(theta_deg), roughness=roughness, **fl)
    with torch.no_grad():
        res = solve_points(cond, closure, **(solver or {}))
    label = getattr(closure, "label", type(closure).__name__)
    return PatternMap(gs, ls, res.pattern.numpy().reshape(L.shape), label, float(D), float(theta_deg), fl)


def _centroid_labels(ax, m: PatternMap) -> None:
    """Name each filled region at its largest-area cell cluster centre (log coordinates)."""
    lg, ll = np.log10(m.vsg), np.log10(m.vsl)
    for code in np.unique(m.codes):
        mask = m.codes == code
        if mask.sum() < 0.01 * mask.size:
            continue
        ii, jj = np.nonzero(mask)
        # the point of the region farthest from other patterns is a safe label spot; approximate by
        # the region cell nearest to its centroid
        ci, cj = ii.mean(), jj.mean()
        k = int(np.argmin((ii - ci) ** 2 + (jj - cj) ** 2))
        ax.text(10 ** lg[jj[k]], 10 ** ll[ii[k]], _nice(PATTERNS[int(code)]), ha="center", va="center", fontsize=8,
                color="#111111", bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="none", alpha=0.6))


def plot_pattern_map(base: PatternMap, path: str | Path, other: PatternMap | None = None, data=None,
                     title: str | None = None, data_note: str = "") -> Path:
    """Draw ``base`` filled, ``other`` as boundaries, ``data`` (DataFrame with vsl, vsg, pattern) as points."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.colors import BoundaryNorm, ListedColormap
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    colours = [PATTERN_COLOURS[p] for p in PATTERNS]
    cmap = ListedColormap(colours)
    norm = BoundaryNorm(np.arange(len(PATTERNS) + 1) - 0.5, len(PATTERNS))
    fig = plt.figure(figsize=(11.0, 7.6))
    ax = fig.add_axes((0.08, 0.15, 0.56, 0.76))
    ax.pcolormesh(base.vsg, base.vsl, base.codes, cmap=cmap, norm=norm, shading="nearest", alpha=0.85)
    ax.set_xscale("log")
    ax.set_yscale("log")
    _centroid_labels(ax, base)
    blank = Patch(facecolor="none", edgecolor="none")
    handles = [blank]
    labels = ["\n".join(textwrap.wrap(f"Filled regions: {base.label}", 46))]
    for c in np.unique(base.codes):
        handles.append(Patch(facecolor=PATTERN_COLOURS[PATTERNS[c]], edgecolor="#777777", alpha=0.85))
        labels.append(_nice(PATTERNS[c]))
    if other is not None:
        for code in np.unique(np.r_[other.codes.ravel(), base.codes.ravel()]):
            ind = (other.codes == code).astype(float)
            if 0 < ind.sum() < ind.size:
                ax.contour(other.vsg, other.vsl, ind, levels=[0.5], colors=BOUNDARY_COLOUR, linewidths=1.4,
                           linestyles="--")
        handles += [blank, Line2D([], [], color=BOUNDARY_COLOUR, ls="--", lw=1.4)]
        labels += ["\n".join(textwrap.wrap(f"Dashed lines: region boundaries of {other.label}", 46)),
                   "pattern boundary"]
    if data is not None and len(data):
        handles.append(blank)
        labels.append("Measured points, by observed pattern")
        for name in PATTERNS:
            sel = data["pattern"].astype(str) == name
            if sel.any():
                ax.scatter(data.loc[sel, "vsg"], data.loc[sel, "vsl"], marker=MARKERS[name], s=34,
                           facecolor=PATTERN_COLOURS[name], edgecolor="#000000", linewidth=0.9, zorder=4)
                handles.append(Line2D([], [], marker=MARKERS[name], ls="none", markersize=6,
                                      markerfacecolor=PATTERN_COLOURS[name], markeredgecolor="#000000"))
                labels.append(f"{_nice(name)} ({int(sel.sum())})")
        unl = ~data["pattern"].astype(str).isin(PATTERNS)
        if unl.any():
            ax.scatter(data.loc[unl, "vsg"], data.loc[unl, "vsl"], marker=".", s=30, color="#000000", zorder=4)
            handles.append(Line2D([], [], marker=".", ls="none", color="#000000"))
            labels.append(f"not recorded ({int(unl.sum())})")
    ax.set_xlim(base.vsg[0], base.vsg[-1])
    ax.set_ylim(base.vsl[0], base.vsl[-1])
    ax.set_xlabel("superficial gas velocity v_SG [m/s]")
    ax.set_ylabel("superficial liquid velocity v_SL [m/s]")
    f = base.fluids
    ax.set_title(title or (f"Flow patterns, D = {base.D * 1000:g} mm, inclination {base.theta_deg:+g} deg\n"
                           f"rho_L = {f['rhol']:g}, rho_G = {f['rhog']:g} kg/m3; mu_L = {f['mul'] * 1000:g}, "
                           f"mu_G = {f['mug'] * 1000:g} mPa s; sigma = {f['sigma'] * 1000:g} mN/m"), fontsize=10)
    ax.grid(True, which="major", color="#ffffff", lw=0.6, alpha=0.7)
    fig.legend(handles, labels, loc="upper left", bbox_to_anchor=(0.66, 0.91), fontsize=8, frameon=False)
    foot = ("Regions and boundaries: the point solver of each closure on a "
            f"{len(base.vsg)} x {len(base.vsl)} grid. " + (data_note + " " if data_note else "") + CAUTION)
    fig.text(0.01, 0.005, "\n".join(textwrap.wrap(foot, 190)), fontsize=6.5, color="#555555", va="bottom")
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return Path(path)


def short(label: str) -> str:
    """A closure label short enough for a legend entry."""
    return label if len(label) <= 60 else label[:57] + "..."


def disagreement(a: PatternMap, b: PatternMap) -> float:
    """Share of grid nodes where two maps on the same grid give different patterns [-]."""
    if a.codes.shape != b.codes.shape:
        raise ValueError(f"maps on different grids: {a.codes.shape} vs {b.codes.shape}")
    return float((a.codes != b.codes).mean())


assert set(MARKERS) == set(PATTERNS) == set(CODE)  # every pattern has a marker (import-time contract)
