"""Study (not a test): do `closure-nn plan`'s points teach the real training stages more than random ones?

On an INVENTED truth (f_i = 3 (h/D)^0.4 Fr_G^0.3 times the Andritsos & Hanratty 1987 interface,
Churchill 1977 walls; not fitted to any experiment) and an INVENTED rig envelope:

1. pre-train on baseline points over the whole envelope (the stages of `closure-nn fit`);
2. fine-tune a bootstrap ensemble on noisy rows from a measured corner of the envelope only;
3. plan N points with that ensemble; draw N random envelope points (several seeds);
4. fine-tune from the same pre-trained closure on measured + planned rows and on measured +
   random rows; score holdup MAE against the truth's noise-free values on envelope rows outside
   the measured corner.

Run: ``.venv/bin/python scripts/plan_study.py [--n 12] [--randoms 3] [--seed 1]`` (about a minute on 2 cores).
"""
from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
import torch

from closure_nn.closures.base import Closure
from closure_nn.closures.baseline import BaselineClosure
from closure_nn.closures.ensemble import ClosureEnsemble
from closure_nn.config import load_config
from closure_nn.data.closure_table import noisy_table
from closure_nn.data.synthetic import lhs_unit, sample_design, solve_table
from closure_nn.physics.geometry import ANNULAR
from closure_nn.physics.momentum import FrictionFactors
from closure_nn.pipeline.plan import PlanSettings, envelope_design, plan
from closure_nn.pipeline.stages import finetune, pretrain, synthesize_design
from closure_nn.training.scoring import predict_table, score_table

ENVELOPE = {"name": "plan_study_rig", "description": "INVENTED", "vsl": [0.01, 0.3], "vsg": [0.5, 15.0],
            "D_mm": [50.0, 100.0, 150.0], "theta_deg": [-3.0, 3.0], "p_bara": [1.0, 6.0], "T_degC": 20.0,
            "roughness_um": 5.0, "gas": {"M_g": 28.96, "mug": 1.8e-5},
            "liquids": {"water": {"rhol": 998.0, "mul": 1.0e-3, "sigma": 0.072},
                        "light_oil": {"rhol": 830.0, "mul": 3.0e-3, "sigma": 0.029}}}
MEASURED = {**ENVELOPE, "vsg": [0.5, 3.0], "D_mm": [50.0], "p_bara": [1.0, 2.0]}
BUDGET = ["fit.synth.n=1000", "stage_trainer.pretrain.max_epochs=6", "stage_trainer.finetune.max_epochs=30",
          "stage_trainer.finetune.patience=8"]


class PowerLawTruth(Closure):
    """INVENTED truth (module docstring)."""

    label = "power_law_truth [INVENTED]"

    def __init__(self) -> None:
        super().__init__()
        self.baseline = BaselineClosure("churchill", "andritsos_hanratty")

    def forward(self, s):
        b = self.baseline(s)
        if s.kind == ANNULAR:
            return b
        fr_g = torch.sqrt(s.rho_core / (s.cond.rhol - s.rho_core)) * s.u_G / torch.sqrt(s.cond.g * s.cond.D)
        return FrictionFactors(b.f_wl, b.f_wg, b.f_i * 3.0 * s.geom.frac ** 0.4 * fr_g ** 0.3)


def labelled(rows: pd.DataFrame, truth, seed: int) -> pd.DataFrame:
    """The truth's holdup, pgrad and pattern at ``rows`` with the noise of closure_table."""
    t, _ = solve_table(rows, truth, progress=False)
    rng = np.random.default_rng(seed)
    out = rows.copy()
    out["holdup"] = np.clip(t["holdup"].to_numpy() + rng.normal(0, 0.01, len(rows)), 0, 1)
    out["pgrad"] = t["pgrad"].to_numpy() * (1 + rng.normal(0, 0.025, len(rows)))
    out["pattern"] = t["pattern"].to_numpy()
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=12)
    ap.add_argument("--randoms", type=int, default=3)
    ap.add_argument("--seed", type=int, default=1, help="seed of the measured rows and of the plan's candidates")
    args = ap.parse_args()
    t0 = time.perf_counter()
    truth, space = PowerLawTruth(), envelope_design(ENVELOPE)
    work = Path(tempfile.mkdtemp(prefix="plan_study_"))
    cfg = load_config("fit", [*BUDGET, f"run_root={work}"])
    pre = pretrain(cfg, synthesize_design(cfg, space, 1000, 0).table, work / "pre")
    measured = noisy_table(envelope_design(MEASURED), 150, args.seed, truth).drop(columns=["holdup_true", "pgrad_true"])
    ens = finetune(cfg, pre.closure, measured, work / "ens", **{"ensemble.members": 3, "ensemble.bootstrap": True}).trained
    if not isinstance(ens, ClosureEnsemble):
        raise SystemExit("the fine-tune did not return an ensemble")
    test = sample_design(space, 300, 13)
    ood = test[~((test["D"] < 0.06) & (test["vsg"] <= 3.0) & (test["p"] <= 2e5))].reset_index(drop=True)
    ood = ood.assign(**{k: v for k, v in predict_table(truth, ood).items() if k in ("holdup", "pgrad")})
    cols = [c for c in measured.columns if c in ("vsl", "vsg", "D", "theta", "roughness", "rhol", "rhog", "mul", "mug",
                                                 "sigma", "p", "T", "M_g", "Z")]

    def ood_mae(extra: pd.DataFrame | None, tag: str) -> float:
        rows = measured if extra is None else pd.concat([measured, labelled(extra[cols], truth, 5)], ignore_index=True)
        net = finetune(cfg, pre.closure, rows, work / tag).trained
        return score_table(predict_table(net, ood), ood)["holdup_mae"]

    print(f"out-of-domain rows {len(ood)}; baseline holdup MAE "
          f"{score_table(predict_table(truth.baseline, ood), ood)['holdup_mae']:.4f}; pre-trained "
          f"{score_table(predict_table(pre.closure, ood), ood)['holdup_mae']:.4f}; measured rows only "
          f"{ood_mae(None, 'only'):.4f}", flush=True)
    chosen, _, _ = plan(ens, space, PlanSettings(n=args.n, candidates=1000, seed=args.seed))
    print(f"planned {args.n}: {ood_mae(chosen, 'planned'):.4f}", flush=True)
    for k in range(args.randoms):
        rnd = space.sample_unit(lhs_unit(args.n, len(space.dimensions), 50 + 10 * args.seed + k))
        print(f"random {args.n} (seed {50 + 10 * args.seed + k}): {ood_mae(rnd, f'random{k}'):.4f}", flush=True)
    print(f"{time.perf_counter() - t0:.0f} s")


if __name__ == "__main__":
    main()
