r"""Honest evaluation of a fine-tuned closure: baseline vs learned closure vs a black-box regressor.

Everything is scored on the SAME held-out lab rows, which no model saw in training:

* a **random split** of the lab rows (``splits.random``), and
* a **grouped out-of-distribution split** (``splits.grouped``): whole groups left out with
  :func:`closure_nn.data.splits.grouped_split`, e.g. every run of the 100 mm section;
* **k-fold robustness** (``kfold``): k random folds with a small budget, fold errors as a box plot.

For each split the pre-trained closure is fine-tuned on the split's training rows only, through
the stages of ``closure-nn fit`` (:func:`closure_nn.pipeline.stages.finetune`: the method's
defaults, development rows held back, the do-no-harm rule), and two black boxes are trained on the
same rows: a :class:`~closure_nn.training.blackbox.BlackBoxRegressor` (an MLP on raw inputs, the
same epoch budget) and gradient-boosted trees on dimensionless groups
(:mod:`closure_nn.training.boosted`, settings chosen on a development share of those rows). Closures are scored through the point solver
(:func:`closure_nn.physics.point.solve_points`): it predicts the flow pattern, and
intermittent/bubble rows get the published slug and drift-flux models, so every held-out row
with a measurement is scored, not only the separated ones.

Measures (:func:`closure_nn.training.metrics.error_summary`, common-practice definitions): holdup
MAE [-] and MAPE [%] (rows with H >= ``scoring.holdup_floor``), pgrad MAPE [%] and the share
within +-10/20/30 % (rows with |pgrad| >= ``scoring.pgrad_floor``), pattern accuracy (rows with an
observed pattern), and the momentum residuals of each closure at the MEASURED states
(:func:`~closure_nn.training.metrics.measured_state_residuals`) and of the solver's own outputs
(:func:`~closure_nn.training.metrics.solver_state_residuals`, zero by construction).

Rows in the documented corruption list (``experiment.corruptions``) are left out of training
when ``experiment.exclude_corrupted`` is true, and each score is given twice: ``clean`` (those
rows left out) and ``all`` (with them).

Identifiability limit: holdup and pgrad give two balance equations per state for the three
factors f_WL, f_WG, f_i. The learned split between them is fixed by the per-factor prior of the
loss (walls anchored to the baseline wall correlation, see :mod:`closure_nn.training.loss`), not
by the data; the report therefore scores holdup, pgrad and the balances, never the individual
factors.

Public functions: :func:`load_lab`, :func:`make_synthetic`, :func:`train_experiment` (pre-train +
fine-tune for the benchmarks), :func:`run_evaluation`.
"""
from __future__ import annotations

import csv
import math
import time
import warnings
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd
import torch
from omegaconf import DictConfig, OmegaConf

from ..caution import CAUTION
from ..closures.loading import load_saved_closure
from ..config import CONF_DIR, load_config
from ..data.demo_reference import ReferenceClosure
from ..data.design_space import parse_design
from ..data.result_tables import write_result_csv
from ..data.splits import group_labels, grouped_split, kfold_split, random_split
from ..physics.checks import InputError
from ..run_folder import write_json
from ..training.processes import map_in_processes
from ..training.run import StageResult
from ..training.scoring import predict_table
from .comparison import black_boxes, residuals, score
from .lab_table import validate_lab
from .stages import baseline_of, finetune, pretrain, synthesize_design

REPO = CONF_DIR.parent
SUBSETS = ("clean", "all")


# --------------------------------------------------------------------------- data and configs
def repo_path(p: str | Path) -> Path:
    """A path as given if it exists (or is absolute), else relative to the repository root."""
    q = Path(p)
    return q if q.is_absolute() or q.exists() else REPO / q


def load_lab(path: str | Path) -> pd.DataFrame:
    """Read and validate a lab table (:func:`closure_nn.pipeline.lab_table.validate_lab`: SI columns, rhog
    computed where needed); rejected rows are dropped with a warning (``closure-nn check-data``
    lists them)."""
    lab = validate_lab(repo_path(path))
    if len(lab.validation.rejected):
        warnings.warn(f"{lab.path}: {len(lab.validation.rejected)} row(s) rejected by validation and left out",
                      stacklevel=2)
    return lab.rows


def corrupted_mask(df: pd.DataFrame, path: str | Path | None) -> np.ndarray:
    """Bool ``(N,)``: rows whose ``run_id`` is in the corruption list ``path`` (none if None)."""
    if not path or "run_id" not in df.columns:
        return np.zeros(len(df), dtype=bool)
    p = repo_path(path)
    ids = set(pd.read_csv(p, comment="#")["run_id"].astype(str))
    return df["run_id"].astype(str).isin(ids).to_numpy()


def _exp(cfg: DictConfig) -> DictConfig:
    return cfg.experiment


