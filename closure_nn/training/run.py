"""``train(cfg) -> metrics``: pre-train, fine-tune or update a neural closure (conf/train.yaml).

Stages (``cfg.stage``):

``pretrain``  a new :class:`~closure_nn.closures.neural.NeuralClosure` (``cfg.model``) on the
              baseline ``cfg.closure``; scaler and training domain fitted on the training table.
``finetune``  start from ``cfg.init_bundle``; learning rate times ``finetune.lr_factor``; the first
              ``finetune.freeze_layers`` hidden layers frozen; scaler kept, domain widened; the
              stage's own rows (not replayed ones) widen the measured-data domain too.
``update``    like ``finetune`` on new rows, plus replay of ``data.replay`` tables (share
              ``data.replay_fraction``, row weight ``data.replay_weight``; a fine-tune may replay
              too, e.g. its synthetic pre-training table, so that the closure keeps the baseline
              where the lab rows are silent); the accuracy on those earlier tables is measured before
              and after, and the change is reported as ``forgetting``.

Ensembles (``ensemble.members`` > 1): member m uses seed ``seed + m`` and, with
``ensemble.bootstrap``, a bootstrap replicate of the training rows; fine-tuning an ensemble
bundle starts member m from its member m. ``ensemble.processes`` = P > 1 trains P members at a
time in spawned CPU processes (one torch thread each by default): the same members as in one
process, in less wall time on a multi-core machine.

Every run writes into its run folder (``run_root``/train-<time>, or the folder of the checkpoint
given as ``resume``): ``config.yaml`` (resolved), ``metrics.json``, ``metrics.csv``, Lightning's
CSV logs, ``checkpoints/`` and the bundle ``bundle/``.
"""
from __future__ import annotations

import copy
import csv
import logging
import math
import time
import warnings
from dataclasses import dataclass
from pathlib import Path

import lightning as L
import pandas as pd
import torch
from lightning.pytorch.callbacks import EarlyStopping, ModelCheckpoint
from lightning.pytorch.loggers import CSVLogger
from lightning.pytorch.strategies import DDPStrategy
from omegaconf import DictConfig, OmegaConf

from ..closures.bundle import save_bundle
from ..closures.ensemble import ClosureEnsemble, save_ensemble
from ..closures.loading import load_saved_closure
from ..closures.neural import NeuralClosure
from ..closures.registry import closure_source
from ..data.configurations import CONFIGURATION_CODE, SEPARATED_CONFIGURATIONS
from ..data.features import FeatureScaler, TrainingDomain, state_features, table_states
from ..data.table_io import read_table
from ..physics.checks import InputError
from ..run_folder import make_run_dir, write_json
from .loss import ClosureLoss, LossSettings
from .loss_batch import batch_conditions, batch_kinds
from .metrics import accuracy
from .module import ClosureTask, EpochTimer
from .processes import map_in_processes
from .development import development_selection
from .tables import bootstrap_table, replay_sample, split_table, table_tensors

STAGES = ("pretrain", "finetune", "update")
BASELINE_KEYS = ("wall", "interface", "annular_interface", "interface_kwargs")


def _provenance(name: str, path, df: pd.DataFrame) -> dict:
    out = {"role": name, "path": str(path), "n_rows": int(len(df))}
    for col in ("source", "campaign"):
        if col in df.columns:
            counts = df[col].fillna("").astype(str).value_counts()
            out[col] = {str(k): int(v) for k, v in counts.head(20).items()}
    return out


def baseline_kwargs(cfg: DictConfig) -> dict:
    """Keyword arguments of the config's baseline closure (``closure`` group, kind baseline)."""
    c = OmegaConf.to_container(cfg.closure, resolve=True)
    if closure_source(c) != "baseline":
        raise InputError(f"train: closure.source must be 'baseline' (the model's baseline), got {closure_source(c)!r}")
    return {k: c[k] for k in BASELINE_KEYS if k in c}


def _new_closure(cfg: DictConfig, df: pd.DataFrame) -> NeuralClosure:
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


def _start_closure(cfg: DictConfig, df: pd.DataFrame, member: int, init=None) -> NeuralClosure:
    if cfg.stage == "pretrain":
        return _new_closure(cfg, df)
    init = init if init is not None else _init_closure(cfg)
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


