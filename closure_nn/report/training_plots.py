"""Figures of the closure evaluation (matplotlib, Agg backend): parity, residuals, curves, folds.

Inputs are plain dicts and numpy arrays from :func:`closure_nn.pipeline.evaluate.run_evaluation`;
this module does not import the training code. Every figure states in its title or footer how
its numbers were measured (which rows, which split, corrupted rows in or out).

matplotlib is imported inside the drawing functions (with the file-only Agg backend): commands
that do not draw never load it, and importing this module never switches a user's backend.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

#: one colour and marker per model, our own choice
STYLE = {"baseline": ("#8c8c8c", "s"), "learned": ("#1a7a45", "o"), "blackbox": ("#b8452e", "^"),
         "boosted": ("#c98a1b", "v"), "reference": ("#2c5d9c", "+"), "pretrained": ("#7d5ba6", "D"),
         "shipped": ("#1a7a45", "o")}
LABEL = {"baseline": "baseline closure", "learned": "fine-tuned closure", "blackbox": "black-box MLP",
         "boosted": "black-box boosted trees", "reference": "reference (demo truth)",
         "pretrained": "pre-trained closure", "shipped": "shipped closure"}


def _label(name: str, scores: dict | None) -> str:
    """Legend label, with the holdup MAE and the pgrad share within +-20 % when ``scores`` has them."""
    s = (scores or {}).get(name)
    if not s:
        return LABEL.get(name, name)
    mae, w20 = s.get("holdup_mae"), s.get("pgrad_within_20")
    txt = [f"MAE {mae:.3f}" if mae == mae and mae is not None else None,
           f"{100 * w20:.0f} % within +-20 %" if w20 == w20 and w20 is not None else None]
    return f"{LABEL.get(name, name)} ({', '.join(t for t in txt if t)})"


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _footer(fig, text: str) -> None:
    fig.text(0.01, 0.01, text, fontsize=7, color="#444444", ha="left", va="bottom", wrap=True)


def _finish(plt, fig, title: str, how: str, path: Path) -> Path:
    """Title, how-measured footer, layout, save as PNG and close."""
    fig.suptitle(title, fontsize=10)
    _footer(fig, how)
    fig.tight_layout(rect=(0, 0.05, 1, 0.95))
    fig.savefig(path, dpi=120)
    plt.close(fig)
    return path


def parity_figure(test: pd.DataFrame, preds: dict, rows: np.ndarray, path: Path, title: str, how: str,
                  scores: dict | None = None) -> Path:
    """Predicted vs measured holdup (linear) and pgrad (symmetric log) for every model; ``scores``
    (model -> measures) put the holdup MAE and the pgrad share within +-20 % into the legend."""
    plt = _plt()
    fig, axes = plt.subplots(1, 2, figsize=(10, 4.8))
    H, P = test["holdup"].to_numpy(float), test["pgrad"].to_numpy(float)
    for name, p in preds.items():
        c, m = STYLE.get(name, ("k", "."))
        okh = rows & np.isfinite(H) & np.isfinite(p["holdup"])
        okp = rows & np.isfinite(P) & np.isfinite(p["pgrad"])
        axes[0].scatter(H[okh], p["holdup"][okh], s=9, c=c, marker=m, alpha=0.6, label=_label(name, scores), linewidths=0.6)
        axes[1].scatter(P[okp], p["pgrad"][okp], s=9, c=c, marker=m, alpha=0.6, label=_label(name, scores), linewidths=0.6)
    axes[0].plot([0, 1], [0, 1], color="k", lw=0.8)
    axes[0].set(xlim=(0, 1), ylim=(0, 1), xlabel="measured holdup [-]", ylabel="predicted holdup [-]")
    lim = np.nanmax(np.abs(P[rows])) * 1.3 if rows.any() else 1.0
    x = np.geomspace(1.0, lim, 50)
    for f, ls in ((1.0, "-"), (1.2, ":"), (0.8, ":")):
        axes[1].plot(x, f * x, color="k", lw=0.8, ls=ls)
    axes[1].set_xscale("symlog", linthresh=10.0)
    axes[1].set_yscale("symlog", linthresh=10.0)
    axes[1].set(xlabel="measured pgrad = -dp/dx [Pa/m]", ylabel="predicted pgrad [Pa/m]")
    axes[1].text(0.03, 0.95, "dotted: +-20 %", transform=axes[1].transAxes, fontsize=8, va="top")
    for ax in axes:
        ax.grid(True, color="#dddddd", lw=0.5)
    axes[0].legend(fontsize=7, loc="upper left", frameon=False)
    return _finish(plt, fig, title, how, path)


def residual_figure(res: dict, path: Path, title: str, how: str, clip: float = 20.0) -> Path:
    """Histograms of the phase residuals at the measured states, one panel per phase."""
    plt = _plt()
    fig, axes = plt.subplots(1, 2, figsize=(10, 4.2), sharey=True)
    bins = np.linspace(-clip, clip, 61)
    for ax, key, phase in ((axes[0], "r_liquid", "liquid"), (axes[1], "r_gas", "gas")):
        for name, r in res.items():
            v = r[key][np.isfinite(r[key])]
            c, _ = STYLE.get(name, ("k", "."))
            out = int((np.abs(v) > clip).sum())
            ax.hist(np.clip(v, -clip, clip), bins=bins, histtype="step", color=c, lw=1.4,
                    label=f"{LABEL.get(name, name)} (median |r| {np.median(np.abs(v)):.2f}; {out} beyond +-{clip:g})" if v.size else name)
        ax.axvspan(-2, 2, color="#eeeeee", zorder=0)
        ax.set(xlabel=f"{phase} balance residual R/(A sigma_p) [effective sd]", title=f"{phase} phase")
        ax.legend(fontsize=7, frameon=False, loc="upper left")
    axes[0].set_ylabel("rows")
    return _finish(plt, fig, title, how, path)


def read_curves(run_dir: str | Path) -> pd.DataFrame | None:
    """Per-epoch train/val loss from Lightning's CSV log of a training run (None if absent)."""
    logs = sorted(Path(run_dir).glob("logs/version_*/metrics.csv")) + sorted(Path(run_dir).glob("member_0/logs/version_*/metrics.csv"))
    if not logs:
        return None
    df = pd.read_csv(logs[-1])
    cols = [c for c in ("train/loss", "val/loss", "val/holdup_rmse") if c in df.columns]
    return df.groupby("epoch")[cols].mean().reset_index()


