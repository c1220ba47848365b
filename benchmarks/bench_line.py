"""Benchmark: a 50 km line with 5,000 stations, baseline + learned-style closure + 5 members.

An invented hilly profile (seeded), two-phase gas-condensate rates, outlet pressure given.
The 'learned' closure and the 5 ensemble members are BaselineClosure variants (different
interfacial-friction constants) so the benchmark needs no trained bundle; a neural closure
costs about the same per point (small MLP). Times the whole run_line call (all marches, step
halving, shooting), then prints a table row. Run:

    .venv/bin/python benchmarks/bench_line.py [--stations 5000] [--members 5] [--boundary outlet]
"""
from __future__ import annotations

import argparse
import os
import platform
import time

import numpy as np
import torch

from closure_nn.allocator import keep_freed_memory
from closure_nn.closures.baseline import BaselineClosure
from closure_nn.line.definition import FluidSpec, LineDefinition
from closure_nn.line.march import MarchSettings
from closure_nn.line.run import run_line


def bench_line(n_stations: int, length: float, boundary: str, definition=None) -> LineDefinition:
    """The benchmark line; ``definition``: the closure_nn.line.definition module to build it with
    (benchmarks/ab_compare.py passes an earlier revision's), this tree's by default."""
    FS, LD = (FluidSpec, LineDefinition) if definition is None else (definition.FluidSpec, definition.LineDefinition)
    rng = np.random.default_rng(7)
    s = np.linspace(0.0, length, n_stations)
    z = 40 * np.sin(2 * np.pi * s / 7000) + 15 * np.sin(2 * np.pi * s / 1900) + np.cumsum(rng.normal(0, 0.3, s.size))
    n = n_stations - 1
    fluid = FS(rhol=735.0, mul=5.5e-4, sigma=0.012, M_g=0.0194, Z=0.89, mug=1.3e-5)
    return LD(name="benchmark line (invented)", distance=s, elevation=z, D=np.full(n, 0.3048),
              roughness=np.full(n, 4.5e-5), T=np.linspace(331.15, 289.15, n_stations), fluid=fluid,
              m_gas=14.0, m_liquid=2.7, boundary=boundary, p_boundary=38e5 if boundary == "outlet" else 75e5,
              invented=True)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--stations", type=int, default=5000)
    ap.add_argument("--length", type=float, default=50_000.0)
    ap.add_argument("--members", type=int, default=5)
    ap.add_argument("--boundary", default="outlet", choices=("inlet", "outlet"))
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--glibc-defaults", action="store_true",
                    help="leave glibc malloc at its defaults (the command line keeps freed memory: closure_nn/allocator.py)")
    a = ap.parse_args()
    if not a.glibc_defaults:
        keep_freed_memory()
    torch.set_num_threads(a.threads)
    line = bench_line(a.stations, a.length, a.boundary)
    closures = {"baseline": BaselineClosure(), "learned": BaselineClosure(interface_kwargs={"coef": 12.0})}
    members = [BaselineClosure(interface_kwargs={"coef": 10.0 + 2.0 * i}) for i in range(a.members)]
    run_line(bench_line(50, 1000.0, a.boundary), {"warm": BaselineClosure()})  # warm-up (imports, allocator)
    t0 = time.perf_counter()
    run = run_line(line, closures, members, settings=MarchSettings())
    dt = time.perf_counter() - t0
    marches = list(run.results.values()) + run.members
    sweeps = [r.diagnostics["sweeps"] for r in marches]
    evals = sum(r.diagnostics["point_evaluations"] for r in marches)
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(f"| {a.stations} | {a.length / 1e3:.0f} km | {a.boundary} | {len(closures)} + {a.members} | {dt:.2f} s | "
          f"{dt / len(marches):.2f} s | {min(sweeps)}-{max(sweeps)} | {evals / dt / 1e3:.0f} k/s | "
          f"{a.threads} | {load:.1f} | {platform.processor() or platform.machine()} |")
    if run.failures:
        print("failures:", run.failures)


if __name__ == "__main__":
    main()
