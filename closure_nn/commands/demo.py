"""``closure-nn demo``: the end-to-end demo on the shipped, INVENTED demo data. The stages are
:func:`closure_nn.pipeline.demo.run_demo`; this command composes the configs once, makes the run
folder and prints.
"""
from __future__ import annotations

import argparse

from omegaconf import OmegaConf

from ..config import load_config
from ..pipeline.demo import run_demo
from ..report.training_plots import evaluation_figures
from ..run_folder import make_run_dir


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", "--runs", dest="out", default=None, metavar="DIR",
                   help="parent folder of the run folder (default: run_root of conf/demo.yaml, ./runs); "
                        "--runs is the old spelling")


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    # every config composed once, here at the edge; the stages get objects, never each other's files
    cfg = load_config("demo", overrides)
    ecfg = load_config("evaluate", list(cfg.evaluate_overrides))
    acfg = load_config("audit", list(cfg.audit_overrides))
    lcfg = load_config("line", list(cfg.line_overrides))
    run_dir = make_run_dir("demo", args.out or cfg.run_root)
    (run_dir / "config.yaml").write_text(OmegaConf.to_yaml(cfg))
    print(f"closure-nn demo on invented data; run folder: {run_dir}")
    summary = run_demo(cfg, ecfg, acfg, lcfg, run_dir, say=lambda line: print("      " + line, flush=True),
                       stage=lambda title: print(f"\n=== {title}", flush=True), figures=evaluation_figures)
    print("\n" + summary["text"])
    return 0
