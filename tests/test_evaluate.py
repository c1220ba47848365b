"""Tests of the evaluation (closure_nn.pipeline.evaluate, metrics, blackbox, report.training_plots).

Sources: MAE, MAPE and "share within +-x %" are common-practice definitions, checked against
values worked by hand on a toy table; a regressor that cannot fit a smooth known function is
broken (common practice); a grouped split must leave its test group out of training entirely
(the definition of an out-of-distribution split). The per-factor prior is checked against its
definition in closure_nn.training.loss.
"""
from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pandas as pd
import pytest
import torch

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.closures.neural import NeuralClosure
from closure_nn.config import load_config
from closure_nn.data.features import FeatureScaler, state_features, table_conditions
from closure_nn.physics.checks import InputError
from closure_nn.physics.holdup_roots import solve_separated
from closure_nn.training.blackbox import INPUT_COLUMNS, BlackBoxRegressor, BlackBoxSettings
from closure_nn.training.loss import TERMS, ClosureLoss, LossSettings
from closure_nn.training.metrics import error_summary, pattern_accuracy
from closure_nn.training.tables import table_tensors


def test_error_measures_match_hand_computed_values():
    """Toy table worked by hand (common-practice MAE / MAPE definitions)."""
    h_meas = np.array([0.10, 0.20, 0.005, np.nan, 0.40])
    h_pred = np.array([0.12, 0.15, 0.010, 0.30, np.nan])
    p_meas = np.array([100.0, -50.0, 0.5, 200.0, 10.0])
    p_pred = np.array([110.0, -40.0, 3.0, 300.0, 10.5])
    m = error_summary(h_pred, h_meas, p_pred, p_meas, holdup_floor=0.01, pgrad_floor=1.0)
    # holdup: rows 0-2 scored (row 3 not measured, row 4 no prediction): |0.02|, |0.05|, |0.005|
    assert m["holdup_mae"] == pytest.approx((0.02 + 0.05 + 0.005) / 3)
    assert m["n_holdup"] == 3 and m["n_holdup_missing"] == 1
    # MAPE over H >= 0.01: 0.02/0.10 = 20 %, 0.05/0.20 = 25 %
    assert m["holdup_mape"] == pytest.approx(22.5) and m["n_holdup_rel"] == 2
    # pgrad: row 2 under the 1 Pa/m floor; 10 %, 20 %, 50 %, 5 %
    assert m["pgrad_mape"] == pytest.approx((10 + 20 + 50 + 5) / 4) and m["n_pgrad"] == 4
    assert m["pgrad_within_10"] == pytest.approx(0.5)  # 10 % (edge, inclusive) and 5 %
    assert m["pgrad_within_20"] == pytest.approx(0.75)
    assert m["pgrad_within_30"] == pytest.approx(0.75)


def test_pattern_accuracy_counts_only_observed_rows():
    pred = np.array(["stratified_wavy", "annular", "intermittent", "stratified_smooth"], dtype=object)
    obs = np.array(["stratified_smooth", "annular", None, "stratified_smooth"], dtype=object)
    a = pattern_accuracy(pred, obs)
    assert a["n_pattern"] == 3
    assert a["pattern_accuracy"] == pytest.approx(2 / 3)
    assert a["pattern_accuracy_coarse"] == pytest.approx(1.0)
    assert math.isnan(pattern_accuracy(np.full(4, None, dtype=object), obs)["pattern_accuracy"])


def _toy_conditions(n: int, seed: int) -> pd.DataFrame:
    r = np.random.default_rng(seed)
    return pd.DataFrame(dict(vsl=10 ** r.uniform(-2, 0, n), vsg=10 ** r.uniform(0, 1.3, n), D=r.uniform(0.04, 0.1, n),
                             theta=r.uniform(-0.05, 0.05, n), roughness=0.0, rhol=998.0, rhog=1.2, mul=1e-3,
                             mug=1.8e-5, sigma=0.072))


