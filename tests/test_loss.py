"""Tests of the physics-regularised loss (closure_nn.training.loss).

Sources: the two-fluid phase balances of Taitel & Dukler (1976), AIChE J. 22(1):47-55, eqs. 1-3;
a closure reproduces the equilibrium it generated (self-consistency, common practice); the
analytic values of each normalised term follow from the definitions in the module docstring;
gradient checks against central finite differences are common practice.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import torch

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.closures.neural import NeuralClosure
from closure_nn.data.features import FeatureScaler, state_features, table_conditions
from closure_nn.physics.holdup_roots import solve_separated
from closure_nn.physics.patterns import kh_gas_velocity
from closure_nn.training.loss import TERMS, ClosureLoss, LossSettings
from closure_nn.training.tables import table_tensors

ALL_ON = {k: 1.0 for k in TERMS}


def make_table(closure, n: int = 24, seed: int = 0, kind: str = "stratified", roughness: float = 5e-5) -> pd.DataFrame:
    """Noise-free synthetic rows: the closure's own separated equilibrium (invented conditions)."""
    r = np.random.default_rng(seed)
    annular = kind == "annular"
    df = pd.DataFrame(dict(
        vsl=10 ** r.uniform(-2.3, -1.0, n), vsg=r.uniform(20, 30, n) if annular else 10 ** r.uniform(0.2, 1.1, n),
        D=r.uniform(0.04, 0.08, n), theta=r.uniform(-0.01, 0.01, n), roughness=roughness, rhol=998.0, rhog=1.2,
        mul=1e-3, mug=1.8e-5, sigma=0.072))
    sol = solve_separated(table_conditions(df), closure, kind)
    assert bool(sol.found.all())
    df["holdup"] = sol.holdup.detach().numpy()
    df["pgrad"] = sol.pgrad.total.detach().numpy()
    df["pattern"] = "annular" if annular else "stratified_wavy"
    df["source"] = "synthetic"
    return df


def fitted_model(df: pd.DataFrame, **kw) -> NeuralClosure:
    net = NeuralClosure(hidden=(8, 8), **kw)
    sc = FeatureScaler.fit(state_features(df, net.baseline))
    net.set_scaler(sc.mean, sc.std)
    return net


def test_every_term_vanishes_for_the_generating_closure():
    """Baseline data + zero-correction model = the baseline: all terms ~0 (self-consistency)."""
    base = BaselineClosure()
    both = make_table(base, 20, seed=1)
    only_h = make_table(base, 10, seed=2).assign(pgrad=np.nan)
    only_p = make_table(base, 10, seed=3).assign(holdup=np.nan)
    ann = make_table(base, 8, seed=4, kind="annular")
    df = pd.concat([both, only_h, only_p, ann], ignore_index=True)
    net = fitted_model(df)
    total, terms, counts = ClosureLoss(LossSettings(weights=ALL_ON))(net, table_tensors(df))
    assert counts["phase_residual"] == 28 and counts["combined_residual"] == 10
    assert counts["data_holdup"] == 38 and counts["data_pgrad"] == 38 and counts["no_root"] == 0
    for k in ("phase_residual", "combined_residual", "data_holdup", "data_pgrad"):
        assert float(terms[k]) < 1e-12, (k, float(terms[k]))
    assert float(terms["prior"]) == 0.0 and float(terms["smooth"]) == 0.0
    assert float(total) < 1e-12


def test_phase_residual_counts_pgrad_standard_deviations():
    """pgrad off by k sigma: R_L/A_L = R_G/A_G = k sigma, so the term is k^2 (module docstring)."""
    base = BaselineClosure()
    df = make_table(base, 12)
    sd = 0.1 * df["pgrad"].abs()
    df = df.assign(pgrad=df["pgrad"] + 2.5 * sd, pgrad_sd=sd)
    w = {k: 0.0 for k in TERMS} | {"phase_residual": 1.0}
    _, terms, _ = ClosureLoss(LossSettings(weights=w))(fitted_model(df), table_tensors(df))
    assert float(terms["phase_residual"]) == pytest.approx(2.5**2, rel=1e-9)


