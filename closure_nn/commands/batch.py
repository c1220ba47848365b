"""``closure-nn batch``: solve every row of a conditions table, write a results table."""
from __future__ import annotations

import argparse
from pathlib import Path

from ..caution import CAUTION
from ..config import load_config
from ..closures.registry import build_closure
from ..physics.checks import InputError, check_conditions
from ..physics.point import solve_points
from ..run_folder import atomic_path, make_run_dir, write_json


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("table", help="conditions table (.csv or .parquet; bracketed units in headers allowed)")
    p.add_argument("--out", default=None, help="results file (default: results.csv in a new run folder)")


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    import pandas as pd
    import torch
    from omegaconf import OmegaConf

    from ..data.schema import to_conditions
    from ..data.table_io import read_table

    cfg = load_config("point", overrides)
    if args.out and not Path(args.out).parent.is_dir():
        raise InputError(f"--out {args.out}: the folder {Path(args.out).parent} does not exist; create it or "
                         "choose another results file")
    df = read_table(args.table)
    cond = to_conditions(df, check=False)
    try:
        check_conditions(cond, where=str(args.table))
    except InputError:
        _raise_for_first_bad_row(cond, df, str(args.table))
        raise
    closure = build_closure(cfg.closure)
    with torch.no_grad():
        res = solve_points(cond, closure, **dict(cfg.solver))
    out_df = pd.concat([df.reset_index(drop=True), pd.DataFrame(res.to_columns()).add_prefix("calc_")], axis=1)
    run_dir = make_run_dir("batch", cfg.run_root)
    out = Path(args.out) if args.out else run_dir / "results.csv"
    with atomic_path(out) as tmp:  # never half a results file
        out_df.to_csv(tmp, index=False)
    (run_dir / "config.yaml").write_text(OmegaConf.to_yaml(cfg))
    counts = out_df["calc_pattern"].value_counts().to_dict()
    write_json(run_dir / "summary.json", {"input": str(args.table), "rows": len(out_df), "closure": closure.describe(),
                                          "patterns": counts, "flagged_rows": int((out_df["calc_flags"] != 0).sum())})
    print(f"{len(out_df)} rows solved with {closure.label}; results: {out}")
    print("patterns: " + ", ".join(f"{k} {v}" for k, v in counts.items()))
    print(CAUTION)
    return 0


def _raise_for_first_bad_row(cond, df, where: str) -> None:
    """Raise the range check of the first bad row, naming its data row (from 1) and file line."""
    first = df.attrs.get("first_data_line")
    for i in range(int(cond.shape[0])):
        try:
            check_conditions(cond[i], where="")
        except InputError as exc:
            line = f" (file line {first + i})" if first else ""
            raise InputError(f"{where}, data row {i + 1}{line}: {exc}") from None
