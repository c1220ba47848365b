r"""``closure-nn fit --search N``: choose the fine-tune settings on the development rows with Optuna.

The space is declared in conf/fit.yaml (``fit.search.space``): each entry a config key with
``low``/``high`` (``log: true`` for a log-uniform range) or ``choices``. Every trial fine-tunes the
SAME pre-trained closure on the SAME fit rows with the trial's settings and is scored on the
development rows by the gain of :func:`closure_nn.training.scoring.no_harm` over the pre-trained
start (the mean of the holdup-MAE and pgrad-error ratios, new over start, subtracted from 1):
higher is better. The sampler is Optuna's TPE (Bergstra et al. 2011, NeurIPS, "Algorithms for
hyper-parameter optimization") with a fixed seed, asked for ``fit.search.processes`` trials at a
time that run side by side on as many CPU processes, so the same table, seed, number of trials and
processes give the same trials. Test rows, if a user keeps any, are never seen: only the table given to
``fit`` is used, and of it only the development rows score a trial.

Each trial runs on a reduced epoch budget (``fit.search.trial_max_epochs``, 12 by default: a
low-fidelity evaluation that ranks the settings, as in successive halving, Jamieson & Talwalkar 2016,
AISTATS, from memory), so that eight trials fit in a quarter of an hour on two cores.
The chosen settings then fine-tune the shipped closure (``fit`` runs the final fine-tune with
them, under the do-no-harm rule). Caveat, stated in the report: the development rows both choose
the settings and judge the result, so the reported development scores after a search are
optimistic; rows the search never saw are the honest check.
"""
from __future__ import annotations

import logging
import time
from pathlib import Path
from typing import Callable

import pandas as pd
from omegaconf import DictConfig, OmegaConf

from ..physics.checks import InputError
from ..run_folder import write_json
from ..training.processes import map_in_processes
from ..training.run import StageResult
from .stages import finetune, stage_config


def _suggest(trial, key: str, spec: dict):
    if "choices" in spec:
        return trial.suggest_categorical(key, list(spec["choices"]))
    lo, hi = float(spec["low"]), float(spec["high"])
    if not lo < hi:
        raise InputError(f"fit.search.space.{key}: low = {lo} must be below high = {hi}")
    return trial.suggest_float(key, lo, hi, log=bool(spec.get("log", False)))


def _trial(cfg: DictConfig, init, rows: pd.DataFrame, run_dir: Path, values: dict) -> dict:
    """One trial: fine-tune ``init`` with ``values``; its development gain and measures."""
    t0 = time.perf_counter()
    ft = finetune(cfg, init, rows, run_dir, **values)
    entry = ft.metrics["selection"]["members"][0]
    dev = entry["trained"]
    return {"gain": float(entry.get("gain", float("nan"))), "holdup_mae": dev["holdup_mae"],
            "pgrad_within_20": dev["pgrad_within_20"], "pgrad_mape": dev["pgrad_mape"],
            "seconds": time.perf_counter() - t0}


def search_settings(cfg: DictConfig, pre: StageResult, rows: pd.DataFrame, run_dir: str | Path,
                    say: Callable[[str], None] = print) -> tuple[DictConfig, dict]:
    """Run ``fit.search.trials`` Optuna trials (module docstring); return the config with the chosen
    settings and a report (one row per trial: its settings, development gain, measures, seconds)."""
    import optuna  # here, not at the top: Optuna loads only when a search runs

    optuna.logging.set_verbosity(logging.WARNING)
    space = OmegaConf.to_container(cfg.fit.search.space, resolve=True)
    n = int(cfg.fit.search.trials)
    run = Path(run_dir)
    run.mkdir(parents=True, exist_ok=True)
    procs = max(1, int(cfg.fit.search.get("processes", 1)))
    sampler = optuna.samplers.TPESampler(seed=int(cfg.fit.search.seed))
    study = optuna.create_study(direction="maximize", sampler=sampler)
    trials: list[dict] = []
    while len(trials) < n:
        # a batch of trials side by side (ask/tell): the same trials for the same seed and processes
        batch = [study.ask() for _ in range(min(procs, n - len(trials)))]
        values = [{k: _suggest(t, k, spec) for k, spec in space.items()} for t in batch]
        cap = cfg.fit.search.get("trial_max_epochs")
        budget = {"trainer.max_epochs": int(cap)} if cap and "trainer.max_epochs" not in space else {}
        jobs = [(cfg, pre.closure, rows, run / f"trial_{t.number:03d}", {**budget, **v}) for t, v in zip(batch, values)]
        results = map_in_processes(_trial, jobs, procs, threads=int(cfg.trainer.num_threads))
        for t, v, r in zip(batch, values, results):
            study.tell(t, r["gain"] if r["gain"] == r["gain"] else -1e9)
            trials.append({"trial": t.number, **v, **r})
            say(f"trial {t.number + 1}/{n}: gain {100 * r['gain']:+.1f} % (holdup MAE {r['holdup_mae']:.4f}, "
                f"pgrad within +-20 % {100 * r['pgrad_within_20']:.1f} %) with "
                + ", ".join(f"{k}={_short(x)}" for k, x in v.items()))
    best = study.best_trial
    chosen = stage_config(cfg, cfg.stage, **best.params)
    table = pd.DataFrame(trials).sort_values("gain", ascending=False)
    table.to_csv(run / "trials.csv", index=False)
    report = {"trials": n, "sampler": f"TPE, seed {int(cfg.fit.search.seed)}, {procs} trial(s) at a time", "best_trial": best.number,
              "best_gain": best.value, "chosen": best.params, "space": space,
              "how_measured": ("each trial fine-tunes the pre-trained closure on the fit rows; gain over the "
                               "pre-trained closure on the development rows (closure_nn.training.scoring.no_harm)"),
              "caveat": "the development rows chose the settings: scores on them after the search are optimistic"}
    write_json(run / "search.json", report)
    (run / "trials.md").write_text(_markdown(table) + "\n")
    say(f"chosen (trial {best.number + 1}, gain {100 * best.value:+.1f} %): "
        + ", ".join(f"{k}={_short(v)}" for k, v in best.params.items()))
    return chosen, report


def _short(v) -> str:
    return f"{v:.4g}" if isinstance(v, float) else str(v)


def _markdown(table: pd.DataFrame) -> str:
    cols = list(table.columns)
    lines = ["| " + " | ".join(cols) + " |", "|" + "---|" * len(cols)]
    for _, r in table.iterrows():
        lines.append("| " + " | ".join(_short(r[c]) for c in cols) + " |")
    return "\n".join(lines)
