"""Line plot: pressure and holdup along distance over the elevation profile, pattern bands.

Layout (our own): two stacked panels share the distance axis - pressure [bar] and holdup [-],
each drawn over the terrain (elevation, right axis, shaded) - and below them one thin band per
closure coloured by flow pattern, with out-of-domain stations marked by a dark tick row above
the band and a hatched span in the panels. In the same tick row a light tick marks stations
inside the training domain but outside the measured-data domain (supported by synthetic baseline
points only). An ensemble appears as a shaded min-max band with its mean dashed. The caution is
printed at the foot of the figure.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from ..caution import CAUTION
from ..physics.vocabulary import PATTERNS

#: flow pattern -> colour (our palette)
PATTERN_COLOURS: dict[str, str] = {
    "stratified_smooth": "#9cc5d9", "stratified_wavy": "#3f7fa6", "intermittent": "#d9794a",
    "annular": "#6fa37a", "dispersed_bubble": "#e8c468", "bubble": "#a58cc9",
    "single_phase_liquid": "#2f3d55", "single_phase_gas": "#cbd2d6",
}
LINE_COLOURS = ("#23395b", "#b5473a", "#4c7d5d", "#8a5a9e", "#c08a1e", "#3c8d99")
TERRAIN = "#e9e1d2"
TERRAIN_EDGE = "#b9a98c"
BAND = "#d8b26e"
OUTSIDE_DOMAIN = "#3a1010"  #: tick: outside the training domain
OUTSIDE_MEASURED = "#d9b3b3"  #: lighter tick: outside the measured-data domain only


def _terrain(ax, x_km, z):
    tw = ax.twinx()
    tw.fill_between(x_km, z, z.min() - 0.05 * (np.ptp(z) + 1), color=TERRAIN, edgecolor=TERRAIN_EDGE, lw=0.8, zorder=0)
    tw.set_ylabel("elevation [m]", color=TERRAIN_EDGE)
    tw.tick_params(axis="y", colors=TERRAIN_EDGE)
    ax.set_zorder(tw.get_zorder() + 1)
    ax.patch.set_visible(False)
    return tw


def _runs(x: np.ndarray, labels: np.ndarray):
    """(start, width, label) runs of equal labels; each station owns half of its neighbours' gaps."""
    edges = np.concatenate([[x[0]], 0.5 * (x[1:] + x[:-1]), [x[-1]]])
    out, i = [], 0
    while i < len(labels):
        j = i
        while j + 1 < len(labels) and labels[j + 1] == labels[i]:
            j += 1
        out.append((edges[i], edges[j + 1] - edges[i], labels[i]))
        i = j + 1
    return out


