"""Benchmark: all holdup roots and the point solver on 1e5 random states; peak memory at 1e6.

Measures, side by side in one run on this machine (median of ``--repeats``, ``torch.no_grad``):
* ``find_roots`` (all stratified roots: 40-point bracketing, turn search, refinement) and
  ``solve_points`` (roots + pattern + pattern models) on N random states, with the default
  baseline closure (Churchill wall, Andritsos-Hanratty interface, conf/closure/baseline.yaml);
* optionally (``--before REV``) the root finder as it was at git revision REV, loaded with
  ``git show`` into a temporary module, on the same states;
* a plain-Python scalar peer: its own implementation of the combined equation (math module,
  written here from Taitel & Dukler 1976 eq. 3, Churchill 1977, Andritsos & Hanratty 1987,
  independent of closure_nn's torch code), brentq per bracket on the SAME 40-point grid, timed
  on a subsample and scaled; its root counts and roots are compared with ours on that subsample;
* ``--rss N``: peak resident memory (ru_maxrss) of a process that builds N states and runs
  ``find_roots`` or ``solve_points`` on them (one child process each).

Run: .venv/bin/python benchmarks/bench_point_solver.py [--n 100000] [--threads 1] [--before cf8ff0b]
     .venv/bin/python benchmarks/bench_point_solver.py --rss 1000000
"""
from __future__ import annotations

import argparse
import importlib.util
import math
import os
import platform
import resource
import subprocess
import sys
import tempfile
import time

import numpy as np
import torch

from closure_nn.allocator import keep_freed_memory
from closure_nn.closures.baseline import BaselineClosure
from closure_nn.physics.conditions import make_conditions
from closure_nn.physics.holdup_roots import find_roots, frac_grid
from closure_nn.physics.point import solve_points

CLOSURE = dict(wall="churchill", interface="andritsos_hanratty")


def random_states(n: int, seed: int = 0, make=make_conditions):
    """``n`` random states (``make``: the make_conditions of the closure_nn to time; benchmarks/ab_compare.py
    passes an earlier revision's)."""
    g = torch.Generator().manual_seed(seed)
    r = lambda: torch.rand(n, generator=g, dtype=torch.float64)  # noqa: E731
    return make(
        vsl=10 ** (-3 + 3 * r()), vsg=10 ** (-1 + 2.5 * r()), D=0.025 + 0.5 * r(),
        theta=torch.deg2rad(-10 + 20 * r()), roughness=5e-5 * r(), rhol=700 + 300 * r(),
        rhog=1 + 50 * r(), mul=10 ** (-3.3 + 1.5 * r()),
    )


def median_of(fn, repeats: int) -> tuple[float, float]:
    """Median wall-clock and median process CPU seconds of ``repeats`` calls (CPU time is less
    disturbed by other processes on shared cores; with 2 threads it counts both)."""
    wall, cpu = [], []
    for _ in range(repeats):
        t, c = time.perf_counter(), time.process_time()
        fn()
        wall.append(time.perf_counter() - t)
        cpu.append(time.process_time() - c)
    return float(np.median(wall)), float(np.median(cpu))


# --- the plain-Python peer (no closure_nn code) ------------------------------------------------
def _fanning_churchill(Re: float, eD: float) -> float:
    Re = max(Re, 1e-6)
    A = (2.457 * math.log(1.0 / ((7.0 / Re) ** 0.9 + 0.27 * eD))) ** 16 if Re > 10 else 0.0
    B = (37530.0 / Re) ** 16
    return 2.0 * ((8.0 / Re) ** 12 + (A + B) ** -1.5) ** (1.0 / 12)


def peer_residual(h: float, p: dict) -> float:
    """Combined two-fluid momentum residual [Pa/m] at h/D, Taitel & Dukler (1976) eq. 3."""
    D = p["D"]
    beta = 2 * math.acos(1 - 2 * h)
    A = math.pi * D * D / 4
    A_L = D * D / 8 * (beta - math.sin(beta))
    A_G = A - A_L
    S_L, S_i = D * beta / 2, D * math.sin(beta / 2)
    S_G = math.pi * D - S_L
    u_L, u_G = p["vsl"] * A / A_L, p["vsg"] * A / A_G
    D_L, D_G = 4 * A_L / S_L, 4 * A_G / (S_G + S_i)
    f_L = _fanning_churchill(p["rhol"] * u_L * D_L / p["mul"], p["roughness"] / D_L)
    f_G = _fanning_churchill(p["rhog"] * u_G * D_G / p["mug"], p["roughness"] / D_G)
    vt = 5.0 * math.sqrt(1.2 / p["rhog"])
    f_i = f_G * (1 + 15 * math.sqrt(h) * max(p["vsg"] / vt - 1, 0.0))
    t_L, t_G = 0.5 * f_L * p["rhol"] * u_L * abs(u_L), 0.5 * f_G * p["rhog"] * u_G * abs(u_G)
    du = u_G - u_L
    t_i = 0.5 * f_i * p["rhog"] * du * abs(du)
    return (t_G * S_G / A_G - t_L * S_L / A_L + t_i * S_i * (1 / A_L + 1 / A_G)
            - (p["rhol"] - p["rhog"]) * p["g"] * math.sin(p["theta"]))


