"""The training loss against a straightforward reference computation written here.

The loss shares one closure evaluation between the residuals, the prior and the smoothness
penalty, takes the smoothness input gradients of all branches in one backward pass, and reads the
measured-state level precomputed per row by the datamodule. These tests recompute the
residual-only terms the plain way - one closure call per term, the per-factor input-gradient loop,
h/D from the holdup in every batch - from the definitions in the :mod:`closure_nn.training.loss`
docstring (phase balances of Taitel & Dukler 1976, AIChE J. 22(1):47-55, eqs. 1-3) and require
the same values and parameter gradients to float64 rounding (1e-10 relative). The rows are
invented states, not equilibria: the terms are definitions and need no solver.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import torch

from closure_nn.closures.neural import NeuralClosure
from closure_nn.data.configurations import CONFIGURATION_CODE, SEPARATED_CONFIGURATIONS
from closure_nn.data.features import FeatureScaler, frac_from_holdup, state_features
from closure_nn.physics.conditions import FIELD_NAMES, Conditions
from closure_nn.physics.groups import closure_features
from closure_nn.physics.local_state import local_state
from closure_nn.physics.momentum import combined_residual, gas_residual, liquid_residual, shear_stresses
from closure_nn.training.datamodule import TableDataModule, TensorRows, with_measured_frac
from closure_nn.training.loss import TERMS, ClosureLoss, LossSettings
from closure_nn.training.loss_terms import smoothness
from closure_nn.training.tables import table_tensors

WALL_ONLY = {"f_wl": ["log10_Re_L", "frac", "rel_rough"], "f_wg": ["log10_Re_G", "frac", "rel_rough"], "f_i": None}
RESIDUAL_ONLY = {k: 0.0 for k in TERMS} | {"phase_residual": 1.0, "combined_residual": 1.0, "prior": 1.0,
                                          "smooth": 1e-3}
MODELS = {
    "one branch per factor": dict(inputs=WALL_ONLY),
    "shared network": dict(inputs=None),
    "interface only": dict(inputs=WALL_ONLY, learn=["f_i"]),
    "direct mode": dict(inputs=WALL_ONLY, mode="direct"),
    "repeated input, tanh": dict(inputs={"f_wl": ["frac", "frac", "log10_Re_L"], "f_wg": None, "f_i": ["frac"]},
                                 activation="tanh"),
}


def invented_table(n: int = 160, seed: int = 0) -> pd.DataFrame:
    """Invented stratified and annular rows at arbitrary holdups and pressure gradients; a quarter
    without pgrad (combined-residual rows), a few not separated or with a clipped holdup."""
    r = np.random.default_rng(seed)
    annular = r.random(n) < 0.4
    df = pd.DataFrame(dict(
        vsl=10 ** r.uniform(-2.5, -0.5, n), vsg=np.where(annular, r.uniform(15, 40, n), 10 ** r.uniform(0.0, 1.2, n)),
        D=r.uniform(0.03, 0.2, n), theta=r.uniform(-0.05, 0.05, n), roughness=r.uniform(0, 1e-4, n),
        rhol=r.uniform(700, 1000, n), rhog=r.uniform(1, 40, n), mul=r.uniform(5e-4, 5e-3, n),
        mug=1.8e-5, sigma=r.uniform(0.02, 0.07, n),
        holdup=np.where(annular, r.uniform(0.02, 0.15, n), r.uniform(0.05, 0.6, n)),
        pgrad=10 ** r.uniform(1.0, 3.5, n)))
    df["pattern"] = np.where(annular, "annular", "stratified_wavy")
    df.loc[r.random(n) < 0.25, "pgrad"] = np.nan
    df.loc[:3, "pattern"] = "intermittent"  # no separated state: no term
    df.loc[4, "holdup"] = 1.0  # clipped reading: no measured state
    df["source"] = "invented"
    return df


def model(df: pd.DataFrame, **kw) -> NeuralClosure:
    net = NeuralClosure(hidden=(8, 8), baseline={"wall": "churchill", "interface": "andritsos_hanratty"}, **kw)
    sc = FeatureScaler.fit(state_features(df, net.baseline))
    net.set_scaler(sc.mean, sc.std)
    g = torch.Generator().manual_seed(3)
    with torch.no_grad():  # away from the zero-correction start, so every term is non-zero
        for p in net.parameters():
            p.add_(0.4 * torch.randn(p.shape, generator=g, dtype=p.dtype))
    return net


def reference_terms(net: NeuralClosure, t: dict, cfg: LossSettings) -> dict[str, torch.Tensor]:
    """The residual-only terms computed plainly, term by term (module docstring of the loss)."""
    H, P = t["holdup"], t["pgrad"]
    sig_p = cfg.pgrad_rel_sd * torch.nan_to_num(P).abs() + cfg.pgrad_sd_floor  # no pgrad_sd given
    lam = torch.tensor([cfg.prior_factors[k] for k in ("f_wl", "f_wg", "f_i")], dtype=torch.float64)
    parts: dict[str, list[torch.Tensor]] = {k: [] for k in ("phase_residual", "combined_residual", "prior", "smooth")}
    for kind in SEPARATED_CONFIGURATIONS:
        rows = (t["kind"] == CONFIGURATION_CODE[kind]) & torch.isfinite(H) & (H > 0) & (H < 1)
        c = Conditions(**{k: t[k][rows] for k in FIELD_NAMES})
        s = local_state(c, frac_from_holdup(H[rows], kind), kind)
        tau = shear_stresses(s, net(s))
        both = torch.isfinite(P[rows])
        p, sig = torch.nan_to_num(P[rows]), sig_p[rows]  # no NaN in the graph (0 * NaN in backward)
        r_l = liquid_residual(s, tau, p) / (s.geom.A_L * sig)
        r_g = gas_residual(s, tau, p) / (s.geom.A_G * sig)
        parts["phase_residual"].append((0.5 * (r_l**2 + r_g**2))[both])
        with torch.no_grad():
            tb, g_ = shear_stresses(s, net.baseline(s)), s.geom
            scale = (tb.tau_wg * g_.S_G / g_.A_G).abs() + (tb.tau_wl * g_.S_L / g_.A_L).abs() \
                + (tb.tau_i * g_.S_i * (1 / g_.A_L + 1 / g_.A_G)).abs() \
                + ((c.rhol - s.rho_core) * c.g * torch.sin(c.theta)).abs()
        parts["combined_residual"].append(((combined_residual(s, tau) / scale.clamp_min(1e-12)) ** 2)[~both])
        dlog = net.log_friction(s) - torch.log(torch.stack(tuple(net.baseline(s)), dim=-1))
        parts["prior"].append((lam * dlog**2).sum(dim=-1))
        z = net.standardise(closure_features(s)).detach().requires_grad_(True)
        g = net.learned_log_factor(z)
        sq = torch.zeros(z.shape[0], dtype=torch.float64)
        for k in range(3):  # one input gradient per factor
            (dz,) = torch.autograd.grad(g[:, k].sum(), z, create_graph=True)
            sq = sq + (dz**2).sum(dim=-1)
        parts["smooth"].append(sq)
    return {k: torch.cat(v).mean() for k, v in parts.items()}


@pytest.mark.parametrize("name", list(MODELS))
def test_loss_terms_and_gradients_match_the_plain_computation(name):
    df = invented_table()
    cfg = LossSettings(weights=RESIDUAL_ONLY)
    t = table_tensors(df)
    net = model(df, **MODELS[name])
    total, terms, counts = ClosureLoss(cfg)(net, t)
    assert counts["phase_residual"] > 50 and counts["combined_residual"] > 10
    assert counts["prior"] == counts["smooth"] == counts["phase_residual"] + counts["combined_residual"]
    total.backward()
    grads = [p.grad.clone() for p in net.parameters()]
    net.zero_grad()
    ref = reference_terms(net, t, cfg)
    ref_total = sum(cfg.weights[k] * v for k, v in ref.items())
    ref_total.backward()
    for k, v in ref.items():
        assert float(v.detach()) > 0, k
        assert float(terms[k].detach()) == pytest.approx(float(v.detach()), rel=1e-10), k
    assert float(total.detach()) == pytest.approx(float(ref_total.detach()), rel=1e-10)
    for gl, p in zip(grads, net.parameters()):
        torch.testing.assert_close(gl, p.grad, rtol=1e-9, atol=1e-12 * float(p.grad.abs().max()))


def test_datamodule_batches_hold_the_rows_and_give_the_same_loss():
    """A batch of the stacked-column dataset is exactly the per-column gather, and the loss with
    the per-row precomputed level equals the loss computing it in the batch."""
    df = invented_table(96, seed=1)
    t = table_tensors(df)
    idx = [5, 0, 77, 31, 31, 90, 2]
    batch = TensorRows(t).__getitems__(idx)
    assert list(batch) == list(t)
    for k, v in t.items():
        b = batch[k]
        assert b.dtype == v.dtype and b.is_contiguous()
        assert torch.equal(torch.isnan(b), torch.isnan(v[idx])) if b.is_floating_point() else True
        assert torch.equal(torch.nan_to_num(b, nan=-7.0), torch.nan_to_num(v[idx], nan=-7.0))
    dm = TableDataModule(t, t, batch_size=40, seed=0)
    net = model(df, inputs=WALL_ONLY)
    loss = ClosureLoss(LossSettings(weights=RESIDUAL_ONLY))
    n = 0
    for b in dm.train_dataloader():
        assert "frac_measured" in b
        plain = {k: v for k, v in b.items() if k != "frac_measured"}
        (t1, terms1, _), (t2, terms2, _) = loss(net, b), loss(net, plain)
        assert float(t1.detach()) == pytest.approx(float(t2.detach()), rel=1e-12)
        for k in TERMS:
            assert float(terms1[k].detach()) == pytest.approx(float(terms2[k].detach()), rel=1e-12, abs=0.0), k
        n += int(b["vsl"].shape[0])
    assert n == len(df)
    fm = with_measured_frac(t)["frac_measured"]
    assert int(torch.isfinite(fm).sum()) == int(((t["kind"] >= 0) & (t["holdup"] > 0) & (t["holdup"] < 1)).sum())


def test_smoothness_alone_equals_the_shared_evaluation():
    df = invented_table(40, seed=2)
    net = model(df, inputs=WALL_ONLY)
    t = table_tensors(df)
    rows = t["kind"] == CONFIGURATION_CODE["stratified"]
    s = local_state(Conditions(**{k: t[k][rows] for k in FIELD_NAMES}), frac_from_holdup(t["holdup"][rows], "stratified"),
                    "stratified")
    a = smoothness(net, s)
    b = smoothness(net, s, net.evaluate(s, input_grad=True))
    assert float(a.detach().min()) > 0
    torch.testing.assert_close(a, b, rtol=1e-12, atol=0.0)


def test_evaluation_with_input_leaves_keeps_the_state_gradient():
    """Factors from ``evaluate(input_grad=True)`` at a state that carries a gradient differentiate
    like the plain forward (the leaves feed only the smoothness penalty)."""
    df = invented_table(30, seed=4)
    net = model(df, inputs=WALL_ONLY)
    t = table_tensors(df)
    rows = t["kind"] == CONFIGURATION_CODE["stratified"]
    frac = frac_from_holdup(t["holdup"][rows], "stratified").requires_grad_(True)
    s = local_state(Conditions(**{k: t[k][rows] for k in FIELD_NAMES}), frac, "stratified")
    (d_plain,) = torch.autograd.grad(torch.stack(tuple(net(s)), dim=-1).sum(), frac, retain_graph=True)
    ev = net.evaluate(s, input_grad=True)
    (d_ev,) = torch.autograd.grad(ev.factors.sum(), frac)
    assert float(d_plain.abs().min()) > 0
    torch.testing.assert_close(d_ev, d_plain, rtol=1e-12, atol=0.0)
