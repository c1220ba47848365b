"""Benchmark: a synthetic training set of 1e5 points (goal: < 30 s on 2 cores).

For each shipped design space (conf/design/demo_loop.yaml, conf/design/wide.yaml) and the
baseline closure, measures in one run on this machine:

* sampling: Latin hypercube (scipy.stats.qmc) + marginal laws + gas density, ``sample_design``;
* solving: ``solve_table`` (input checks, then ``solve_points`` in chunks of 20,000 rows);
* the whole ``synthesize`` call (sampling + solving + table assembly), best of ``repeats``.

Run: .venv/bin/python benchmarks/bench_synth.py [N] [repeats]
"""
from __future__ import annotations

import platform
import sys
import time

import torch

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.config import load_config
from closure_nn.data.design_space import parse_design
from closure_nn.data.synthetic import DEFAULT_CHUNK, sample_design, solve_table, synthesize


def best_of(fn, repeats: int) -> tuple[float, object]:
    best, out = float("inf"), None
    for _ in range(repeats):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def main(n: int = 100_000, repeats: int = 2) -> None:
    closure = BaselineClosure()
    rows = []
    for design in ("demo_loop", "wide"):
        cfg = load_config("synth", [f"design={design}"])
        space = parse_design(cfg.design)
        solver = dict(cfg.solver)
        synthesize(space, 2000, 1, closure, solver, progress=False)  # warm-up
        t_sample, inputs = best_of(lambda: sample_design(space, n, 0), repeats)
        t_solve, _ = best_of(lambda: solve_table(inputs, closure, solver, chunk=DEFAULT_CHUNK, progress=False), repeats)
        t_all, res = best_of(lambda: synthesize(space, n, 0, closure, solver, chunk=DEFAULT_CHUNK, progress=False),
                             repeats)
        rows.append((design, t_sample, t_solve, t_all, res.report))
    print(f"machine: {platform.machine()}, {torch.get_num_threads()} torch threads, Python {platform.python_version()}, "
          f"torch {torch.__version__}; N = {n:,}, chunk {DEFAULT_CHUNK:,}, best of {repeats}")
    print()
    print("| design | sampling [s] | solving [s] | synthesize total [s] | points/s | goal |")
    print("|---|---|---|---|---|---|")
    for design, ts, tv, ta, _ in rows:
        print(f"| {design} | {ts:.2f} | {tv:.2f} | {ta:.2f} | {n / ta:,.0f} | < 30 s |")
    print()
    for design, *_, rep in rows:
        pats = ", ".join(f"{p} {c}" for p, c in rep["patterns"].items() if c)
        print(f"{design}: {pats}; no stratified root {rep['no_separated_root']}, several roots {rep['several_roots']}")


if __name__ == "__main__":
    args = [int(a) for a in sys.argv[1:]]
    main(*args)