def peer_roots(p: dict, grid: list[float]) -> list[float]:
    from scipy.optimize import brentq  # here, so that the peak-RSS child (--rss) carries only what a solve needs

    ys = [peer_residual(x, p) for x in grid]
    return [brentq(peer_residual, a, b, args=(p,), xtol=1e-12)
            for a, b, ya, yb in zip(grid[:-1], grid[1:], ys[:-1], ys[1:]) if (ya < 0) != (yb < 0)]


def load_before(rev: str):
    src = subprocess.run(["git", "show", f"{rev}:closure_nn/physics/holdup_roots.py"], check=True,
                         capture_output=True, text=True).stdout
    path = os.path.join(tempfile.mkdtemp(), "holdup_roots_before.py")
    with open(path, "w") as fh:
        fh.write(src)
    spec = importlib.util.spec_from_file_location("closure_nn.physics.holdup_roots_before", path)
    mod = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = mod
    spec.loader.exec_module(mod)
    return mod


def rss_child(what: str, n: int) -> None:
    torch.set_num_threads(1)
    mb = lambda: resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # noqa: E731
    base = mb()
    cond = random_states(n)
    loaded = mb()
    t = time.perf_counter()
    with torch.no_grad():
        (find_roots if what == "find_roots" else solve_points)(cond, BaselineClosure(**CLOSURE))
    print(f"| {what}, {n:,} states | {mb():.0f} MB | {base:.0f} MB | {loaded:.0f} MB | {time.perf_counter() - t:.1f} s |")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=100_000)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--peer", type=int, default=300, help="states in the scalar-peer subsample")
    ap.add_argument("--before", default=None, help="git revision of an earlier root finder to time alongside")
    ap.add_argument("--rss", type=int, default=0, help="peak-RSS run with this many states (child processes)")
    ap.add_argument("--rss-child", default=None, help=argparse.SUPPRESS)
    ap.add_argument("--glibc-defaults", action="store_true",
                    help="leave glibc malloc at its defaults (the command line keeps freed memory: closure_nn/allocator.py)")
    a = ap.parse_args()
    if not a.glibc_defaults:
        keep_freed_memory()
    if a.rss_child:
        return rss_child(a.rss_child, a.rss)
    if a.rss:
        print("| solve | peak RSS | after imports | after building the states | time (1 thread) |")
        print("|---|---|---|---|---|")
        for what in ("find_roots", "solve_points"):
            subprocess.run([sys.executable, __file__, "--rss", str(a.rss), "--rss-child", what]
                           + ["--glibc-defaults"] * a.glibc_defaults, check=True)
        return
    torch.set_num_threads(a.threads)
    closure = BaselineClosure(**CLOSURE)
    cond = random_states(a.n)
    rows = []
    with torch.no_grad():
        solve_points(cond[:2000], closure)  # warm-up
        t_roots = median_of(lambda: find_roots(cond, closure), a.repeats)
        t_point = median_of(lambda: solve_points(cond, closure), a.repeats)
        rows += [("all roots (`find_roots`)", t_roots), ("all roots + pattern + models (`solve_points`)", t_point)]
        if a.before:
            old = load_before(a.before)
            old.find_all_roots(cond[:2000], closure)
            rows.append((f"all roots, root finder of {a.before} (`find_all_roots`)",
                         median_of(lambda: old.find_all_roots(cond, closure), a.repeats)))
        ours = find_roots(cond[:a.peer], closure)

    grid = frac_grid("stratified", 40).tolist()
    fields = {k: v[:a.peer].tolist() for k, v in cond.as_dict().items()}
    peer_roots({k: fields[k][0] for k in fields}, grid)  # warm-up: imports scipy.optimize outside the timing
    t, c = time.perf_counter(), time.process_time()
    peer = [peer_roots({k: fields[k][i] for k in fields}, grid) for i in range(a.peer)]
    t_peer = ((time.perf_counter() - t) / a.peer * a.n, (time.process_time() - c) / a.peer * a.n)
    rows.append((f"plain-Python peer, brentq on the same 40-point grid (scaled from {a.peer})", t_peer))
    same = sum(len(p) == int(ours.n_roots[i]) for i, p in enumerate(peer))
    diff = max((abs(r - float(ours.roots[i, k])) for i, p in enumerate(peer) if len(p) == int(ours.n_roots[i])
                for k, r in enumerate(p[:3])), default=0.0)

    load = os.getloadavg()[0]
    print(f"machine: {platform.processor() or platform.machine()}, {os.cpu_count()} cores, {a.threads} torch "
          f"threads, python {platform.python_version()}, torch {torch.__version__}, 1-min load {load:.1f}")
    print(f"N = {a.n:,} states, median of {a.repeats}")
    print("| stage | wall s | CPU s | states/s (wall) |")
    print("|---|---|---|---|")
    for name, (sec, cpu) in rows:
        print(f"| {name} | {sec:.3f} | {cpu:.3f} | {a.n / sec:,.0f} |")
    print(f"peer vs find_roots: {t_peer[0] / t_roots[0]:.0f}x wall, {t_peer[1] / t_roots[1]:.0f}x CPU; peer root counts equal to ours on {same} of {a.peer} "
          f"states (the peer sees sign changes only), roots within {diff:.1e}")


if __name__ == "__main__":
    main()
