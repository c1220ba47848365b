"""Tests of the neural closure (closure_nn.closures.neural) and its training domain.

Sources: the closure contract of closure_nn.closures.base (elementwise, positive, any batch
shape); the bound e^-b <= f/f_base <= e^b and the zero-correction start follow from the model
definition f = f_base exp(b tanh(o)) (module docstring); distance-based applicability domains
are common practice.
"""
from __future__ import annotations

import math

import pytest
import torch

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.closures.neural import NeuralClosure
from closure_nn.data.features import FeatureScaler, TrainingDomain
from closure_nn.physics.conditions import make_conditions
from closure_nn.physics.groups import FEATURE_NAMES, closure_features
from closure_nn.physics.holdup_roots import frac_grid, solve_separated
from closure_nn.physics.local_state import local_state

WALL_ONLY = {"f_wl": ["log10_Re_L", "frac", "rel_rough"], "f_wg": ["log10_Re_G", "frac", "rel_rough"], "f_i": None}


def grid_state(kind: str = "stratified"):
    """States (B, n_grid): every trial level of the root finder's grid (invented conditions)."""
    c = make_conditions(vsl=[0.01, 0.05, 0.2], vsg=[1.0, 5.0, 20.0], D=0.05, roughness=5e-5).unsqueeze(-1)
    return local_state(c, frac_grid(kind, 40).expand(3, -1), kind)


def randomise(net: NeuralClosure, scale: float = 3.0, seed: int = 0) -> NeuralClosure:
    g = torch.Generator().manual_seed(seed)
    with torch.no_grad():
        for p in net.parameters():
            p.copy_(scale * torch.randn(p.shape, generator=g, dtype=p.dtype))
    return net


@pytest.mark.parametrize("kind", ["stratified", "annular"])
@pytest.mark.parametrize("inputs", [None, WALL_ONLY])
def test_untrained_correction_model_is_the_baseline_on_any_batch_shape(kind, inputs):
    s = grid_state(kind)
    net, base = NeuralClosure(hidden=(8, 8), inputs=inputs), BaselineClosure()
    for a, b in zip(net(s), base(s)):
        assert a.shape == (3, 40) and torch.equal(a, b)


def test_correction_is_bounded_and_positive():
    s = grid_state()
    net = randomise(NeuralClosure(hidden=(8,), bound=0.7), scale=0.3)
    for a, b in zip(net(s), BaselineClosure()(s)):
        r = a / b
        assert bool((a > 0).all()) and bool(torch.isfinite(a).all())
        assert float(r.max()) <= math.exp(0.7) * (1 + 1e-12) and float(r.min()) >= math.exp(-0.7) * (1 - 1e-12)
        assert float(r.max() - r.min()) > 0.01  # the randomised net does correct


def test_direct_mode_is_positive_and_limited_by_its_span():
    s = grid_state()
    net = randomise(NeuralClosure(hidden=(8,), mode="direct", direct_span=2.0), scale=10.0)
    f = torch.stack(tuple(net(s)), dim=-1)
    ratio = torch.log(f) - net.log_f_ref
    assert bool((f > 0).all()) and float(ratio.abs().max()) <= 2.0 + 1e-12


def test_wall_factors_see_only_their_inputs():
    """With per-output inputs, d ln f_WL / d z vanishes for every feature not listed."""
    net = randomise(NeuralClosure(hidden=(8,), inputs=WALL_ONLY), scale=1.0)
    z = torch.randn(5, len(FEATURE_NAMES), dtype=torch.float64, generator=torch.Generator().manual_seed(1))
    jac = torch.autograd.functional.jacobian(lambda x: net.learned_log_factor(x).sum(0), z)  # (3, 5, F)
    for j, out in enumerate(("f_wl", "f_wg")):
        used = {FEATURE_NAMES.index(n) for n in WALL_ONLY[out]}
        for k in range(len(FEATURE_NAMES)):
            assert (float(jac[j, :, k].abs().max()) > 0) == (k in used), (out, FEATURE_NAMES[k])
    assert bool((jac[2].abs().sum(0) > 0).all())


