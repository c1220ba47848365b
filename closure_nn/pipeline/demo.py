"""The end-to-end demo on the shipped, INVENTED demo data, as one function on typed stages.

One run folder holds every stage:

1. ``evaluation/``: a Latin-hypercube synthetic set of the baseline -> pre-training -> fine-tuning
   on the lab campaign's training rows; held-out scores of baseline, learned closure and a
   black-box regressor on a random and a grouped (100 mm section left out) split
   (:func:`closure_nn.pipeline.evaluate.run_evaluation`, the stages of ``closure-nn fit``);
2. ``ensemble/``: the band's ensemble, ``ensemble/band``: the evaluated fine-tuned closure plus
   ``ensemble_members`` - 1 bootstrap members fine-tuned from the same pre-trained closure on the
   same rows (trained side by side on ``ensemble_processes`` CPU processes);
3. ``audit/``: consistency audit of the lab campaign against the learned closure, scored against
   the documented corrupted rows, and the learned closure's health
   (:func:`closure_nn.pipeline.audit_stage.audit_table`, as ``closure-nn audit``);
4. ``line/``: the invented Karvel Ridge tie-back marched with the baseline, the learned closure
   and every ensemble member (:func:`closure_nn.line.run.run_line`, as ``closure-nn line``);
5. ``summary.md`` / ``summary.json``: what was found.

Every stage gets the objects the previous one made (tables, closures); nothing is read back from a
file the same process wrote.
"""
from __future__ import annotations

import time
from collections.abc import Callable
from pathlib import Path

import torch
from omegaconf import DictConfig, OmegaConf

from ..audit.scoring import read_truth
from ..caution import CAUTION
from ..closures.ensemble import ClosureEnsemble, combine_ensembles
from ..closures.registry import build_closure
from ..line.definition import line_from_config
from ..line.march import MarchSettings
from ..line.run import run_line, write_line_run
from ..report.line_plots import line_figure
from ..run_folder import write_json
from .audit_stage import audit_table
from .evaluate import make_synthetic, repo_path, run_evaluation
from .lab_table import validate_lab
from .stages import finetune, pretrain


def _stage(stage: Callable[[str], None], title: str) -> float:
    stage(title)
    return time.perf_counter()


def _members(closure) -> list:
    return list(closure.members) if isinstance(closure, ClosureEnsemble) else [closure]


