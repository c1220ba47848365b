"""Audit report: Markdown plus PNG figures (matplotlib, Agg backend) in a run folder.

Figures (our own layout and colours):

* ``residuals.png`` - histograms of the normalised residuals r_L, r_G, r_F (top) and of the
  standardised residuals e (bottom, with the k-robust-sd flag limits), all rows vs suspect rows;
* ``measured_vs_closure.png`` - measured against closure holdup and pgrad, suspects marked;
* ``multiple_roots.png`` - number of stratified equilibrium roots over v_SG x v_SL per inclination,
  zoomed to where the equation has several roots.

matplotlib is imported inside the drawing functions (with the file-only Agg backend): commands
that do not draw never load it, and importing this module never switches a user's backend.
"""
from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import pandas as pd

from ..caution import CAUTION
from ..data.result_tables import write_result_csv
from ..audit.dataset import CHECKS, AuditResult
from ..audit.health import HealthReport

#: our palette: all rows, suspect rows, flag limits, reference line
C_ALL, C_SUSPECT, C_LIMIT, C_REF = "#5b7fa6", "#b8420f", "#3d3d3d", "#8a8a8a"
E_CLIP = 15.0  # range of the standardised-residual histograms [sd]
ROOT_COLOURS = ("#f2f2f2", "#cfe3cf", "#e9a23b", "#7b2d8e")  # 0, 1, 2, 3 roots


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _foot(fig, text: str = CAUTION) -> None:
    fig.text(0.01, 0.005, "\n".join(textwrap.wrap(text, 180)), fontsize=6.5, color="#555555", va="bottom")


def md_table(df: pd.DataFrame, floatfmt: str = ".3g", max_rows: int | None = None) -> str:
    """A GitHub-style Markdown table of ``df`` (no extra dependency)."""
    d = df if max_rows is None else df.head(max_rows)

    def cell(v) -> str:
        if isinstance(v, (float, np.floating)):
            return "-" if not np.isfinite(v) else format(float(v), floatfmt)
        return str(v).replace("|", "/").replace("\n", " ")

    head = "| " + " | ".join(map(str, d.columns)) + " |"
    sep = "|" + "---|" * len(d.columns)
    body = ["| " + " | ".join(cell(v) for v in row) + " |" for row in d.itertuples(index=False)]
    more = [f"\n({len(df) - len(d)} more rows in the CSV)"] if len(d) < len(df) else []
    return "\n".join([head, sep, *body, *more])


def _finish(plt, fig, title: str, path: str | Path, top: float = 0.95) -> Path:
    """Title, layout, caution footer, save as PNG and close."""
    fig.suptitle(title, fontsize=10)
    fig.tight_layout(rect=(0, 0.05, 1, top))
    _foot(fig)
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return Path(path)


