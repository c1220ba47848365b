"""Training benchmarks (wall time, never asserted in tests). Run:

    .venv/bin/python benchmarks/bench_training.py [--rows 100000] [--threads 2] [--skip-demo]

1. One training epoch over ``--rows`` synthetic rows (conf/design/demo_loop.yaml, baseline
   Churchill + Andritsos-Hanratty labels) with the residual-only loss (phase/combined residuals,
   prior, smoothness; no solver in the loop), batch 4096. Goal <= 2 s.
2. The same with the solver-in-the-loop misfit (data_holdup, data_pgrad on; the equilibrium and
   its implicit gradient per batch). Goal <= 2 s (issue 17). ``--compare-solvers R`` times it R
   times alternately with the equilibrium refined from the measured level (the default,
   :mod:`closure_nn.physics.near_root`) and with the all-roots solver on the 40-point grid (as
   before), and counts the rows where the two solvers' roots differ (untrained network, h/D
   differing by more than 1e-9).
3. The demo's pre-train + fine-tune (:func:`closure_nn.pipeline.evaluate.train_experiment`,
   conf/experiment/demo.yaml). Goal <= 5 min on 2 cores.

Epoch times are the training part of one epoch measured by the EpochTimer callback
(``seconds_per_epoch`` of the metrics; it includes the end-of-epoch validation of the 1 %
validation rows). Wall times by ``time.perf_counter``. Prints one JSON line per measurement plus
the machine, with the 1-minute load average after each epoch measurement (the cores may be shared).
"""
from __future__ import annotations

import argparse
import json
import os
import platform
import tempfile
import time
import warnings
from pathlib import Path

from closure_nn.allocator import keep_freed_memory


def machine() -> dict:
    import torch

    cpu = "?"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    return {"cpu": cpu, "cores": os.cpu_count(), "python": platform.python_version(), "torch": torch.__version__,
            "load_1min_at_start": load}


def epoch_time(table: Path, root: Path, solver: bool, threads: int) -> dict:
    from closure_nn.config import load_config
    from closure_nn.training.run import train

    w = ["loss.weights.data_holdup=1.0", "loss.weights.data_pgrad=1.0"] if solver else \
        ["loss.weights.data_holdup=0.0", "loss.weights.data_pgrad=0.0"]
    cfg = load_config("train", [f"data.train={table}", f"run_root={root}", "trainer.max_epochs=1", "trainer.patience=0",
                                "trainer.batch_size=4096", "trainer.progress_bar=false", f"trainer.num_threads={threads}",
                                "closure.wall=churchill", "data.val_fraction=0.01", "loss.weights.pattern=0.0", *w])
    m = train(cfg)
    return {"what": "epoch, solver-in-the-loop misfit" if solver else "epoch, residual-only loss",
            "seconds_per_epoch": m["seconds_per_epoch"], "rows": None,
            "load_1min_after": os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")}


def compare_solvers(table: Path, root: Path, threads: int, repeats: int) -> None:
    """Solver-in-the-loop epochs, alternately with the stencil solve and the all-roots solve."""
    import statistics

    import torch

    from closure_nn.closures.neural import NeuralClosure
    from closure_nn.data.table_io import read_table
    from closure_nn.physics.holdup_roots import solve_separated
    from closure_nn.physics.near_root import solve_separated_near
    from closure_nn.training import loss as loss_mod
    from closure_nn.training.loss_batch import batch_conditions, measured_frac
    from closure_nn.training.tables import table_tensors

    def all_roots(c, closure, guess, kind, n_grid=40):
        return solve_separated(c, closure, kind, select="thinnest", n_grid=n_grid)

    times = {"stencil": [], "all_roots": []}
    for _ in range(repeats):
        for name, fn in (("stencil", solve_separated_near), ("all_roots", all_roots)):
            loss_mod.solve_separated_near = fn
            times[name].append(epoch_time(table, root / name, True, threads)["seconds_per_epoch"])
    loss_mod.solve_separated_near = solve_separated_near
    for name, v in times.items():
        print(json.dumps({"what": f"epoch, solver in the loop, {name}", "seconds": v, "median": statistics.median(v),
                          "threads": threads, "load_1min_after": os.getloadavg()[0]}))
    t = table_tensors(read_table(table))
    sel = t["kind"] == 0  # stratified rows
    t = {k: v[sel] for k, v in t.items()}
    net = NeuralClosure(hidden=(64, 64), baseline={"wall": "churchill"})
    with torch.no_grad():
        c = batch_conditions(t)
        near = solve_separated_near(c, net, measured_frac(t))
        full = solve_separated(c, net)
    diff = (near.frac - full.frac).abs() > 1e-9
    print(json.dumps({"what": "rows where the stencil root differs from the thinnest root (untrained net)",
                      "stratified_rows": int(sel.sum()), "differ": int(diff.sum()),
                      "several_roots": int((full.n_roots > 1).sum())}))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=100_000)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--skip-demo", action="store_true")
    ap.add_argument("--compare-solvers", type=int, default=0, metavar="R",
                    help="only the solver-in-the-loop epoch, R times each with the stencil and the all-roots solve")
    ap.add_argument("--glibc-defaults", action="store_true",
                    help="leave glibc malloc at its defaults (the command line keeps freed memory: closure_nn/allocator.py)")
    a = ap.parse_args(argv)
    if not a.glibc_defaults:
        keep_freed_memory()
    warnings.simplefilter("ignore")
    import torch
    from omegaconf import OmegaConf

    from closure_nn.closures.baseline import BaselineClosure
    from closure_nn.config import load_config
    from closure_nn.data.design_space import parse_design
    from closure_nn.data.synthetic import synthesize
    from closure_nn.data.table_io import write_table

    torch.set_num_threads(a.threads)
    print(json.dumps({"machine": machine()}))
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        d = load_config("synth", [])
        t0 = time.perf_counter()
        s = synthesize(parse_design(OmegaConf.to_container(d.design, resolve=True)), a.rows, 0,
                       BaselineClosure(wall="churchill"), progress=False)
        table = write_table(s.table, root / "synth.parquet")
        n_sep = int(s.table["pattern"].isin(["stratified_smooth", "stratified_wavy", "annular"]).sum())
        print(json.dumps({"what": "synthetic set", "rows": a.rows, "separated_rows": n_sep, "seconds": time.perf_counter() - t0}))
        if a.compare_solvers:
            compare_solvers(table, root / "runs", a.threads, a.compare_solvers)
            return 0
        for solver in (False, True):
            r = epoch_time(table, root / "runs", solver, a.threads)
            r["rows"] = a.rows
            r["separated_rows_trained"] = int(round(0.99 * n_sep))
            print(json.dumps(r))
        if not a.skip_demo:
            from closure_nn.pipeline.evaluate import load_lab, train_experiment

            cfg = load_config("evaluate", [])
            lab = load_lab(cfg.lab)
            t0 = time.perf_counter()
            r = train_experiment(cfg, lab, root / "demo")
            print(json.dumps({"what": "demo pre-train + fine-tune (train_experiment)", "wall_seconds": time.perf_counter() - t0,
                              "parts": r["seconds"], "members": r["members"]}))
            r3 = train_experiment(cfg, lab, root / "demo3", members=3)
            print(json.dumps({"what": "demo pre-train + fine-tune, 3-member ensemble", "parts": r3["seconds"], "members": 3}))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
