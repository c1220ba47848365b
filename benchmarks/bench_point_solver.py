"""Benchmark: all-roots holdup solve + flow pattern for 1e5 random states.

Measures, in one run on this machine:
* closure-nn's vectorised `solve_points` (all stratified roots, pattern, annular/intermittent
  models) on N random states, and the all-roots stage alone (`find_all_roots`);
* a scalar loop of scipy.optimize.brentq on the SAME combined equation (same 40-point
  bracketing grid per state, one brentq call per bracket), timed on a subsample and scaled;
* per-point calls of fluids.two_phase.Taitel_Dukler_regime for the pattern, timed on a
  subsample and scaled.

Run: .venv/bin/python benchmarks/bench_point_solver.py [N]
"""
from __future__ import annotations

import math
import platform
import sys
import time

import numpy as np
import torch
from fluids.two_phase import Taitel_Dukler_regime
from scipy.optimize import brentq

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.physics.conditions import make_conditions
from closure_nn.physics.holdup_roots import find_all_roots, frac_grid, residual_fn
from closure_nn.physics.point import solve_points


def random_states(n: int, seed: int = 0):
    g = torch.Generator().manual_seed(seed)
    r = lambda: torch.rand(n, generator=g, dtype=torch.float64)  # noqa: E731
    return make_conditions(
        vsl=10 ** (-3 + 3 * r()), vsg=10 ** (-1 + 2.5 * r()), D=0.025 + 0.5 * r(),
        theta=torch.deg2rad(-10 + 20 * r()), roughness=5e-5 * r(), rhol=700 + 300 * r(),
        rhog=1 + 50 * r(), mul=10 ** (-3.3 + 1.5 * r()),
    )


def best_of(fn, repeats: int = 3) -> float:
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def main(n: int = 100_000) -> None:
    closure = BaselineClosure()
    cond = random_states(n)
    with torch.no_grad():
        solve_points(cond[:1000], closure)  # warm-up
        t_roots = best_of(lambda: find_all_roots(cond, closure))
        t_point = best_of(lambda: solve_points(cond, closure))

    # scalar brentq loop on the same equation, subsample
    m = 200
    grid = frac_grid("stratified", 40).numpy()
    sub = cond[:m]
    t = time.perf_counter()
    with torch.no_grad():
        for i in range(m):
            F = residual_fn(sub[i : i + 1], closure, "stratified", 0.0)
            f = lambda x: float(F(torch.tensor([x], dtype=torch.float64)))  # noqa: E731
            ys = [f(x) for x in grid]
            for a, b, ya, yb in zip(grid[:-1], grid[1:], ys[:-1], ys[1:]):
                if ya * yb < 0:
                    brentq(f, a, b, xtol=1e-12)
    t_brentq = (time.perf_counter() - t) / m * n

    # fluids' Taitel-Dukler regime, per point, subsample (mass rate and quality from our states)
    k = 2000
    c = {key: val[:k].numpy() for key, val in cond.as_dict().items()}
    A = math.pi * c["D"] ** 2 / 4
    mg, ml = c["rhog"] * c["vsg"] * A, c["rhol"] * c["vsl"] * A
    t = time.perf_counter()
    for i in range(k):
        Taitel_Dukler_regime(m=mg[i] + ml[i], x=mg[i] / (mg[i] + ml[i]), rhol=c["rhol"][i], rhog=c["rhog"][i],
                             mul=c["mul"][i], mug=c["mug"][i], D=c["D"][i], angle=math.degrees(c["theta"][i]),
                             roughness=c["roughness"][i])
    t_fluids = (time.perf_counter() - t) / k * n

    print(f"machine: {platform.processor() or platform.machine()}, {torch.get_num_threads()} torch threads, "
          f"python {platform.python_version()}, torch {torch.__version__}")
    print(f"N = {n} states (best of 3)")
    print(f"| stage | seconds | states/s |")
    print(f"|---|---|---|")
    print(f"| all roots (find_all_roots) | {t_roots:.3f} | {n / t_roots:,.0f} |")
    print(f"| all roots + pattern + pattern models (solve_points) | {t_point:.3f} | {n / t_point:,.0f} |")
    print(f"| scalar brentq loop, same equation (scaled from {m}) | {t_brentq:.1f} | {n / t_brentq:,.0f} |")
    print(f"| fluids Taitel_Dukler_regime per point (scaled from {k}) | {t_fluids:.1f} | {n / t_fluids:,.0f} |")
    print(f"speed-up vs brentq loop: {t_brentq / t_point:.0f}x; vs fluids per-point pattern: {t_fluids / t_point:.0f}x")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 100_000)