def plot_residuals(res: AuditResult, path: str | Path) -> Path:
    plt = _plt()
    t = res.table
    fig, axes = plt.subplots(2, 4, figsize=(14, 6.6))
    sus = t["suspect"].to_numpy()
    names = {"liquid": "liquid balance", "gas": "gas balance", "combined": "combined equation", "joint": "both balances at once"}
    for j, r in enumerate(("liquid", "gas", "combined")):
        ax = axes[0, j]
        x = t[f"res_{r}"].to_numpy(float)
        ok = np.isfinite(x)
        bins = np.linspace(-1, 1, 41)
        ax.hist(x[ok], bins=bins, color=C_ALL, alpha=0.85, label=f"all rows ({ok.sum()})")
        ax.hist(x[ok & sus], bins=bins, color=C_SUSPECT, alpha=0.9, label=f"suspect rows ({(ok & sus).sum()})")
        ax.axvline(0, color=C_REF, lw=0.8)
        ax.set_title(f"{names[r]}: r = R / (sum of |terms|)", fontsize=9)
        ax.set_xlabel("normalised residual r [-]")
        ax.set_ylabel("rows")
        ax.legend(fontsize=7, frameon=False)
    axes[0, 3].axis("off")
    axes[0, 3].text(0, 0.95, "How to read:\n\ntop: residual of the momentum balance at the\nmeasured state, "
                    "divided by the sum of the\nmagnitudes of its terms (0 = closes exactly,\n+-1 = one force "
                    "unbalanced).\n\nbottom: standard deviations of the measurement\nneeded to close the balance "
                    f"(e).\nDashed: flag limits, median +- {res.settings.k_robust:g} robust sd\n(stratified rows).",
                    va="top", fontsize=8, transform=axes[0, 3].transAxes)
    for j, r in enumerate(("liquid", "gas", "combined", "joint")):
        ax = axes[1, j]
        top = E_CLIP
        x = np.clip(t[f"e_{r}"].to_numpy(float), -top, top)  # beyond the range: counted in the end bins
        ok = np.isfinite(x)
        bins = np.linspace(-top if r != "joint" else 0, top, 41)
        ax.hist(x[ok], bins=bins, color=C_ALL, alpha=0.85, label="all rows")
        ax.hist(x[ok & sus], bins=bins, color=C_SUSPECT, alpha=0.9, label="suspect rows")
        st = res.stats.get(f"stratified/{r}")
        if st:
            for sgn in (-1, 1):
                ax.axvline(st["standardised_median"] + sgn * res.settings.k_robust * st["standardised_robust_sd"],
                           color=C_LIMIT, ls="--", lw=1)
        ax.set_title(names[r], fontsize=9)
        ax.set_xlabel(f"standardised residual e [measurement sd]\n(end bins hold all |e| >= {E_CLIP:g})", fontsize=8)
        ax.set_ylabel("rows")
    return _finish(plt, fig, f"Momentum-balance residuals at the measured states - closure {res.closure_label}",
                   path, top=0.96)


def plot_measured_vs_closure(res: AuditResult, path: str | Path) -> Path:
    plt = _plt()
    t = res.table
    sus = t["suspect"].to_numpy()
    fig, axes = plt.subplots(1, 2, figsize=(11, 5.2))
    for ax, col, unit in ((axes[0], "holdup", "[-]"), (axes[1], "pgrad", "[Pa/m]")):
        x, y = t[f"{col}_pred"].to_numpy(float), t[col].to_numpy(float)
        ok = np.isfinite(x) & np.isfinite(y)
        ax.scatter(x[ok & ~sus], y[ok & ~sus], s=16, color=C_ALL, label="consistent rows", zorder=2)
        ax.scatter(x[ok & sus], y[ok & sus], s=40, marker="D", facecolor="none", edgecolor=C_SUSPECT, lw=1.3,
                   label="suspect rows", zorder=3)
        lim = [np.nanmin(np.r_[x[ok], y[ok]]), np.nanmax(np.r_[x[ok], y[ok]])] if ok.any() else [0, 1]
        ax.plot(lim, lim, color=C_REF, lw=0.8, label="measured = closure")
        if col == "pgrad":
            ax.set_xscale("symlog", linthresh=10)
            ax.set_yscale("symlog", linthresh=10)
            ax.set_title("pressure gradient -dp/dx (symmetric log: linear within +-10 Pa/m)", fontsize=9)
        else:
            ax.set_title("liquid holdup", fontsize=9)
        ax.set_xlabel(f"closure {col} {unit}")
        ax.set_ylabel(f"measured {col} {unit}")
        ax.legend(fontsize=8, frameon=False)
    return _finish(plt, fig, f"Measurements against the closure's point solution - {res.closure_label}", path)


def several_roots_window(roots: dict, margin_decades: float = 0.5) -> tuple[tuple[float, float], tuple[float, float]] | None:
    """The v_SG and v_SL ranges [m/s] (common to all panels) that hold every grid cell with more
    than one stratified root, widened by ``margin_decades`` each side and kept inside the grid;
    None where no cell has several roots.

    >>> g = np.logspace(-1, 1, 21)
    >>> n = np.ones((21, 21), dtype=int); n[3, 10] = 3
    >>> (gx, lx) = several_roots_window({1.0: {"vsg": g, "vsl": g, "n_roots": n}})[0:2]
    >>> [round(float(np.log10(v)), 2) for v in (*gx, *lx)]
    [-0.5, 0.5, -1.0, -0.2]
    """
    lo_g = lo_l = np.inf
    hi_g = hi_l = -np.inf
    full = None
    for m in roots.values():
        g, l_ = np.asarray(m["vsg"]), np.asarray(m["vsl"])
        full = (g[0], g[-1], l_[0], l_[-1])
        ii, jj = np.nonzero(np.asarray(m["n_roots"]) > 1)
        if len(ii):
            lo_g, hi_g = min(lo_g, g[jj].min()), max(hi_g, g[jj].max())
            lo_l, hi_l = min(lo_l, l_[ii].min()), max(hi_l, l_[ii].max())
    if full is None or not np.isfinite(lo_g):
        return None
    f = 10.0 ** margin_decades
    return ((max(lo_g / f, full[0]), min(hi_g * f, full[1])), (max(lo_l / f, full[2]), min(hi_l * f, full[3])))