def with_stage_trainer(cfg: DictConfig) -> DictConfig:
    """A copy of ``cfg`` whose ``trainer`` values left null take the stage's defaults
    (``stage_trainer.<stage>`` of conf/train.yaml: a pre-training sees thousands of synthetic rows,
    a fine-tune hundreds of lab rows)."""
    out = copy.deepcopy(cfg)
    defaults = (cfg.get("stage_trainer") or {}).get(cfg.stage) or {}
    for key, value in defaults.items():
        if out.trainer.get(key) is None:
            out.trainer[key] = value
    missing = [k for k in ("max_epochs", "batch_size", "patience") if out.trainer.get(k) is None]
    if missing:
        raise InputError(f"train: trainer.{missing[0]} is not set and stage {cfg.stage} has no default for it")
    if int(out.trainer.max_epochs) < 1:
        raise InputError(f"train: trainer.max_epochs = {out.trainer.max_epochs}; expected a whole number >= 1")
    return out


#: data terms and the target each one needs
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


def _init_closure(cfg: DictConfig):
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


def _fit_one(cfg: DictConfig, train_df: pd.DataFrame, val_t: dict, replay_t: dict | None, seed: int,
             out_dir: Path, member: int, callbacks: list, init=None) -> tuple[NeuralClosure, dict]:
    L.seed_everything(seed, workers=True, verbose=False)
    closure = _start_closure(cfg, train_df, member, init)
    w = train_df[ROW_WEIGHT].to_numpy() if ROW_WEIGHT in train_df.columns else 1.0
    train_t = table_tensors(train_df, cfg.data.unknown_pattern, weight=w)
    loss = LossSettings(**OmegaConf.to_container(cfg.loss, resolve=True))
    counts = fed_rows(closure, train_t, loss)
    check_fed(counts, train_t, loss, str(cfg.data.get("train") or "training table"), cfg.data.unknown_pattern)
    metrics: dict = {"seed": seed, "rows_per_term": counts, "val_initial": accuracy(closure, val_t, cfg.loss.select)}
    if replay_t is not None:
        metrics["replay_before"] = accuracy(closure, replay_t, cfg.loss.select)
    t = cfg.trainer
    lr = float(t.lr) * (1.0 if cfg.stage == "pretrain" else float(cfg.finetune.lr_factor))
    task = ClosureTask(closure, loss, lr=lr, weight_decay=t.weight_decay, select=cfg.loss.select,
                       lr_schedule=t.lr_schedule, lr_final_factor=t.lr_final_factor, max_epochs=t.max_epochs)
    from .datamodule import TableDataModule

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
        "train": accuracy(closure, train_t, cfg.loss.select), "val": accuracy(closure, val_t, cfg.loss.select),
    })
    if replay_t is not None:
        metrics["replay_after"] = accuracy(closure, replay_t, cfg.loss.select)
        metrics["forgetting"] = {k: metrics["replay_after"][k] - metrics["replay_before"][k]
                                 for k in ("holdup_rmse", "pgrad_rel_rmse")}
    return closure, metrics


def _fit_worker(cfg: DictConfig, df: pd.DataFrame, val_t: dict, replay_t: dict | None, seed: int, out_dir: Path,
                member: int, init=None) -> tuple[NeuralClosure, dict]:
    """One ensemble member in a worker process (same settings as in the parent)."""
    _quiet_lightning()
    return _fit_one(cfg, df, val_t, replay_t, seed, out_dir, member, [], init)


def _flatten(d: dict, prefix: str = "") -> dict:
    out = {}
    for k, v in d.items():
        key = f"{prefix}{k}"
        if isinstance(v, dict):
            out.update(_flatten(v, key + "."))
        elif not isinstance(v, list):
            out[key] = v
    return out


def _quiet_lightning() -> None:
    """Silence Lightning's start-up notices (accelerator availability, a hosted-logging tip) and a
    deprecation warning of its internals: noise on a CPU-only tool. Warnings of our own stay."""
    logging.getLogger("lightning.pytorch.utilities.rank_zero").setLevel(logging.WARNING)
    logging.getLogger("lightning.pytorch.accelerators.cuda").setLevel(logging.WARNING)
    warnings.filterwarnings("ignore", message=r".*LeafSpec.*")


def read_training_table(path: str | Path, role: str) -> pd.DataFrame:
    """Read and validate a training table (the checks of ``closure-nn check-data``); rejected rows
    stop the run with the validation summary, none is dropped silently."""
    from ..data.validate import validate_table

    raw = read_table(path)
    res = validate_table(raw, path=path)
    if len(res.rejected):
        raise InputError(f"train: {role} table {path}: {len(res.rejected)} of {res.n_rows} row(s) rejected by the "
                         f"checks of check-data, e.g. {str(res.rejected['reason'].iloc[0]).split(' | ')[0]}; "
                         f"run `closure-nn check-data {path}` for the list, fix or remove them")
    if not len(res.clean):
        raise InputError(f"train: {role} table {path}: no data rows")
    clean = res.clean
    clean.attrs["path"] = str(path)
    return clean