def plot_line(stations, band=None, path: str | Path = "line.png", title: str = "line") -> Path:
    """Draw the line figure from a station table (:func:`closure_nn.line.results.station_table`
    rows of role 'compare') and an optional ensemble band table; returns the PNG path."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.patches import Patch

    comp = stations[stations["role"] == "compare"]
    names = list(dict.fromkeys(comp["closure"]))
    n_bands = max(len(names), 1)
    fig = plt.figure(figsize=(11, 7.5 + 0.35 * n_bands))
    gs = fig.add_gridspec(3, 1, height_ratios=[3.0, 2.2, 0.45 * n_bands + 0.3], hspace=0.12)
    ax_p, ax_h = fig.add_subplot(gs[0]), fig.add_subplot(gs[1])
    ax_b = fig.add_subplot(gs[2], sharex=ax_p)
    ax_h.sharex(ax_p)
    ref = comp[comp["closure"] == names[0]] if names else stations
    x_km, z = ref["distance"].to_numpy() / 1e3, ref["elevation"].to_numpy()
    for ax in (ax_p, ax_h):
        _terrain(ax, x_km, z)
        ax.grid(True, color="#d5d5d5", lw=0.5, zorder=1)
    if band is not None and len(band):
        bx = band["distance"].to_numpy() / 1e3
        ax_p.fill_between(bx, band["p_min"] / 1e5, band["p_max"] / 1e5, color=BAND, alpha=0.55, lw=0, label="ensemble min-max")
        ax_p.plot(bx, band["p_mean"] / 1e5, color="#8c6420", ls="--", lw=1.1, label="ensemble mean")
        ax_h.fill_between(bx, band["holdup_min"], band["holdup_max"], color=BAND, alpha=0.55, lw=0)
        ax_h.plot(bx, band["holdup_mean"], color="#8c6420", ls="--", lw=1.1)
    ood_any = np.zeros(len(ref), dtype=bool)
    for k, name in enumerate(names):
        d = comp[comp["closure"] == name]
        c = LINE_COLOURS[k % len(LINE_COLOURS)]
        xk = d["distance"].to_numpy() / 1e3
        ax_p.plot(xk, d["p"] / 1e5, color=c, lw=1.6, label=name)
        ax_h.plot(xk, d["holdup"], color=c, lw=1.2, label=name)
        prof = d[d["profile_station"]]
        if len(prof) == len(ood_any):
            ood_any |= ~prof["in_domain"].to_numpy(dtype=bool)
    for ax in (ax_p, ax_h):
        for a, w, lab in _runs(x_km, ood_any):
            if lab:
                ax.axvspan(a, a + w, facecolor="none", edgecolor="#7a1f1f", hatch="///", lw=0, alpha=0.5, zorder=2)
    ax_p.set_ylabel("pressure [bar a]")
    ax_h.set_ylabel("liquid holdup [-]")
    ax_h.set_ylim(bottom=0)
    ax_p.legend(loc="upper right", fontsize=8, frameon=False)
    # pattern bands, one per closure
    unmeasured_any = False
    for k, name in enumerate(names):
        d = comp[comp["closure"] == name]
        xk = d["distance"].to_numpy() / 1e3
        y0 = n_bands - 1 - k
        for a, w, lab in _runs(xk, d["pattern"].to_numpy()):
            ax_b.broken_barh([(a, w)], (y0 + 0.08, 0.62), facecolors=PATTERN_COLOURS.get(lab, "#888888"), lw=0)
        bad = ~d["in_domain"].to_numpy(dtype=bool)
        unmeasured = (~d["in_measured_domain"].to_numpy(dtype=bool)) if "in_measured_domain" in d else np.zeros_like(bad)
        unmeasured_any |= bool(unmeasured.any())
        for mask, colour in ((unmeasured & ~bad, OUTSIDE_MEASURED), (bad, OUTSIDE_DOMAIN)):
            for a, w, lab in _runs(xk, mask):
                if lab:
                    ax_b.broken_barh([(a, max(w, 1e-3 * (xk[-1] - xk[0])))], (y0 + 0.74, 0.16), facecolors=colour, lw=0)
    ax_b.set_yticks([n_bands - 1 - k + 0.45 for k in range(len(names))], names, fontsize=8)
    ax_b.set_ylim(0, n_bands)
    ax_b.set_xlabel("distance along the pipe [km]")
    used = [p for p in PATTERNS if p in set(comp["pattern"])]
    handles = [Patch(color=PATTERN_COLOURS[p], label=p.replace("_", " ")) for p in used]
    if ood_any.any() or (~comp["in_domain"].astype(bool)).any():
        handles.append(Patch(color=OUTSIDE_DOMAIN, label="outside training domain"))
    if unmeasured_any:
        handles.append(Patch(color=OUTSIDE_MEASURED, label="outside measured data"))
    ax_b.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.55), ncol=min(len(handles), 5),
                fontsize=8, frameon=False)
    for ax in (ax_p, ax_h):
        plt.setp(ax.get_xticklabels(), visible=False)
    ax_p.set_title(title, loc="left", fontsize=11)
    # below the pattern legend; bbox_inches="tight" keeps it in the picture
    fig.text(0.01, -0.03, CAUTION, fontsize=6, color="#555555", wrap=True, va="top")
    path = Path(path)
    fig.savefig(path, dpi=110, bbox_inches="tight")
    plt.close(fig)
    return path