def test_holdup_misfit_is_scaled_by_its_uncertainty():
    """Measured holdup shifted by delta: data_holdup = (delta / holdup_sd)^2 (definition)."""
    base = BaselineClosure()
    df = make_table(base, 12).assign(pgrad=np.nan)
    df = df.assign(holdup=df["holdup"] + 0.01, holdup_sd=0.004)
    w = {k: 0.0 for k in TERMS} | {"data_holdup": 1.0}
    _, terms, _ = ClosureLoss(LossSettings(weights=w))(fitted_model(df), table_tensors(df))
    assert float(terms["data_holdup"]) == pytest.approx((0.01 / 0.004) ** 2, rel=1e-9)


def test_robust_data_misfit_is_the_cauchy_loss_of_the_standardised_misfit():
    """data_robust_scale c: data terms c^2 ln(1 + r^2/c^2) of the same standardised misfits r
    (Cauchy loss, Holland & Welsch 1977, from memory): r^2 for |r| << c, and a 30-sd row (a
    pattern label in error) costs ~41.5 instead of 900 at c = 3 (the cauchy() example)."""
    base = BaselineClosure()
    df = make_table(base, 12)
    r_h, r_p = 0.5, np.where(np.arange(12) < 2, 30.0, 0.5)  # two rows 30 sd off in pgrad
    df = df.assign(holdup=df["holdup"] + 0.01 * r_h, holdup_sd=0.01, pgrad_sd=df["pgrad"].abs() * 0.02)
    df = df.assign(pgrad=df["pgrad"] + r_p * df["pgrad_sd"])
    w = {k: 0.0 for k in TERMS} | {"data_holdup": 1.0, "data_pgrad": 1.0}
    net, t = fitted_model(df), table_tensors(df)
    _, plain, _ = ClosureLoss(LossSettings(weights=w))(net, t)
    _, robust, _ = ClosureLoss(LossSettings(weights=w, data_robust_scale=3.0))(net, t)
    cauchy = lambda r: 9.0 * np.log1p((np.asarray(r) / 3.0) ** 2)
    assert float(plain["data_pgrad"]) == pytest.approx(float(np.mean(r_p**2)), rel=1e-6)
    assert float(robust["data_pgrad"]) == pytest.approx(float(np.mean(cauchy(r_p))), rel=1e-6)
    assert float(robust["data_holdup"]) == pytest.approx(float(cauchy(r_h)), rel=1e-6)
    assert float(cauchy(30.0)) == pytest.approx(41.5361, abs=1e-4)


def test_pattern_term_penalises_a_contradicting_equilibrium():
    """Kelvin-Helmholtz margin (Taitel & Dukler 1976): a stable stratified equilibrium observed as
    intermittent is penalised, observed as stratified it is not."""
    base = BaselineClosure()
    df = make_table(base, 6, seed=5).assign(holdup=np.nan, pgrad=np.nan)
    sol = solve_separated(table_conditions(df), base)
    margin = sol.state.u_G / kh_gas_velocity(sol.state.cond, sol.state) - 1
    stable = (margin < -0.1).numpy()
    assert stable.sum() >= 3
    df = df[stable].reset_index(drop=True)
    net = fitted_model(df)
    w = {k: 0.0 for k in TERMS} | {"pattern": 1.0}
    loss = ClosureLoss(LossSettings(weights=w, pattern_margin=0.05))
    _, t_ok, c_ok = loss(net, table_tensors(df.assign(pattern="stratified_smooth")))
    assert c_ok["pattern"] == len(df) and float(t_ok["pattern"]) == 0.0
    total, t_bad, _ = loss(net, table_tensors(df.assign(pattern="intermittent")))
    m = margin[torch.as_tensor(stable)]
    assert float(t_bad["pattern"]) == pytest.approx(float((((0.05 - m) / 0.05) ** 2).mean()), rel=1e-9)
    total.backward()
    assert any(p.grad is not None and float(p.grad.abs().sum()) > 0 for p in net.parameters())