def run_demo(cfg: DictConfig, ecfg: DictConfig, acfg: DictConfig, lcfg: DictConfig, run_dir: Path,
             say: Callable[[str], None] = print, stage: Callable[[str], None] = print,
             figures: Callable | None = None) -> dict:
    """The demo's four stages (module docstring) into ``run_dir``; returns the summary
    (``text`` and ``data``), also written as ``summary.md`` / ``summary.json``. The configs are
    composed by the caller: conf/demo.yaml and, with its override lists, conf/evaluate.yaml,
    conf/audit.yaml and conf/line.yaml. ``say``: progress lines; ``stage``: stage titles; ``figures``: the
    evaluation's figure writer (from the report layer, passed in by the command)."""
    seconds: dict[str, float] = {}
    t_all = time.perf_counter()

    # 1. synthetic set -> pre-train -> fine-tune (the stages of `closure-nn fit`), held-out comparison
    t0 = _stage(stage, "1/4 synthetic set, pre-training, fine-tuning and held-out evaluation")
    lab = validate_lab(repo_path(ecfg.lab))
    synth = make_synthetic(ecfg, run_dir / "evaluation" / "synthetic")
    say(f"{len(synth.table)} synthetic points of the baseline ({synth.report['seconds']:.0f} s); pre-training")
    pre = pretrain(ecfg, synth.table, run_dir / "evaluation" / "train" / "pretrain", say=say)
    say("fine-tuning and scoring the random and the grouped split (side by side)")
    ev = run_evaluation(ecfg, lab.rows, pre, run_dir / "evaluation", figures=figures)
    kept = ev.pop("_kept")
    learned = kept["random"]["_closure"]
    learned_bundle = ev["splits"]["random"]["finetune"]["bundle"]
    seconds["evaluation"] = time.perf_counter() - t0

    # 2. ensemble for the band: the evaluated closure plus N - 1 bootstrap members (seeds 1 .. N - 1),
    #    fine-tuned from the same pre-trained closure on the same training rows
    band = None
    n = int(cfg.ensemble_members)
    if n > 1:
        t0 = _stage(stage, f"2/4 ensemble of {n}: the fine-tuned closure + {n - 1} bootstrap member(s)")
        rows = kept["random"]["_train"]  # the random split's training rows, corrupted rows already left out
        fm = finetune(ecfg, pre.closure, rows, run_dir / "ensemble" / "members", say=say,
                      **{"ensemble.members": n - 1, "ensemble.bootstrap": True, "seed": int(ecfg.experiment.seed) + 1,
                         "ensemble.processes": int(cfg.ensemble_processes)})
        band = ClosureEnsemble([learned, *_members(fm.closure)]).eval()
        combine_ensembles([learned_bundle, str(fm.bundle)], run_dir / "ensemble" / "band")  # the band on disk
        seconds["ensemble"] = time.perf_counter() - t0

    # 3. consistency audit of the lab campaign against the learned closure
    t0 = _stage(stage, "3/4 consistency audit of the lab campaign (learned closure)")
    truth = read_truth(repo_path(ecfg.experiment.corruptions)) if ecfg.experiment.corruptions else None
    v = lab.validation
    notes = [f"data: {lab.path} ({v.n_rows} rows read, {len(v.clean)} accepted, {len(v.rejected)} rejected by "
             "validation; those are listed in rejected.csv)"]
    if truth is not None:
        notes.append(f"corruption list: {ecfg.experiment.corruptions} ({len(truth)} rows)")
    audit = audit_table(lab.rows, learned, OmegaConf.to_container(acfg, resolve=True), run_dir / "audit",
                        truth=truth, rejected=v.rejected, health=bool(acfg.health), notes=notes, say=say)
    seconds["audit"] = time.perf_counter() - t0

    # 4. the line: baseline vs learned vs ensemble band. The learned line is the ensemble's mean
    #    closure (geometric mean of the members' factors), so that the band brackets it; without an
    #    ensemble, the evaluated fine-tuned closure
    t0 = _stage(stage, "4/4 line calculation: baseline vs learned closure vs ensemble band")
    line = line_from_config(lcfg.line, where="conf line")
    closures = {"baseline": build_closure(lcfg.closure), "learned": band if band is not None else learned}
    torch.set_num_threads(max(1, int(lcfg.get("threads", 1))))
    march = run_line(line, closures, _members(band) if band is not None else [], solver=dict(lcfg.solver),
                     settings=MarchSettings(**OmegaConf.to_container(lcfg.march)), say=say)
    line_dir = run_dir / "line"
    line_dir.mkdir()
    write_line_run(march, line_dir, config_yaml=OmegaConf.to_yaml(lcfg), figure=line_figure if lcfg.plot else None)
    seconds["line"] = time.perf_counter() - t0
    seconds["total"] = time.perf_counter() - t_all

    summary = _summary(ev, audit.summary, march.summary(), seconds, run_dir, line_dir)
    write_json(run_dir / "summary.json", summary["data"])
    (run_dir / "summary.md").write_text(summary["text"] + "\n")
    return summary


def _pct(x: float) -> str:
    return f"{100 * x:.1f} %"


