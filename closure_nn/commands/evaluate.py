"""``closure-nn evaluate``: baseline vs fine-tuned closure vs black-box regressor on held-out lab rows.

Examples (key=value arguments are Hydra overrides of conf/evaluate.yaml)::

    closure-nn evaluate                                  # demo campaign; pre-trains first
    closure-nn evaluate --closure runs/train-...         # start every split from this pre-trained closure
    closure-nn evaluate kfold.k=0 splits.grouped.by=theta_band splits.grouped.test_groups=null

Writes a run folder (``run_root``/evaluate-<time>): evaluation.json/.csv, predictions per split,
parity, residual, training-curve and k-fold figures, the fine-tuning runs, CAUTION.txt.

The evaluation pipeline and its figures (Lightning, pandas, matplotlib) are imported inside
:func:`run`, so that argument errors answer without loading them.
"""
from __future__ import annotations

import argparse
import math

from omegaconf import OmegaConf

from ..caution import CAUTION
from ..config import load_config, require_complete
from ..physics.checks import InputError
from ..run_folder import make_run_dir
from .options import add_out_option, closure_path, deprecated


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--closure", default=None, metavar="PATH",
                   help="the pre-trained closure every split is fine-tuned from: a bundle, an ensemble folder or a "
                        "training run folder (default: pre-train here)")
    p.add_argument("--bundle", default=None, help=argparse.SUPPRESS)  # old spelling of --closure
    p.add_argument("--lab", default=None, help="lab table (default: the experiment's, data_demo/lab_campaign.csv)")
    add_out_option(p)
    p.add_argument("--show-config", action="store_true", help="print the composed config and exit")


def _fmt(x: float, spec: str) -> str:
    return "-" if x is None or (isinstance(x, float) and math.isnan(x)) else format(x, spec)


def summary_lines(report: dict) -> list[str]:
    """One line per split and model: holdup MAE, pgrad MAPE and share within +-20 %, pattern accuracy."""
    lines = []
    for split, r in report["splits"].items():
        held = f" (held out {r['by']} = {', '.join(r['test_groups'])})" if r["kind"] == "grouped" else ""
        scored = "development rows (from the training rows)" if r.get("holdout") == "development" else "held-out rows"
        lines.append(f"{split} split{held}: {r['n_train']} training rows, {r['n_test']} {scored} "
                     f"({r['n_test_corrupted']} corrupted, left out of these scores)")
        for model, m in r["scores"]["clean"].items():
            lines.append(f"  {model:<10s} holdup MAE {_fmt(m['holdup_mae'], '.4f')}  MAPE {_fmt(m['holdup_mape'], '5.1f')} %  "
                         f"pgrad MAPE {_fmt(m['pgrad_mape'], '6.1f')} %  within 20 % {_fmt(m['pgrad_within_20'], '.3f')}  "
                         f"pattern {_fmt(m['pattern_accuracy'], '.3f')}")
    return lines


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    from ..pipeline.evaluate import load_lab, repo_path, run_evaluation
    from ..report.training_plots import evaluation_figures

    cfg = load_config("evaluate", overrides)
    if args.show_config:
        print(OmegaConf.to_yaml(cfg))
        return 0
    require_complete(cfg, "evaluate")
    spec = args.closure or args.bundle
    if spec == "baseline":
        raise InputError("evaluate --closure baseline: the fine-tune starts from a pre-trained neural closure; "
                         "give its PATH, or leave --closure out to pre-train here")
    start = None
    if spec:
        if not repo_path(spec).exists():
            raise FileNotFoundError(2, "No such bundle", spec)
        start = str(closure_path(repo_path(spec)))
    if args.bundle and not args.closure:
        deprecated(f"--bundle {args.bundle}", f"--closure {args.bundle}")
    lab = load_lab(args.lab or cfg.lab)
    run_dir = make_run_dir("evaluate", root=args.out or cfg.run_root, name=cfg.run_name)
    report = run_evaluation(cfg, lab, start, run_dir, figures=evaluation_figures)
    report.pop("_kept", None)
    print("\n".join(summary_lines(report)))
    print(f"run folder: {run_dir} ({report['seconds']['total']:.0f} s)")
    print(CAUTION)
    return 0
