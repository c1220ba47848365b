"""``closure-nn distill``: a learned closure as a readable formula per friction factor.

Examples (key=value arguments override conf/distill.yaml)::

    closure-nn distill runs/fit-<time>/bundle                  # development rows of that fit
    closure-nn distill my_bundle --table my_loop.csv           # a bundle outside a fit run folder
    closure-nn point --vsl 0.1 --vsg 3 --D 0.1 --closure runs/distill-<time>/distilled.json

A BUNDLE inside a ``closure-nn fit`` run folder brings its lab table (``report.json``) and the
fit's settings (``settings.yaml``), so the development rows are exactly the ones fit held back,
and its pre-training design (``synthetic.parquet``) for the fitting and grid conditions. Elsewhere
``--table`` gives the rows (a seeded share held back, ``development.*``) and the design is the
table's envelope (closure_nn/pipeline/envelope.py). Writes ``distilled.json`` (the closure),
``formula.md`` (text, LaTeX, fidelity table), ``fidelity.csv`` and ``distill.json``.

The pipeline and the data layer (Lightning, scipy) are imported inside the functions that use
them, so that ``closure-nn distill --help`` and argument errors answer without loading them.
"""
from __future__ import annotations

import argparse
import json
from pathlib import Path

import pandas as pd

from omegaconf import OmegaConf

from ..caution import CAUTION
from ..closures.formula import save_formula
from ..closures.loading import load_saved_closure
from ..config import load_config
from ..physics.checks import InputError
from ..run_folder import atomic_path, make_run_dir, write_json


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("bundle", metavar="BUNDLE", help="a closure bundle or ensemble folder (a correction of a baseline)")
    p.add_argument("--table", default=None, metavar="TABLE",
                   help="lab table; default: the table of the fit run folder that holds BUNDLE")
    p.add_argument("--out", default=None, metavar="DIR", help="parent folder of the run folder (default: run_root)")


def _fit_context(bundle: Path, table: str | None, cfg) -> tuple:
    """(lab rows to fit on, development rows, design conditions, where they came from)."""
    from ..data.synthetic import sample_design
    from ..pipeline.envelope import envelope_design
    from ..pipeline.lab_table import validate_lab
    from ..training.tables import split_table

    run = bundle.resolve().parent
    report = run / "report.json"
    in_fit = report.is_file() and (run / "settings.yaml").is_file()
    src = table or (json.loads(report.read_text()).get("table") if in_fit else None)
    if src is None or not Path(src).is_file():
        raise InputError(f"distill: {bundle} is not inside a fit run folder with its table; give the lab table "
                         "with --table TABLE")
    rows = validate_lab(src).rows
    if in_fit:
        fit_cfg = OmegaConf.load(run / "settings.yaml")
        frac, seed = float(fit_cfg.data.val_fraction), int(fit_cfg.seed)
    else:
        frac, seed = float(cfg.development.fraction), int(cfg.development.seed)
    fit_rows, dev_rows = split_table(rows, frac, seed)
    n = int(cfg.sample.n_fit) + int(cfg.sample.n_grid)
    synth = run / "synthetic.parquet"
    if in_fit and synth.is_file():
        design = pd.read_parquet(synth)
        design = design.sample(n=min(n, len(design)), random_state=int(cfg.sample.seed)).reset_index(drop=True)
        origin = f"{synth} (the fit's pre-training design)"
    else:
        design = sample_design(envelope_design(rows), n, int(cfg.sample.seed))
        origin = "the table's envelope (closure_nn/pipeline/envelope.py)"
    return fit_rows, dev_rows, design, {"table": str(src), "development_share": frac, "development_seed": seed,
                                        "design": origin, "fit_run": str(run) if in_fit else None}


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    from ..data.schema import INPUTS
    from ..pipeline.distill import DistillSettings, baseline_of_closure, distill, fidelity, fidelity_markdown

    ov = list(overrides) + ([f"run_root={args.out}"] if args.out else [])
    cfg = load_config("distill", ov)
    bundle = Path(args.bundle)
    if not bundle.exists():
        raise FileNotFoundError(2, "No such file or folder", str(bundle))
    closure = load_saved_closure(bundle)
    try:
        baseline = baseline_of_closure(closure)
    except ValueError as exc:
        raise InputError(f"distill: {bundle}: {exc}") from None
    fit_rows, dev_rows, design, origin = _fit_context(bundle, args.table, cfg)
    n_fit = min(int(cfg.sample.n_fit), len(design))
    conditions = pd.concat([fit_rows[list(INPUTS)], design.iloc[:n_fit][list(INPUTS)]], ignore_index=True)
    grid = design.iloc[n_fit:].reset_index(drop=True)
    settings = DistillSettings(**{**OmegaConf.to_container(cfg.distill, resolve=True)})
    settings.level_factors = tuple(settings.level_factors)
    solver = dict(OmegaConf.to_container(cfg.solver, resolve=True))
    print(f"closure-nn distill {bundle}: fitting on {len(conditions)} conditions ({len(fit_rows)} fine-tune rows, "
          f"{n_fit} of {origin['design']})", flush=True)
    result = distill(closure, conditions, settings, solver)
    formula = result.formula
    table = fidelity({"network": closure, "formula": formula, "baseline": baseline}, dev_rows, grid, solver=solver)
    run_dir = make_run_dir("distill", cfg.run_root)
    OmegaConf.save(cfg, run_dir / "config.yaml", resolve=True)
    how = ("closures solved by the point solver (pattern predicted); development rows: holdup MAE and pgrad share within "
           "+-20 % against the measurements (|pgrad| >= 1 Pa/m); grid: the same measures against the network's own "
           "holdup and pgrad on conditions of the design not used to fit")
    fid = {"table": table.to_dict(orient="records"), "how_measured": how}
    save_formula(formula, run_dir / "distilled.json", source=str(bundle.resolve()), fidelity=fid, caution=CAUTION)
    with atomic_path(run_dir / "fidelity.csv") as tmp:
        table.to_csv(tmp, index=False)
    md = ["# closure-nn distill", "", f"> {CAUTION}", "", f"Closure: `{bundle}` ({closure.label}).", "",
          "## Formula (ratio to the baseline; clipped at the network's bound "
          + ", ".join(f"{k} e^+-{v:g}" for k, v in formula.bound.items()) + ")", "", "```",
          *(formula.text() or ["(no correction: the baseline)"]), "```", "", "LaTeX:", "", "```latex",
          *formula.text(latex=True), "```", "", "## Fidelity", "", fidelity_markdown(table), "", f"How measured: {how}.",
          "", f"Fitting states per region: {result.n_states}; rows and design: {origin}."]
    (run_dir / "formula.md").write_text("\n".join(md) + "\n", encoding="utf-8")
    write_json(run_dir / "distill.json", {"caution": CAUTION, "source": str(bundle.resolve()), **origin,
                                          "n_states": result.n_states, "fits": result.fits, "fidelity": fid,
                                          "text": formula.text(), "latex": formula.text(latex=True)})
    print("\n".join(formula.text() or ["(no correction: the baseline)"]))
    print(fidelity_markdown(table))
    print(f"closure file: {run_dir / 'distilled.json'} (use as --closure)")
    print(f"run folder: {run_dir}")
    print(CAUTION)
    return 0