def make_synthetic(cfg: DictConfig, out_dir: str | Path):
    """The experiment's synthetic pre-training set (``experiment.synth``: design, n, seed), labelled
    by the config's baseline; its report and table are kept in ``out_dir`` as provenance."""
    e = _exp(cfg)
    scfg = load_config("synth", [f"design={e.synth.design}"])
    space = parse_design(OmegaConf.to_container(scfg.design, resolve=True))
    s = synthesize_design(cfg, space, int(e.synth.n), int(e.synth.seed))
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    write_json(out / "synthetic_report.json", s.report)
    s.table.to_parquet(out / "synthetic.parquet")
    return s


def train_experiment(cfg: DictConfig, lab_df: pd.DataFrame, run_dir: str | Path, rows: np.ndarray | None = None,
                     members: int | None = None) -> dict:
    """Synthetic set -> pre-train -> fine-tune on the lab rows, through the stages of ``fit``.

    ``rows``: positions of ``lab_df`` to fine-tune on (default all); corrupted rows of the
    experiment's list are dropped first when ``experiment.exclude_corrupted``. ``members``:
    ensemble size of the fine-tuned bundle (default ``experiment.members``; the members share the
    pre-trained start and differ by seed and bootstrap). Returns the stage results, the bundle
    folders and timings [s] measured with ``time.perf_counter``.
    """
    e = _exp(cfg)
    out = Path(run_dir)
    t0 = time.perf_counter()
    synth = make_synthetic(cfg, out / "synthetic")
    t1 = time.perf_counter()
    pre = pretrain(cfg, synth.table, out / "train" / "pretrain")
    t2 = time.perf_counter()
    df = lab_df if rows is None else lab_df.iloc[np.asarray(rows)]
    if e.exclude_corrupted:
        df = df[~corrupted_mask(df, e.corruptions)]
    n = int(members if members is not None else e.members)
    ft = finetune(cfg, pre.closure, df, out / "train" / "finetune",
                  **{"ensemble.members": n, "ensemble.bootstrap": n > 1})
    t3 = time.perf_counter()
    return {"pretrain": pre, "finetune": ft, "pretrained": str(pre.bundle), "finetuned": str(ft.bundle),
            "members": n, "n_finetune_rows": int(len(df)),
            "seconds": {"synthetic": t1 - t0, "pretrain": t2 - t1, "finetune": t3 - t2, "total": t3 - t0}}


def evaluate_split(cfg: DictConfig, name: str, lab: pd.DataFrame, train_idx: np.ndarray, test_idx: np.ndarray,
                   corrupt: np.ndarray, init, run_dir: Path, trainer: dict | None = None, keep: bool = True) -> dict:
    """Fine-tune ``init`` (the pre-trained closure) and the black boxes on ``train_idx``, score every
    model on ``test_idx`` (module docstring). ``trainer``: trainer settings of this call (k-fold budget)."""
    e = _exp(cfg)
    solver = OmegaConf.to_container(cfg.solver, resolve=True)
    tr = lab.iloc[train_idx]
    if e.exclude_corrupted:
        tr = tr[~corrupt[train_idx]]
    t0 = time.perf_counter()
    values = {f"trainer.{k}": v for k, v in (trainer or {}).items()}
    ft = finetune(cfg, init, tr, run_dir / "train" / f"finetune-{name}", **values)
    t_ft = time.perf_counter() - t0
    boxes, box_info = black_boxes(cfg, tr)
    models = {"baseline": baseline_of(cfg), "learned": ft.closure, **boxes}
    if cfg.scoring.oracle:
        models["reference"] = ReferenceClosure()
    test = lab.iloc[test_idx].reset_index(drop=True)
    preds = {k: predict_table(m, test, solver) for k, m in models.items()}
    bad = corrupt[test_idx]
    rows = {"clean": ~bad, "all": np.ones(len(test), dtype=bool)}
    out = {"n_train": int(len(tr)), "n_test": int(len(test)), "n_test_corrupted": int(bad.sum()),
           "scores": {s: score(preds, test, rows[s], cfg.scoring) for s in SUBSETS},
           "finetune": {"run_dir": str(ft.bundle.parent), "bundle": str(ft.bundle), "epochs": ft.metrics.get("epochs"),
                        "seconds": t_ft, "selection": ft.metrics["selection"]["members"][0].get("reason")},
           **box_info}
    sr = {k: p["solver_residual"] for k, p in preds.items() if k not in boxes}
    out["solver_residual_max"] = {k: float(np.nanmax(v)) if np.isfinite(v).any() else math.nan for k, v in sr.items()}
    closures = {k: m for k, m in models.items() if k not in boxes}
    res = residuals(closures, test, rows["clean"], cfg)
    out["measured_residuals"] = {k: v["summary"] for k, v in res.items()}
    if keep:
        out["_preds"], out["_test"], out["_res"], out["_rows"], out["_train"] = preds, test, res, rows, tr
        out["_closure"] = ft.closure  # the fine-tuned closure itself (the demo marches and audits it)
        cols = {c: test[c] for c in ("run_id", "D", "theta", "vsl", "vsg", "holdup", "pgrad", "pattern") if c in test}
        tab = pd.DataFrame(cols).assign(corrupted=bad)
        for k, p in preds.items():
            for q in ("holdup", "pgrad", "pattern"):
                tab[f"{q}_{k}"] = p[q]
        write_result_csv(tab, run_dir / f"predictions_{name}.csv")  # SI values, the unit in each header
    return out


