r"""``fit``: from a lab table to a validated closure bundle, in one call (``closure-nn fit``).

Stages, each a plain function on objects (no file written to be read back by this process):

1. :func:`validate_lab` - the checks of ``closure-nn check-data``; rejected rows are listed on the
   terminal and in ``rejected.csv``, never dropped silently.
2. the design space: a user's own design file, or the table's envelope widened to a line's
   conditions (:mod:`closure_nn.pipeline.envelope`);
3. a synthetic set of the baseline on it (:func:`closure_nn.data.synthetic.synthesize`);
4. pre-training on it, 5. fine-tuning on the lab rows (:func:`closure_nn.training.run.run_stage`)
   with a seeded share of the lab rows held back as DEVELOPMENT rows (``data.val_fraction``,
   ``seed``): they stop the fine-tune early and decide, by the do-no-harm rule
   (:func:`closure_nn.training.scoring.no_harm`), whether the fine-tuned closure ships or its
   pre-trained start does;
6. the report: baseline, pre-trained, fine-tuned and shipped closure on the development rows in
   the README's measures (holdup MAE and MAPE, pgrad MAPE and share within +-20 %, pattern
   accuracy), the rows per loss term, the rows whose stratified label the closure's pattern map
   contradicts (their data term decides, ``loss.pattern_rows=data_first``), a parity figure.

With ``search`` > 0 an Optuna study (:mod:`closure_nn.pipeline.search`) first chooses the
fine-tune settings on the development rows; the chosen settings are written beside the bundle.

Every setting comes from the composed config (conf/fit.yaml = conf/train.yaml + ``fit``): the
defaults are the method.
"""
from __future__ import annotations

import shutil
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd
import yaml
from omegaconf import DictConfig, OmegaConf

from ..caution import CAUTION
from ..data.design_space import DesignSpace, parse_design
from ..data.result_tables import write_result_csv
from ..physics.checks import InputError
from ..run_folder import make_run_dir, write_json
from ..training.module import EpochProgress
from ..training.run import StageResult
from ..training.scoring import predict_table, score_table
from .lab_table import LabTable, validate_lab
from .envelope import Margins, describe_envelope, envelope_design, line_conditions
from .stages import baseline_of, development_split, finetune, pretrain, solver_of, synthesize_design

#: measures of the report, in the README's words
MEASURES = (("holdup_mae", "holdup MAE [-]"), ("holdup_mape", "holdup MAPE [%]"), ("pgrad_mape", "pgrad MAPE [%]"),
            ("pgrad_within_20", "pgrad within +-20 %"), ("pattern_accuracy", "pattern accuracy"))


@dataclass
class FitResult:
    """What :func:`fit` returns: the run folder, the shipped bundle folder and closure, the report."""

    run_dir: Path
    bundle: Path
    closure: object
    report: dict
    stages: dict[str, StageResult] = field(default_factory=dict)


def design_space(cfg: DictConfig, lab: LabTable, line=None, design: str | Path | None = None,
                 say: Callable[[str], None] = print) -> DesignSpace:
    """The pre-training design space: the user's ``design`` file, else the lab envelope (+ line)."""
    if design is not None:
        p = Path(design)
        if not p.is_file():
            raise InputError(f"fit: design file {p} not found")
        spec = yaml.safe_load(p.read_text(encoding="utf-8"))
        if not isinstance(spec, dict):
            raise InputError(f"fit: design file {p}: expected a mapping (name, variables, ...)")
        return parse_design(spec)
    line_rows = None
    if line is not None:
        say(f"line {line.name!r}: local conditions from a baseline march")
        line_rows = line_conditions(line, solver_of(cfg))
    m = cfg.fit.margins
    return envelope_design(lab.rows, line_rows, Margins(**OmegaConf.to_container(m, resolve=True)))


def _pattern_conflicts(pred: dict, df: pd.DataFrame) -> int:
    """Rows observed stratified, with holdup or pgrad, that the closure's map puts in another pattern."""
    if "pattern" not in df.columns:
        return 0
    obs = df["pattern"].astype(object).to_numpy()
    has = np.zeros(len(df), dtype=bool)
    for c in ("holdup", "pgrad"):
        if c in df.columns:
            has |= np.isfinite(pd.to_numeric(df[c], errors="coerce").to_numpy(np.float64))
    strat = np.array([isinstance(o, str) and o.startswith("stratified") for o in obs])
    pred_strat = np.array([isinstance(p, str) and p.startswith("stratified") for p in pred["pattern"]])
    return int((strat & has & ~pred_strat).sum())


