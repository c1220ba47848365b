"""Wall time of `closure-nn fit` on the demo campaign, with and without `--search N`.

    .venv/bin/python benchmarks/bench_fit.py [--search 8] [--out runs/bench_fit]

Runs `closure_nn.pipeline.fit.fit` with the defaults (conf/fit.yaml) on data_demo/lab_campaign.csv
(INVENTED data, 2,262 rows) once without and once with the settings search, and prints a Markdown
table of the stage times measured by `fit` itself (time.perf_counter) and the development-row
scores. No timing is asserted anywhere: this is a measurement.
"""
from __future__ import annotations

import argparse
import os
import platform
import sys
import time
from pathlib import Path

import torch

from closure_nn.config import load_config
from closure_nn.pipeline.fit import fit

REPO = Path(__file__).resolve().parents[1]


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--search", type=int, default=8)
    p.add_argument("--out", default="runs/bench_fit")
    p.add_argument("--skip-plain", action="store_true")
    a = p.parse_args(argv)
    table = REPO / "data_demo" / "lab_campaign.csv"
    rows = []
    runs = [0, a.search] if not a.skip_plain else [a.search]
    for trials in runs:
        cfg = load_config("fit", [f"run_root={a.out}", f"fit.search.trials={trials}"])
        t0 = time.perf_counter()
        r = fit(cfg, table, say=lambda line: print(line, flush=True))
        wall = time.perf_counter() - t0
        s = r.report["seconds"]
        sc = r.report["scores"]["shipped"]
        rows.append((f"fit{'' if not trials else f' --search {trials}'}", wall, s["synthetic"], s["pretrain"],
                     s["finetune"], sc["holdup_mae"], sc["pgrad_within_20"], r.report["shipped"]))
    print(f"\nmachine: {platform.machine()}, {os.cpu_count()} cores, torch {torch.__version__}, "
          f"load average at the end {os.getloadavg()[0]:.1f}")
    print("| run | wall [s] | synthetic [s] | pre-train [s] | fine-tune (+ search) [s] | dev holdup MAE | dev pgrad within +-20 % | shipped |")
    print("|---|---|---|---|---|---|---|---|")
    for name, wall, syn, pre, ft, mae, w20, shipped in rows:
        print(f"| {name} | {wall:.0f} | {syn:.0f} | {pre:.0f} | {ft:.0f} | {mae:.4f} | {100 * w20:.1f} % | {shipped} |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
