"""`closure-nn plan` on an INVENTED truth: do the planned points teach more than random ones?

The truth is the invented power law of tests/test_distill.py (f_i = 3 (h/D)^0.4 Fr_G^0.3 times
the Andritsos & Hanratty 1987 interface, f_WL = 0.8 Re_L^0.03 times Churchill 1977; not fitted to
any experiment). The loop envelope is invented here. The main test runs the training stages of
`closure-nn fit` at a test budget. The other tests use a cheaper ensemble: NeuralClosures fitted
by least squares to the truth's ln(f / f_base), with noise, at states around the truth's
equilibria of the measured conditions (what a measured holdup gives); their scaler and training
domain span the whole envelope, their measured-data domain the measured rows only. No outside
source applies to the planning itself: the checks compare planned with random points on the truth.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import torch

from closure_nn.cli import main
from closure_nn.closures.ensemble import ClosureEnsemble, save_ensemble
from closure_nn.closures.neural import NeuralClosure
from closure_nn.config import load_config
from closure_nn.data.closure_table import noisy_table
from closure_nn.data.synthetic import lhs_unit, sample_design, solve_table
from closure_nn.pipeline.plan import PlanSettings, choose_batch, envelope_design, plan
from closure_nn.pipeline.stages import finetune, pretrain, synthesize_design
from closure_nn.training.scoring import predict_table, score_table

from test_distill import PowerLawTruth, _feature_targets

#: an INVENTED rig: 50, 100 and 150 mm sections, air with water or a light oil
ENVELOPE = {"name": "plan_test_rig", "description": "INVENTED", "vsl": [0.01, 0.3], "vsg": [0.5, 15.0],
            "D_mm": [50.0, 100.0, 150.0], "theta_deg": [-3.0, 3.0], "p_bara": [1.0, 6.0], "T_degC": 20.0,
            "roughness_um": 5.0, "gas": {"M_g": 28.96, "mug": 1.8e-5},
            "liquids": {"water": {"rhol": 998.0, "mul": 1.0e-3, "sigma": 0.072},
                        "light_oil": {"rhol": 830.0, "mul": 3.0e-3, "sigma": 0.029}}}
#: the measured corner of it: the 50 mm section, low gas rates, low pressure
MEASURED = {**ENVELOPE, "vsg": [0.5, 3.0], "D_mm": [50.0], "p_bara": [1.0, 2.0]}
N_PLAN = 12


def _learner(truth, rows: pd.DataFrame, scaler: tuple, seed: int, steps: int = 500) -> NeuralClosure:
    """The stand-in learner of the module docstring (seeded; noise sd 0.03 on ln f)."""
    torch.manual_seed(seed)
    threads = torch.get_num_threads()
    torch.set_num_threads(1)  # a small network: one thread is faster than two contended ones
    net = NeuralClosure(hidden=(32, 32), bound={"f_wl": 0.5, "f_wg": 0.5, "f_i": 4.0}, baseline=truth.baseline,
                        inputs={"f_wl": ["log10_Re_L", "frac", "rel_rough"], "f_wg": ["log10_Re_G", "frac", "rel_rough"],
                                "f_i": None})
    ft = _feature_targets(truth, rows).values()
    x, y = torch.cat([f for f, _ in ft]), torch.cat([t for _, t in ft])
    y = y + 0.03 * torch.randn(y.shape, dtype=torch.float64, generator=torch.Generator().manual_seed(seed))
    net.set_scaler(*scaler)
    z = net.standardise(x)
    net.set_domain(torch.full((11,), -1e9), torch.full((11,), 1e9), z[:1], threshold=1e9)  # the whole envelope
    net.set_measured_domain(z.min(0).values, z.max(0).values, z, threshold=1.0)
    opt = torch.optim.Adam(net.parameters(), lr=3e-3)
    try:
        for _ in range(steps):
            opt.zero_grad()
            ((net.learned_log_factor(z) - y) ** 2).mean().backward()
            opt.step()
    finally:
        torch.set_num_threads(threads)
    return net.eval()


@pytest.fixture(scope="module")
def campaign():
    truth = PowerLawTruth()
    space = envelope_design(ENVELOPE)
    wide = sample_design(space, 300, 11)
    ft = _feature_targets(truth, wide).values()
    x = torch.cat([f for f, _ in ft])
    scaler = (x.mean(0), x.std(0).clamp_min(1e-6))
    measured = sample_design(envelope_design(MEASURED), 120, 12)
    members = []
    for m in range(3):  # bootstrap replicates of the measured rows
        boot = measured.iloc[np.random.default_rng(100 + m).integers(0, len(measured), len(measured))]
        members.append(_learner(truth, boot.reset_index(drop=True), scaler, seed=m))
    ens = ClosureEnsemble(members)
    test = sample_design(space, 300, 13)
    ood = test[~((test["D"] < 0.06) & (test["vsg"] <= 3.0) & (test["p"] <= 2e5))].reset_index(drop=True)
    ood = ood.assign(**{k: v for k, v in predict_table(truth, ood).items() if k in ("holdup", "pgrad")})
    return {"truth": truth, "space": space, "scaler": scaler, "measured": measured, "ens": ens, "ood": ood}


#: a test-sized budget of the fit stages (the defaults are the method; only sizes change)
BUDGET = ["fit.synth.n=1000", "stage_trainer.pretrain.max_epochs=6", "stage_trainer.finetune.max_epochs=30",
          "stage_trainer.finetune.patience=8"]


def _labelled(rows: pd.DataFrame, truth, seed: int) -> pd.DataFrame:
    """The truth's holdup, pgrad and pattern at ``rows`` with the noise of closure_nn.data.closure_table
    (holdup sd 0.01, pgrad 2.5 %)."""
    t, _ = solve_table(rows, truth, progress=False)
    rng = np.random.default_rng(seed)
    return rows.assign(holdup=np.clip(t["holdup"].to_numpy() + rng.normal(0, 0.01, len(rows)), 0, 1),
                       pgrad=t["pgrad"].to_numpy() * (1 + rng.normal(0, 0.025, len(rows))), pattern=t["pattern"].to_numpy())


def test_planned_points_teach_the_fit_stages_more_than_random_points(campaign, tmp_path):
    """The stages of `closure-nn fit` at a test budget: pre-train over the envelope, fine-tune a
    3-member bootstrap ensemble on 150 noisy rows of the measured corner, plan N_PLAN points with it;
    then fine-tune from the same pre-trained closure on measured + planned rows and on measured +
    N_PLAN random envelope points (two seeded draws). Seeded: the planned rows' out-of-domain holdup
    MAE (against the truth, envelope rows outside the corner) is at least 10 % below the mean of the
    random draws'. (Measured when written: 0.0049 vs 0.0050 and 0.0075, a 22 % margin; the
    baseline's 0.0093. scripts/plan_study.py repeats the comparison for other seeds.)"""
    truth, space, ood = campaign["truth"], campaign["space"], campaign["ood"]
    cfg = load_config("fit", [*BUDGET, f"run_root={tmp_path}"])
    pre = pretrain(cfg, synthesize_design(cfg, space, 1000, 0).table, tmp_path / "pre")
    measured = noisy_table(envelope_design(MEASURED), 150, 1, truth).drop(columns=["holdup_true", "pgrad_true"])
    ens = finetune(cfg, pre.closure, measured, tmp_path / "ens", **{"ensemble.members": 3, "ensemble.bootstrap": True}).trained
    chosen, _, _ = plan(ens, space, PlanSettings(n=N_PLAN, candidates=1000, seed=1))
    inputs = [c for c in chosen.columns if c in measured.columns and c not in ("holdup", "pgrad", "pattern")]

    def ood_mae(extra: pd.DataFrame, tag: str) -> float:
        rows = pd.concat([measured, _labelled(extra[inputs], truth, 5)], ignore_index=True)
        return score_table(predict_table(finetune(cfg, pre.closure, rows, tmp_path / tag).trained, ood), ood)["holdup_mae"]

    planned = ood_mae(chosen, "planned")
    randoms = [ood_mae(space.sample_unit(lhs_unit(N_PLAN, len(space.dimensions), 50 + k)), f"random{k}") for k in range(2)]
    assert planned <= 0.9 * float(np.mean(randoms)), (planned, randoms)