def test_baseline_input_is_the_andritsos_hanratty_enhancement():
    """``base_input``: the f_i branch reads ln(f_i,base / f_WG,base) as one more input, here the
    Andritsos & Hanratty (1987) enhancement 1 + 15 sqrt(h/D) (v_SG / v_SG,t - 1) above
    v_SG,t = 5 m/s sqrt(1.2 / rho_G) and 0 below it (constants as in
    closure_nn.closures.correlations, from memory). The untrained model is still the baseline,
    and the new input does reach f_i."""
    c = make_conditions(vsl=0.05, vsg=[2.0, 8.0, 15.0], D=0.05, roughness=5e-5)
    s = local_state(c, torch.tensor([0.3, 0.2, 0.1], dtype=torch.float64), "stratified")
    net = NeuralClosure(hidden=(8,), inputs=WALL_ONLY, base_input=True)
    assert [len(ix) for ix in net.branch_inputs] == [3, 3, len(FEATURE_NAMES) + 1]
    base = BaselineClosure()(s)
    assert torch.equal(net(s).f_i, base.f_i)
    ev = net.evaluate(s)
    beta = ev.inputs[2][..., -1]
    u_t = 5.0 * math.sqrt(1.2 / 1.2)  # make_conditions: air at 1.2 kg/m3
    h = s.geom.frac
    expect = torch.log(1 + 15 * torch.sqrt(h) * torch.clamp(c.vsg / u_t - 1, min=0.0))
    assert torch.allclose(beta, expect, rtol=1e-10, atol=1e-12) and float(beta[0]) == 0.0
    net = randomise(net, scale=1.0)
    z = net.evaluate(s, input_grad=True)
    (dz,) = torch.autograd.grad(z.g[..., 2].sum(), z.inputs[2])
    assert bool((dz[..., -1].abs() > 0).all())
    # a shared network reads it too; without the option nothing changes
    assert len(NeuralClosure(hidden=(4,), base_input=True).branch_inputs[0]) == len(FEATURE_NAMES) + 1
    assert len(NeuralClosure(hidden=(4,)).branch_inputs[0]) == len(FEATURE_NAMES)


def test_learning_only_the_interface_keeps_the_baseline_walls():
    s = grid_state()
    net = randomise(NeuralClosure(hidden=(8,), learn=["f_i"]))
    f, fb = net(s), BaselineClosure()(s)
    assert torch.equal(f.f_wl, fb.f_wl) and torch.equal(f.f_wg, fb.f_wg) and not torch.equal(f.f_i, fb.f_i)
    with pytest.raises(ValueError, match="learn"):
        NeuralClosure(learn=["f_x"])


def test_solver_runs_on_the_network_and_gradients_reach_every_parameter():
    c = make_conditions(vsl=[0.02, 0.05], vsg=[3.0, 8.0], D=0.05, roughness=5e-5)
    net = randomise(NeuralClosure(hidden=(8,), inputs=WALL_ONLY, bound=0.3), scale=0.5)
    sol = solve_separated(c, net)
    assert bool(sol.found.all())
    (sol.holdup.sum() + 1e-3 * sol.pgrad.total.sum()).backward()
    assert all(p.grad is not None and bool(torch.isfinite(p.grad).all()) for p in net.parameters())


def test_freeze_layers_keeps_the_output_layer_trainable():
    net = NeuralClosure(hidden=(8, 8), inputs=WALL_ONLY)
    net.freeze_layers(2)
    for branch in net.branches:
        lin = [m for m in branch if isinstance(m, torch.nn.Linear)]
        assert [m.weight.requires_grad for m in lin] == [False, False, True]
    with pytest.raises(ValueError, match="cannot freeze 3"):
        net.freeze_layers(3)


def test_training_domain_flags_far_states():
    c = make_conditions(vsl=torch.linspace(0.01, 0.1, 30), vsg=torch.linspace(2.0, 8.0, 30), D=0.05, roughness=5e-5)
    s = local_state(c, torch.linspace(0.1, 0.4, 30, dtype=torch.float64), "stratified")
    x = closure_features(s)
    scaler = FeatureScaler.fit(x)
    dom = TrainingDomain.fit(x, scaler)
    net = NeuralClosure(hidden=(4,))
    net.set_scaler(scaler.mean, scaler.std)
    dom.apply_to(net)
    assert bool(net.in_domain(x).all()) and bool(dom.in_domain(x, scaler).all())
    far = local_state(make_conditions(vsl=3.0, vsg=60.0, D=0.5, roughness=5e-5).unsqueeze(0),
                      torch.tensor([0.9], dtype=torch.float64), "stratified")
    assert not bool(net.in_domain(closure_features(far)).any())
    assert net.in_domain(closure_features(grid_state())).shape == (3, 40)
