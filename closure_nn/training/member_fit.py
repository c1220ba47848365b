"""One member of a training stage: its starting closure (a new network on the baseline, or a copy
of the stage's initial closure with its domains widened), the rows each loss term gets, and its
Lightning fit with checkpoints and early stopping. :func:`closure_nn.training.run.run_stage` runs
the members of a stage (in this process or in spawned ones) and decides what ships.
"""
from __future__ import annotations

import copy
import logging
import math
import time
import warnings
from pathlib import Path

import lightning as L
import pandas as pd
import torch
from lightning.pytorch.callbacks import EarlyStopping, ModelCheckpoint
from lightning.pytorch.loggers import CSVLogger
from lightning.pytorch.strategies import DDPStrategy
from omegaconf import DictConfig, OmegaConf

from ..closures.ensemble import ClosureEnsemble
from ..closures.loading import load_saved_closure
from ..closures.neural import NeuralClosure
from ..closures.registry import closure_source
from ..data.features import FeatureScaler, TrainingDomain, state_features, table_states
from ..physics.checks import InputError
from .datamodule import TableDataModule
from .loss import ClosureLoss, LossSettings
from .metrics import accuracy
from .module import ClosureTask, EpochTimer
from .tables import table_tensors

BASELINE_KEYS = ("wall", "interface", "annular_interface", "interface_kwargs")


def baseline_kwargs(cfg: DictConfig) -> dict:
    """Keyword arguments of the config's baseline closure (``closure`` group, kind baseline)."""
    c = OmegaConf.to_container(cfg.closure, resolve=True)
    if closure_source(c) != "baseline":
        raise InputError(f"train: closure.source must be 'baseline' (the model's baseline), got {closure_source(c)!r}")
    return {k: c[k] for k in BASELINE_KEYS if k in c}


def new_closure(cfg: DictConfig, df: pd.DataFrame) -> NeuralClosure:
    m = cfg.model
    bound = OmegaConf.to_container(m.bound) if OmegaConf.is_config(m.bound) else m.bound
    closure = NeuralClosure(hidden=list(m.hidden), activation=m.activation, mode=m.mode, bound=bound,
                            direct_span=m.direct_span, baseline=baseline_kwargs(cfg),
                            inputs=OmegaConf.to_container(m.inputs, resolve=True) if m.get("inputs") else None,
                            learn=list(m.learn) if m.get("learn") else None,
                            base_input=bool(m.get("base_input", False)))
    states = table_states(df, closure.baseline, cfg.data.unknown_pattern)
    if not states:
        raise InputError(f"train: {cfg.data.train}: no separated-flow row (stratified or annular pattern) to train on")
    feats = state_features(df, closure.baseline, cfg.data.unknown_pattern)
    scaler = FeatureScaler.fit(feats)
    closure.set_scaler(scaler.mean, scaler.std)
    d = cfg.domain
    TrainingDomain.fit(feats, scaler, d.max_points, d.quantile, d.factor, cfg.seed).apply_to(closure)
    with torch.no_grad():
        logs = torch.cat([torch.log(torch.stack(tuple(closure.baseline(s)), dim=-1)) for s in states])
        closure.log_f_ref.copy_(logs.mean(dim=0))
    return closure


def start_closure(cfg: DictConfig, df: pd.DataFrame, member: int, init=None) -> NeuralClosure:
    if cfg.stage == "pretrain":
        return new_closure(cfg, df)
    init = init if init is not None else init_closure(cfg)
    closure = copy.deepcopy(init.members[member % len(init)] if isinstance(init, ClosureEnsemble) else init)
    closure.train()
    closure.freeze_layers(int(cfg.finetune.freeze_layers))
    scaler = FeatureScaler(mean=closure.feature_mean.clone(), std=closure.feature_std.clone())
    feats = state_features(df, closure.baseline, cfg.data.unknown_pattern)
    d = cfg.domain
    if feats.shape[0]:
        new = TrainingDomain.fit(feats, scaler, d.max_points, d.quantile, d.factor, cfg.seed)
        TrainingDomain.from_closure(closure).merged(new, d.max_points, cfg.seed).apply_to(closure)
    # measured-data domain: the stage's own rows only (replayed rows, e.g. a synthetic pre-training
    # table, are not measurements of this stage), merged into what earlier stages recorded
    own = df[~df[REPLAYED].to_numpy(dtype=bool)] if REPLAYED in df.columns else df
    own_feats = feats if own is df else state_features(own, closure.baseline, cfg.data.unknown_pattern)
    if own_feats.shape[0]:
        new = TrainingDomain.fit(own_feats, scaler, d.max_points, d.quantile, d.factor, cfg.seed)
        TrainingDomain.from_closure(closure, measured=True).merged(new, d.max_points, cfg.seed).apply_to(
            closure, measured=True)
    return closure


