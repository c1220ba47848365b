"""The audit stage on typed objects: a validated table and a closure in, the audit's results and
its run-folder files out. ``closure-nn audit`` and the demo both call :func:`audit_table`, so
neither runs the other's command nor reads back what it wrote.

Parts: the dataset audit (:func:`closure_nn.audit.dataset.audit_dataset`: both phase momentum
balances at every measured state, uncertainty checks, the closure's point solution), precision and
recall against a corruption list (:mod:`closure_nn.audit.scoring`), and the closure's health
(:func:`closure_nn.audit.health.audit_closure`: positivity, smoothness, holdup roots, single-phase
limits). The report is written by :func:`closure_nn.report.audit_report.write_report`.
"""
from __future__ import annotations

import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from ..audit.dataset import AuditResult, AuditSettings, audit_dataset
from ..audit.health import HealthGridSpec, HealthReport, audit_closure
from ..audit.scoring import recall_by_kind, score_against
from ..caution import CAUTION
from ..physics.checks import InputError
from ..report.audit_report import write_report
from ..run_folder import write_json


@dataclass
class AuditOutcome:
    """What :func:`audit_table` returns: the dataset audit, the health report (or None), the
    score against a corruption list (or None), the report path and the ``summary.json`` content."""

    result: AuditResult
    health: HealthReport | None
    score: dict | None
    report: Path
    summary: dict = field(default_factory=dict)


def _timed(say: Callable[[str], None], text: str, work: Callable[[], object]):
    say(text + " ...")
    t0 = time.perf_counter()
    out = work()
    say(f"  done in {time.perf_counter() - t0:.0f} s")
    return out


def audit_table(rows: pd.DataFrame, closure, settings: Mapping, run_dir: str | Path, *,
                truth: pd.DataFrame | None = None, rejected: pd.DataFrame | None = None, health: bool = True,
                notes: list[str] | None = None, say: Callable[[str], None] = print) -> AuditOutcome:
    """Audit ``rows`` (validated, SI) against ``closure`` and write the report into ``run_dir``.

    ``settings``: the composed ``conf/audit.yaml`` (``checks``, ``grid``, ``solver``).
    ``truth``: a corruption list (``run_id, kind, description``) to score the suspects against;
    rows the validation rejected (``rejected``, with ``run_id``) count as found.
    """
    if len(rows) == 0:
        raise InputError("no valid rows to audit")
    try:
        checks = AuditSettings.from_mapping(dict(settings["checks"]))
        spec = HealthGridSpec.from_mapping(dict(settings["grid"]))
    except ValueError as exc:
        raise InputError(f"config audit: {exc}") from None
    run_dir = Path(run_dir)
    run_dir.mkdir(parents=True, exist_ok=True)
    if rejected is not None and len(rejected):
        rejected.to_csv(run_dir / "rejected.csv", index=False)
    res = _timed(say, f"dataset audit: momentum-balance residuals at the {len(rows)} measured states and the "
                      f"closure's point solution of each row ({closure.label})",
                 lambda: audit_dataset(rows, closure, checks, solver=dict(settings["solver"])))
    score = by_kind = None
    if truth is not None:
        flagged = set(res.flagged_run_ids())
        if rejected is not None and "run_id" in rejected:
            flagged |= {str(r) for r in rejected["run_id"].dropna()}  # validation found them first
        score = score_against(flagged, truth["run_id"]).as_dict()
        by_kind = recall_by_kind(flagged, truth)
    report_health = None
    if health:
        report_health = _timed(say, f"closure health: positivity over the grid, smoothness sweeps of {spec.n_sweep} "
                                    f"points, root maps of {spec.n_map} x {spec.n_map} cells at "
                                    f"{len(spec.roots_theta_deg)} inclinations, single-phase limits",
                               lambda: audit_closure(closure, spec))
    report = _timed(say, "writing report.md, the tables and the figures",
                    lambda: write_report(run_dir, res, report_health, score, by_kind, list(notes or [])))
    summary = {"audit": res.summary(), "score": score, "health": report_health.summary() if report_health else None,
               "closure": closure.describe(), "caution": CAUTION}
    write_json(run_dir / "summary.json", summary)
    return AuditOutcome(res, report_health, score, report, summary)