def test_pattern_term_tolerance_and_rows_with_targets():
    """The same Kelvin-Helmholtz margin (Taitel & Dukler 1976) in units of ``pattern_tolerance``;
    rows with a measured holdup feed the term only with ``pattern_rows='observed'``."""
    base = BaselineClosure()
    df = make_table(base, 6, seed=5).assign(pgrad=np.nan)
    sol = solve_separated(table_conditions(df), base)
    margin = sol.state.u_G / kh_gas_velocity(sol.state.cond, sol.state) - 1
    stable = (margin < -0.1).numpy()
    df = df[stable].reset_index(drop=True).assign(pattern="intermittent")
    m = margin[torch.as_tensor(stable)]
    net = fitted_model(df.assign(pattern="stratified_smooth"))
    w = {k: 0.0 for k in TERMS} | {"pattern": 1.0}
    only = ClosureLoss(LossSettings(weights=w, pattern_margin=0.05, pattern_tolerance=0.05))
    _, t, c = only(net, table_tensors(df))
    assert c["pattern"] == 0  # every row has a holdup
    _, t, c = only(net, table_tensors(df.assign(holdup=np.nan)))
    assert c["pattern"] == len(df)
    assert float(t["pattern"]) == pytest.approx(float((((0.05 - m) / 0.05) ** 2).mean()), rel=1e-9)
    every = ClosureLoss(LossSettings(weights=w, pattern_margin=0.05, pattern_tolerance=0.05, pattern_rows="observed"))
    _, t_all, c_all = every(net, table_tensors(df))
    assert c_all["pattern"] == len(df) and float(t_all["pattern"]) == pytest.approx(float(t["pattern"]), rel=1e-9)
    with pytest.raises(ValueError, match="pattern_rows"):
        LossSettings(pattern_rows="all")


def test_rows_of_unknown_pattern_take_the_predicted_configuration():
    """``unknown_pattern='predicted'``: a row without a pattern feeds the terms a row observed in
    the pattern the closure predicts would feed (definition in the module docstring); the
    predicted pattern is the point solver's (Taitel & Dukler 1976 near horizontal)."""
    from closure_nn.data.configurations import RowConfiguration, configuration_codes
    from closure_nn.physics.point import solve_points
    from closure_nn.physics.vocabulary import PATTERNS

    base = BaselineClosure()
    strat = make_table(base, 10, seed=11)
    ann = make_table(base, 6, seed=12, kind="annular")
    df = pd.concat([strat, ann], ignore_index=True)
    pred = solve_points(table_conditions(df), base).pattern
    df["pattern"] = [PATTERNS[int(k)] for k in pred]
    assert len(set(df["pattern"])) >= 2  # separated and non-separated predictions alike
    # observed as predicted vs not observed at all; the pattern term is left out (it needs an observation)
    df = df.assign(holdup=df["holdup"] + 0.003, pgrad=df["pgrad"] * 1.04)  # nonzero misfits
    net = fitted_model(df)
    w = {**ALL_ON, "pattern": 0.0}
    t_obs = table_tensors(df)
    t_unk = table_tensors(df.assign(pattern=np.nan), unknown_pattern="predicted")
    assert bool((t_unk["kind"] == RowConfiguration.PREDICTED).all())
    assert configuration_codes(pd.Series([np.nan, "intermittent"]), 2, "predicted").tolist() == [RowConfiguration.PREDICTED, -1]
    loss = ClosureLoss(LossSettings(weights=w))
    total_o, terms_o, counts_o = loss(net, t_obs)
    total_u, terms_u, counts_u = loss(net, t_unk)
    for k in ("phase_residual", "data_holdup", "data_pgrad", "prior"):
        assert counts_u[k] == counts_o[k] > 0
        assert float(terms_u[k]) == pytest.approx(float(terms_o[k]), rel=1e-9)
    # the held-out residuals at the measured states resolve them alike (closure_nn.training.metrics)
    from closure_nn.training.loss_batch import uncertainties
    from closure_nn.training.metrics import measured_state_residuals
    sd_p = uncertainties(t_obs, LossSettings())[1]
    r_o = measured_state_residuals(net, t_obs, sd_p)
    r_u = measured_state_residuals(net, t_unk, sd_p)
    assert np.isfinite(r_o["r_gas"]).sum() > 0
    np.testing.assert_allclose(r_u["r_gas"], r_o["r_gas"], rtol=1e-9, equal_nan=True)
    np.testing.assert_allclose(r_u["r_liquid"], r_o["r_liquid"], rtol=1e-9, equal_nan=True)
    # the mapping pattern -> configuration, on the states of the classify() example
    from closure_nn.data.configurations import predicted_configuration_codes
    from closure_nn.physics.conditions import make_conditions
    c = make_conditions(vsl=[0.01, 0.3, 0.1], vsg=[0.5, 1.0, 30.0], D=0.05)
    assert predicted_configuration_codes(c, BaselineClosure("taitel_dukler", "smooth")).tolist() == [0, -1, 1]
    # the skip rule leaves the same rows out of every term
    _, _, counts_s = loss(net, table_tensors(df.assign(pattern=np.nan), unknown_pattern="skip"))
    assert counts_s["data_holdup"] == 0 and counts_s["phase_residual"] == 0


