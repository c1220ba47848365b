"""``closure-nn audit DATA``: consistency audit of a measurement table and of the closure.

Writes into a run folder: ``report.md``, residual and root-map PNGs, ``audit_rows.csv``,
``suspects.csv``, ``summary.json`` and the resolved config. With a corruption list (``truth=`` or
``<DATA stem>_corruptions.csv`` beside DATA) precision and recall of the suspect rows are reported;
``--self-check`` audits the invented corrupted campaign of :mod:`closure_nn.audit.selfcheck` instead.
"""
from __future__ import annotations

import argparse
from pathlib import Path

from ..caution import CAUTION
from ..config import load_config
from ..physics.checks import InputError
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


def _stage(text: str) -> float:
    """One progress line for a stage that may take a while; returns its start time."""
    import time

    print(text + " ...", flush=True)
    return time.perf_counter()


def _done(t0: float) -> None:
    import time

    print(f"  done in {time.perf_counter() - t0:.0f} s", flush=True)


def _closure(args: argparse.Namespace, cfg, overrides: list[str]):
    """``--closure``; the old ``--closure-config YAML`` (a closure config file) still works, with a note."""
    from omegaconf import OmegaConf

    from ..closures.registry import build_closure

    path = getattr(args, "closure_config", None)
    if path is None or args.closure is not None:
        return chosen_closure(args.closure, cfg, overrides)
    p = Path(path)
    if not p.exists():
        raise InputError(f"--closure-config {p}: no such file")
    ccfg = OmegaConf.load(p)
    spec = "baseline" if ccfg.get("kind", "baseline") == "baseline" else ccfg.get("path", "PATH")
    closure = build_closure(ccfg)
    deprecated(f"--closure-config {path}", f"--closure {spec}")  # after loading: a failure stays one line
    return closure


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    from omegaconf import OmegaConf

    from ..audit.dataset import AuditSettings, audit_dataset
    from ..audit.health import HealthGridSpec, audit_closure
    from ..audit.report import write_report
    from ..audit.scoring import read_truth, recall_by_kind, score_against
    from ..data.table_io import read_table
    from ..data.validate import validate_table
    from ..run_folder import make_run_dir, write_json

    cfg = load_config("audit", overrides)
    try:
        settings = AuditSettings.from_mapping(OmegaConf.to_container(cfg.checks, resolve=True))
        spec = HealthGridSpec.from_mapping(OmegaConf.to_container(cfg.grid, resolve=True))
    except ValueError as exc:
        raise InputError(f"config audit: {exc}") from None
    closure = _closure(args, cfg, overrides)
    notes, truth, rejected = [], None, None
    if args.self_check:
        from ..audit.selfcheck import corrupted_campaign

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
    if rejected is not None and len(rejected):
        rejected.to_csv(run_dir / "rejected.csv", index=False)
    t0 = _stage(f"dataset audit: momentum-balance residuals at the {len(df)} measured states and the closure's "
                f"point solution of each row ({closure.label})")
    res = audit_dataset(df, closure, settings, solver=dict(cfg.solver))
    _done(t0)
    score = by_kind = None
    if truth is not None:
        flagged = set(res.flagged_run_ids())
        if rejected is not None and "run_id" in rejected:
            flagged |= {str(r) for r in rejected["run_id"].dropna()}  # validation found them first
        score = score_against(flagged, truth["run_id"]).as_dict()
        by_kind = recall_by_kind(flagged, truth)
    health = None
    if not (args.no_health or not cfg.health):
        t0 = _stage(f"closure health: positivity over the grid, smoothness sweeps of {spec.n_sweep} points, root maps of "
                    f"{spec.n_map} x {spec.n_map} cells at {len(spec.roots_theta_deg)} inclinations, single-phase limits")
        health = audit_closure(closure, spec)
        _done(t0)
    t0 = _stage("writing report.md, the tables and the figures")
    report = write_report(run_dir, res, health, score, by_kind, notes)
    _done(t0)
    summary = {"audit": res.summary(), "score": score, "health": health.summary() if health else None,
               "closure": closure.describe(), "caution": CAUTION}
    write_json(run_dir / "summary.json", summary)
    t = res.table
    print(f"{len(t)} rows audited with {closure.label}: {int(t['suspect'].sum())} suspect")
    if score is not None:
        print(f"against the corruption list: precision {score['precision']:.3f}, recall {score['recall']:.3f}")
    if health is not None:
        print(f"closure health: {health.verdict}" + "".join(f"\n  - {m}" for m in health.problems + health.warnings))
    print(f"report: {report}")
    print(CAUTION)
    return 0
