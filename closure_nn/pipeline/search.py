r"""``closure-nn fit --search N``: choose the fine-tune settings on the development rows with Optuna.

The space is declared in conf/fit.yaml (``fit.search.space``): each entry a config key with
``low``/``high`` (``log: true`` for a log-uniform range) or ``choices``. Every trial fine-tunes the
SAME pre-trained closure on the SAME fit rows with the trial's settings and is scored on the
development rows by the gain of :func:`closure_nn.training.scoring.no_harm` over the pre-trained
start (the mean of the holdup-MAE and pgrad-error ratios, new over start, subtracted from 1):
higher is better. The sampler is Optuna's TPE (Bergstra et al. 2011, NeurIPS, "Algorithms for
hyper-parameter optimization") with a fixed seed, so the same table, seed and number of trials
give the same trials. Test rows, if a user keeps any, are never seen: only the table given to
``fit`` is used, and of it only the development rows score a trial.

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
from ..training.run import StageResult
from .stages import finetune, stage_config


def _suggest(trial, key: str, spec: dict):
    if "choices" in spec:
        return trial.suggest_categorical(key, list(spec["choices"]))
    lo, hi = float(spec["low"]), float(spec["high"])
    if not lo < hi:
        raise InputError(f"fit.search.space.{key}: low = {lo} must be below high = {hi}")
    return trial.suggest_float(key, lo, hi, log=bool(spec.get("log", False)))


def search_settings(cfg: DictConfig, pre: StageResult, rows: pd.DataFrame, run_dir: str | Path,
                    say: Callable[[str], None] = print) -> tuple[DictConfig, dict]:
    """Run ``fit.search.trials`` Optuna trials (module docstring); return the config with the chosen
    settings and a report (one row per trial: its settings, development gain, measures, seconds)."""
    import optuna

    optuna.logging.set_verbosity(logging.WARNING)
    space = OmegaConf.to_container(cfg.fit.search.space, resolve=True)
    n = int(cfg.fit.search.trials)
    run = Path(run_dir)
    run.mkdir(parents=True, exist_ok=True)
    trials: list[dict] = []

    def objective(trial) -> float:
        values = {k: _suggest(trial, k, spec) for k, spec in space.items()}
        t0 = time.perf_counter()
        ft = finetune(cfg, pre.closure, rows, run / f"trial_{trial.number:03d}", **values)
        entry = ft.metrics["selection"]["members"][0]
        gain = float(entry.get("gain", float("nan")))
        dev = entry["trained"]
        trials.append({"trial": trial.number, **values, "gain": gain, "holdup_mae": dev["holdup_mae"],
                       "pgrad_within_20": dev["pgrad_within_20"], "pgrad_mape": dev["pgrad_mape"],
                       "seconds": time.perf_counter() - t0})
        say(f"trial {trial.number + 1}/{n}: gain {100 * gain:+.1f} % (holdup MAE {dev['holdup_mae']:.4f}, "
            f"pgrad within +-20 % {100 * dev['pgrad_within_20']:.1f} %) with "
            + ", ".join(f"{k}={_short(v)}" for k, v in values.items()))
        return gain if gain == gain else -1e9

    sampler = optuna.samplers.TPESampler(seed=int(cfg.fit.search.seed))
    study = optuna.create_study(direction="maximize", sampler=sampler)
    study.optimize(objective, n_trials=n)
    best = study.best_trial
    chosen = stage_config(cfg, cfg.stage, **best.params)
    table = pd.DataFrame(trials).sort_values("gain", ascending=False)
    table.to_csv(run / "trials.csv", index=False)
    report = {"trials": n, "sampler": f"TPE, seed {int(cfg.fit.search.seed)}", "best_trial": best.number,
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