def _summary(ev: dict, audit: dict, line: dict, seconds: dict, run_dir: Path, line_dir: Path) -> dict:
    """The short summary of the demo: accuracy vs baseline, suspect rows, line results."""
    lines = ["# closure-nn demo: summary (INVENTED data: Tarnwick Hill loop campaign, Karvel Ridge line)", "",
             f"> {CAUTION}", ""]
    data: dict = {"caution": CAUTION, "seconds": seconds, "run_dir": str(run_dir)}
    lines += ["## Held-out accuracy (lab rows never used for training; documented corrupted rows left out)", "",
              "| split | model | holdup MAE [-] | pgrad within +-20 % | pattern accuracy |", "|---|---|---|---|---|"]
    data["accuracy"] = {}
    for split, s in ev["splits"].items():
        sc = s["scores"]["clean"]
        data["accuracy"][split] = {}
        for model in ("baseline", "learned", "blackbox", "boosted"):
            m = sc.get(model)
            if not m:
                continue
            row = {k: m.get(k) for k in ("holdup_mae", "pgrad_within_20", "pattern_accuracy")}
            data["accuracy"][split][model] = row
            pa = row["pattern_accuracy"]
            lines.append(f"| {split} | {model} | {row['holdup_mae']:.4f} | {_pct(row['pgrad_within_20'])} | "
                         f"{'-' if pa is None or pa != pa else _pct(pa)} |")
        b, l_ = sc["baseline"]["holdup_mae"], sc["learned"]["holdup_mae"]
        lines.append(f"| {split} | learned vs baseline | {100 * (l_ / b - 1):+.0f} % | | |")
        if "boosted" in sc:
            g = sc["boosted"]["holdup_mae"]
            lines.append(f"| {split} | learned vs boosted trees | {100 * (l_ / g - 1):+.0f} % | "
                         f"{100 * (sc['learned']['pgrad_within_20'] - sc['boosted']['pgrad_within_20']):+.1f} points | |")
    a, s = audit["audit"], audit.get("score")
    lines += ["", "## Consistency audit of the lab campaign (against the learned closure)", "",
              f"- {a['rows']} rows audited, {a['suspect_rows']} suspect"]
    if s:
        lines.append(f"- against the 13 documented corrupted rows: precision {s['precision']:.2f}, recall {s['recall']:.2f}"
                     f" ({s['tp']} found, {s['fn']} missed, {s['fp']} other rows flagged)")
    if audit.get("health"):
        lines.append(f"- learned closure health: {audit['health'].get('verdict', '?')}")
    data["audit"] = {"summary": a, "score": s, "health": (audit.get("health") or {}).get("verdict")}
    lines += ["", "## Line: Karvel Ridge tie-back (invented)", "",
              "| closure | inlet p [bar] | pressure drop [bar] (friction / gravity) | liquid inventory [m3] | "
              "stations outside training domain | stations outside the measured data |",
              "|---|---|---|---|---|---|"]
    data["line"] = {}
    for name, c in line["closures"].items():
        ood = c.get("out_of_domain", {})
        ood_txt = str(ood.get("stations", 0)) if ood.get("checked") else "n/a"
        mea = c.get("out_of_measured_domain", {})
        mea_txt = f"{mea['stations']} of {mea['of']}" if mea.get("checked") else "n/a"
        lines.append(f"| {name} | {c['p_inlet_bar']:.2f} | {c['dp_total_Pa'] / 1e5:.2f} ({c['dp_friction_Pa'] / 1e5:.2f} / "
                     f"{c['dp_gravity_Pa'] / 1e5:.2f}) | {c['liquid_inventory_m3']:.1f} | {ood_txt} | {mea_txt} |")
        data["line"][name] = {k: c[k] for k in ("p_inlet_bar", "dp_total_Pa", "dp_friction_Pa", "dp_gravity_Pa", "liquid_inventory_m3")}
        data["line"][name]["stations_outside_measured_data"] = mea.get("stations") if mea.get("checked") else None
    if "ensemble" in line:
        e = line["ensemble"]
        per = [k for k in e.get("out_of_measured_domain_stations", []) if k is not None]
        mea_txt = f"{min(per)}-{max(per)}" if per else ""
        lines.append(f"| ensemble of {e['members']} (min-max) | {e['p_inlet_Pa']['min'] / 1e5:.2f}-{e['p_inlet_Pa']['max'] / 1e5:.2f} | | "
                     f"{e['liquid_inventory_m3']['min']:.1f}-{e['liquid_inventory_m3']['max']:.1f} | | {mea_txt} |")
        data["line"]["ensemble"] = e
        lines += ["", f"Here 'learned' is the ensemble's mean closure (geometric mean of the {e['members']} members' "
                  "friction factors; member 0 is the evaluated fine-tuned closure). Its line can fall outside the "
                  "members' min-max: the members differ along the direction holdup and pgrad cannot fix (more gas-wall, "
                  "less interfacial friction), and averaging factors is not averaging results. A wide band means the "
                  "lab rows do not pin the closure down at the line's conditions."]
    if any(c.get("out_of_measured_domain", {}).get("stations") for c in line["closures"].values()):
        lines += ["", "At stations outside the measured data no lab row supports the learned correction: it rests on "
                  "the synthetic baseline points of the pre-training only (or, outside the training domain, on nothing)."]
    lines += ["", f"Plot: {line_dir / 'line.png'}", "",
              "Time [s]: " + ", ".join(f"{k} {v:.0f}" for k, v in seconds.items())]
    return {"text": "\n".join(lines), "data": data}
