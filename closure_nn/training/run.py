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
import math
from dataclasses import dataclass
from pathlib import Path

import pandas as pd
import torch
from omegaconf import DictConfig, OmegaConf

from ..closures.bundle import save_bundle
from ..closures.ensemble import ClosureEnsemble, save_ensemble
from ..closures.neural import NeuralClosure
from ..data.configurations import CONFIGURATION_CODE, SEPARATED_CONFIGURATIONS
from ..data.features import TrainingDomain
from ..data.table_io import read_table
from ..data.validate import validate_table
from ..physics.checks import InputError
from ..run_folder import make_run_dir, write_json
from .choices import STAGES
from .development import development_selection
from .loss_batch import batch_conditions, batch_kinds
from .member_fit import (REPLAYED, ROW_WEIGHT, baseline_kwargs, fit_member, fit_member_in_worker, init_closure,
                         quiet_lightning)
from .processes import map_in_processes
from .tables import bootstrap_table, replay_sample, split_table, table_tensors

__all__ = ["STAGES", "StageResult", "baseline_kwargs", "read_training_table", "run_stage", "train", "with_stage_trainer"]


def _provenance(name: str, path, df: pd.DataFrame) -> dict:
    out = {"role": name, "path": str(path), "n_rows": int(len(df))}
    for col in ("source", "campaign"):
        if col in df.columns:
            counts = df[col].fillna("").astype(str).value_counts()
            out[col] = {str(k): int(v) for k, v in counts.head(20).items()}
    return out


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
def _flatten(d: dict, prefix: str = "") -> dict:
    out = {}
    for k, v in d.items():
        key = f"{prefix}{k}"
        if isinstance(v, dict):
            out.update(_flatten(v, key + "."))
        elif not isinstance(v, list):
            out[key] = v
    return out


def read_training_table(path: str | Path, role: str) -> pd.DataFrame:
    """Read and validate a training table (the checks of ``closure-nn check-data``); rejected rows
    stop the run with the validation summary, none is dropped silently."""
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
    quiet_lightning()
    say = say or (lambda _line: None)
    n_members = int(cfg.ensemble.members)
    if cfg.resume and n_members != 1:
        raise InputError("train: resume works for single-model runs (ensemble.members = 1)")
    torch.set_num_threads(int(cfg.trainer.num_threads))
    run_dir = _stage_folder(cfg, run_dir)
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
        init = init_closure(cfg)
    jobs = _member_jobs(cfg, train_df, replay_df, run_dir)
    n_proc = min(int(cfg.ensemble.processes), n_members)
    if n_proc > 1 and callbacks:
        raise InputError("train: extra callbacks need ensemble.processes = 1 (they cannot be sent to worker processes)")
    t = cfg.trainer
    say(f"{cfg.stage}: {len(train_df)} training and {len(val_df)} validation rows, {n_members} model(s), "
        f"up to {t.max_epochs} epochs (batch {t.batch_size}, patience {t.patience})")
    if n_proc > 1:
        # members seeded as in the sequential loop below, so they are the same as in one process
        fitted = map_in_processes(fit_member_in_worker, [(cfg, df, val_t, replay_t, seed, out_dir, m, init)
                                                for df, seed, out_dir, m in jobs],
                                  n_proc, threads=int(cfg.trainer.num_threads))
    else:
        fitted = [fit_member(cfg, df, val_t, replay_t, seed, out_dir, m, list(callbacks or []), init)
                  for df, seed, out_dir, m in jobs]
    members = [c for c, _ in fitted]
    member_metrics = [mm for _, mm in fitted]
    say(f"{cfg.stage}: rows per loss term " + ", ".join(f"{k} {v}" for k, v in member_metrics[0]["rows_per_term"].items()))
    trained = members[0] if n_members == 1 else ClosureEnsemble(list(members))
    members, development = development_selection(cfg, members, member_metrics, val_df, init)
    provenance["selection"] = development["selection"]
    for line in development["lines"]:
        say(f"{cfg.stage}: {line}")
    shipped, metrics, bundle = _save_stage(cfg, members, member_metrics, development, provenance, val_t, run_dir)
    return StageResult(closure=shipped, metrics=metrics, bundle=Path(bundle), trained=trained)


def _stage_folder(cfg: DictConfig, run_dir: Path | None) -> Path:
    """The stage's run folder (given, the checkpoint's with ``resume``, else a new one under
    ``run_root``), with the resolved ``config.yaml`` (a resume keeps the run's saved one)."""
    if run_dir is None and cfg.resume:
        ck = Path(cfg.resume)
        if not ck.exists():
            raise FileNotFoundError(2, "No such checkpoint", str(ck))
        run_dir = ck.resolve().parent.parent
    elif run_dir is None:
        run_dir = make_run_dir("train", root=cfg.run_root, name=cfg.run_name)
    run_dir = Path(run_dir)
    run_dir.mkdir(parents=True, exist_ok=True)
    if not (cfg.resume and (run_dir / "config.yaml").exists()):
        OmegaConf.save(cfg, run_dir / "config.yaml", resolve=True)
    return run_dir


def _member_jobs(cfg: DictConfig, train_df: pd.DataFrame, replay_df: pd.DataFrame | None,
                 run_dir: Path) -> list[tuple[pd.DataFrame, int, Path, int]]:
    """(rows, seed, folder, member index) of every ensemble member: seed ``seed + m``, a bootstrap
    replicate with ``ensemble.bootstrap``, replayed rows appended with their row weight."""
    n_members = int(cfg.ensemble.members)
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
    return jobs


def _save_stage(cfg: DictConfig, members: list, member_metrics: list[dict], development: dict, provenance: dict,
                val_t: dict, run_dir: Path):
    """Write the shipped bundle (or ensemble) and ``metrics.json``/``metrics.csv``; returns
    (shipped closure, metrics, bundle path)."""
    config = OmegaConf.to_container(cfg, resolve=True)
    if len(members) == 1:
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
    return shipped, metrics, bundle


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