def test_unbounded_prior_keeps_its_pull_where_the_bound_saturates():
    """prior_space='unbounded': lambda (b o)^2 on the correction before its tanh bound. Equal to
    the log-factor prior lambda (b tanh o)^2 to second order for small o (tanh o = o - o^3/3),
    and, unlike it, still pulling where tanh saturates (d/do (b tanh o)^2 -> 0; calculus)."""
    base = BaselineClosure()
    df = make_table(base, 10)
    net = fitted_model(df, inputs={"f_wl": ["log10_Re_L", "frac", "rel_rough"], "f_wg": ["log10_Re_G", "frac", "rel_rough"], "f_i": None})
    w = {k: 0.0 for k in TERMS} | {"prior": 1.0}
    t = table_tensors(df)
    head = net.branches[1][-1]  # the f_wg branch's output layer

    def prior_and_grad(space, bias):
        with torch.no_grad():
            head.bias.fill_(bias)
        net.zero_grad()
        total, terms, _ = ClosureLoss(LossSettings(weights=w, prior_space=space))(net, t)
        total.backward()
        return float(terms["prior"]), float(head.bias.grad[0])

    small_log, _ = prior_and_grad("log_factor", 1e-3)
    small_raw, _ = prior_and_grad("unbounded", 1e-3)
    b = net.bound_vec[1].item()
    assert small_raw == pytest.approx((b * 1e-3) ** 2, rel=1e-9)  # lambda_wg = 1
    assert small_log == pytest.approx(small_raw, rel=1e-5)
    _, g_log = prior_and_grad("log_factor", 8.0)  # tanh(8) = 1 - 2e-7: at the bound
    _, g_raw = prior_and_grad("unbounded", 8.0)
    assert abs(g_log) < 1e-5 and g_raw == pytest.approx(2 * b**2 * 8.0, rel=1e-9)
    with pytest.raises(ValueError, match="prior_space"):
        LossSettings(prior_space="raw")


def test_prior_and_smoothness_grow_away_from_the_baseline():
    base = BaselineClosure()
    df = make_table(base, 10)
    net = fitted_model(df)
    with torch.no_grad():
        for p in net.parameters():
            p.add_(0.3 * torch.randn(p.shape, generator=torch.Generator().manual_seed(0), dtype=p.dtype))
    w = {k: 0.0 for k in TERMS} | {"prior": 1.0, "smooth": 1.0}
    _, terms, _ = ClosureLoss(LossSettings(weights=w))(net, table_tensors(df))
    assert float(terms["prior"]) > 1e-4 and float(terms["smooth"]) > 1e-4


def test_data_loss_gradient_matches_finite_differences():
    """Implicit-function gradient of the solver misfit vs central differences (common practice)."""
    ref = BaselineClosure(wall="churchill", interface="andritsos_hanratty", interface_kwargs={"coef": 25.0})
    df = make_table(ref, 8, roughness=1e-4)
    net = fitted_model(df)
    with torch.no_grad():
        for p in net.parameters():
            p.add_(0.2 * torch.randn(p.shape, generator=torch.Generator().manual_seed(1), dtype=p.dtype))
    w = {k: 0.0 for k in TERMS} | {"data_holdup": 1.0, "data_pgrad": 1.0}
    loss = ClosureLoss(LossSettings(weights=w))
    t = table_tensors(df)
    total, _, _ = loss(net, t)
    total.backward()
    param = net.branches[0][-1].bias  # output bias of the f_wl branch
    g = float(param.grad[0])
    h = 1e-6
    vals = []
    for sign in (1, -1):
        with torch.no_grad():
            param[0] += sign * h
            vals.append(float(loss(net, t)[0]))
            param[0] -= sign * h
    fd = (vals[0] - vals[1]) / (2 * h)
    assert math.isfinite(g) and g == pytest.approx(fd, rel=1e-5, abs=1e-8)


