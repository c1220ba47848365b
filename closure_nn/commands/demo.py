"""``closure-nn demo``: the end-to-end demo on the shipped, invented demo data.

Stage 1 (this version): a batch point calculation of data_demo/points_demo.csv with the
baseline closure. Later stages (synthetic set, pre-training, fine-tuning, audit, line) are added
as their modules land.
"""
from __future__ import annotations

import argparse
from pathlib import Path

DEMO_DIR = Path(__file__).resolve().parents[2] / "data_demo"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--runs", default="runs", help="folder for run folders (default ./runs)")


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    from . import batch

    ns = argparse.Namespace(table=str(DEMO_DIR / "points_demo.csv"), out=None)
    return batch.run(ns, [f"run_root={args.runs}", *overrides])
