r"""Honest evaluation of a fine-tuned closure: baseline vs learned closure vs a black-box regressor.

Everything is scored on the SAME held-out lab rows, which no model saw in training:

* a **random split** of the lab rows (``splits.random``), and
* a **grouped out-of-distribution split** (``splits.grouped``): whole groups left out with
  :func:`closure_nn.data.splits.grouped_split`, e.g. every run of the 100 mm section;
* **k-fold robustness** (``kfold``): k random folds with a small budget, fold errors as a box plot.

For each split the pre-trained bundle is fine-tuned on the split's training rows only
(:func:`finetune`, settings of ``conf/experiment/<name>.yaml``) and a
:class:`~closure_nn.training.blackbox.BlackBoxRegressor` is trained on the same rows with the same
epoch budget. Closures are scored through the point solver
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

Public functions: :func:`load_lab`, :func:`make_synthetic`, :func:`pretrain`, :func:`finetune`,
:func:`train_experiment` (pre-train + fine-tune for the demo), :func:`run_evaluation`.
"""
from __future__ import annotations

import csv
import json
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
from ..closures.baseline import BaselineClosure
from ..closures.bundle import load_bundle
from ..config import CONF_DIR, load_config
from ..data.schema import to_conditions
from ..data.splits import group_labels, grouped_split, kfold_split, random_split
from ..data.table_io import read_table, write_table
from ..physics.checks import InputError
from ..physics.point import solve_points
from ..run_folder import write_json
from .blackbox import BlackBoxRegressor, BlackBoxSettings
from .loss import LossSettings, uncertainties
from .metrics import error_summary, measured_state_residuals, pattern_accuracy, solver_state_residuals
from .processes import map_in_processes
from .tables import table_tensors

REPO = CONF_DIR.parent
SUBSETS = ("clean", "all")


# --------------------------------------------------------------------------- data and configs
def repo_path(p: str | Path) -> Path:
    """A path as given if it exists (or is absolute), else relative to the repository root."""
    q = Path(p)
    return q if q.is_absolute() or q.exists() else REPO / q


