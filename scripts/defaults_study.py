"""Development-row study of the method's defaults on INVENTED truths other than the demo's.

For each of two invented truth closures of different form (below) and three seeds, a noisy lab
table is generated at 50 and 100 mm (-3..+3 deg, air-water and air-oil, 1-8 bara), and the
stages of ``closure-nn fit`` run on it: envelope design -> synthetic set -> pre-training (shared
by the variants of one truth and seed) -> one fine-tune per variant of the settings. Each variant
is scored on the fit's DEVELOPMENT rows (a seeded 20 % of the table, held back from the
fine-tune); rows at 200 and 300 mm, never used for any choice, are scored too and reported apart.

    .venv/bin/python scripts/defaults_study.py --out runs/defaults_study [--processes 2]

Writes ``results.csv`` (one row per truth, seed, variant, row set, closure) and prints the means.
The truths are invented for this study: not validated against any experiment.
"""
from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import pandas as pd
import torch

from closure_nn.closures.base import Closure
from closure_nn.closures.correlations import wall_churchill
from closure_nn.config import load_config
from closure_nn.data.closure_table import noisy_table
from closure_nn.data.demo_reference import ReferenceClosure
from closure_nn.data.design_space import parse_design
from closure_nn.physics.geometry import ANNULAR
from closure_nn.physics.momentum import FrictionFactors
from closure_nn.pipeline.envelope import envelope_design
from closure_nn.pipeline.fit import validate_lab
from closure_nn.pipeline.stages import baseline_of, development_split, finetune, pretrain, synthesize_design
from closure_nn.training.processes import map_in_processes
from closure_nn.training.scoring import predict_table, score_table


class GasFroudeTruth(Closure):
    """INVENTED truth: Churchill walls; f_i / f_WG = 1 + 15 (h/D) (v_SG / 2 m/s)^1.2 (stratified),
    f_i = 0.003 (1 + 500 delta/D) (annular). Smooth power laws, unlike the baseline's
    Andritsos-Hanratty switch at 5 m/s and the demo truth's softplus ramp."""

    label = "gas_froude_truth [INVENTED]"

    def forward(self, s):
        f_wl, f_wg = wall_churchill(s, "liquid"), wall_churchill(s, "gas")
        if s.kind == ANNULAR:
            f_i = 0.003 * (1 + 500.0 * s.geom.frac)
        else:
            f_i = f_wg * (1 + 15.0 * s.geom.frac.clamp_min(0.0) * (s.cond.vsg / 2.0) ** 1.2)
        return FrictionFactors(f_wl=f_wl, f_wg=f_wg, f_i=f_i)


TRUTHS = {"gas_froude": GasFroudeTruth, "demo_reference": ReferenceClosure}

LOOP = {
    "name": "study_loop",
    "variables": {"vsl": {"law": "log_uniform", "low": 0.005, "high": 1.0},
                  "vsg": {"law": "log_uniform", "low": 0.3, "high": 25.0},
                  "theta": {"law": "uniform", "low": -3.0, "high": 3.0, "unit": "deg"},
                  "roughness": {"law": "uniform", "low": 0.0, "high": 20.0, "unit": "um"},
                  "p": {"law": "uniform", "low": 1.0, "high": 8.0, "unit": "bara"},
                  "T": {"law": "uniform", "low": 15.0, "high": 30.0, "unit": "degC"},
                  "M_g": {"law": "fixed", "value": 28.96, "unit": "g/mol"}, "Z": 1.0,
                  "mug": {"law": "uniform", "low": 17.5, "high": 19.0, "unit": "uPa s"}},
    "fluid": {"law": "choice", "values": ["air_water", "air_oil"]},
    "fluids": {"air_water": {"rhol": 998.0, "mul": {"law": "uniform", "low": 0.8, "high": 1.1, "unit": "cP"},
                             "sigma": 0.072},
               "air_oil": {"rhol": 830.0, "mul": {"law": "uniform", "low": 2.0, "high": 4.0, "unit": "cP"},
                           "sigma": 0.029}},
}