def fit(cfg: DictConfig, table: str | Path | pd.DataFrame, *, line=None, design: str | Path | None = None,
        say: Callable[[str], None] = print, figures: Callable[[dict, Path], list[str]] | None = None,
        run_dir: str | Path | None = None) -> FitResult:
    """Lab table -> validated closure bundle (module docstring). ``cfg``: conf/fit.yaml composed.

    ``line``: a :class:`~closure_nn.line.definition.LineDefinition` whose conditions widen the
    design space; ``design``: a design file of the user's own (replaces the envelope);
    ``figures``: the figure writer (from the report layer), called with (report, run folder);
    ``run_dir``: the run folder (default: a new ``fit-<time>`` under ``run_root``).
    """
    t_all = time.perf_counter()
    seconds: dict[str, float] = {}
    # the table and the design space first: a refused input leaves no run folder behind
    t0 = time.perf_counter()
    lab = validate_lab(table)
    v = lab.validation
    say(f"[1/5] table {lab.path}: {v.n_rows} row(s) read, {len(lab.rows)} accepted, {len(v.rejected)} rejected")
    for reason in v.rejected["reason"].head(10) if len(v.rejected) else []:
        say(f"      rejected: {str(reason).split(' | ')[0]}")
    if len(lab.rows) < 10:
        raise InputError(f"fit: {lab.path}: {len(lab.rows)} accepted row(s); need at least 10 to fit and check a closure")
    fit_rows, dev_rows = development_split(cfg, lab.rows)
    say(f"      {len(fit_rows)} rows to fine-tune on, {len(dev_rows)} development rows held back "
        f"(seeded {100 * float(cfg.data.val_fraction):.0f} %, seed {int(cfg.seed)})")
    seconds["validate"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    space = design_space(cfg, lab, line, design, say)
    run = _open_run(cfg, lab, run_dir, say)
    say(f"[2/5] design space {space.name!r}: " + "; ".join(describe_envelope(space)))
    synth = synthesize_design(cfg, space, int(cfg.fit.synth.n), int(cfg.fit.synth.seed))
    say(f"      {len(synth.table)} synthetic points of the baseline in {synth.report['seconds']:.0f} s")
    synth.table.to_parquet(run / "synthetic.parquet")  # provenance of the pre-training
    write_json(run / "design_space.json", space.describe())
    seconds["synthetic"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    say("[3/5] pre-training on the synthetic set")
    pre = pretrain(cfg, synth.table, run / "pretrain", say=_indent(say),
                   callbacks=[EpochProgress(_indent(say), "pretrain", every=5)])
    seconds["pretrain"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    ft_cfg = cfg
    search_report = None
    if int(cfg.fit.search.trials) > 0:
        from .search import search_settings  # lazy: Optuna is imported only when a search is asked for

        say(f"[4/5] settings search: {int(cfg.fit.search.trials)} trials on the development rows")
        ft_cfg, search_report = search_settings(cfg, pre, lab.rows, run / "search", say=_indent(say))
        OmegaConf.save(ft_cfg, run / "chosen_settings.yaml", resolve=True)
    say("[4/5] fine-tuning on the lab rows")
    ft = finetune(ft_cfg, pre.closure, lab.rows, run / "finetune", say=_indent(say),
                  callbacks=[EpochProgress(_indent(say), "finetune", every=10)])
    seconds["finetune"] = time.perf_counter() - t0
    bundle = run / "bundle"  # the shipped closure, where a user looks for it (the stage folder keeps its own copy)
    shutil.copytree(ft.bundle, bundle)

    t0 = time.perf_counter()
    say("[5/5] scoring on the development rows")
    report, preds = _development_report(cfg, lab, fit_rows, dev_rows, space, synth, pre, ft, bundle)
    report["search"] = search_report
    report["text"] = report_text(report)
    seconds["score"] = time.perf_counter() - t0
    seconds["total"] = time.perf_counter() - t_all
    report["seconds"] = seconds
    _write_report(report, preds, dev_rows, run, figures)
    for line_ in report["text"].splitlines():
        say(line_)
    return FitResult(run_dir=run, bundle=bundle, closure=ft.closure, report=report,
                     stages={"pretrain": pre, "finetune": ft})


def _open_run(cfg: DictConfig, lab: LabTable, run_dir: str | Path | None, say: Callable[[str], None]) -> Path:
    """The run folder with the caution, the resolved settings and the rejected rows."""
    run = Path(run_dir) if run_dir is not None else make_run_dir("fit", root=cfg.run_root, name=cfg.run_name)
    run.mkdir(parents=True, exist_ok=True)
    (run / "CAUTION.txt").write_text(CAUTION + "\n")
    OmegaConf.save(cfg, run / "settings.yaml", resolve=True)
    v = lab.validation
    if len(v.rejected):
        v.write(run)
        say(f"      the {len(v.rejected)} rejected row(s) with their reasons: {run / 'rejected.csv'}")
    return run


def _write_report(report: dict, preds: dict, dev_rows: pd.DataFrame, run: Path,
                  figures: Callable[[dict, Path], list[str]] | None) -> None:
    """report.json / report.md, the figures and development_predictions.csv."""
    kept = {k: preds[k] for k in ("baseline", "pretrained", "shipped")}
    if figures is not None:
        report["figures"] = figures({"predictions": kept, "rows": dev_rows, "scores": report["scores"]}, run)
    write_json(run / "report.json", {k: v for k, v in report.items() if k != "text"})
    (run / "report.md").write_text(report["text"] + "\n")
    write_result_csv(_prediction_table(kept, dev_rows), run / "development_predictions.csv")


def _development_report(cfg: DictConfig, lab: LabTable, fit_rows: pd.DataFrame, dev_rows: pd.DataFrame,
                        space: DesignSpace, synth, pre: StageResult, ft: StageResult, bundle: Path) -> tuple[dict, dict]:
    """Baseline, pre-trained, fine-tuned and shipped closure on the development rows: the report
    dict (without its text) and the predictions of every closure."""
    solver = solver_of(cfg)
    base = baseline_of(cfg)
    models = {"baseline": base, "pretrained": pre.closure, "finetuned": ft.trained, "shipped": ft.closure}
    preds = {k: predict_table(m, dev_rows, solver) for k, m in models.items()}
    scores = {k: score_table(p, dev_rows) for k, p in preds.items()}
    adopted = bool(ft.metrics["selection"]["members"][0].get("adopt", True))
    v = lab.validation
    report = {
        "caution": CAUTION, "table": lab.path, "rows": {"read": v.n_rows, "accepted": len(lab.rows),
                                                          "rejected": len(v.rejected), "fit": len(fit_rows),
                                                          "development": len(dev_rows)},
        "how_measured": ("every closure solved by the point solver (pattern predicted) on the development rows, a "
                         f"seeded {100 * float(cfg.data.val_fraction):.0f} % of the accepted lab rows held back from the "
                         "fine-tune (they also stop it early); floors: holdup 0.01 for MAPE, |pgrad| 1 Pa/m"),
        "design_space": space.describe(), "synthetic": {k: synth.report[k] for k in ("n", "patterns", "seconds")},
        "rows_per_term": {"pretrain": _rows_per_term(pre.metrics), "finetune": _rows_per_term(ft.metrics)},
        "label_map_conflicts": {k: _pattern_conflicts(preds[k], dev_rows) for k in ("baseline", "shipped")}
                               | {"fit_rows_baseline": _pattern_conflicts(predict_table(base, fit_rows, solver), fit_rows)},
        "scores": scores, "selection": ft.metrics["selection"], "shipped": "finetuned" if adopted else "pretrained",
        "bundle": str(bundle),
    }
    return report, preds


def _rows_per_term(metrics: dict) -> dict | None:
    """Rows per loss term of a stage (an ensemble stage: of its first member; members differ only
    by bootstrap replicates)."""
    members = metrics.get("members") or [metrics]
    return members[0].get("rows_per_term")


def _prediction_table(preds: dict, rows: pd.DataFrame) -> pd.DataFrame:
    cols = [c for c in ("run_id", "D", "theta", "vsl", "vsg", "holdup", "pgrad", "pattern") if c in rows.columns]
    out = rows[cols].copy().reset_index(drop=True)
    for k, p in preds.items():
        for q in ("holdup", "pgrad", "pattern"):
            out[f"{q}_{k}"] = p[q]
    return out


def _indent(say: Callable[[str], None]) -> Callable[[str], None]:
    return lambda line: say("      " + line)


def _fmt(key: str, x) -> str:
    if x is None or x != x:
        return "-"
    if key in ("pgrad_within_20", "pattern_accuracy"):
        return f"{100 * x:.1f} %"
    if key in ("holdup_mape", "pgrad_mape"):
        return f"{x:.1f}"
    return f"{x:.4f}"


def report_text(r: dict) -> str:
    """The report as Markdown (also printed at the end of ``closure-nn fit``)."""
    rows = r["rows"]
    lines = [f"# closure-nn fit: {r['table']}", "", f"> {r['caution']}", "",
             f"Rows: {rows['read']} read, {rows['accepted']} accepted, {rows['rejected']} rejected; "
             f"{rows['fit']} fine-tuned on, {rows['development']} development rows held back.", "",
             "| closure (development rows) | " + " | ".join(lbl for _, lbl in MEASURES) + " |",
             "|---|" + "---|" * len(MEASURES)]
    for name in ("baseline", "pretrained", "finetuned", "shipped"):
        s = r["scores"][name]
        lines.append(f"| {name} | " + " | ".join(_fmt(k, s.get(k)) for k, _ in MEASURES) + " |")
    sel = r["selection"]["members"][0]
    lines += ["", f"Shipped: the {r['shipped']} closure ({sel.get('reason', '')}).",
              f"Bundle: {r['bundle']}"]
    ft_rows = r["rows_per_term"]["finetune"] or {}
    lines.append("Rows per loss term (fine-tune): " + ", ".join(f"{k} {v}" for k, v in ft_rows.items()))
    c = r["label_map_conflicts"]
    lines.append(f"Rows observed stratified (with data) that the pattern map calls another pattern: "
                 f"{c['fit_rows_baseline']} fit rows (baseline map), {c['baseline']} / {c['shipped']} development rows "
                 "(baseline / shipped map); their data term decides.")
    lines.append(f"How measured: {r['how_measured']}.")
    if r.get("search"):
        sr = r["search"]
        lines.append(f"Settings search: {sr['trials']} trials ({sr['sampler']}), chosen "
                     + ", ".join(f"{k}={v:.4g}" if isinstance(v, float) else f"{k}={v}" for k, v in sr["chosen"].items())
                     + f"; {sr['caveat']}.")
    return "\n".join(lines)
