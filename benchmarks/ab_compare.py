"""Side by side in ONE process: the solver of a git revision against the working tree, alternating.

On shared or noisy machines, runs of one script in separate processes differ by up to 20 %
(benchmarks/README.md); two versions timed alternately in one process see the same machine state.
The revision's ``closure_nn`` is extracted with ``git archive`` into a temporary folder under
another package name (the package imports itself only relatively, so it loads beside the working
tree's), then both are timed on the same inputs, ``--repeats`` times in alternating order:

* ``roots``: ``find_roots`` and ``solve_points`` on ``--n`` random states (the states and the
  closure of benchmarks/bench_point_solver.py: Churchill wall, Andritsos-Hanratty interface);
  prints the medians and the largest difference of the roots (0 when bit-identical);
* ``line``: ``run_line`` on the line of benchmarks/bench_line.py (5,000 stations, baseline +
  learned-style + 5 members, inlet pressure given).

The states and the line are built by those two scripts, with the revision's own constructors.

Run: .venv/bin/python benchmarks/ab_compare.py REV [--what roots|line] [--threads 1] [--repeats 6]
"""
from __future__ import annotations

import argparse
import importlib
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import torch
from bench_line import bench_line
from bench_point_solver import CLOSURE, random_states

from closure_nn.allocator import keep_freed_memory

ROOT = Path(__file__).resolve().parents[1]


def load_revision(rev: str, into: Path) -> str:
    """Extract ``closure_nn`` of git revision ``rev`` as package ``closure_nn_<rev>`` under ``into``."""
    name = "closure_nn_" + "".join(c if c.isalnum() else "_" for c in rev)
    tar = subprocess.run(["git", "-C", str(ROOT), "archive", rev, "closure_nn"], check=True, capture_output=True).stdout
    subprocess.run(["tar", "-x", "-C", str(into)], input=tar, check=True)
    (into / "closure_nn").rename(into / name)
    sys.path.insert(0, str(into))
    return name


def roots_case(pkg: str, n: int):
    m = lambda name: importlib.import_module(f"{pkg}.{name}")  # noqa: E731
    cond = random_states(n, 0, m("physics.conditions").make_conditions)
    closure = m("closures.baseline").BaselineClosure(**CLOSURE)
    find_roots, solve_points = m("physics.holdup_roots").find_roots, m("physics.point").solve_points

    def run() -> dict:
        with torch.no_grad():
            t0 = time.perf_counter()
            roots = find_roots(cond, closure).roots
            t1 = time.perf_counter()
            solve_points(cond, closure)
            t2 = time.perf_counter()
        return {"find_roots s": t1 - t0, "solve_points s": t2 - t1, "_out": roots}

    return run


def line_case(pkg: str):
    m = lambda name: importlib.import_module(f"{pkg}.{name}")  # noqa: E731
    march, run_line, Closure = m("line.march"), m("line.run").run_line, m("closures.baseline").BaselineClosure
    full = bench_line(5000, 50_000.0, "inlet", m("line.definition"))
    closures = {"baseline": Closure(), "learned": Closure(interface_kwargs={"coef": 12.0})}
    members = [Closure(interface_kwargs={"coef": 10.0 + 2.0 * i}) for i in range(5)]
    run_line(bench_line(50, 1000.0, "inlet", m("line.definition")), {"warm": Closure()})  # warm-up

    def run() -> dict:
        t0 = time.perf_counter()
        r = run_line(full, closures, members, settings=march.MarchSettings())
        return {"line s": time.perf_counter() - t0, "_out": torch.as_tensor(r.results["baseline"].p)}

    return run


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("rev", help="git revision to compare the working tree with")
    ap.add_argument("--what", choices=("roots", "line"), default="roots")
    ap.add_argument("--n", type=int, default=100_000)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--repeats", type=int, default=6)
    a = ap.parse_args()
    keep_freed_memory()
    torch.set_num_threads(a.threads)
    with tempfile.TemporaryDirectory() as tmp:
        old = load_revision(a.rev, Path(tmp))
        make = (lambda pkg: roots_case(pkg, a.n)) if a.what == "roots" else line_case
        runs = {a.rev: make(old), "working tree": make("closure_nn")}
        times: dict[str, dict[str, list[float]]] = {k: {} for k in runs}
        outs = {}
        for i in range(a.repeats):
            for who in (list(runs) if i % 2 == 0 else list(runs)[::-1]):
                res = runs[who]()
                outs[who] = res.pop("_out")
                for k, v in res.items():
                    times[who].setdefault(k, []).append(v)
    print(f"{a.what}, {a.threads} thread(s), {a.repeats} alternating repeats, medians (each repeat in brackets)")
    print(f"| measure | {a.rev} | working tree | ratio |\n|---|---|---|---|")
    for k in times[a.rev]:
        o, w = statistics.median(times[a.rev][k]), statistics.median(times["working tree"][k])
        each = lambda v: " / ".join(f"{x:.3f}" for x in v)  # noqa: E731
        print(f"| {k} | {o:.3f} ({each(times[a.rev][k])}) | {w:.3f} ({each(times['working tree'][k])}) | {w / o:.3f} |")
    x, y = outs[a.rev], outs["working tree"]
    same_nan = bool((x.isnan() == y.isnan()).all())
    print(f"largest difference of the results: {float((x - y).abs().nan_to_num(0.0).max()):.3g} (NaN pattern equal: {same_nan})")


if __name__ == "__main__":
    main()