def train(cfg: DictConfig, callbacks: list | None = None, say=None) -> dict:
    """Run one training stage as configured (module docstring); returns the metrics dict.

    Reads and validates the tables named in ``cfg.data`` and calls :func:`run_stage`.
    ``callbacks`` are extra Lightning callbacks (e.g. for tests or monitoring).
    """
    if cfg.stage not in STAGES:
        raise InputError(f"train: stage = {cfg.stage!r}; expected one of {', '.join(STAGES)}")
    train_df = read_training_table(cfg.data.train, "training")
    val_df = read_training_table(cfg.data.val, "validation") if cfg.data.val else None
    replay = [(p, read_training_table(p, "replay")) for p in cfg.data.replay] if cfg.data.replay else []
    return run_stage(cfg, train_df, val_df, replay=replay, callbacks=callbacks, say=say).metrics


@dataclass
class StageResult:
    """What a training stage hands on: the shipped ``closure`` (a NeuralClosure or ClosureEnsemble),
    its ``metrics`` (as in metrics.json), the ``bundle`` folder it was saved to, and the ``trained``
    closure (the same as ``closure`` unless the do-no-harm rule kept the start)."""

    closure: object
    metrics: dict
    bundle: Path
    trained: object = None


def run_stage(cfg: DictConfig, train_df: pd.DataFrame, val_df: pd.DataFrame | None = None, *,
              replay: list[tuple[str, pd.DataFrame]] = (), callbacks: list | None = None,
              run_dir: Path | None = None, init=None, say=None) -> StageResult:
    """One training stage on validated SI tables (module docstring).

    ``init``: the starting closure or ensemble of a fine-tune/update (default: load ``init_bundle``).

    ``val_df``: validation rows (None: a seeded share ``data.val_fraction`` of ``train_df``). They
    decide early stopping and, for ``finetune``/``update``, whether the new closure ships
    (:func:`closure_nn.training.scoring.no_harm` against the starting bundle; an ensemble member
    that does not beat its start is replaced by it). ``replay``: (path, table) pairs of earlier
    tables. ``run_dir``: the run folder (default: a new one under ``run_root``, or the checkpoint's
    with ``resume``). ``say``: a function that prints one progress line (None: silent).
    """
    if cfg.stage not in STAGES:
        raise InputError(f"train: stage = {cfg.stage!r}; expected one of {', '.join(STAGES)}")
    cfg = with_stage_trainer(cfg)
    _quiet_lightning()
    say = say or (lambda _line: None)
    n_members = int(cfg.ensemble.members)
    if cfg.resume and n_members != 1:
        raise InputError("train: resume works for single-model runs (ensemble.members = 1)")
    torch.set_num_threads(int(cfg.trainer.num_threads))
    if run_dir is None and cfg.resume:
        ck = Path(cfg.resume)
        if not ck.exists():
            raise FileNotFoundError(2, "No such checkpoint", str(ck))
        run_dir = ck.resolve().parent.parent
    elif run_dir is None:
        run_dir = make_run_dir("train", root=cfg.run_root, name=cfg.run_name)
    run_dir = Path(run_dir)
    run_dir.mkdir(parents=True, exist_ok=True)
    if not (cfg.resume and (run_dir / "config.yaml").exists()):  # a resume keeps the run's saved config
        OmegaConf.save(cfg, run_dir / "config.yaml", resolve=True)
    train_path = cfg.data.get("train") or train_df.attrs.get("path", "in-memory table")
    if val_df is None:
        train_df, val_df = split_table(train_df, float(cfg.data.val_fraction), int(cfg.seed))
    if len(val_df) == 0:
        raise InputError("train: no validation rows; give data.val or data.val_fraction > 0")
    provenance = {"stage": cfg.stage, "init_bundle": cfg.init_bundle,
                  "tables": [_provenance("train", train_path, train_df), _provenance("val", cfg.data.val or "split", val_df)]}
    replay_df = None
    if cfg.stage in ("finetune", "update") and replay:
        replay_df = pd.concat([d for _, d in replay], ignore_index=True)
        provenance["tables"] += [_provenance("replay", p, d) for p, d in replay]
    elif cfg.stage == "update":
        raise InputError("train: stage update needs data.replay=[<earlier table>, ...] to replay and to measure forgetting")
    val_t = table_tensors(val_df, cfg.data.unknown_pattern)
    replay_t = table_tensors(replay_df, cfg.data.unknown_pattern) if replay_df is not None else None
    if cfg.stage != "pretrain" and init is None:
        init = _init_closure(cfg)
    jobs = []
    for m in range(n_members):
        seed = int(cfg.seed) + m
        df = train_df
        if cfg.ensemble.bootstrap and n_members > 1:
            df = bootstrap_table(train_df, seed)
        if replay_df is not None:
            rep = replay_sample(replay_df, float(cfg.data.replay_fraction), seed)
            df = pd.concat([df.assign(**{ROW_WEIGHT: 1.0, REPLAYED: False}),
                            rep.assign(**{ROW_WEIGHT: float(cfg.data.replay_weight), REPLAYED: True})],
                           ignore_index=True)
        out_dir = run_dir if n_members == 1 else run_dir / f"member_{m}"
        jobs.append((df, seed, out_dir, m))
    n_proc = min(int(cfg.ensemble.processes), n_members)
    if n_proc > 1 and callbacks:
        raise InputError("train: extra callbacks need ensemble.processes = 1 (they cannot be sent to worker processes)")
    t = cfg.trainer
    say(f"{cfg.stage}: {len(train_df)} training and {len(val_df)} validation rows, {n_members} model(s), "
        f"up to {t.max_epochs} epochs (batch {t.batch_size}, patience {t.patience})")
    if n_proc > 1:
        # members seeded as in the sequential loop below, so they are the same as in one process
        fitted = map_in_processes(_fit_worker, [(cfg, df, val_t, replay_t, seed, out_dir, m, init)
                                                for df, seed, out_dir, m in jobs],
                                  n_proc, threads=int(cfg.trainer.num_threads))
    else:
        fitted = [_fit_one(cfg, df, val_t, replay_t, seed, out_dir, m, list(callbacks or []), init)
                  for df, seed, out_dir, m in jobs]
    members = [c for c, _ in fitted]
    member_metrics = [mm for _, mm in fitted]
    say(f"{cfg.stage}: rows per loss term " + ", ".join(f"{k} {v}" for k, v in member_metrics[0]["rows_per_term"].items()))
    trained = members[0] if n_members == 1 else ClosureEnsemble(list(members))
    members, development = development_selection(cfg, members, member_metrics, val_df, init)
    provenance["selection"] = development["selection"]
    for line in development["lines"]:
        say(f"{cfg.stage}: {line}")
    config = OmegaConf.to_container(cfg, resolve=True)
    if n_members == 1:
        shipped = members[0]
        metrics = {"stage": cfg.stage, **member_metrics[0], "development": development["scores"],
                   "selection": development["selection"]}
        bundle = save_bundle(members[0], run_dir / "bundle", provenance=provenance, metrics=_flatten(metrics),
                             config=config, domain=_domain_summary(members[0], cfg))
    else:
        ens = shipped = ClosureEnsemble(members)
        metrics = {"stage": cfg.stage, "members": member_metrics, "ensemble": _ensemble_metrics(ens, val_t, cfg),
                   "development": development["scores"], "selection": development["selection"]}
        meta = [dict(provenance=provenance, metrics=_flatten(mm), config=config, domain=_domain_summary(c, cfg))
                for c, mm in zip(members, member_metrics)]
        bundle = save_ensemble(members, run_dir / "bundle", meta, metrics=metrics["ensemble"])
    metrics["run_dir"] = str(run_dir)
    metrics["bundle"] = str(bundle)
    write_json(run_dir / "metrics.json", metrics)
    with open(run_dir / "metrics.csv", "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["metric", "value"])
        for k, v in _flatten(metrics).items():
            w.writerow([k, v])
    return StageResult(closure=shipped, metrics=metrics, bundle=Path(bundle), trained=trained)


def _domain_summary(closure: NeuralClosure, cfg: DictConfig) -> dict:
    d = TrainingDomain.from_closure(closure)
    d.rule = OmegaConf.to_container(cfg.domain, resolve=True)
    return d.to_dict()


def _ensemble_metrics(ens: ClosureEnsemble, val_t: dict, cfg: DictConfig) -> dict:
    spreads_h, spreads_p, errs = [], [], []
    kinds = batch_kinds(val_t, ens, cfg.loss.select)  # rows of kind predicted: the ensemble's pattern
    for kind in SEPARATED_CONFIGURATIONS:
        sel = kinds == CONFIGURATION_CODE[kind]
        if not sel.any():
            continue
        pred = ens.predict(batch_conditions(val_t, sel), kind, cfg.loss.select)
        spreads_h.append(pred.holdup_std)
        spreads_p.append(pred.pgrad_std / pred.pgrad_mean.abs())
        errs.append(pred.holdup_mean - val_t["holdup"][sel])
    h, p, e = torch.cat(spreads_h), torch.cat(spreads_p), torch.cat(errs)
    e = e[torch.isfinite(e)]
    return {"n_members": len(ens), "val_holdup_std_mean": float(torch.nanmean(h)),
            "val_pgrad_rel_std_mean": float(torch.nanmean(p)),
            "val_mean_holdup_rmse": float(torch.sqrt((e**2).mean())) if e.numel() else math.nan}