DATA_TERMS = {"data_holdup": "holdup", "data_pgrad": "pgrad"}


def fed_rows(closure: NeuralClosure, t: dict, loss: LossSettings) -> dict[str, int]:
    """Rows of the tensor table ``t`` that feed each loss term with ``closure`` (one loss evaluation
    over the whole table, no gradient); ``no_root`` counts rows without an equilibrium."""
    with torch.no_grad():
        _, _, counts = ClosureLoss(loss)(closure, t)
    out = {k: int(v) for k, v in counts.items()}
    if loss.weights.get("smooth", 0.0) > 0:
        out["smooth"] = out["prior"]  # the same states; not evaluated without gradients
    return out


def check_fed(counts: dict[str, int], t: dict, loss: LossSettings, where: str, unknown_pattern: str) -> None:
    """Stop with a clear message when a data term should be fed (its target is measured on some
    rows and its weight is > 0) but gets no row."""
    for term, target in DATA_TERMS.items():
        n_target = int(torch.isfinite(t[target]).sum())
        if loss.weights.get(term, 0.0) > 0 and n_target and counts.get(term, 0) == 0:
            raise InputError(
                f"train: {where}: {n_target} row(s) have {target} but none feeds the {term} term: no row is in a "
                f"separated configuration (stratified or annular) under data.unknown_pattern={unknown_pattern}; "
                "give a 'pattern' column, or data.unknown_pattern=stratified if every such row is stratified")


def init_closure(cfg: DictConfig):
    """The starting closure (or ensemble) of a fine-tune or update: the bundle ``init_bundle``."""
    if not cfg.init_bundle:
        raise InputError(f"train: stage {cfg.stage} needs init_bundle=<bundle directory>")
    return load_saved_closure(cfg.init_bundle)


def _strategy(t: DictConfig):
    if t.strategy == "ddp":
        return DDPStrategy(process_group_backend=t.backend, start_method=t.start_method)
    return t.strategy


#: column of the combined training table: 1 for the stage's own rows, ``data.replay_weight`` for
#: replayed rows (multiplies every loss term of the row)
ROW_WEIGHT = "_row_weight"
#: column of the combined training table: True for replayed rows (left out of the measured-data domain)
REPLAYED = "_replayed"