def development_rows(train_idx: np.ndarray, fraction: float, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Cut a split's TRAINING rows into (fit rows, development rows) at random (seeded).

    Settings are compared on the development rows so that the split's held-out rows stay unseen
    until the final run (``holdout: development`` in conf/evaluate.yaml).

    >>> fit, dev = development_rows(np.arange(10, 20), 0.3, seed=0)
    >>> len(fit), len(dev), bool(set(fit) | set(dev) == set(range(10, 20)))
    (7, 3, True)
    """
    fit, dev = random_split(len(train_idx), (1.0 - fraction, fraction), seed=seed)
    return np.asarray(train_idx)[fit], np.asarray(train_idx)[dev]


def _map_splits(jobs: list[tuple], processes: int) -> list[dict]:
    """:func:`evaluate_split` for every argument tuple, in order; with ``processes`` > 1 on that many
    spawned CPU processes (each split is seeded on its own, so the results are the same)."""
    return map_in_processes(evaluate_split, jobs, processes, threads=int(jobs[0][0].num_threads) if jobs else 1)


def _split_indices(cfg: DictConfig, lab: pd.DataFrame) -> dict[str, tuple[np.ndarray, np.ndarray, dict]]:
    """(training rows, scored rows, description) per enabled split. With ``holdout: development``
    the scored rows are a seeded share of the split's training rows and its test rows are unused."""
    out = _test_splits(cfg, lab)
    if cfg.holdout == "test":
        return out
    if cfg.holdout != "development":
        raise InputError(f"evaluate: holdout = {cfg.holdout!r}; expected test or development")
    d = cfg.development
    dev = {}
    for name, (tr, te, info) in out.items():
        fit, rows = development_rows(tr, float(d.fraction), int(d.seed))
        dev[name] = (fit, rows, {**info, "holdout": "development", "development_fraction": float(d.fraction),
                                 "development_seed": int(d.seed), "n_test_unused": int(len(te))})
    return dev


def _test_splits(cfg: DictConfig, lab: pd.DataFrame) -> dict[str, tuple[np.ndarray, np.ndarray, dict]]:
    sp = cfg.splits
    out = {}
    if sp.random.enabled:
        f = float(sp.random.test_fraction)
        tr, te = random_split(len(lab), (1 - f, f), seed=int(sp.random.seed))
        out["random"] = (tr, te, {"kind": "random", "test_fraction": f, "seed": int(sp.random.seed)})
    if sp.grouped.enabled:
        groups = group_labels(lab, sp.grouped.by)
        wanted = list(sp.grouped.test_groups) if sp.grouped.test_groups is not None else None
        tr, te = grouped_split(groups, test_groups=wanted, test_fraction=float(sp.grouped.test_fraction),
                               seed=int(sp.grouped.seed))
        held = sorted({str(g) for g in np.asarray(groups, dtype=object)[te]})
        out["grouped"] = (tr, te, {"kind": "grouped", "by": sp.grouped.by, "test_groups": held})
    return out


def _flat_rows(report: dict) -> list[tuple]:
    rows = []
    for split, r in report["splits"].items():
        for subset, models in r["scores"].items():
            for model, m in models.items():
                rows += [(split, subset, model, k, v) for k, v in m.items()]
    for model, folds in report.get("kfold", {}).get("folds", {}).items():
        for i, m in enumerate(folds):
            rows += [(f"kfold_{i}", "clean", model, k, v) for k, v in m.items()]
    return rows


def run_evaluation(cfg: DictConfig, lab_df: pd.DataFrame, pretrained: StageResult | str | Path | None, run_dir: str | Path,
                   figures: Callable[[dict, dict, Path], list[str]] | None = None) -> dict:
    """The evaluation report (module docstring) written into ``run_dir``; returns it as a dict.

    ``cfg``: conf/evaluate.yaml composed (its ``experiment`` group holds the training settings).
    ``lab_df``: the validated SI lab table (:func:`load_lab`). ``pretrained``: the pre-training
    stage (or the folder of a PRE-TRAINED bundle) every split is fine-tuned from (None: pre-train
    here on the experiment's synthetic set). The returned dict also holds, under ``_kept``, the
    predictions and training rows of every split (not written to evaluation.json). Files: ``evaluation.json``, ``evaluation.csv`` (split, subset, model, metric, value),
    ``predictions_<split>.csv``, ``parity_<split>.png``, ``residuals_<split>.png``,
    ``training_curves.png``, ``kfold.png``, ``CAUTION.txt``. ``figures``: the figure writer
    (``closure_nn.report.training_plots.evaluation_figures``, passed in by the commands so that
    training never imports the report layer), called with (report, kept predictions, run folder)
    when ``cfg.plots``.
    """
    e = _exp(cfg)
    run = Path(run_dir)
    run.mkdir(parents=True, exist_ok=True)
    (run / "CAUTION.txt").write_text(CAUTION + "\n")
    OmegaConf.save(cfg, run / "config.yaml", resolve=True)
    torch.set_num_threads(int(cfg.num_threads))
    t_start = time.perf_counter()
    if len(lab_df) < 10:
        raise InputError(f"evaluate: {lab_df.attrs.get('path', 'lab table')}: {len(lab_df)} rows; need at least 10")
    corrupt = corrupted_mask(lab_df, e.corruptions)
    timing = {}
    if pretrained is None:
        t0 = time.perf_counter()
        synth = make_synthetic(cfg, run / "synthetic")
        pretrained = pretrain(cfg, synth.table, run / "train" / "pretrain")
        timing["synthetic_and_pretrain"] = time.perf_counter() - t0
    if isinstance(pretrained, StageResult):
        init, bundle_dir = pretrained.closure, pretrained.bundle
    else:
        init, bundle_dir = load_saved_closure(pretrained), pretrained
    report: dict = {"caution": CAUTION, "lab": lab_df.attrs.get("path", ""), "n_lab_rows": int(len(lab_df)),
                    "pretrained_bundle": str(bundle_dir), "corrupted_rows": int(corrupt.sum()),
                    "corrupted_rows_in_training": not bool(e.exclude_corrupted),
                    "holdout": str(cfg.holdout),
                    "scoring": OmegaConf.to_container(cfg.scoring, resolve=True),
                    "how_measured": ("every model on the same held-out lab rows; closures through solve_points "
                                     f"(pattern predicted, non-separated rows by the published models); subset 'clean' "
                                     f"leaves out the {int(corrupt.sum())} rows of the corruption list, 'all' keeps them"),
                    "identifiability": ("holdup + pgrad give two balances for three friction factors; the split "
                                        "between f_WL, f_WG and f_i is set by the per-factor prior (walls anchored to "
                                        "the baseline wall correlation), not by the data"),
                    "splits": {}}
    keep = {}
    n_proc = int(cfg.processes)
    splits = _split_indices(cfg, lab_df)
    t0 = time.perf_counter()
    results = _map_splits([(cfg, name, lab_df, tr, te, corrupt, init, run) for name, (tr, te, _) in splits.items()],
                          n_proc)
    timing["splits"] = time.perf_counter() - t0
    for (name, (_, _, info)), r in zip(splits.items(), results):
        keep[name] = {k: r.pop(k) for k in ("_preds", "_test", "_res", "_rows", "_train", "_closure")}
        report["splits"][name] = {**info, **r}
    if int(cfg.kfold.k) >= 2 and cfg.holdout == "development":
        report["kfold"] = {"skipped": "holdout: development (k-fold would score rows of the test splits)"}
    elif int(cfg.kfold.k) >= 2:
        t0 = time.perf_counter()
        folds: dict[str, list] = {}
        budget = OmegaConf.to_container(cfg.kfold.trainer, resolve=True)
        jobs = [(cfg, f"fold{i}", lab_df, tr, va, corrupt, init, run / "kfold", budget, False)
                for i, (tr, va) in enumerate(kfold_split(len(lab_df), int(cfg.kfold.k), seed=int(cfg.kfold.seed)))]
        for r in _map_splits(jobs, n_proc):
            for model, m in r["scores"]["clean"].items():
                folds.setdefault(model, []).append(m)
        report["kfold"] = {"k": int(cfg.kfold.k), "trainer": budget, "subset": "clean", "folds": folds}
        timing["kfold"] = time.perf_counter() - t0
    report["seconds"] = {**timing, "total": time.perf_counter() - t_start}
    write_json(run / "evaluation.json", report)
    with open(run / "evaluation.csv", "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["split", "subset", "model", "metric", "value"])
        w.writerows(_flat_rows(report))
    if cfg.plots and figures is not None:
        report["figures"] = figures(report, keep, run)
        write_json(run / "evaluation.json", report)
    return {**report, "_kept": keep}
