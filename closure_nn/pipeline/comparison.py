"""The models of an evaluation side by side: the black boxes trained on the same rows as the
closure (an MLP on raw inputs, :class:`~closure_nn.training.blackbox.BlackBoxRegressor`, and
gradient-boosted trees on dimensionless groups, :mod:`closure_nn.training.boosted`), the scores of
every model on the same rows (:func:`score`) and the momentum residuals of each closure at the
measured states (:func:`residuals`). Used by :func:`closure_nn.pipeline.evaluate.run_evaluation`.
"""
from __future__ import annotations

import math
import time

import numpy as np
import pandas as pd
from omegaconf import DictConfig, OmegaConf

from ..training.blackbox import BlackBoxRegressor, BlackBoxSettings
from ..training.boosted import BoostedGroupsRegressor, BoostedSettings
from ..training.loss import LossSettings
from ..training.loss_batch import uncertainties
from ..training.metrics import measured_state_residuals
from ..training.run import with_stage_trainer
from ..training.scoring import score_table
from ..training.tables import table_tensors
from .stages import stage_config


def score(preds: dict[str, dict], df: pd.DataFrame, rows: np.ndarray, sc: DictConfig) -> dict[str, dict]:
    """Scores of every model on the same ``rows`` (bool ``(N,)``): a measurement counts only where
    every model has a finite prediction; each model's own misses are reported as ``n_*_missing``."""
    H, P = df["holdup"].to_numpy(np.float64), df["pgrad"].to_numpy(np.float64)
    all_h = np.logical_and.reduce([np.isfinite(p["holdup"]) for p in preds.values()])
    all_p = np.logical_and.reduce([np.isfinite(p["pgrad"]) for p in preds.values()])
    common = df.assign(holdup=np.where(all_h, H, np.nan), pgrad=np.where(all_p, P, np.nan))
    out = {}
    for name, p in preds.items():
        own = score_table(p, df, rows, sc.holdup_floor, sc.pgrad_floor)
        s = score_table(p, common, rows, sc.holdup_floor, sc.pgrad_floor)
        s["n_holdup_missing"], s["n_pgrad_missing"] = own["n_holdup_missing"], own["n_pgrad_missing"]
        out[name] = s
    return out


def _residual_summary(r: np.ndarray) -> dict[str, float]:
    a = np.abs(r[np.isfinite(r)])
    if not a.size:
        return {"n": 0, "median_abs": math.nan, "p90_abs": math.nan, "share_within_2": math.nan}
    return {"n": int(a.size), "median_abs": float(np.median(a)), "p90_abs": float(np.quantile(a, 0.9)),
            "share_within_2": float((a <= 2).mean())}


def residuals(closures: dict, df: pd.DataFrame, rows: np.ndarray, tcfg: DictConfig) -> dict[str, dict]:
    """Measured-state phase residuals of each closure on ``rows``: arrays and summary. Units: pgrad
    sd, or the effective sd with the propagated holdup sd when the loss uses ``effective_variance``."""
    t = table_tensors(df[rows].reset_index(drop=True), tcfg.data.unknown_pattern)
    ls = LossSettings(**OmegaConf.to_container(tcfg.loss, resolve=True))
    sh, sp = uncertainties(t, ls)
    out = {}
    for name, c in closures.items():
        r = measured_state_residuals(c, t, sp, sh if ls.effective_variance else None)
        out[name] = {"r_liquid": r["r_liquid"], "r_gas": r["r_gas"],
                     "summary": {"liquid": _residual_summary(r["r_liquid"]), "gas": _residual_summary(r["r_gas"])}}
    return out


def _blackbox_settings(cfg: DictConfig, seed: int) -> BlackBoxSettings:
    """Same budget as the closure's fine-tune: epochs, batch size, patience, validation share;
    the learning rate of a training from scratch (``trainer.lr``)."""
    b, t = cfg.blackbox, with_stage_trainer(stage_config(cfg, "finetune")).trainer
    return BlackBoxSettings(hidden=tuple(b.hidden), activation=b.activation, max_epochs=int(t.max_epochs),
                            batch_size=int(t.batch_size), lr=float(t.lr), weight_decay=float(t.weight_decay),
                            patience=int(t.patience), val_fraction=float(cfg.data.val_fraction),
                            holdup_scale=float(b.holdup_scale), pgrad_scale=float(b.pgrad_scale), seed=seed)


def black_boxes(cfg: DictConfig, rows: pd.DataFrame) -> tuple[dict, dict]:
    """The black-box regressors trained on ``rows`` (the MLP on raw inputs and, with
    ``boosted.enabled``, gradient-boosted trees on dimensionless groups), and their timings."""
    out, info = {}, {}
    t0 = time.perf_counter()
    out["blackbox"] = BlackBoxRegressor(_blackbox_settings(cfg, int(cfg.experiment.seed))).fit(rows)
    info["blackbox"] = {"epochs": len(out["blackbox"].history), "seconds": time.perf_counter() - t0}
    if cfg.boosted.enabled:
        t0 = time.perf_counter()
        out["boosted"] = BoostedGroupsRegressor(BoostedSettings(seed=int(cfg.experiment.seed))).fit(rows)
        info["boosted"] = {"chosen": getattr(out["boosted"], "chosen", None), "seconds": time.perf_counter() - t0}
    return out, info
