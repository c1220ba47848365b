"""``closure-nn plan``: rank candidate flow-loop test points and choose a diverse batch.

Examples (key=value arguments override conf/plan.yaml)::

    closure-nn plan runs/ens --envelope data_demo/loop_envelope.yaml --n 20
    closure-nn plan runs/ens --envelope my_loop.yaml --n 12 --data my_loop.csv weights.boundary=0

ENSEMBLE is an ensemble folder (``ensemble.json``; at least two members). The envelope is a
YAML of our own (closure_nn/pipeline/plan.py, ``read_envelope``); ``--data`` (a lab table) only
draws the existing rows on the map - the distance from the measured data uses the domain the
members store. Writes ``test_matrix.csv`` (the chosen points, ranked, in the rig's units),
``candidates.csv``, ``plan_map.png`` and ``plan.json``.

The pipeline, its map and pandas (Lightning, pandas, matplotlib) are imported inside the functions
that use them, so that ``closure-nn plan --help`` and argument errors answer without loading them.
"""
from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
from omegaconf import OmegaConf

from ..caution import CAUTION
from ..closures.loading import load_saved_closure
from ..config import load_config
from ..physics.checks import InputError
from ..run_folder import atomic_path, make_run_dir, write_json


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("ensemble", metavar="ENSEMBLE", help="an ensemble folder (ensemble.json, two or more members)")
    p.add_argument("--envelope", required=True, metavar="LOOP.yaml", help="the loop's operating envelope (our own YAML)")
    p.add_argument("--n", type=int, default=None, metavar="N", help="test points to choose (default: n of conf/plan.yaml)")
    p.add_argument("--data", default=None, metavar="TABLE", help="existing lab rows to draw on the map (optional)")
    p.add_argument("--out", default=None, metavar="DIR", help="parent folder of the run folder (default: run_root)")


def test_matrix(chosen):
    """The chosen points in the rig's units, ranked, with the reasons."""
    import pandas as pd

    return pd.DataFrame({
        "rank": chosen["rank"], "fluid": chosen.get("fluid", pd.Series([""] * len(chosen))),
        "D [mm]": 1e3 * chosen["D"], "theta [deg]": np.degrees(chosen["theta"]).round(2),
        "vsl [m/s]": chosen["vsl"].round(4), "vsg [m/s]": chosen["vsg"].round(3),
        "p [bara]": (chosen["p"] / 1e5).round(3) if "p" in chosen else np.nan,
        "predicted pattern": chosen["pattern"], "holdup mean [-]": chosen["holdup_mean"].round(4),
        "holdup sd [-]": chosen["holdup_sd"].round(4), "pgrad mean [Pa/m]": chosen["pgrad_mean"].round(2),
        "ln pgrad sd [-]": chosen["pgrad_sd_rel"].round(4), "disagreement [0-1]": chosen["disagreement"].round(3),
        "distance [thresholds]": chosen["distance"].round(2), "boundary [0-1]": chosen["boundary"].round(2),
        "score": chosen["score"].round(3)})


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    from ..pipeline.plan import PlanSettings, plan, read_envelope
    from ..pipeline.lab_table import validate_lab
    from ..report.plan_plots import plan_map

    ov = list(overrides) + ([f"run_root={args.out}"] if args.out else [])
    if args.n is not None:
        if args.n < 1:
            raise InputError(f"plan: --n {args.n}: expected a number of test points >= 1")
        ov.append(f"n={args.n}")
    cfg = load_config("plan", ov)
    if not Path(args.envelope).is_file():
        raise FileNotFoundError(2, "No such file", args.envelope)
    spec, space = read_envelope(args.envelope)
    ens = load_saved_closure(args.ensemble)
    data = None
    if args.data:
        data = validate_lab(args.data).rows
    c = OmegaConf.to_container(cfg, resolve=True)
    settings = PlanSettings(n=c["n"], candidates=c["candidates"], seed=c["seed"], weights=c["weights"],
                            min_separation=c["min_separation"], distance_cap=c["distance_cap"],
                            boundary_step=c["boundary_step"])
    print(f"closure-nn plan: {settings.candidates} candidates in {space.name!r}, {len(ens)} members", flush=True)
    chosen, cand, summary = plan(ens, space, settings, solver=c["solver"])
    run_dir = make_run_dir("plan", cfg.run_root)
    OmegaConf.save(cfg, run_dir / "config.yaml", resolve=True)
    matrix = test_matrix(chosen)
    for name, df in (("test_matrix.csv", matrix), ("candidates.csv", cand)):
        with atomic_path(run_dir / name) as tmp:
            df.to_csv(tmp, index=False)
    plan_map(chosen, cand, data, run_dir / "plan_map.png",
             f"closure-nn plan: {len(chosen)} test points in {space.name} ({args.ensemble})")
    write_json(run_dir / "plan.json", {"caution": CAUTION, "ensemble": str(Path(args.ensemble).resolve()),
                                       "envelope": spec, **summary,
                                       "how": "closure_nn/pipeline/plan.py (module docstring)"})
    print(matrix.head(int(settings.n)).to_string(index=False))
    if summary["separation_used"] < summary["separation_asked"]:
        print(f"note: the envelope had no room for {settings.n} points {summary['separation_asked']} apart; "
              f"least separation used {summary['separation_used']:.3g}")
    print(f"run folder: {run_dir}")
    print(CAUTION)
    return 0