def test_the_batch_is_diverse_and_ranked_by_score(campaign):
    chosen, cand, summary = plan(campaign["ens"], campaign["space"], PlanSettings(n=8, candidates=300, seed=2))
    assert list(chosen["rank"]) == list(range(1, 9))
    assert chosen["score"].is_monotonic_decreasing or summary["separation_used"] < 0.15
    assert chosen["score"].iloc[0] == pytest.approx(cand["score"].max())
    assert {"disagreement", "distance", "boundary"} <= set(chosen.columns)
    # every reason is on its 0..1 scale; the measured corner is near, the rest of the envelope far
    assert ((cand["disagreement"] >= 0) & (cand["disagreement"] <= 1)).all()
    assert ((cand["boundary"] >= 0) & (cand["boundary"] <= 1)).all()


def test_choose_batch_keeps_points_apart():
    """Invented scores on a line: the best point, then the best one at least 0.3 away, and so on."""
    x = np.linspace(0, 1, 101)[:, None]
    score = 1 - np.abs(x[:, 0] - 0.5)  # peak at 0.5
    idx, sep = choose_batch(score, x, 3, 0.3)
    picked = sorted(float(x[i, 0]) for i in idx)
    assert sep == 0.3 and picked == pytest.approx([0.2, 0.5, 0.8])
    idx, sep = choose_batch(score, x, 8, 0.3)  # no room for 8 points 0.3 apart: the separation halves
    assert len(idx) == 8 and sep < 0.3


def test_plan_command_writes_matrix_map_and_summary(campaign, tmp_path, capsys):
    import yaml

    ens_dir = save_ensemble(list(campaign["ens"].members), tmp_path / "ens")
    env = tmp_path / "loop.yaml"
    env.write_text(yaml.safe_dump(ENVELOPE))
    data = tmp_path / "lab.csv"
    campaign["measured"].assign(holdup=0.2).to_csv(data, index=False)
    rc = main(["plan", str(ens_dir), "--envelope", str(env), "--n", "5", "--data", str(data),
               "--out", str(tmp_path / "runs"), "candidates=200"])
    assert rc == 0, capsys.readouterr().err
    (run,) = [p for p in (tmp_path / "runs").iterdir() if p.is_dir()]
    m = pd.read_csv(run / "test_matrix.csv")
    assert len(m) == 5 and {"vsl [m/s]", "vsg [m/s]", "D [mm]", "theta [deg]", "p [bara]", "score"} <= set(m.columns)
    assert m["D [mm]"].isin([50.0, 100.0, 150.0]).all() and m["vsl [m/s]"].between(0.01, 0.3).all()
    assert (run / "plan_map.png").stat().st_size > 10_000 and (run / "plan.json").is_file()
    env.write_text(yaml.safe_dump({**ENVELOPE, "vsgg": [1, 2]}))
    assert main(["plan", str(ens_dir), "--envelope", str(env), "--out", str(tmp_path / "runs")]) == 2
    assert "vsg" in capsys.readouterr().err
