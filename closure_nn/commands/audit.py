"""``closure-nn audit DATA``: consistency audit of a measurement table and of the closure.

Writes into a run folder: ``report.md``, residual and root-map PNGs, ``audit_rows.csv``,
``suspects.csv``, ``summary.json`` and the resolved config. With a corruption list (``truth=`` or
``<DATA stem>_corruptions.csv`` beside DATA) precision and recall of the suspect rows are reported;
``--self-check`` audits the invented corrupted campaign of :mod:`closure_nn.audit.selfcheck` instead.
"""
from __future__ import annotations

import argparse
from pathlib import Path

from omegaconf import OmegaConf

from ..audit.scoring import read_truth
from ..audit.selfcheck import corrupted_campaign
from ..caution import CAUTION
from ..closures.registry import build_closure, closure_source
from ..config import load_config
from ..data.table_io import read_table
from ..data.validate import validate_table
from ..physics.checks import InputError
from ..pipeline.audit_stage import audit_table
from ..run_folder import make_run_dir
from .options import CLOSURE_HELP, add_closure_option, add_out_option, chosen_closure, deprecated


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("data", nargs="?", default=None, help="measurement table (.csv or .parquet; units in headers allowed)")
    add_closure_option(p, help="the closure audited: " + CLOSURE_HELP + " (default: baseline)")
    p.add_argument("--closure-config", default=None, help=argparse.SUPPRESS)  # old spelling of --closure
    p.add_argument("--truth", default=None, help="corruption list CSV (run_id, kind, description)")
    p.add_argument("--self-check", action="store_true",
                   help="audit the invented corrupted campaign (closure_nn.audit.selfcheck) instead of DATA")
    p.add_argument("--no-health", action="store_true", help="skip the closure health grid")
    add_out_option(p)


def _closure(args: argparse.Namespace, cfg, overrides: list[str]):
    """``--closure``; the old ``--closure-config YAML`` (a closure config file) still works, with a note."""
    path = getattr(args, "closure_config", None)
    if path is None or args.closure is not None:
        return chosen_closure(args.closure, cfg, overrides)
    p = Path(path)
    if not p.exists():
        raise InputError(f"--closure-config {p}: no such file")
    ccfg = OmegaConf.load(p)
    spec = "baseline" if closure_source(ccfg) == "baseline" else ccfg.get("path", "PATH")
    closure = build_closure(ccfg)
    deprecated(f"--closure-config {path}", f"--closure {spec}")  # after loading: a failure stays one line
    return closure


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    cfg = load_config("audit", overrides)
    closure = _closure(args, cfg, overrides)
    notes, truth, rejected = [], None, None
    if args.self_check:
        df, truth = corrupted_campaign()
        notes.append("data: the invented corrupted campaign of closure_nn.audit.selfcheck (not a real facility)")
    else:
        if args.data is None:
            raise InputError("give a measurement table (closure-nn audit DATA) or --self-check")
        val = validate_table(read_table(args.data), path=args.data)
        df, rejected = val.clean, val.rejected
        notes.append(f"data: {args.data} ({val.n_rows} rows read, {len(val.clean)} accepted, "
                     f"{len(val.rejected)} rejected by validation; those are listed in rejected.csv)")
        tpath = args.truth or cfg.truth
        if tpath is None:
            cand = Path(args.data).with_name(Path(args.data).stem + "_corruptions.csv")
            tpath = str(cand) if cand.exists() else None
        if tpath is not None:
            truth = read_truth(tpath)
            notes.append(f"corruption list: {tpath} ({len(truth)} rows)")
    if len(df) == 0:
        raise InputError(f"{args.data}: no valid rows to audit")
    run_dir = make_run_dir("audit", args.out or cfg.run_root)
    (run_dir / "config.yaml").write_text(OmegaConf.to_yaml(cfg))
    out = audit_table(df, closure, OmegaConf.to_container(cfg, resolve=True), run_dir, truth=truth, rejected=rejected,
                      health=not (args.no_health or not cfg.health), notes=notes,
                      say=lambda text: print(text, flush=True))
    t, score, health = out.result.table, out.score, out.health
    print(f"{len(t)} rows audited with {closure.label}: {int(t['suspect'].sum())} suspect")
    if score is not None:
        print(f"against the corruption list: precision {score['precision']:.3f}, recall {score['recall']:.3f}")
    if health is not None:
        print(f"closure health: {health.verdict}" + "".join(f"\n  - {m}" for m in health.problems + health.warnings))
    print(f"report: {out.report}")
    print(CAUTION)
    return 0