def load_lab(path: str | Path) -> pd.DataFrame:
    """Read and validate a lab table (SI columns, rhog computed where needed); rejected rows are
    dropped with a warning (run ``closure-nn check-data`` to see them)."""
    from ..data.validate import validate

    p = repo_path(path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        clean, rejected = validate(read_table(p), path=p)
    if len(rejected):
        warnings.warn(f"{p}: {len(rejected)} row(s) rejected by validation and left out", stacklevel=2)
    clean.attrs["path"] = str(p)
    return clean.reset_index(drop=True)


def corrupted_mask(df: pd.DataFrame, path: str | Path | None) -> np.ndarray:
    """Bool ``(N,)``: rows whose ``run_id`` is in the corruption list ``path`` (none if None)."""
    if not path or "run_id" not in df.columns:
        return np.zeros(len(df), dtype=bool)
    p = repo_path(path)
    ids = set(pd.read_csv(p, comment="#")["run_id"].astype(str))
    return df["run_id"].astype(str).isin(ids).to_numpy()


def _exp(cfg: DictConfig) -> DictConfig:
    return cfg.experiment if "experiment" in cfg else cfg


def train_config(cfg: DictConfig, stage: str, overrides: list[str] | tuple[str, ...] = ()) -> DictConfig:
    """conf/train.yaml composed with the experiment's ``train.common`` + ``train.<stage>`` overrides."""
    e = _exp(cfg)
    return load_config("train", [*e.train.common, *e.train[stage], *overrides])


def _baseline(tcfg: DictConfig) -> BaselineClosure:
    from .run import _baseline_kwargs

    return BaselineClosure(**_baseline_kwargs(tcfg))


def make_synthetic(cfg: DictConfig, out_dir: str | Path) -> Path:
    """Synthetic pre-training table of the experiment (``experiment.synth``: design, n, seed),
    labelled by the experiment's baseline closure; written to ``out_dir/synthetic.parquet``."""
    from ..data.design_space import parse_design
    from ..data.synthetic import synthesize

    e = _exp(cfg)
    scfg = load_config("synth", [f"design={e.synth.design}"])
    space = parse_design(OmegaConf.to_container(scfg.design, resolve=True))
    s = synthesize(space, int(e.synth.n), int(e.synth.seed), _baseline(train_config(cfg, "pretrain")),
                   solver=OmegaConf.to_container(scfg.solver, resolve=True), progress=False)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    write_json(out / "synthetic_report.json", s.report)
    return write_table(s.table, out / "synthetic.parquet")


def pretrain(cfg: DictConfig, table: str | Path, run_root: str | Path, name: str = "pretrain") -> dict:
    """Pre-train on a synthetic table with the experiment settings; returns the train metrics."""
    from .run import train

    return train(train_config(cfg, "pretrain", [f"data.train={table}", f"run_root={run_root}", f"run_name={name}"]))


def pretraining_tables(bundle: str | Path) -> list[str]:
    """Paths of the training tables a bundle (or an ensemble's first member) was PRE-trained on,
    from its provenance (``bundle.json``); empty if it was not a pre-training run."""
    b = Path(bundle)
    meta_file = b / "bundle.json" if (b / "bundle.json").exists() else b / "member_0" / "bundle.json"
    prov = json.loads(meta_file.read_text()).get("provenance", {})
    if prov.get("stage") != "pretrain":
        return []
    return [t["path"] for t in prov.get("tables", []) if t.get("role") == "train"]


def replay_overrides(cfg: DictConfig, init_bundle: str | Path) -> list[str]:
    """Train overrides that make a fine-tune replay the init bundle's pre-training table
    (``experiment.replay_pretraining``: share and row weight; none if null), so that where the
    lab rows are silent the closure keeps what it learned from the baseline."""
    r = _exp(cfg).get("replay_pretraining")
    if not r:
        return []
    tables = pretraining_tables(init_bundle)
    missing = [t for t in tables if not Path(t).exists()]
    if not tables or missing:
        raise InputError(f"finetune: experiment.replay_pretraining is set but the pre-training table of {init_bundle} "
                         f"is {'unknown' if not tables else 'missing: ' + ', '.join(missing)}; "
                         "set experiment.replay_pretraining=null or pre-train again")
    return [f"data.replay=[{','.join(tables)}]", f"data.replay_fraction={float(r.fraction)}",
            f"data.replay_weight={float(r.weight)}"]


def finetune(cfg: DictConfig, init_bundle: str | Path, rows: pd.DataFrame, run_root: str | Path, name: str,
             overrides: list[str] | tuple[str, ...] = ()) -> dict:
    """Fine-tune ``init_bundle`` on the lab ``rows`` (written to ``run_root/<name>_rows.parquet``),
    replaying its pre-training table as ``experiment.replay_pretraining`` says."""
    from .run import train

    root = Path(run_root)
    root.mkdir(parents=True, exist_ok=True)
    table = write_table(rows.reset_index(drop=True), root / f"{name}_rows.parquet")
    return train(train_config(cfg, "finetune", ["stage=finetune", f"init_bundle={init_bundle}", f"data.train={table}",
                                                f"run_root={root}", f"run_name={name}",
                                                *replay_overrides(cfg, init_bundle), *overrides]))


def train_experiment(cfg: DictConfig, lab_df: pd.DataFrame, run_dir: str | Path, rows: np.ndarray | None = None,
                     members: int | None = None) -> dict:
    """Synthetic set -> pre-train -> fine-tune on the lab rows, with the experiment settings.

    ``rows``: positions of ``lab_df`` to fine-tune on (default all); corrupted rows of the
    experiment's list are dropped first when ``experiment.exclude_corrupted``. ``members``:
    ensemble size of the fine-tuned bundle (default ``experiment.members``; the members share the
    pre-trained start and differ by seed and bootstrap). Returns the paths (``synthetic``,
    ``pretrained``, ``finetuned`` bundle directories) and timings [s] measured with
    ``time.perf_counter``.
    """
    e = _exp(cfg)
    out = Path(run_dir)
    t0 = time.perf_counter()
    synth = make_synthetic(cfg, out / "synthetic")
    t1 = time.perf_counter()
    pm = pretrain(cfg, synth, out / "train")
    t2 = time.perf_counter()
    df = lab_df if rows is None else lab_df.iloc[np.asarray(rows)]
    if e.exclude_corrupted:
        df = df[~corrupted_mask(df, e.corruptions)]
    n = int(members if members is not None else e.members)
    fm = finetune(cfg, pm["bundle"], df, out / "train", "finetune",
                  [f"ensemble.members={n}", f"ensemble.bootstrap={str(n > 1).lower()}"])
    t3 = time.perf_counter()
    return {"synthetic": str(synth), "pretrained": pm["bundle"], "finetuned": fm["bundle"],
            "pretrain_run": pm["run_dir"], "finetune_run": fm["run_dir"], "members": n, "n_finetune_rows": int(len(df)),
            "seconds": {"synthetic": t1 - t0, "pretrain": t2 - t1, "finetune": t3 - t2, "total": t3 - t0}}


# --------------------------------------------------------------------------- prediction and scoring
def predict(model, df: pd.DataFrame, solver: dict) -> dict[str, np.ndarray]:
    """Holdup, pgrad, pattern (None for the black box) and the solver-state residual ``(N,)``."""
    if isinstance(model, BlackBoxRegressor):
        p = model.predict(df)
        return {**p, "pattern": np.full(len(df), None, dtype=object), "solver_residual": np.full(len(df), np.nan)}
    cond = to_conditions(df, check=True)
    with torch.no_grad():
        r = solve_points(cond, model, **solver)
        res = solver_state_residuals(model, cond, r)
    cols = r.to_columns()
    return {"holdup": cols["holdup"], "pgrad": cols["pgrad"], "pattern": cols["pattern"], "solver_residual": res}


def score(preds: dict[str, dict], df: pd.DataFrame, rows: np.ndarray, sc: DictConfig) -> dict[str, dict]:
    """Scores of every model on the same ``rows`` (bool ``(N,)``): a measurement counts only where
    every model has a finite prediction; each model's own misses are reported as ``n_*_missing``."""
    H = np.where(rows, df["holdup"].to_numpy(np.float64), np.nan)
    P = np.where(rows, df["pgrad"].to_numpy(np.float64), np.nan)
    obs = np.array([p if (rows[i] and isinstance(p, str)) else None for i, p in enumerate(df["pattern"].tolist())], dtype=object)
    all_h = np.logical_and.reduce([np.isfinite(p["holdup"]) for p in preds.values()])
    all_p = np.logical_and.reduce([np.isfinite(p["pgrad"]) for p in preds.values()])
    out = {}
    for name, p in preds.items():
        own = error_summary(p["holdup"], H, p["pgrad"], P, sc.holdup_floor, sc.pgrad_floor)
        s = error_summary(p["holdup"], np.where(all_h, H, np.nan), p["pgrad"], np.where(all_p, P, np.nan),
                          sc.holdup_floor, sc.pgrad_floor)
        s["n_holdup_missing"], s["n_pgrad_missing"] = own["n_holdup_missing"], own["n_pgrad_missing"]
        out[name] = {**s, **pattern_accuracy(p["pattern"], obs)}
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


def _blackbox_settings(cfg: DictConfig, tcfg: DictConfig, seed: int) -> BlackBoxSettings:
    """Same budget as the closure's fine-tune: epochs, batch size, patience, validation share;
    the learning rate of a training from scratch (``trainer.lr``)."""
    b, t = cfg.blackbox, tcfg.trainer
    return BlackBoxSettings(hidden=tuple(b.hidden), activation=b.activation, max_epochs=int(t.max_epochs),
                            batch_size=int(t.batch_size), lr=float(t.lr), weight_decay=float(t.weight_decay),
                            patience=int(t.patience), val_fraction=float(tcfg.data.val_fraction),
                            holdup_scale=float(b.holdup_scale), pgrad_scale=float(b.pgrad_scale), seed=seed)


def evaluate_split(cfg: DictConfig, name: str, lab: pd.DataFrame, train_idx: np.ndarray, test_idx: np.ndarray,
                   corrupt: np.ndarray, init_bundle: str, run_dir: Path, overrides: tuple[str, ...] = (),
                   keep: bool = True) -> dict:
    """Fine-tune + black box on ``train_idx``, score every model on ``test_idx`` (module docstring)."""
    e = _exp(cfg)
    solver = OmegaConf.to_container(cfg.solver, resolve=True)
    tr = lab.iloc[train_idx]
    if e.exclude_corrupted:
        tr = tr[~corrupt[train_idx]]
    t0 = time.perf_counter()
    fm = finetune(cfg, init_bundle, tr, run_dir / "train", f"finetune-{name}", overrides)
    t_ft = time.perf_counter() - t0
    tcfg = train_config(cfg, "finetune", overrides)
    learned = load_bundle(fm["bundle"])
    t0 = time.perf_counter()
    bb = BlackBoxRegressor(_blackbox_settings(cfg, tcfg, int(e.seed))).fit(tr)
    t_bb = time.perf_counter() - t0
    base = _baseline(tcfg)
    models = {"baseline": base, "learned": learned, "blackbox": bb}
    if cfg.scoring.oracle:
        from ..data.demo_reference import ReferenceClosure

        models["reference"] = ReferenceClosure()
    test = lab.iloc[test_idx].reset_index(drop=True)
    preds = {k: predict(m, test, solver) for k, m in models.items()}
    bad = corrupt[test_idx]
    rows = {"clean": ~bad, "all": np.ones(len(test), dtype=bool)}
    out = {"n_train": int(len(tr)), "n_test": int(len(test)), "n_test_corrupted": int(bad.sum()),
           "scores": {s: score(preds, test, rows[s], cfg.scoring) for s in SUBSETS},
           "finetune": {"run_dir": fm["run_dir"], "bundle": fm["bundle"], "epochs": fm.get("epochs"), "seconds": t_ft},
           "blackbox": {"epochs": len(bb.history), "seconds": t_bb}}
    sr = {k: p["solver_residual"] for k, p in preds.items() if k != "blackbox"}
    out["solver_residual_max"] = {k: float(np.nanmax(v)) if np.isfinite(v).any() else math.nan for k, v in sr.items()}
    closures = {k: m for k, m in models.items() if k != "blackbox"}
    res = residuals(closures, test, rows["clean"], tcfg)
    out["measured_residuals"] = {k: v["summary"] for k, v in res.items()}
    if keep:
        out["_preds"], out["_test"], out["_res"], out["_rows"] = preds, test, res, rows
        cols = {c: test[c] for c in ("run_id", "D", "theta", "vsl", "vsg", "holdup", "pgrad", "pattern") if c in test}
        tab = pd.DataFrame(cols).assign(corrupted=bad)
        for k, p in preds.items():
            for q in ("holdup", "pgrad", "pattern"):
                tab[f"{q}_{k}"] = p[q]
        tab.to_csv(run_dir / f"predictions_{name}.csv", index=False)
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


def run_evaluation(cfg: DictConfig, lab_df: pd.DataFrame, bundle_dir: str | Path | None, run_dir: str | Path,
                   figures: Callable[[dict, dict, Path], list[str]] | None = None) -> dict:
    """The evaluation report (module docstring) written into ``run_dir``; returns it as a dict.

    ``cfg``: conf/evaluate.yaml composed (its ``experiment`` group holds the training settings).
    ``lab_df``: the validated SI lab table (:func:`load_lab`). ``bundle_dir``: the PRE-TRAINED
    bundle every split is fine-tuned from (None: pre-train here on the experiment's synthetic
    set). Files: ``evaluation.json``, ``evaluation.csv`` (split, subset, model, metric, value),
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
    if bundle_dir is None:
        t0 = time.perf_counter()
        synth = make_synthetic(cfg, run / "synthetic")
        bundle_dir = pretrain(cfg, synth, run / "train")["bundle"]
        timing["synthetic_and_pretrain"] = time.perf_counter() - t0
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
    results = _map_splits([(cfg, name, lab_df, tr, te, corrupt, str(bundle_dir), run) for name, (tr, te, _) in splits.items()],
                          n_proc)
    timing["splits"] = time.perf_counter() - t0
    for (name, (_, _, info)), r in zip(splits.items(), results):
        keep[name] = {k: r.pop(k) for k in ("_preds", "_test", "_res", "_rows")}
        report["splits"][name] = {**info, **r}
    if int(cfg.kfold.k) >= 2 and cfg.holdout == "development":
        report["kfold"] = {"skipped": "holdout: development (k-fold would score rows of the test splits)"}
    elif int(cfg.kfold.k) >= 2:
        t0 = time.perf_counter()
        folds: dict[str, list] = {}
        jobs = [(cfg, f"fold{i}", lab_df, tr, va, corrupt, str(bundle_dir), run / "kfold", tuple(cfg.kfold.overrides), False)
                for i, (tr, va) in enumerate(kfold_split(len(lab_df), int(cfg.kfold.k), seed=int(cfg.kfold.seed)))]
        for r in _map_splits(jobs, n_proc):
            for model, m in r["scores"]["clean"].items():
                folds.setdefault(model, []).append(m)
        report["kfold"] = {"k": int(cfg.kfold.k), "overrides": list(cfg.kfold.overrides), "subset": "clean", "folds": folds}
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
    return report
