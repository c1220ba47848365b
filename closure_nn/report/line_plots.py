"""Line plot: pressure and holdup along distance over the elevation profile, pattern bands.

Layout (our own): two stacked panels share the distance axis - pressure [bar] and holdup [-],
each drawn over the terrain (elevation, right axis, shaded) - and below them one thin band per
closure coloured by flow pattern, with out-of-domain stations marked by a dark tick row above
the band and a hatched span in the panels. In the same tick row a light tick marks stations
inside the training domain but outside the measured-data domain (supported by synthetic baseline
points only). An ensemble appears as a shaded min-max band with its mean dashed. The caution is
printed at the foot of the figure.

matplotlib is imported inside the drawing functions (with the file-only Agg backend): importing
this module (e.g. for :func:`key_numbers`) never loads it or switches a user's backend.
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


#: header of the key-number table under the line figure
KEY_HEADER = ("closure", "inlet p\n[bar a]", "outlet p\n[bar a]", "pressure drop\n[bar]",
              "of it friction / gravity\n[bar]", "liquid inventory\n[m3]")


def key_numbers(summary: dict) -> list[tuple[str, ...]]:
    """Rows of the key-number table from a line summary (:meth:`closure_nn.line.run.LineRun.summary`):
    inlet and outlet pressure, pressure drop with its friction and gravity parts, and liquid
    inventory per closure, then the ensemble's min-max.

    >>> s = {"closures": {"baseline": {"p_inlet_Pa": 30e5, "p_outlet_Pa": 29.2e5, "dp_total_Pa": 0.8e5,
    ...      "dp_friction_Pa": 0.5e5, "dp_gravity_Pa": 0.3e5, "liquid_inventory_m3": 12.34}}}
    >>> key_numbers(s)
    [('baseline', '30.00', '29.20', '0.800', '0.500 / 0.300', '12.3')]
    """
    out = []
    for name, c in summary.get("closures", {}).items():
        out.append((name, f"{c['p_inlet_Pa'] / 1e5:.2f}", f"{c['p_outlet_Pa'] / 1e5:.2f}", f"{c['dp_total_Pa'] / 1e5:.3f}",
                    f"{c['dp_friction_Pa'] / 1e5:.3f} / {c['dp_gravity_Pa'] / 1e5:.3f}",
                    f"{c['liquid_inventory_m3']:.1f}"))
    e = summary.get("ensemble")
    if e:
        rng = lambda k, f=1e-5, fmt=".2f": f"{e[k]['min'] * f:{fmt}} - {e[k]['max'] * f:{fmt}}"  # noqa: E731
        out.append((f"ensemble of {e['members']} (min - max)", rng("p_inlet_Pa"), rng("p_outlet_Pa"),
                    rng("dp_total_Pa", fmt=".3f"), "", rng("liquid_inventory_m3", 1.0, ".1f")))
    return out


def _key_table(ax, rows: list[tuple[str, ...]], colours: list[str]) -> None:
    """The key numbers as a plain table under the figure; each closure name in its line colour."""
    ax.axis("off")
    tab = ax.table(cellText=[list(r) for r in rows], colLabels=list(KEY_HEADER), cellLoc="right", colLoc="right",
                   loc="upper center", edges="horizontal", colWidths=[0.26, 0.13, 0.13, 0.14, 0.19, 0.15])
    tab.auto_set_font_size(False)
    tab.set_fontsize(8.5)
    tab.scale(1.0, 1.3)
    for (r, c), cell in tab.get_celld().items():
        cell.set_edgecolor("#bbbbbb")
        if c == 0:
            cell.set_text_props(ha="left")
            cell._loc = "left"
        if r == 0:
            cell.set_text_props(weight="bold", color="#333333")
            cell.set_height(cell.get_height() * 1.8)
        elif c == 0 and r - 1 < len(colours):
            cell.set_text_props(color=colours[r - 1], weight="bold")


def plot_line(stations, band=None, path: str | Path = "line.png", title: str = "line", summary: dict | None = None) -> Path:
    """Draw the line figure from a station table (:func:`closure_nn.line.results.station_table`
    rows of role 'compare') and an optional ensemble band table; returns the PNG path.
    ``summary`` (the run's summary dict) adds the key-number table under the figure."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    comp = stations[stations["role"] == "compare"]
    names = list(dict.fromkeys(comp["closure"]))
    n_bands = max(len(names), 1)
    rows = key_numbers(summary) if summary else []
    table_h = 0.27 * (len(rows) + 2) if rows else 0.0
    fig = plt.figure(figsize=(11, 7.5 + 0.35 * n_bands + (table_h + 0.8 if rows else 0.0)))
    # rows: pressure, holdup, pattern bands, (room for the axis label and the pattern key, key numbers)
    ratios = [3.0, 2.2, 0.45 * n_bands + 0.3] + ([0.8, table_h] if rows else [])
    gs = fig.add_gridspec(len(ratios), 1, height_ratios=ratios, hspace=0.12)
    ax_p, ax_h = fig.add_subplot(gs[0]), fig.add_subplot(gs[1])
    ax_b = fig.add_subplot(gs[2], sharex=ax_p)
    ax_h.sharex(ax_p)
    ood_any = _profiles(ax_p, ax_h, stations, comp, names, band)
    unmeasured_any = _pattern_bands(ax_b, comp, names, n_bands)
    _pattern_key(ax_b, comp, ood_any.any(), unmeasured_any)
    for ax in (ax_p, ax_h):
        plt.setp(ax.get_xticklabels(), visible=False)
    ax_p.set_title(title, loc="left", fontsize=11)
    if rows:
        fig.add_subplot(gs[3]).axis("off")
        _key_table(fig.add_subplot(gs[4]), rows, [LINE_COLOURS[k % len(LINE_COLOURS)] for k in range(len(names))])
    # below the pattern legend; bbox_inches="tight" keeps it in the picture
    y_foot = fig.axes[-1].get_position().y0 - (0.0 if rows else 0.03)  # under the key numbers or the pattern key
    fig.text(0.01, y_foot, CAUTION, fontsize=6, color="#555555", wrap=True, va="top")
    path = Path(path)
    fig.savefig(path, dpi=110, bbox_inches="tight")
    plt.close(fig)
    return path


def _profiles(ax_p, ax_h, stations, comp, names: list[str], band) -> np.ndarray:
    """Pressure and holdup of each closure (and the ensemble band) over the terrain, out-of-domain
    spans hatched; returns where any closure is outside its training domain (profile stations)."""
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
    return ood_any


def _pattern_bands(ax_b, comp, names: list[str], n_bands: int) -> bool:
    """One band per closure coloured by flow pattern, with the tick row of stations outside the
    training (dark) or only the measured-data domain (light); returns whether any is light."""
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
    return unmeasured_any


def _pattern_key(ax_b, comp, ood_any: bool, unmeasured_any: bool) -> None:
    """The legend of the pattern colours and domain ticks, under the bands."""
    from matplotlib.patches import Patch

    used = [p for p in PATTERNS if p in set(comp["pattern"])]
    handles = [Patch(color=PATTERN_COLOURS[p], label=p.replace("_", " ")) for p in used]
    if ood_any or (~comp["in_domain"].astype(bool)).any():
        handles.append(Patch(color=OUTSIDE_DOMAIN, label="outside training domain"))
    if unmeasured_any:
        handles.append(Patch(color=OUTSIDE_MEASURED, label="outside measured data"))
    ax_b.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.55), ncol=min(len(handles), 5),
                fontsize=8, frameon=False)


def line_figure(run, stations, band, path: str | Path) -> Path:
    """The figure writer of :func:`closure_nn.line.run.write_line_run`: :func:`plot_line` of a
    :class:`~closure_nn.line.run.LineRun` with the line's name as title ("invented" added where the
    line is marked invented and its name does not say so)."""
    invented = run.line.invented and "invented" not in run.line.name.lower()
    title = run.line.name + (" (invented line)" if invented else "")
    return plot_line(stations, band, path, title=title, summary=run.summary())
