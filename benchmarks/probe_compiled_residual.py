"""Probe: the root finder with its residual compiled by ``torch.compile``, against eager, in one process.

Not a path of the package. It measures what a compiled residual would give the goals of issue 17
(benchmarks/README.md), so that the choice between a compiled path and revised goals rests on
numbers: the same ``find_roots`` / ``run_line`` code, with ``holdup_roots.residual_fn`` replaced for
the duration of the probe by one that calls ``torch.compile(..., dynamic=True)`` on the combined
residual (Taitel & Dukler 1976, eq. 3, as closure_nn computes it) wherever no gradient is tracked.
Every closure gets its own compiled function (its constants are part of the graph).

Prints the time of the first call (compiling, and loading from the inductor cache where a
previous run left it), the medians of ``--repeats`` alternating eager / compiled runs, and the
largest difference of the results (roots, or the baseline march's pressures).

Run: .venv/bin/python benchmarks/probe_compiled_residual.py [--what roots|line] [--threads 2] [--repeats 4]
"""
from __future__ import annotations

import argparse
import contextlib
import functools
import statistics
import time

import torch
from bench_line import bench_line
from bench_point_solver import CLOSURE, random_states

import closure_nn.physics.holdup_roots as roots_module
from closure_nn.allocator import keep_freed_memory
from closure_nn.closures.baseline import BaselineClosure
from closure_nn.line.march import MarchSettings
from closure_nn.line.run import run_line
from closure_nn.physics.conditions import Conditions
from closure_nn.physics.geometry import SeparatedGeometry
from closure_nn.physics.local_state import LocalState, local_state
from closure_nn.physics.momentum import combined_residual, shear_stresses

EAGER_RESIDUAL_FN = roots_module.residual_fn


def compiled_residual_fn():
    """A drop-in for ``holdup_roots.residual_fn`` that evaluates a compiled residual under no_grad."""
    kernels: dict = {}

    def residual_fn(cond, closure, kind, entrainment):
        if torch.is_grad_enabled():
            return EAGER_RESIDUAL_FN(cond, closure, kind, entrainment)
        key = (id(closure), kind)
        if key not in kernels:
            def residual(frac, E, *fields):
                s = local_state(Conditions(*fields), frac, kind, E)
                return combined_residual(s, shear_stresses(s, closure(s)))

            kernels[key] = (closure, torch.compile(residual, dynamic=True))  # the closure kept alive: ids stay unique
        kernel = kernels[key][1]
        fields = tuple(cond.as_dict().values())
        E = torch.as_tensor(entrainment, dtype=torch.float64)
        return lambda frac: kernel(frac, E, *fields)

    return residual_fn


@contextlib.contextmanager
def residual(fn):
    """``fn`` as the root finder's residual_fn; with the compiled one, the cached properties of the
    geometry and the local state become plain properties (``functools.cached_property`` takes a
    lock in Python 3.11 that ``torch.compile`` cannot trace: a graph break at each, and the
    pieces between them recompile per batch size until dynamo gives up and runs them eagerly)."""
    swapped = []
    if fn is not EAGER_RESIDUAL_FN:
        for cls in (SeparatedGeometry, LocalState):
            for name, attr in list(vars(cls).items()):
                if isinstance(attr, functools.cached_property):
                    swapped.append((cls, name, attr))
                    setattr(cls, name, property(attr.func))
    roots_module.residual_fn = fn
    try:
        yield
    finally:
        roots_module.residual_fn = EAGER_RESIDUAL_FN
        for cls, name, attr in swapped:
            setattr(cls, name, attr)


def roots_case(n: int):
    cond, closure = random_states(n), BaselineClosure(**CLOSURE)

    def run() -> torch.Tensor:
        with torch.no_grad():
            return roots_module.find_roots(cond, closure).roots

    return run


def line_case():
    line = bench_line(5000, 50_000.0, "inlet")
    closures = {"baseline": BaselineClosure(), "learned": BaselineClosure(interface_kwargs={"coef": 12.0})}
    members = [BaselineClosure(interface_kwargs={"coef": 10.0 + 2.0 * i}) for i in range(5)]
    return lambda: torch.as_tensor(run_line(line, closures, members, settings=MarchSettings()).results["baseline"].p)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--what", choices=("roots", "line"), default="roots")
    ap.add_argument("--n", type=int, default=100_000)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--repeats", type=int, default=4)
    a = ap.parse_args()
    keep_freed_memory()
    torch.set_num_threads(a.threads)
    run = roots_case(a.n) if a.what == "roots" else line_case()
    ways = {"eager": EAGER_RESIDUAL_FN, "compiled": compiled_residual_fn()}
    first, times, outs = {}, {k: [] for k in ways}, {}
    for i in range(a.repeats + 1):
        for who in (list(ways) if i % 2 == 0 else list(ways)[::-1]):
            with residual(ways[who]):
                t = time.perf_counter()
                outs[who] = run()
                dt = time.perf_counter() - t
            if i == 0:
                first[who] = dt  # compiling, or loading from inductor's cache
            else:
                times[who].append(dt)
    print(f"{a.what}, {a.threads} thread(s), first call then {a.repeats} alternating repeats (median; each in brackets)")
    print("| residual | first call s | median s | repeats s |\n|---|---|---|---|")
    for who in ways:
        print(f"| {who} | {first[who]:.1f} | {statistics.median(times[who]):.3f} | "
              f"{' / '.join(f'{x:.3f}' for x in times[who])} |")
    x, y = outs["eager"], outs["compiled"]
    print(f"largest difference of the results: {float((x - y).abs().nan_to_num(0.0).max()):.3g} "
          f"(NaN pattern equal: {bool((x.isnan() == y.isnan()).all())})")


if __name__ == "__main__":
    main()
