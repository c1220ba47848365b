"""Figure of ``closure-nn plan`` (matplotlib, Agg): the chosen test points over the existing data.

matplotlib is imported inside :func:`plan_map` (with the file-only Agg backend): importing this
module never loads it or switches a user's backend.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..run_folder import atomic_path


def plan_map(chosen: pd.DataFrame, candidates: pd.DataFrame, data: pd.DataFrame | None, path: str | Path,
             title: str) -> Path:
    """``path`` (PNG): left, v_SG against v_SL (log-log) - the candidates shaded by score, the
    existing rows (``data``, SI columns) as grey dots, the chosen points numbered by rank; right,
    inclination against diameter, the same three layers."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(1, 2, figsize=(12, 5.2), gridspec_kw={"width_ratios": [3, 2]})
    rng = np.random.default_rng(0)  # horizontal jitter of the diameters, so stacked points show
    for ax, (x, y, logs) in zip(axes, (("vsg", "vsl", True), ("D", "theta", False))):
        jit = (lambda d: d * 1e3 * (1 + 0.04 * rng.standard_normal(len(d)))) if x == "D" else (lambda d: d)
        conv = (lambda c, v: np.degrees(v) if c == "theta" else v)
        sc = ax.scatter(jit(candidates[x].to_numpy()), conv(y, candidates[y].to_numpy()), c=candidates["score"],
                        cmap="Greens", s=6, alpha=0.6, label="candidates (shade: score)")
        if data is not None and len(data):
            ax.scatter(jit(data[x].to_numpy()), conv(y, data[y].to_numpy()), s=14, c="0.15", marker="x",
                       linewidths=0.7, label=f"existing rows ({len(data)})")
        cx, cy = jit(chosen[x].to_numpy()), conv(y, chosen[y].to_numpy())
        ax.scatter(cx, cy, s=70, facecolors="none", edgecolors="crimson", linewidths=1.6,
                   label=f"chosen ({len(chosen)})")
        for r, a, b in zip(chosen["rank"], cx, cy):
            ax.annotate(str(r), (a, b), textcoords="offset points", xytext=(4, 4), fontsize=7, color="crimson")
        if logs:
            ax.set_xscale("log")
            ax.set_yscale("log")
        ax.set_xlabel("v_SG [m/s]" if x == "vsg" else "D [mm]")
        ax.set_ylabel("v_SL [m/s]" if y == "vsl" else "inclination [deg]")
        ax.grid(True, which="both", alpha=0.25)
    axes[0].legend(loc="lower left", fontsize=8)
    fig.colorbar(sc, ax=axes[1], label="score")
    fig.suptitle(title, fontsize=10)
    fig.subplots_adjust(bottom=0.15)
    fig.text(0.01, 0.01, "Score = disagreement of the ensemble + distance from the measured data + closeness to a "
             "pattern boundary (weights in plan.json). Results are estimates, not a design basis.", fontsize=7)
    out = Path(path)
    with atomic_path(out) as tmp:
        fig.savefig(tmp, dpi=110, format="png")
    plt.close(fig)
    return out
