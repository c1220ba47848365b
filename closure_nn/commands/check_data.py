"""``closure-nn check-data FILE``: validate a training table and write it in SI.

Writes into a new run folder: ``data_si.csv`` (or ``.parquet``) with the accepted rows in SI,
``rejected.csv`` (data row, check, reason, values in SI), ``validation_summary.txt``,
``summary.json`` (counts) and the resolved ``config.yaml``. Prints a short summary.
Exit code 0 when at least one row is accepted (and, with ``--strict``, none rejected), else 1.

The data layer (which loads pandas and scipy) is imported inside :func:`run`, so that
``closure-nn check-data --help`` and argument errors answer without loading it.
"""
from __future__ import annotations

import argparse
from pathlib import Path

from omegaconf import OmegaConf

from ..config import load_config
from ..physics.checks import InputError
from ..run_folder import make_run_dir, write_json


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("file", metavar="FILE", help="training table (.csv or .parquet); units in headers, e.g. 'D [mm]'")
    p.add_argument("--out", metavar="DIR", default=None,
                   help="parent folder for the run folder (default: run_root of the config, ./runs)")
    p.add_argument("--strict", action="store_true", help="exit with code 1 if any row is rejected")


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    from ..data.table_io import read_table, write_table
    from ..data.validate import REASON_SEP, validate_table

    cfg = load_config("check_data", overrides)
    if cfg.unknown_columns not in ("keep", "drop"):
        raise InputError(f"unknown_columns must be 'keep' or 'drop', not {cfg.unknown_columns!r}")
    if cfg.table_format not in ("csv", "parquet"):
        raise InputError(f"table_format must be 'csv' or 'parquet', not {cfg.table_format!r}")
    table = read_table(args.file)
    res = validate_table(table, path=args.file, unknown=cfg.unknown_columns)
    root = args.out or cfg.run_root
    run_dir = make_run_dir("check-data", root=root)
    (run_dir / "config.yaml").write_text(OmegaConf.to_yaml(cfg))
    data_path = write_table(res.clean, run_dir / f"data_si.{cfg.table_format}", unit_headers=bool(cfg.unit_headers))
    paths = res.write(run_dir)
    write_json(run_dir / "summary.json", {
        "file": str(Path(args.file)), "rows": res.n_rows, "accepted": len(res.clean),
        "rejected": len(res.rejected), "rejected_by_check": res.counts(),
        "rhog_computed": res.n_rhog_computed, "warnings": res.warnings,
    })
    print(f"checked {args.file}: {res.n_rows} rows, {len(res.clean)} accepted, {len(res.rejected)} rejected")
    for code, n in sorted(res.counts().items(), key=lambda kv: -kv[1]):
        print(f"  rejected ({code}): {n}")
    for w in res.warnings:
        print(f"  warning: {w}")
    if len(res.rejected):
        first = str(res.rejected["reason"].iloc[0]).split(REASON_SEP)[0]
        print(f"  first problem: {first}")
    print(f"SI table: {data_path}")
    print(f"rejected rows: {paths['rejected']}; summary: {paths['summary']}")
    if len(res.clean) == 0:
        return 1
    return 1 if (args.strict and len(res.rejected)) else 0