def test_blackbox_fits_a_known_smooth_function():
    """Holdup = logistic of a linear form in log velocities, pgrad = +-40 v_SG^1.8 (invented
    targets; the negative one checks the sign handling): held-out errors far below the spread."""
    df = _toy_conditions(500, 0)
    lx, lg = np.log10(df["vsl"]), np.log10(df["vsg"])
    df["holdup"] = 1 / (1 + np.exp(-(1.5 * lx - 1.0 * lg + 0.5)))
    for sign in (1.0, -1.0):
        df["pgrad"] = sign * 40.0 * df["vsg"] ** 1.8
        train, test = df.iloc[:400], df.iloc[400:]
        bb = BlackBoxRegressor(BlackBoxSettings(hidden=(32, 32), max_epochs=150, batch_size=64, lr=3e-3, patience=0)).fit(train)
        p = bb.predict(test)
        m = error_summary(p["holdup"], test["holdup"], p["pgrad"], test["pgrad"])
        # measured: holdup MAE 5e-4 / 6e-4, pgrad MAPE 5.4 % / 5.1 %
        assert m["holdup_mae"] < 0.1 * test["holdup"].std(), m
        assert m["pgrad_mape"] < 10.0, m
        assert np.all(np.sign(p["pgrad"]) == sign)
        assert len(bb.history) == 150 and set(INPUT_COLUMNS) <= set(df.columns)


def test_grouped_split_leaves_the_chosen_group_out_entirely():
    from closure_nn.pipeline.evaluate import _split_indices

    lab = _toy_conditions(60, 1).assign(D=np.repeat([0.05, 0.1, 0.15], 20))
    cfg = load_config("evaluate", ["splits.grouped.test_groups=[0.1]"])
    parts = _split_indices(cfg, lab)
    tr, te, info = parts["grouped"]
    assert set(np.round(lab["D"].iloc[te], 6)) == {0.1}
    assert 0.1 not in set(np.round(lab["D"].iloc[tr], 6))
    assert len(tr) + len(te) == len(lab) and info["test_groups"] == ["0.1"]
    rtr, rte, _ = parts["random"]
    assert len(np.intersect1d(rtr, rte)) == 0 and len(rte) == 12


def test_prior_weights_each_factor_by_its_own_weight():
    """prior = sum_k lambda_k (ln f_k - ln f_k,base)^2 (closure_nn.training.loss docstring):
    a pure f_i offset d costs lambda_i d^2, a pure f_wl offset lambda_wl d^2."""
    base = BaselineClosure()
    df = _toy_conditions(12, 2).assign(theta=0.0, vsl=0.02, vsg=5.0)
    sol = solve_separated(table_conditions(df), base)
    df["holdup"], df["pgrad"], df["pattern"] = sol.holdup.numpy(), np.nan, "stratified_wavy"
    w = {k: 0.0 for k in TERMS} | {"prior": 1.0}
    for j, key in enumerate(("f_wl", "f_wg", "f_i")):
        net = NeuralClosure(hidden=(4,))
        sc = FeatureScaler.fit(state_features(df, net.baseline))
        net.set_scaler(sc.mean, sc.std)
        with torch.no_grad():
            net.branches[0][-1].bias[j] = 0.2  # one shared branch; correction mode: d = tanh(0.2)
        d = math.tanh(0.2)
        for lam in (1.0, 0.01):
            s = LossSettings(weights=w, prior_factors={key: lam}, prior_space="log_factor")
            _, terms, _ = ClosureLoss(s)(net, table_tensors(df))
            assert float(terms["prior"]) == pytest.approx(lam * d**2, rel=1e-9), (key, lam)
            # the method's prior space (conf/loss/physics.yaml): on the correction before its bound, b * o
            # (bound 1 here, o = 0.2)
            s = LossSettings(weights=w, prior_factors={key: lam}, prior_space="unbounded")
            _, terms, _ = ClosureLoss(s)(net, table_tensors(df))
            assert float(terms["prior"]) == pytest.approx(lam * 0.2**2, rel=1e-9), (key, lam)
    with pytest.raises(ValueError, match="prior_factors"):
        LossSettings(prior_factors={"f_x": 1.0})


