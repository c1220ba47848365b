"""The equilibrium root refined from a guess (closure_nn.physics.near_root), used in training.

References: scipy.optimize.brentq (Brent 1973, *Algorithms for Minimization without Derivatives*,
ch. 4) one state at a time on the combined momentum equation (Taitel & Dukler 1976, AIChE J.
22(1):47-55, eq. 3), independent of both vectorised solvers; the all-roots solver for the
selection rule and the implicit gradients.
"""
import math

import numpy as np
import torch
from scipy.optimize import brentq

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.closures.neural import NeuralClosure
from closure_nn.physics.conditions import make_conditions
from closure_nn.physics.holdup_roots import residual_fn, solve_separated
from closure_nn.physics.near_root import solve_separated_near

CLOSURE = BaselineClosure(wall="churchill", interface="andritsos_hanratty")


def _states(n, seed=0):
    g = torch.Generator().manual_seed(seed)
    r = lambda: torch.rand(n, generator=g, dtype=torch.float64)  # noqa: E731
    return make_conditions(vsl=10 ** (-3 + 3 * r()), vsg=10 ** (-1 + 2.5 * r()), D=0.025 + 0.5 * r(),
                           theta=torch.deg2rad(-10 + 20 * r()), roughness=5e-5 * r(), rhol=700 + 300 * r(),
                           rhog=1 + 50 * r(), mul=10 ** (-3.3 + 1.5 * r()))


def test_root_from_a_guess_equals_the_thinnest_root_where_there_is_one_root():
    cond = _states(3000)
    with torch.no_grad():
        full = solve_separated(cond, CLOSURE)
        g = torch.Generator().manual_seed(1)
        guess = (full.frac + 0.02 * torch.randn(3000, generator=g, dtype=torch.float64)).clamp(1e-4, 0.999)
        guess[::7] = float("nan")  # rows without a guess: the all-roots solve
        near = solve_separated_near(cond, CLOSURE, guess)
    one = full.n_roots == 1
    assert one.float().mean() > 0.98 and bool(near.found.all())
    np.testing.assert_allclose(near.frac[one].numpy(), full.frac[one].numpy(), rtol=0, atol=2e-12)
    # rows without a guess come from the all-roots solver, root count included
    assert torch.equal(near.n_roots[::7], full.n_roots[::7])
    # independent check: brentq on the residual, bracketed +-1e-6 around the returned root
    for i in range(0, 3000, 150):
        ci = cond[i:i + 1]
        Fi = residual_fn(ci, CLOSURE, "stratified", 0.0)
        f = lambda x: float(Fi(torch.tensor([x], dtype=torch.float64))[0])  # noqa: E731
        x = float(near.frac[i])
        a, b = max(x - 1e-6, 1e-9), min(x + 1e-6, 1 - 1e-9)
        assert f(a) * f(b) < 0 and abs(brentq(f, a, b, xtol=1e-14) - x) < 1e-11


def test_implicit_gradients_equal_those_of_the_all_roots_solver():
    net = NeuralClosure(hidden=(8,), baseline={"wall": "churchill"})
    with torch.no_grad():
        for p in net.parameters():
            p.add_(0.05 * torch.randn_like(p))
    cond = make_conditions(vsl=[0.01, 0.05, 0.2], vsg=[2.0, 8.0, 1.0], D=0.05, theta=math.radians(0.5))
    full = solve_separated(cond, net)
    near = solve_separated_near(cond, net, full.frac.detach() * 1.1)
    params = [p for p in net.parameters() if p.requires_grad]
    g_full = torch.autograd.grad(full.pgrad.total.sum() + full.holdup.sum(), params)
    g_near = torch.autograd.grad(near.pgrad.total.sum() + near.holdup.sum(), params)
    for a, b in zip(g_full, g_near):
        np.testing.assert_allclose(a.numpy(), b.numpy(), rtol=1e-7, atol=1e-12)
    assert sum(float(a.abs().sum()) for a in g_near) > 0


def test_guess_at_a_thick_root_returns_a_thinner_root_from_the_stencil_or_the_thick_one():
    # Issue 17's state (smooth interface): roots near h/D 0.038, 0.050 and 0.46 (test_solver_roots).
    # A guess at the thin root refines the thin root; the documented limit: a guess at the thick
    # root refines the leftmost sign change of its stencil, never a level that is not a root.
    closure = BaselineClosure(wall="churchill", interface="smooth")
    cond = make_conditions(vsl=[0.0011, 0.0011], vsg=[11.69, 11.69], D=0.0402, theta=math.radians(2.0))
    with torch.no_grad():
        full = solve_separated(cond, closure)
        near = solve_separated_near(cond, closure, torch.tensor([0.04, 0.46], dtype=torch.float64))
    roots = full.roots[0].numpy()
    assert int(full.n_roots[0]) == 3
    assert abs(float(near.frac[0]) - roots[0]) < 1e-11
    assert min(abs(float(near.frac[1]) - r) for r in roots) < 1e-11
