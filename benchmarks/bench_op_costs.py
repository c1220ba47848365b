"""Benchmark: what one element-wise torch operation and one closure network evaluation cost here.

The cost model behind the solver's speed (benchmarks/README.md, "Issue 17: where the time goes"):
the root finder's grid pass works on chunks of 4,096 states x 40 levels (163,840 float64 values),
so each row below times one operation on a tensor of that size (median of ``--repeats`` calls,
inputs warm in cache, glibc malloc kept from returning freed memory as the command line does).
A second table times the branches of the default closure network (conf/model/correction.yaml:
one 64 x 64 branch per friction factor) per row, forward without gradients and forward +
backward, in float64 and, for comparison only, in float32 (closure-nn trains and solves in float64).

Run: .venv/bin/python benchmarks/bench_op_costs.py [--threads 1] [--repeats 50]
"""
from __future__ import annotations

import argparse
import copy
import os
import platform
import time
from pathlib import Path

import torch

from closure_nn.allocator import keep_freed_memory

N = 4096 * 40  # one grid chunk of the root finder (closure_nn.physics.holdup_roots.GRID_CHUNK x 40 levels)


def median_us(fn, repeats: int) -> float:
    for _ in range(5):
        fn()
    ts = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t)
    return sorted(ts)[len(ts) // 2] * 1e6


def op_rows(repeats: int) -> list[tuple[str, float]]:
    g = torch.Generator().manual_seed(0)
    x = torch.rand(N, generator=g, dtype=torch.float64) + 0.5
    y = torch.rand(N, generator=g, dtype=torch.float64) + 0.5
    mask = torch.rand(N, generator=g) < 0.5  # a random mask, as the refinement's masks are
    idx = mask.nonzero(as_tuple=True)[0]
    ops = {
        "x * y": lambda: x * y, "x + y": lambda: x + y, "x / y": lambda: x / y,
        "reciprocal(x)": lambda: torch.reciprocal(x), "x.abs()": lambda: x.abs(),
        "maximum(x, y)": lambda: torch.maximum(x, y), "x < y": lambda: x < y,
        "rsqrt(x)": lambda: torch.rsqrt(x), "sqrt(x)": lambda: torch.sqrt(x), "exp(x)": lambda: torch.exp(x),
        "log(x)": lambda: torch.log(x), "sin(x)": lambda: torch.sin(x), "acos(x - 1)": lambda: torch.acos(x - 1),
        "x.pow(-0.2)": lambda: x.pow(-0.2), "where(mask, x, y)": lambda: torch.where(mask, x, y),
        "x[mask] (boolean index)": lambda: x[mask], "x.index_select(0, idx)": lambda: x.index_select(0, idx),
    }
    return [(name, median_us(fn, repeats)) for name, fn in ops.items()]


def network_rows(repeats: int) -> list[tuple[str, float]]:
    """The branches of the default model (conf/model/correction.yaml: one 64 x 64 branch per
    friction factor), per row of input features."""
    from omegaconf import OmegaConf

    from closure_nn.closures.neural import NeuralClosure

    m = OmegaConf.to_container(OmegaConf.load(Path(__file__).parents[1] / "conf" / "model" / "correction.yaml"))
    net = NeuralClosure(hidden=m["hidden"], activation=m["activation"], mode=m["mode"], bound=m["bound"],
                        inputs=m["inputs"], learn=m["learn"], base_input=m["base_input"])
    mlps = [mod for mod in net.modules() if isinstance(mod, torch.nn.Sequential)]
    rows = 24576
    xs = [torch.rand(rows, mlp[0].in_features, dtype=torch.float64) for mlp in mlps]
    out = []
    with torch.no_grad():
        out.append(("forward, float64, no gradient", median_us(lambda: [f(x) for f, x in zip(mlps, xs)], repeats) / rows))
        m32, x32 = [copy.deepcopy(f).float() for f in mlps], [x.float() for x in xs]
        out.append(("forward, float32, no gradient", median_us(lambda: [f(x) for f, x in zip(m32, x32)], repeats) / rows))
    xg = [x.clone().requires_grad_(True) for x in xs]
    out.append(("forward + backward, float64",
                median_us(lambda: sum(f(x).sum() for f, x in zip(mlps, xg)).backward(), repeats) / rows))
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--repeats", type=int, default=50)
    a = ap.parse_args()
    keep_freed_memory()
    torch.set_num_threads(a.threads)
    print(f"machine: {platform.machine()}, {os.cpu_count()} cores, torch {torch.__version__}, {a.threads} thread(s), "
          f"1-min load {os.getloadavg()[0]:.1f}\n")
    rows = op_rows(a.repeats)
    mul = dict(rows)["x * y"]
    print(f"| operation on {N:,} float64 values | us | ns per value | x the cost of x * y |\n|---|---|---|---|")
    for name, us in rows:
        print(f"| `{name}` | {us:.0f} | {us * 1e3 / N:.2f} | {us / mul:.1f} |")
    print("\n| closure network of conf/model/correction.yaml (three 64 x 64 branches) | us per row |\n|---|---|")
    for name, us in network_rows(max(5, a.repeats // 5)):
        print(f"| {name} | {us:.2f} |")


if __name__ == "__main__":
    main()