VARIANTS = {
    "defaults": {},
    "pattern_rows=observed": {"loss.pattern_rows": "observed"},
    "pattern_rows=pattern_only": {"loss.pattern_rows": "pattern_only"},
}


def tables(truth: Closure, seed: int, n_lab: int, n_ood: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    lab_d = {**LOOP, "variables": {**LOOP["variables"], "D": {"law": "choice", "values": [50.0, 100.0], "unit": "mm"}}}
    ood_d = {**LOOP, "variables": {**LOOP["variables"], "D": {"law": "choice", "values": [200.0, 300.0], "unit": "mm"}}}
    lab = noisy_table(parse_design(lab_d), n_lab, seed, truth)
    ood = noisy_table(parse_design(ood_d), n_ood, seed + 100, truth, label_flip=0.0)
    return lab, ood


def job(truth_name: str, seed: int, out: str, n_lab: int, n_ood: int, n_synth: int) -> list[dict]:
    torch.set_num_threads(1)
    root = Path(out) / f"{truth_name}-s{seed}"
    truth = TRUTHS[truth_name]()
    lab_raw, ood = tables(truth, seed, n_lab, n_ood)
    cfg = load_config("fit", [f"seed={seed}", f"fit.synth.seed={seed}"])
    lab = validate_lab(lab_raw)
    fit_rows, dev_rows = development_split(cfg, lab.rows)
    space = envelope_design(lab.rows)
    synth = synthesize_design(cfg, space, n_synth, seed)
    pre = pretrain(cfg, synth.table, root / "pretrain")
    base = baseline_of(cfg)
    rows = []

    def add(variant: str, name: str, model) -> None:
        for which, df in (("development", dev_rows), ("ood_200_300mm", ood)):
            s = score_table(predict_table(model, df), df)
            rows.append({"truth": truth_name, "seed": seed, "variant": variant, "rows": which, "closure": name,
                         **{k: s[k] for k in ("holdup_mae", "holdup_mape", "pgrad_mape", "pgrad_within_20",
                                              "pattern_accuracy", "n_holdup", "n_pgrad")}})

    add("-", "baseline", base)
    add("-", "truth", truth)
    add("-", "pretrained", pre.closure)
    for variant, values in VARIANTS.items():
        t0 = time.perf_counter()
        ft = finetune(cfg, pre.closure, lab.rows, root / variant.replace("=", "_"), **values)
        add(variant, "finetuned", ft.trained)
        add(variant, "shipped", ft.closure)
        rows[-1]["seconds"] = time.perf_counter() - t0
        rows[-1]["adopted"] = ft.metrics["selection"]["members"][0].get("adopt")
    return rows


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--out", default="runs/defaults_study")
    p.add_argument("--seeds", type=int, nargs="+", default=[0, 1, 2])
    p.add_argument("--truths", nargs="+", default=list(TRUTHS))
    p.add_argument("--n-lab", type=int, default=400)
    p.add_argument("--n-ood", type=int, default=200)
    p.add_argument("--n-synth", type=int, default=3000)
    p.add_argument("--processes", type=int, default=2)
    a = p.parse_args(argv)
    Path(a.out).mkdir(parents=True, exist_ok=True)
    jobs = [(t, s, a.out, a.n_lab, a.n_ood, a.n_synth) for t in a.truths for s in a.seeds]
    t0 = time.perf_counter()
    res = map_in_processes(job, jobs, a.processes, threads=1)
    df = pd.DataFrame([r for rows in res for r in rows])
    df.to_csv(Path(a.out) / "results.csv", index=False)
    summary = (df.groupby(["truth", "rows", "variant", "closure"])[["holdup_mae", "pgrad_within_20", "pgrad_mape"]]
               .agg(["mean", "min", "max"]).round(4))
    pd.set_option("display.width", 200)
    print(summary.to_string())
    (Path(a.out) / "summary.txt").write_text(summary.to_string() + f"\n\nwall time {time.perf_counter() - t0:.0f} s\n")
    json.dump({"argv": sys.argv, "seconds": time.perf_counter() - t0}, open(Path(a.out) / "run.json", "w"))
    return 0


if __name__ == "__main__":
    sys.exit(main())