def plot_root_map(health: HealthReport, path: str | Path) -> Path:
    """Number of stratified roots over v_SG x v_SL per inclination, zoomed to where the equation has
    several roots (the rest of the grid has one root or none, as the panel notes say)."""
    from matplotlib.colors import BoundaryNorm, ListedColormap
    from matplotlib.patches import Patch
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    plt = _plt()
    keys = list(health.roots)
    n = max(len(keys), 1)
    fig, axes = plt.subplots(1, n, figsize=(4.3 * n + 0.5, 4.9), squeeze=False)
    cmap, norm = ListedColormap(ROOT_COLOURS), BoundaryNorm([-0.5, 0.5, 1.5, 2.5, 3.5], 4)
    window = several_roots_window(health.roots)
    for ax, k in zip(axes[0], keys):
        m = health.roots[k]
        counts = np.clip(np.asarray(m["n_roots"]), 0, 3)
        ax.pcolormesh(m["vsg"], m["vsl"], counts, cmap=cmap, norm=norm, shading="nearest", edgecolors="face")
        ax.set_xscale("log")
        ax.set_yscale("log")
        if window is not None:
            ax.set_xlim(*window[0])
            ax.set_ylim(*window[1])
        several = int((counts > 1).sum())
        ax.set_title(f"inclination {k:+g} deg, D = {m['D'] * 1000:g} mm\n"
                     f"{several} of {counts.size} grid cells with several roots", fontsize=9)
        for axis, lim in ((ax.xaxis, ax.get_xlim()), (ax.yaxis, ax.get_ylim())):  # plain numbers, no crowding
            wide = np.log10(lim[1] / lim[0]) > 2.2
            axis.set_major_locator(LogLocator(base=10, subs=(1.0,) if wide else (1.0, 2.0, 5.0)))
            axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
            axis.set_minor_formatter(NullFormatter())
        ax.set_xlabel("superficial gas velocity v_SG [m/s]")
        ax.set_ylabel("superficial liquid velocity v_SL [m/s]")
    handles = [Patch(facecolor=c, edgecolor="#999999", label=l) for c, l in
               zip(ROOT_COLOURS, ("no root", "one root", "two roots (tangent)", "three roots"))]
    fig.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, 0.92), fontsize=8, frameon=False, ncol=4)
    m0 = health.roots[keys[0]] if keys else None
    if m0 is not None:
        grid = (f"grid v_SG {m0['vsg'][0]:.3g}-{m0['vsg'][-1]:.3g} m/s, v_SL {m0['vsl'][0]:.3g}-{m0['vsl'][-1]:.3g} m/s, "
                f"{len(m0['vsg'])} x {len(m0['vsl'])} cells")
        zoom = ("axes zoomed to where several roots occur (half a decade around them); outside, one root or none"
                if window is not None else "one root or none everywhere: full grid shown")
        fig.text(0.5, 0.845, f"{zoom}; {grid}", ha="center", fontsize=8, color="#444444")
    fig.suptitle(f"Stratified equilibrium roots of the combined momentum equation - {health.closure_label}",
                 fontsize=10)
    fig.tight_layout(rect=(0, 0.06, 1, 0.83))
    _foot(fig)
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return Path(path)


