"""``closure-nn fit``: from a lab table to a validated closure bundle in one command.

Examples (key=value arguments override conf/fit.yaml, which composes conf/train.yaml)::

    closure-nn fit my_loop.csv
    closure-nn fit my_loop.csv --line my_line.yaml        # pre-train where the line runs too
    closure-nn fit my_loop.csv --design my_design.yaml    # a design space of your own
    closure-nn fit my_loop.csv --search 8                 # choose fine-tune settings (Optuna, development rows)
    closure-nn fit my_loop.csv --config-dir my_conf model=my_model   # config groups of your own

Validation -> design space (the table's envelope, widened to the line) -> synthetic set ->
pre-training -> fine-tuning with development rows held back -> do-no-harm selection -> report,
parity figure and bundle in one run folder (closure_nn/pipeline/fit.py).

The pipeline, the line reader and the figures (Lightning, pandas, scipy, matplotlib) are imported
inside :func:`run`, so that ``closure-nn fit --help`` and argument errors answer without them.
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

from omegaconf import OmegaConf

from ..caution import CAUTION
from ..config import load_config
from ..physics.checks import InputError


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("table", metavar="TABLE", help="lab table, CSV or Parquet (columns and units: closure-nn check-data)")
    p.add_argument("--line", default=None, metavar="LINE.yaml",
                   help="a line definition: its conditions widen the pre-training design space")
    p.add_argument("--design", default=None, metavar="FILE",
                   help="a design-space YAML of your own instead of the table's envelope")
    p.add_argument("--search", type=int, default=None, metavar="N",
                   help="N trials of an Optuna search over the fine-tune settings (fit.search.space), "
                        "scored on the development rows")
    p.add_argument("--config-dir", default=None, metavar="DIR",
                   help="a folder of config groups of your own (e.g. DIR/model/wide.yaml), searched before the package's")
    p.add_argument("--out", default=None, metavar="DIR", help="parent folder of the run folder (default: run_root)")
    p.add_argument("--show-config", action="store_true", help="print the composed config and exit")


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    ov = list(overrides)
    if args.search is not None:
        if args.search < 0:
            raise InputError(f"fit: --search {args.search}: expected a number of trials >= 0")
        ov.append(f"fit.search.trials={args.search}")
    if args.out:
        ov.append(f"run_root={args.out}")
    cfg = load_config("fit", ov, config_dir=args.config_dir)
    if args.show_config:
        print(OmegaConf.to_yaml(cfg))
        return 0
    table = Path(args.table)
    if not table.exists():
        raise FileNotFoundError(2, "No such file", str(table))
    line = None
    if args.line:
        from ..line.definition import load_line

        if not Path(args.line).is_file():
            raise FileNotFoundError(2, "No such file", args.line)
        line = load_line(args.line)
    from ..pipeline.fit import fit
    from ..report.fit_plots import fit_figures

    say = lambda line_: print(line_, flush=True)  # noqa: E731
    say(f"closure-nn fit {table}")
    result = fit(cfg, table, line=line, design=args.design, say=say, figures=fit_figures)
    print(f"run folder: {result.run_dir}")
    print(CAUTION, file=sys.stdout)
    return 0