def fit_member(cfg: DictConfig, train_df: pd.DataFrame, val_t: dict, replay_t: dict | None, seed: int,
             out_dir: Path, member: int, callbacks: list, init=None) -> tuple[NeuralClosure, dict]:
    L.seed_everything(seed, workers=True, verbose=False)
    closure = start_closure(cfg, train_df, member, init)
    w = train_df[ROW_WEIGHT].to_numpy() if ROW_WEIGHT in train_df.columns else 1.0
    train_t = table_tensors(train_df, cfg.data.unknown_pattern, weight=w)
    loss = LossSettings(**OmegaConf.to_container(cfg.loss, resolve=True))
    counts = fed_rows(closure, train_t, loss)
    check_fed(counts, train_t, loss, str(cfg.data.get("train") or "training table"), cfg.data.unknown_pattern)
    # monitoring of the training and replay tables on a seeded sample (trainer.monitor_rows); the
    # validation rows, which stop the fit and decide what ships, are always used whole
    sample = (cfg.trainer.get("monitor_rows"), seed)
    metrics: dict = {"seed": seed, "rows_per_term": counts, "val_initial": accuracy(closure, val_t, cfg.loss.select)}
    if replay_t is not None:
        metrics["replay_before"] = accuracy(closure, replay_t, cfg.loss.select, *sample)
    t = cfg.trainer
    lr = float(t.lr) * (1.0 if cfg.stage == "pretrain" else float(cfg.finetune.lr_factor))
    task = ClosureTask(closure, loss, lr=lr, weight_decay=t.weight_decay, select=cfg.loss.select,
                       lr_schedule=t.lr_schedule, lr_final_factor=t.lr_final_factor, max_epochs=t.max_epochs)
    dm = TableDataModule(train_t, val_t, batch_size=t.batch_size, seed=seed)
    ckpt = ModelCheckpoint(dirpath=out_dir / "checkpoints", filename="best-{epoch:03d}", monitor=t.monitor,
                           mode="min", save_top_k=1)
    # last.ckpt after EVERY epoch (save_last=True would only refresh it when the best improves)
    latest = ModelCheckpoint(dirpath=out_dir / "checkpoints", filename="last", monitor=None, save_top_k=1,
                             enable_version_counter=False)
    timer = EpochTimer()
    cbs = [ckpt, latest, timer, *callbacks]
    if t.patience:
        cbs.append(EarlyStopping(monitor=t.monitor, mode="min", patience=int(t.patience), min_delta=float(t.min_delta)))
    trainer = L.Trainer(
        accelerator="cpu", devices=int(t.devices), strategy=_strategy(t), max_epochs=int(t.max_epochs),
        precision="64-true", deterministic=bool(t.deterministic), logger=CSVLogger(out_dir, name="logs"),
        callbacks=cbs, enable_progress_bar=bool(t.progress_bar), enable_model_summary=False,
        log_every_n_steps=int(t.log_every_n_steps), inference_mode=False, num_sanity_val_steps=0,
        gradient_clip_val=t.gradient_clip_val, default_root_dir=out_dir,
    )
    t0 = time.perf_counter()
    trainer.fit(task, datamodule=dm, ckpt_path=cfg.resume or None)
    fit_seconds = time.perf_counter() - t0
    last = out_dir / "checkpoints" / "last.ckpt"  # read back: spawned DDP workers do not return the loop state
    epochs = int(torch.load(last, map_location="cpu", weights_only=False)["epoch"]) + 1 if last.exists() else 0
    best = ckpt.best_model_path
    if best:
        state = torch.load(best, map_location="cpu", weights_only=False)["state_dict"]
        task.load_state_dict(state)
    closure = task.closure.eval()
    score = ckpt.best_model_score
    metrics.update({
        "epochs": epochs, "fit_seconds": fit_seconds, "best_checkpoint": str(best),
        f"best_{t.monitor.replace('/', '_')}": float(score) if score is not None else math.nan,
        # training part of an epoch (timer callback); under spawned DDP the whole fit / epochs
        "seconds_per_epoch": sum(timer.seconds) / len(timer.seconds) if timer.seconds else fit_seconds / max(epochs, 1),
        "train": accuracy(closure, train_t, cfg.loss.select, *sample), "val": accuracy(closure, val_t, cfg.loss.select),
    })
    if replay_t is not None:
        metrics["replay_after"] = accuracy(closure, replay_t, cfg.loss.select, *sample)
        metrics["forgetting"] = {k: metrics["replay_after"][k] - metrics["replay_before"][k]
                                 for k in ("holdup_rmse", "pgrad_rel_rmse")}
    return closure, metrics


def fit_member_in_worker(cfg: DictConfig, df: pd.DataFrame, val_t: dict, replay_t: dict | None, seed: int, out_dir: Path,
                member: int, init=None) -> tuple[NeuralClosure, dict]:
    """One ensemble member in a worker process (same settings as in the parent)."""
    quiet_lightning()
    return fit_member(cfg, df, val_t, replay_t, seed, out_dir, member, [], init)


def quiet_lightning() -> None:
    """Silence Lightning's start-up notices (accelerator availability, a hosted-logging tip) and a
    deprecation warning of its internals: noise on a CPU-only tool. Warnings of our own stay."""
    logging.getLogger("lightning.pytorch.utilities.rank_zero").setLevel(logging.WARNING)
    logging.getLogger("lightning.pytorch.accelerators.cuda").setLevel(logging.WARNING)
    warnings.filterwarnings("ignore", message=r".*LeafSpec.*")