def curves_figure(runs: dict[str, str], path: Path, how: str) -> Path:
    """Training and validation loss per epoch of the given runs (name -> run folder)."""
    plt = _plt()
    fig, axes = plt.subplots(1, 2, figsize=(10, 4.2))
    palette = ["#1a7a45", "#2c5d9c", "#b8452e", "#7a4b94", "#8c8c8c"]
    for i, (name, rd) in enumerate(runs.items()):
        d = read_curves(rd)
        if d is None:
            continue
        c = palette[i % len(palette)]
        for col, ls in (("train/loss", "-"), ("val/loss", "--")):
            if col in d:
                axes[0].plot(d["epoch"], d[col], color=c, ls=ls, lw=1.2, label=f"{name} {col.split('/')[0]}")
        if "val/holdup_rmse" in d:
            axes[1].plot(d["epoch"], d["val/holdup_rmse"], color=c, lw=1.2, label=name)
    axes[0].set(yscale="log", xlabel="epoch", ylabel="loss [-]", title="loss (solid: train, dashed: validation)")
    axes[1].set(xlabel="epoch", ylabel="holdup RMSE [-]", title="validation holdup RMSE (separated rows)")
    for ax in axes:
        ax.grid(True, color="#dddddd", lw=0.5)
        ax.legend(fontsize=7, frameon=False)
    _footer(fig, how)
    fig.tight_layout(rect=(0, 0.05, 1, 1))
    fig.savefig(path, dpi=120)
    plt.close(fig)
    return path


