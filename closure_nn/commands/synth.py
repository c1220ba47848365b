"""``closure-nn synth [design=demo_loop] [n=20000] [seed=0]``: a synthetic training table.

Samples the design space ``conf/design/<design>.yaml`` with a seeded Latin hypercube, solves
every point with the configured closure (default: the mechanistic baseline) and writes into a
new run folder:

* ``synthetic.parquet`` (or ``.csv``, ``table_format=csv``): schema columns in SI;
* ``synth_report.json``: points per flow pattern, points without a separated-flow root or with
  several roots, timing, the design's SI bounds;
* ``config.yaml``: the resolved config; ``CAUTION.txt``.

Never imports Lightning (the data layer and the physics only).

The data layer (which loads pandas and scipy) is imported inside :func:`run`, so that
``closure-nn synth --help`` and argument errors answer without loading it.
"""
from __future__ import annotations

import argparse

import torch
from omegaconf import OmegaConf

from ..caution import CAUTION
from ..closures.registry import build_closure
from ..config import load_config
from ..physics.checks import InputError
from ..run_folder import make_run_dir, write_json


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", metavar="DIR", default=None,
                   help="parent folder for the run folder (default: run_root of the config, ./runs)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    from ..data.design_space import parse_design
    from ..data.synthetic import synthesize
    from ..data.table_io import write_table

    cfg = load_config("synth", overrides)
    torch.set_num_threads(int(cfg.threads))
    if cfg.table_format not in ("csv", "parquet"):
        raise InputError(f"table_format must be 'csv' or 'parquet', not {cfg.table_format!r}")
    for key in ("n", "chunk"):
        if not isinstance(cfg[key], int) or cfg[key] < 1:
            raise InputError(f"{key} = {cfg[key]!r}; expected a whole number >= 1")
    if not isinstance(cfg.seed, int):
        raise InputError(f"seed = {cfg.seed!r}; expected a whole number")
    space = parse_design(cfg.design)
    closure = build_closure(cfg.closure)
    result = synthesize(space, int(cfg.n), int(cfg.seed), closure, dict(cfg.solver), chunk=int(cfg.chunk),
                        progress=bool(cfg.progress) and not args.quiet)
    root = args.out or cfg.run_root
    run_dir = make_run_dir("synth", root=root, name=cfg.run_name)
    (run_dir / "config.yaml").write_text(OmegaConf.to_yaml(cfg, resolve=True))
    table_path = write_table(result.table, run_dir / f"synthetic.{cfg.table_format}")
    report = {**result.report, "table": table_path.name, "design_space": space.describe(),
              "closure_description": closure.describe(), "solver": dict(cfg.solver), "caution": CAUTION}
    write_json(run_dir / "synth_report.json", report)
    print(result.report_text())
    print(f"table:  {table_path}")
    print(f"report: {run_dir / 'synth_report.json'}")
    print(CAUTION)
    return 0