def test_unknown_loss_term_is_rejected():
    with pytest.raises(ValueError, match="unknown loss term"):
        LossSettings(weights={"data": 1.0})


def test_clear_rule_leaves_out_rows_of_unknown_pattern_near_a_transition():
    """``unknown_pattern='predicted_clear'`` (closure_nn.data.configurations.clear_configuration_codes): a row
    without a pattern takes the predicted configuration only where that prediction survives a
    +-20 % change of either superficial velocity. Checked across the Kelvin-Helmholtz boundary of
    Taitel & Dukler (1976) with the baseline, located here by bisection on v_SG: within 10 % of
    it the row is left out, at half and twice its v_SG it is not."""
    from closure_nn.data.configurations import (RowConfiguration, clear_configuration_codes, configuration_codes,
                                                predicted_configuration_codes)
    from closure_nn.physics.conditions import make_conditions

    base = BaselineClosure("taitel_dukler", "smooth")
    kind = lambda vsg: int(predicted_configuration_codes(make_conditions(vsl=[0.05], vsg=[vsg], D=0.05), base)[0])
    lo, hi = 0.5, 30.0
    assert kind(lo) == 0 and kind(hi) != 0
    for _ in range(40):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if kind(mid) == 0 else (lo, mid)
    vsg = hi * np.array([0.5, 0.9, 1.1, 2.0])
    c = make_conditions(vsl=np.full(4, 0.05), vsg=vsg, D=0.05)
    pred = predicted_configuration_codes(c, base).tolist()
    assert pred[:2] == [0, 0] and pred[2] == pred[3] != 0
    assert clear_configuration_codes(c, base).tolist() == [0, -1, -1, pred[3]]
    assert configuration_codes(pd.Series([np.nan, "annular"]), 2, "predicted_clear").tolist() == [RowConfiguration.PREDICTED_CLEAR, 1]
    # in the loss: the rows left out feed no term; the clear ones feed the terms of their kind
    df = make_table(BaselineClosure(), 4, seed=13).assign(vsl=0.05, vsg=vsg, D=0.05, theta=0.0, holdup=np.nan,
                                                           pgrad=50.0, pattern=np.nan)
    net = fitted_model(make_table(BaselineClosure(), 10, seed=11))
    loss = ClosureLoss(LossSettings(weights={**ALL_ON, "pattern": 0.0}))
    _, _, counts = loss(net, table_tensors(df, unknown_pattern="predicted_clear"))
    clear_net = clear_configuration_codes(c, net)
    assert int((clear_net >= 0).sum()) > 0
    assert counts["data_pgrad"] + counts["no_root"] == int((clear_net >= 0).sum())


def test_pattern_term_leaves_layers_that_throw_drops_to_the_map(monkeypatch):
    """Downward pipes: a Kelvin-Helmholtz-stable layer fast enough to throw drops onto the upper
    wall is not stratified (Barnea, Shoham & Taitel 1982), so a non-stratified label there says
    nothing of the KH margin and the hinge leaves the row alone; a stratified label still counts.
    The drop-throw velocity is set to zero here (every downward layer throws), to test the rule."""
    import closure_nn.training.loss as loss_module

    base = BaselineClosure()
    df = make_table(base, 6, seed=5).assign(holdup=np.nan, pgrad=np.nan, theta=-0.05)
    net = fitted_model(df)
    w = {k: 0.0 for k in TERMS} | {"pattern": 1.0}
    loss = ClosureLoss(LossSettings(weights=w, pattern_rows="observed"))
    _, _, before = loss(net, table_tensors(df.assign(pattern="intermittent")))
    assert before["pattern"] == len(df)
    monkeypatch.setattr(loss_module, "bst_annular_liquid_velocity", lambda c, s, f: torch.zeros_like(s.u_L))
    _, _, thrown = loss(net, table_tensors(df.assign(pattern="intermittent")))
    _, _, strat = loss(net, table_tensors(df.assign(pattern="stratified_wavy")))
    assert thrown["pattern"] == 0 and strat["pattern"] == len(df)
