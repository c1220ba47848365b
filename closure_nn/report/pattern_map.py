"""Flow-pattern map over superficial gas and liquid velocity (log-log), one or two closures.

:func:`compute_pattern_map` runs the point solver (:func:`closure_nn.physics.point.solve_points`)
on an ``n x n`` grid for given fluids, diameter and inclination; the pattern therefore comes from
the closure's own stratified equilibrium (Taitel & Dukler 1976 criteria, Taitel, Barnea & Dukler
1980 for steep upflow; see :mod:`closure_nn.physics.patterns`).

:func:`plot_pattern_map` draws (our own layout): the first closure's regions filled with thin solid
boundaries, each region named in place where its name stays clear of edges and markers
(:func:`label_spots`; else in the legend); a second closure's boundaries as dark dashed lines;
data points marked by their observed pattern (shape and fill) with a dark edge and a white halo,
so a point stays visible inside the region of its own colour; the caution as a footnote. Colours are the project's
pattern palette (:data:`closure_nn.report.line_plots.PATTERN_COLOURS`).

Observed patterns per inclination band (scores and one panel per band):
:mod:`closure_nn.report.pattern_bands`.

matplotlib is imported inside the drawing functions (with the file-only Agg backend): commands
that do not draw never load it, and importing this module never switches a user's backend.
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
MARKER_EDGE = "#141414"  #: dark marker edge; a white halo around it keeps markers visible in any region


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


#: label box half-size in axes fractions: width per character, height (font size 8 at this figure size)
_CHAR_W, _HALF_H = 0.0078, 0.026


def _boundary_cells(codes: np.ndarray) -> np.ndarray:
    """(n_vsl, n_vsg) bool: grid cells with a neighbour of another pattern."""
    b = np.zeros(codes.shape, dtype=bool)
    b[1:, :] |= codes[1:, :] != codes[:-1, :]
    b[:-1, :] |= codes[1:, :] != codes[:-1, :]
    b[:, 1:] |= codes[:, 1:] != codes[:, :-1]
    b[:, :-1] |= codes[:, 1:] != codes[:, :-1]
    return b


def label_spots(m: PatternMap, points: np.ndarray | None = None, min_share: float = 0.01) -> dict[int, tuple[float, float]]:
    """Where to write each region's name: the cell of the region whose label box keeps farthest
    from the region's edge and from every data marker (box distance, in box sizes). A region
    whose name cannot be written clear of both (no cell scores >= 1) gets no spot: it is named
    in the legend only.

    ``points``: (N, 2) marker positions (vsg, vsl) [m/s]. Returns {pattern code: (vsg, vsl)}.

    >>> from closure_nn.physics.vocabulary import CODE
    >>> codes = np.zeros((40, 40), dtype=int); codes[:, 20:] = CODE["annular"]
    >>> g = np.logspace(-1, 1, 40)
    >>> pm = PatternMap(g, g, codes, "x", 0.05, 0.0, {})
    >>> spots = label_spots(pm)
    >>> sorted(spots) == sorted({0, CODE["annular"]}) and spots[CODE["annular"]][0] > 1.0
    True
    >>> label_spots(pm, points=np.array([[x, y] for x in g[::2] for y in g[::2]])) == {}  # markers everywhere
    True
    """
    lg, ll = np.log10(m.vsg), np.log10(m.vsl)
    u = (lg - lg[0]) / (lg[-1] - lg[0])  # axes fractions
    v = (ll - ll[0]) / (ll[-1] - ll[0])
    V, U = np.meshgrid(v, u, indexing="ij")
    edge = _boundary_cells(m.codes)
    eu, ev = U[edge], V[edge]
    if points is not None and len(points):
        pu = (np.log10(points[:, 0]) - lg[0]) / (lg[-1] - lg[0])
        pv = (np.log10(points[:, 1]) - ll[0]) / (ll[-1] - ll[0])
    else:
        pu = pv = np.zeros(0)
    # the frame counts as an edge too: a label must fit inside the axes
    out = {}
    for code in np.unique(m.codes):
        mask = m.codes == code
        if mask.sum() < min_share * mask.size:
            continue
        hw = _CHAR_W * len(_nice(PATTERNS[int(code)])) + 0.01
        ii, jj = np.nonzero(mask)
        cu, cv = U[ii, jj], V[ii, jj]

        def box_dist(qu: np.ndarray, qv: np.ndarray) -> np.ndarray:
            if len(qu) == 0:
                return np.full(len(cu), np.inf)
            d = np.maximum(np.abs(cu[:, None] - qu[None, :]) / hw, np.abs(cv[:, None] - qv[None, :]) / _HALF_H)
            return d.min(axis=1)

        other = m.codes[edge] != code  # edge cells of other regions bound this one
        frame = np.minimum(np.minimum(cu / hw, (1 - cu) / hw), np.minimum(cv / _HALF_H, (1 - cv) / _HALF_H))
        score = np.minimum.reduce([box_dist(eu[other], ev[other]), box_dist(pu, pv) / 1.3, frame])
        k = int(np.argmax(score))
        if score[k] >= 1.0:
            out[int(code)] = (float(10 ** lg[jj[k]]), float(10 ** ll[ii[k]]))
    return out


def _region_labels(ax, m: PatternMap, points: np.ndarray | None) -> list[str]:
    """Name each filled region in place, clear of markers and edges; returns the names not placed."""
    spots = label_spots(m, points)
    for code, (x, y) in spots.items():
        ax.text(x, y, _nice(PATTERNS[code]), ha="center", va="center", fontsize=8, color="#111111", zorder=6,
                bbox=dict(boxstyle="round,pad=0.25", fc="white", ec="#666666", lw=0.5, alpha=0.85))
    return [PATTERNS[int(c)] for c in np.unique(m.codes) if int(c) not in spots]


def plot_pattern_map(base: PatternMap, path: str | Path, other: PatternMap | None = None, data=None,
                     title: str | None = None, data_note: str = "") -> Path:
    """Draw ``base`` filled with its boundaries as thin solid lines, ``other``'s boundaries dashed,
    ``data`` (DataFrame with vsl, vsg, pattern) as points with a dark edge and a white halo."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.patheffects as pe
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
    _boundaries(ax, base, ls="-", lw=0.9)
    blank = Patch(facecolor="none", edgecolor="none")
    handles = [blank]
    labels = ["\n".join(textwrap.wrap(f"Filled regions, solid lines: {base.label}", 46))]
    for c in np.unique(base.codes):
        handles.append(Patch(facecolor=PATTERN_COLOURS[PATTERNS[c]], edgecolor="#777777", alpha=0.85))
        labels.append(_nice(PATTERNS[c]))
    handles.append(Line2D([], [], color=BOUNDARY_COLOUR, ls="-", lw=0.9))
    labels.append("baseline boundary")
    if other is not None:
        _boundaries(ax, other, ls="--", lw=1.6)
        handles += [blank, Line2D([], [], color=BOUNDARY_COLOUR, ls="--", lw=1.6)]
        labels += ["\n".join(textwrap.wrap(f"Dashed lines: {other.label}", 46)), "its region boundary"]
    halo = [pe.withStroke(linewidth=2.6, foreground="white")]
    points = None
    if data is not None and len(data):
        points = data[["vsg", "vsl"]].to_numpy(np.float64)
        handles.append(blank)
        labels.append("Measured points, by observed pattern")
        for name in PATTERNS:
            sel = data["pattern"].astype(str) == name
            if sel.any():
                ax.scatter(data.loc[sel, "vsg"], data.loc[sel, "vsl"], marker=MARKERS[name], s=36,
                           facecolor=PATTERN_COLOURS[name], edgecolor=MARKER_EDGE, linewidth=1.0, zorder=5,
                           path_effects=halo)
                handles.append(Line2D([], [], marker=MARKERS[name], ls="none", markersize=6.5,
                                      markerfacecolor=PATTERN_COLOURS[name], markeredgecolor=MARKER_EDGE,
                                      path_effects=halo))
                labels.append(f"{_nice(name)} ({int(sel.sum())})")
        unl = ~data["pattern"].astype(str).isin(PATTERNS)
        if unl.any():
            ax.scatter(data.loc[unl, "vsg"], data.loc[unl, "vsl"], marker="o", s=10, color=MARKER_EDGE, zorder=4,
                       path_effects=halo)
            handles.append(Line2D([], [], marker="o", markersize=3.5, ls="none", color=MARKER_EDGE, path_effects=halo))
            labels.append(f"not recorded ({int(unl.sum())})")
    ax.set_xlim(base.vsg[0], base.vsg[-1])
    ax.set_ylim(base.vsl[0], base.vsl[-1])
    unplaced = _region_labels(ax, base, points)
    if unplaced:  # named in the legend only: say so
        handles.append(blank)
        labels.append("\n".join(textwrap.wrap("Not named in place (too narrow or crowded): " +
                                              ", ".join(_nice(n) for n in unplaced) + " (see the colours above)", 46)))
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


def _boundaries(ax, m: PatternMap, ls: str, lw: float) -> None:
    """Every region boundary of ``m`` as a contour line."""
    for code in np.unique(m.codes):
        ind = (m.codes == code).astype(float)
        if 0 < ind.sum() < ind.size:
            ax.contour(m.vsg, m.vsl, ind, levels=[0.5], colors=BOUNDARY_COLOUR, linewidths=lw, linestyles=ls)


def short(label: str) -> str:
    """A closure label short enough for a legend entry."""
    return label if len(label) <= 60 else label[:57] + "..."


def disagreement(a: PatternMap, b: PatternMap) -> float:
    """Share of grid nodes where two maps on the same grid give different patterns [-]."""
    if a.codes.shape != b.codes.shape:
        raise ValueError(f"maps on different grids: {a.codes.shape} vs {b.codes.shape}")
    return float((a.codes != b.codes).mean())


assert set(MARKERS) == set(PATTERNS) == set(CODE)  # every pattern has a marker (import-time contract)