@pytest.fixture(scope="module")
def tiny_report(tmp_path_factory):
    """A tiny end-to-end evaluation on a 300-row slice of the demo campaign (1-2 epochs)."""
    from closure_nn.pipeline.evaluate import load_lab, run_evaluation

    run = tmp_path_factory.mktemp("evaluate")
    ov = ["experiment.synth.n=300", "stage_trainer.pretrain.max_epochs=1", "stage_trainer.finetune.max_epochs=1",
          "stage_trainer.finetune.batch_size=256", "kfold.k=2", "kfold.trainer.max_epochs=1", "blackbox.hidden=[8]",
          "processes=2"]  # splits and folds on 2 processes
    cfg = load_config("evaluate", ov)
    lab = load_lab(cfg.lab)
    rng = np.random.default_rng(0)
    lab = lab.iloc[np.sort(rng.permutation(len(lab))[:300])].reset_index(drop=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        from closure_nn.report.training_plots import evaluation_figures

        report = run_evaluation(cfg, lab, None, run / "out", figures=evaluation_figures)
        report.pop("_kept")
        return report, run / "out"


def test_report_files_are_written(tiny_report):
    report, run = tiny_report
    for f in ("evaluation.json", "evaluation.csv", "CAUTION.txt", "config.yaml", "predictions_random.csv",
              "predictions_grouped.csv", "parity_random.png", "parity_grouped.png", "residuals_random.png",
              "residuals_grouped.png", "training_curves.png", "kfold.png"):
        assert (run / f).exists() and (run / f).stat().st_size > 0, f
    saved = json.loads((run / "evaluation.json").read_text())
    assert saved["caution"].startswith("CAUTION")
    tab = pd.read_csv(run / "evaluation.csv")
    assert set(tab["model"]) >= {"baseline", "learned", "blackbox"}
    assert set(tab["subset"]) == {"clean", "all"}
    g = saved["splits"]["grouped"]
    assert g["test_groups"] == ["0.1"]
    pred = pd.read_csv(run / "predictions_grouped.csv")
    assert np.allclose(pred["D [m]"], 0.1) and len(pred) == g["n_test"]  # plain table, SI unit in the header
    # every model is scored on the same rows
    s = g["scores"]["clean"]
    assert len({m["n_holdup"] for m in s.values()}) == 1 and len({m["n_pgrad"] for m in s.values()}) == 1
    # solver outputs satisfy the balances (by construction; root-finder tolerance)
    assert all(v < 1e-6 for v in g["solver_residual_max"].values()), g["solver_residual_max"]
    assert len(saved["kfold"]["folds"]["learned"]) == 2


def test_cli_evaluate_shows_its_config_and_rejects_a_missing_bundle(capsys):
    from closure_nn.cli import main

    assert main(["evaluate", "--show-config", "kfold.k=3"]) == 0
    assert "k: 3" in capsys.readouterr().out
    assert main(["evaluate", "--bundle", "/nonexistent/bundle"]) == 2
    assert "not found" in capsys.readouterr().err


def test_development_holdout_never_scores_test_rows():
    """holdout=development scores a share of each split's TRAINING rows; its test rows stay unused
    (the protocol by which settings are chosen, docs/evaluation_log.md)."""
    from closure_nn.pipeline.evaluate import _split_indices, _test_splits, load_lab

    lab = load_lab(load_config("evaluate", []).lab)
    test = _test_splits(load_config("evaluate", []), lab)
    dev = _split_indices(load_config("evaluate", ["holdout=development"]), lab)
    for name, (tr, te, _) in test.items():
        fit, rows, info = dev[name]
        assert info["holdout"] == "development" and info["n_test_unused"] == len(te)
        assert not set(rows) & set(te) and not set(fit) & set(te) and not set(fit) & set(rows)
        assert set(fit) | set(rows) == set(tr)
        assert abs(len(rows) / len(tr) - 0.25) < 0.01
    with pytest.raises(InputError):
        _split_indices(load_config("evaluate", ["holdout=validation"]), lab)