def write_report(run_dir: str | Path, audit: AuditResult | None = None, health: HealthReport | None = None,
                 score: dict | None = None, by_kind: pd.DataFrame | None = None, notes: list[str] | None = None,
                 title: str = "Consistency audit") -> Path:
    """Write ``report.md``, CSV tables and PNG figures into ``run_dir``; return the report path."""
    d = Path(run_dir)
    lines = [f"# {title}", "", f"> {CAUTION}", ""]
    lines += [f"- {n}" for n in (notes or [])]
    if audit is not None:
        t = audit.table
        write_result_csv(audit.table, d / "audit_rows.csv")  # plain tables, the SI unit in each header
        write_result_csv(audit.suspects(), d / "suspects.csv")
        plot_residuals(audit, d / "residuals.png")
        plot_measured_vs_closure(audit, d / "measured_vs_closure.png")
        lines += ["", f"## Dataset audit against {audit.closure_label}", "",
                  f"{len(t)} rows audited, {int(t['suspect'].sum())} suspect "
                  f"({100 * t['suspect'].mean():.1f} %). Flag limits: {audit.settings.k_robust:g} robust sd for "
                  f"residuals, {audit.settings.k_sigma:g} combined sd for the uncertainty checks.", "",
                  "Normalised residual r: the balance residual divided by the sum of the magnitudes of its terms "
                  "(equivalently the mean stress imbalance on the phase perimeter over the mean force per unit "
                  "perimeter). Standardised residual e: measurement standard deviations needed to close the "
                  "balance.", "",
                  "![residuals](residuals.png)", "", "![measured vs closure](measured_vs_closure.png)", "",
                  "### Residual distributions", ""]
        st = pd.DataFrame([{"configuration / residual": k, **v} for k, v in audit.stats.items()])
        lines += [md_table(st), "", "### Checks", ""]
        lines += [md_table(pd.DataFrame([{"check": k, "meaning": CHECKS[k], "rows flagged": audit.counts.get(k, 0)}
                                         for k in CHECKS if k in audit.counts])), ""]
        lines += ["### Suspect rows", "", "All rows with scores: `audit_rows.csv`; suspects only: `suspects.csv`.", ""]
        sus = audit.suspects()[["run_id", "pattern", "theta_deg", "vsl", "vsg", "D", "holdup", "pgrad", "checks", "reasons"]]
        lines += [md_table(sus, max_rows=60) if len(sus) else "(none)", ""]
    if score is not None:
        lines += ["## Precision and recall against the known corrupted rows", "",
                  f"precision {score['precision']:.3f} ({score['tp']} of {score['tp'] + score['fp']} flagged rows are "
                  f"corrupted), recall {score['recall']:.3f} ({score['tp']} of {score['tp'] + score['fn']} corrupted rows "
                  "found).", ""]
        if score.get("missed"):
            lines += [f"missed: {', '.join(score['missed'])}", ""]
        if score.get("false_positives"):
            lines += [f"flagged but not on the list: {', '.join(score['false_positives'])}", ""]
        if by_kind is not None:
            lines += [md_table(by_kind), ""]
    if health is not None:
        plot_root_map(health, d / "multiple_roots.png")
        health.smoothness.to_csv(d / "health_smoothness.csv", index=False)
        lines += [f"## Closure health: {health.closure_label}", "", f"verdict: **{health.verdict}**", ""]
        lines += [f"- problem: {p}" for p in health.problems] + [f"- warning: {w}" for w in health.warnings]
        lines += ["", "### Positivity and finiteness", "", md_table(health.positivity), "",
                  "### Smoothness (ln f sweeps; Lipschitz per unit sweep coordinate; kinks by grid refinement)", ""]
        sm = health.smoothness.groupby(["config", "sweep", "coordinate"], as_index=False).agg(
            lipschitz=("lipschitz", "max"), curvature=("curvature", "max"), kink_sweeps=("kink_bases", "sum"),
            sweeps=("bases", "max"))
        lines += [md_table(sm), "", "Full table per factor: `health_smoothness.csv`.", "",
                  "### Multiple stratified roots", "", "![multiple roots](multiple_roots.png)", "",
                  md_table(health.roots_summary), "", "### Single-phase limits", "",
                  md_table(health.single_phase), ""]
    lines += ["", "---", f"*{CAUTION}*", ""]
    p = d / "report.md"
    p.write_text("\n".join(lines))
    return p

