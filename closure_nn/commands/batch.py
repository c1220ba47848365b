"""``closure-nn batch TABLE``: solve every row of a conditions table, write a results table.

Writes ``results.csv`` into a new run folder under ``--out DIR`` (default ./runs): the input
columns in SI and the results ``calc_*``, each header with its unit (``calc_pgrad [Pa/m]``), a
plain table that ``pandas.read_csv`` and ``closure-nn check-data`` read. ``--output FILE`` also
writes the table to FILE (``.csv`` or ``.parquet``).

pandas and the data layer (which loads pandas and scipy) are imported inside :func:`run`, so that
``closure-nn batch --help`` and argument errors answer without loading them.
"""
from __future__ import annotations

import argparse
from pathlib import Path

import torch
from omegaconf import OmegaConf

from ..caution import CAUTION
from ..config import load_config
from ..physics.checks import InputError, check_conditions
from ..physics.point import solve_points
from ..run_folder import make_run_dir, write_json
from .options import add_closure_option, add_out_option, chosen_closure, deprecated

#: suffixes of a file name: an --out ending so is the old spelling of --output
_TABLE_SUFFIXES = (".csv", ".txt", ".tsv", ".parquet")


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("table", help="conditions table (.csv or .parquet; bracketed units in headers allowed)")
    add_closure_option(p)
    add_out_option(p)
    p.add_argument("--output", default=None, metavar="FILE",
                   help="write the results table to FILE as well (its folder must exist); the run folder under "
                        "--out keeps results.csv, the config and the summary")


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    import pandas as pd

    from ..data.result_tables import drop_result_columns, write_result_csv
    from ..data.schema import to_conditions
    from ..data.table_io import read_table

    cfg = load_config("point", overrides)
    torch.set_num_threads(int(cfg.threads))
    output, out_root, old_out = args.output, args.out, None
    if out_root and Path(out_root).suffix.lower() in _TABLE_SUFFIXES and not Path(out_root).is_dir():
        output, out_root, old_out = out_root, None, out_root  # the old spelling: --out FILE
    if output and not Path(output).parent.is_dir():
        raise InputError(f"{'--out' if old_out else '--output'} {output}: the folder {Path(output).parent} does not exist; create it or "
                         "choose another results file")
    df = read_table(args.table)
    df, old = drop_result_columns(df)
    if old:
        print(f"note: {len(old)} result column(s) of an earlier run left out of the input and written anew "
              f"({', '.join(map(str, old[:3]))}{', ...' if len(old) > 3 else ''})")
    cond = to_conditions(df, check=False)
    try:
        check_conditions(cond, where=str(args.table))
    except InputError:
        _raise_for_first_bad_row(cond, df, str(args.table))
        raise
    closure = chosen_closure(args.closure, cfg, overrides)
    with torch.no_grad():
        res = solve_points(cond, closure, **dict(cfg.solver))
    out_df = pd.concat([df.reset_index(drop=True), pd.DataFrame(res.to_columns()).add_prefix("calc_")], axis=1)
    run_dir = make_run_dir("batch", out_root or cfg.run_root)
    out = write_result_csv(out_df, run_dir / "results.csv")  # SI values, the unit in each header
    if output:
        out = write_result_csv(out_df, output)
    (run_dir / "config.yaml").write_text(OmegaConf.to_yaml(cfg))
    counts = out_df["calc_pattern"].value_counts().to_dict()
    write_json(run_dir / "summary.json", {"input": str(args.table), "rows": len(out_df), "closure": closure.describe(),
                                          "results": str(out), "patterns": counts,
                                          "flagged_rows": int((out_df["calc_flags"] != 0).sum()), "caution": CAUTION})
    print(f"{len(out_df)} rows solved with {closure.label}; results: {out}")
    print("patterns: " + ", ".join(f"{k} {v}" for k, v in counts.items()))
    print(CAUTION)
    if old_out:  # noted once the run worked: a failure stays one line
        deprecated(f"--out {old_out} (a results file)", f"--output {old_out} (--out DIR is the parent of the run folder)")
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