def kfold_figure(folds: dict[str, list[dict]], path: Path, how: str) -> Path:
    """Box plots of the fold errors (holdup MAE, pgrad MAPE, pgrad share within +-20 %) per model."""
    plt = _plt()
    keys = (("holdup_mae", "holdup MAE [-]"), ("pgrad_mape", "pgrad MAPE [%]"), ("pgrad_within_20", "pgrad within +-20 % [-]"))
    fig, axes = plt.subplots(1, 3, figsize=(12, 4.2))
    names = list(folds)
    for ax, (k, lab) in zip(axes, keys):
        data = [[f[k] for f in folds[n]] for n in names]
        bp = ax.boxplot(data, patch_artist=True, widths=0.55)
        ax.set_xticks(range(1, len(names) + 1), [LABEL.get(n, n) for n in names], rotation=20, fontsize=8)
        for patch, n in zip(bp["boxes"], names):
            patch.set_facecolor(STYLE.get(n, ("#cccccc", ""))[0])
            patch.set_alpha(0.45)
        for i, d in enumerate(data):
            ax.scatter(np.full(len(d), i + 1.0), d, s=10, c="k", zorder=3)
        ax.set(ylabel=lab)
        ax.grid(True, axis="y", color="#dddddd", lw=0.5)
    fig.suptitle(f"k-fold robustness: {len(next(iter(folds.values())))} folds", fontsize=10)
    _footer(fig, how)
    fig.tight_layout(rect=(0, 0.05, 1, 0.95))
    fig.savefig(path, dpi=120)
    plt.close(fig)
    return path


def evaluation_figures(report: dict, keep: dict, run: str | Path) -> list[str]:
    """All figures of an evaluation report into ``run``; returns their paths."""
    run = Path(run)
    out = []
    corr = f"the documented corrupted rows ({report['corrupted_rows']} in the table) left out of scoring"
    for name, k in keep.items():
        s = report["splits"][name]
        what = "random split" if s["kind"] == "random" else f"grouped split, held out {s['by']} = {', '.join(s['test_groups'])}"
        rows = ("Development rows (a seeded share of the split's training rows; the test rows unused; "
                if s.get("holdout") == "development" else "Held-out lab rows (")
        how = (f"{rows}{what}; {s['n_test']} rows, {corr}); closures solved with solve_points, "
               f"black box trained on the same {s['n_train']} rows with the same epoch budget.")
        out.append(str(parity_figure(k["_test"], k["_preds"], k["_rows"]["clean"], run / f"parity_{name}.png",
                                     f"Parity, {what}", how, scores=s["scores"]["clean"])))
        how_r = (f"Phase momentum balances at the MEASURED states (measured holdup and pgrad, observed separated "
                 f"pattern) of the held-out rows, {what}; in effective sd (pgrad sd and the propagated holdup sd, Orear 1982); {corr}.")
        out.append(str(residual_figure(k["_res"], run / f"residuals_{name}.png", f"Momentum residuals at measured states, {what}", how_r)))
    runs = {"pre-train": str(Path(report["pretrained_bundle"]).parent)}
    runs.update({f"fine-tune {n}": s["finetune"]["run_dir"] for n, s in report["splits"].items()})
    out.append(str(curves_figure(runs, run / "training_curves.png",
                                 "From the Lightning CSV logs of each run; validation rows are a seeded share of that run's training rows.")))
    if "folds" in report.get("kfold", {}):
        kf = report["kfold"]
        out.append(str(kfold_figure(kf["folds"], run / "kfold.png",
                                    f"{kf['k']} random folds of the lab rows, each fine-tuned from the same pre-trained bundle with "
                                    f"{', '.join(f'{k} {v}' for k, v in kf.get('trainer', {}).items()) or 'the fine-tune budget'}; "
                                    f"scored on the fold's rows, {corr}.")))
    return out
