"""The training stages as plain functions on objects, shared by ``fit``, ``evaluate`` and the demo.

Each takes the composed config (conf/train.yaml and its groups: the method) and in-memory tables,
and returns objects; nothing is written for this process to read back (the run folders hold the
artefacts and their provenance).

* :func:`stage_config` - the config of one stage (a copy with ``stage`` and given values set);
* :func:`synthesize_design` - baseline-labelled synthetic points of a design space;
* :func:`pretrain` - a new closure on a synthetic table;
* :func:`finetune` - a closure (or ensemble) from a starting one on lab rows, with development
  rows held back (a seeded share ``data.val_fraction``) that stop it early and decide by the
  do-no-harm rule whether it ships (:func:`closure_nn.training.scoring.no_harm`).
"""
from __future__ import annotations

import copy
from pathlib import Path
from typing import Callable

import pandas as pd
from omegaconf import DictConfig, OmegaConf

from ..closures.baseline import BaselineClosure
from ..data.design_space import DesignSpace
from ..data.synthetic import SyntheticSet, synthesize
from ..training.member_fit import baseline_kwargs
from ..training.run import StageResult, run_stage
from ..training.tables import split_table

Say = Callable[[str], None]


def stage_config(cfg: DictConfig, stage: str, **values) -> DictConfig:
    """A copy of the composed config for one ``stage`` with dotted keys set from ``values``
    (e.g. ``stage_config(cfg, 'finetune', **{'ensemble.members': 3})``).

    >>> from closure_nn.config import load_config
    >>> c = stage_config(load_config("fit"), "finetune", **{"ensemble.members": 3})
    >>> c.stage, c.ensemble.members
    ('finetune', 3)
    """
    out = copy.deepcopy(cfg)
    OmegaConf.set_struct(out, False)
    out.stage = stage
    for k, v in values.items():
        OmegaConf.update(out, k, v, merge=True)
    return out


def baseline_of(cfg: DictConfig) -> BaselineClosure:
    """The baseline closure of a composed config (``closure`` group)."""
    return BaselineClosure(**baseline_kwargs(cfg))


def solver_of(cfg: DictConfig) -> dict:
    """Point-solver settings of the loss (root rule and bracketing grid)."""
    return {"select": cfg.loss.select, "n_grid": int(cfg.loss.n_grid)}


def synthesize_design(cfg: DictConfig, space: DesignSpace, n: int, seed: int) -> SyntheticSet:
    """``n`` Latin-hypercube points of ``space`` labelled by the config's baseline closure."""
    return synthesize(space, int(n), int(seed), baseline_of(cfg), solver=solver_of(cfg), progress=False)


def pretrain(cfg: DictConfig, table: pd.DataFrame, run_dir: str | Path, say: Say | None = None,
             callbacks: list | None = None) -> StageResult:
    """Pre-train a new closure on the synthetic ``table`` (validation: a seeded share of it)."""
    return run_stage(stage_config(cfg, "pretrain"), table, None, run_dir=Path(run_dir), say=say, callbacks=callbacks)


def development_split(cfg: DictConfig, rows: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(rows to fit, development rows): a seeded share ``data.val_fraction`` held back (``seed``)."""
    return split_table(rows, float(cfg.data.val_fraction), int(cfg.seed))


def finetune(cfg: DictConfig, init, rows: pd.DataFrame, run_dir: str | Path, say: Say | None = None,
             callbacks: list | None = None, **values) -> StageResult:
    """Fine-tune the closure or ensemble ``init`` on the lab ``rows``; development rows are held back
    (:func:`development_split`). ``values``: dotted config keys of this call (e.g.
    ``**{'ensemble.members': 3, 'ensemble.bootstrap': True, 'seed': 1}``)."""
    c = stage_config(cfg, "finetune", **values)
    fit_rows, dev_rows = development_split(c, rows)
    return run_stage(c, fit_rows, dev_rows, run_dir=Path(run_dir), init=init, say=say, callbacks=callbacks)
