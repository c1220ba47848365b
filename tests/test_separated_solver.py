"""The all-roots stratified/annular equilibrium solver and its implicit gradients.

References: Taitel & Dukler (1976), AIChE J. 22(1):47-55 (the combined momentum equation);
scipy.optimize.brentq (Brent 1973) as an independent scalar root finder on the same equation;
Darcy-Weisbach single-phase limit (e.g. White, Fluid Mechanics, eq. 6.10).
"""
import math

import numpy as np
import pytest
import torch
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.physics.conditions import make_conditions
from closure_nn.physics.friction import fanning_churchill
from closure_nn.physics.holdup_roots import residual_fn, solve_separated
from closure_nn.physics.local_state import local_state
from closure_nn.physics.momentum import gas_residual, liquid_residual

TD_SMOOTH = BaselineClosure(wall="taitel_dukler", interface="smooth")


def _random_conditions(n, seed=0, theta_deg=(-10, 10)):
    g = torch.Generator().manual_seed(seed)
    r = lambda: torch.rand(n, generator=g, dtype=torch.float64)  # noqa: E731
    return make_conditions(
        vsl=10 ** (-3 + 3 * r()), vsg=10 ** (-1 + 2.3 * r()), D=0.02 + 0.5 * r(),
        theta=torch.deg2rad(theta_deg[0] + (theta_deg[1] - theta_deg[0]) * r()),
        roughness=1e-5 * r(), rhol=700 + 400 * r(), rhog=1 + 60 * r(), mul=10 ** (-3.3 + 2 * r()),
    )


@pytest.mark.parametrize("closure", [TD_SMOOTH, BaselineClosure(wall="churchill")], ids=["td-smooth", "churchill-ah"])
def test_residual_vanishes_at_every_root_and_phase_balances_agree(closure):
    cond = _random_conditions(3000)
    sol = solve_separated(cond, closure)
    assert bool(sol.found.all())
    F = residual_fn(cond.unsqueeze(-1), closure, "stratified", 0.0)
    roots = sol.roots
    fin = torch.isfinite(roots)
    vals = F(torch.where(fin, roots, torch.full_like(roots, 0.5)))
    # scale: the largest term of the combined equation, (rho_L - rho_G) g + wall stress terms
    s = local_state(cond.unsqueeze(-1), torch.where(fin, roots, torch.full_like(roots, 0.5)), "stratified")
    tau = closure(s)
    scale = (0.5 * tau.f_wl * cond.rhol[:, None] * s.u_L**2 * s.geom.S_L / s.geom.A_L).abs() + cond.rhol[:, None] * 9.81
    assert float((vals.abs() / scale)[fin].max()) < 1e-9
    # at the selected root both phase balances hold with the reported pressure gradient
    RL = liquid_residual(sol.state, sol.stresses, sol.pgrad.total) / sol.state.geom.A_L
    RG = gas_residual(sol.state, sol.stresses, sol.pgrad.total) / sol.state.geom.A_G
    rel = torch.maximum(RL.abs(), RG.abs()) / (sol.pgrad.total.abs() + cond.rhol * 9.81 * 1e-6)
    assert float(rel.max()) < 1e-6


def test_all_three_roots_in_upward_flow_match_brentq_scan():
    # Upward inclined flow with three roots (Barnea & Taitel 1992 discuss such multiplicity).
    # Independent check: scipy.optimize.brentq on sign changes of a 20,000-point scan.
    cond = make_conditions(vsl=[0.0013, 0.0017], vsg=[19.1, 10.98], D=[0.048, 0.151], theta=[math.radians(4.48), math.radians(0.295)])
    sol = solve_separated(cond, TD_SMOOTH)
    assert sol.n_roots.tolist() == [3, 3]
    for i in range(2):
        F = residual_fn(cond[i : i + 1], TD_SMOOTH, "stratified", 0.0)
        f = lambda x: float(F(torch.tensor([x], dtype=torch.float64)))  # noqa: E731
        xs = np.linspace(1e-6, 1 - 1e-6, 20001)
        ys = F(torch.tensor(xs)).numpy()
        ref = [brentq(f, a, b, xtol=1e-14) for a, b, ya, yb in zip(xs[:-1], xs[1:], ys[:-1], ys[1:]) if ya * yb < 0]
        assert len(ref) == 3
        np.testing.assert_allclose(sol.roots[i].numpy(), ref, atol=1e-10)
    # documented rule: the thinnest-film root is selected (Barnea & Taitel 1992)
    assert torch.equal(sol.frac.detach(), sol.roots[:, 0])
    thick = solve_separated(cond, TD_SMOOTH, select="thickest")
    assert torch.equal(thick.frac.detach(), sol.roots[:, 2])


def test_vanishing_liquid_rate_gives_single_phase_gas_darcy_weisbach():
    # As v_SL -> 0 the liquid layer vanishes, D_G -> D, and -dp/dx -> 2 f rho v^2 / D (+ gravity of
    # the gas) with f the Churchill (1977) factor of the gas alone (Darcy-Weisbach).
    D, vsg, rhog, mug, eps = 0.1, 8.0, 20.0, 1.5e-5, 4.5e-5
    cond = make_conditions(vsl=[1e-7], vsg=[vsg], D=D, roughness=eps, rhog=rhog, mug=mug)
    sol = solve_separated(cond, BaselineClosure(wall="churchill", interface="smooth"))
    f = fanning_churchill(torch.tensor(rhog * vsg * D / mug, dtype=torch.float64), eps / D)
    ref = 2 * float(f) * rhog * vsg**2 / D
    assert float(sol.pgrad.total) == pytest.approx(ref, rel=2e-3)
    assert float(sol.holdup) < 1e-3


def test_implicit_gradients_match_finite_differences():
    # Implicit-function-theorem gradient of the root vs central finite differences of the
    # re-solved root (torch.autograd.gradcheck).
    class Scaled(torch.nn.Module):
        def __init__(self, k):
            super().__init__()
            self.k = k

        def forward(self, s):
            f = TD_SMOOTH(s)
            return type(f)(f.f_wl * self.k[0], f.f_wg * self.k[1], f.f_i * self.k[2])

    cond = make_conditions(vsl=[0.02, 0.1, 0.005], vsg=[2.0, 6.0, 12.0], D=0.08, theta=[0.0, 0.01, -0.02])

    def holdup_and_pgrad(k):
        sol = solve_separated(cond, Scaled(k), xtol=1e-15)
        return sol.holdup, sol.pgrad.total

    k = torch.tensor([1.1, 0.9, 1.3], dtype=torch.float64, requires_grad=True)
    assert torch.autograd.gradcheck(holdup_and_pgrad, (k,), eps=1e-6, atol=1e-5, rtol=1e-4)

    # gradient with respect to a condition (the superficial gas velocity)
    vsg = torch.tensor([3.0, 7.0], dtype=torch.float64, requires_grad=True)
    f = lambda v: solve_separated(make_conditions(vsl=[0.05, 0.05], vsg=v, D=0.1), TD_SMOOTH, xtol=1e-15).holdup  # noqa: E731
    assert torch.autograd.gradcheck(f, (vsg,), eps=1e-6, atol=1e-6, rtol=1e-4)


def test_annular_film_equilibrium():
    # Annular film with Wallis (1969) interfacial friction: a thin film whose residual vanishes.
    cond = make_conditions(vsl=[0.02, 0.05], vsg=[25.0, 40.0], D=0.05, theta=[0.0, math.pi / 2])
    sol = solve_separated(cond, BaselineClosure(), kind="annular")
    assert bool(sol.found.all())
    assert bool(((sol.frac > 0) & (sol.frac < 0.05)).all())
    RL = liquid_residual(sol.state, sol.stresses, sol.pgrad.total)
    assert float((RL.abs() / (sol.pgrad.total * sol.state.geom.A_L)).max()) < 1e-6


@settings(max_examples=60, deadline=None)
@given(
    vsl=st.floats(0.0, 10.0), vsg=st.floats(0.0, 100.0), D=st.floats(0.005, 2.0),
    theta=st.floats(-math.pi / 2, math.pi / 2), mul=st.floats(1e-5, 5.0), rhog=st.floats(0.05, 300.0),
)
def test_every_state_returns_a_root_or_an_explicit_flag(vsl, vsg, D, theta, mul, rhog):
    # Property: never an unflagged NaN (requirement of the solver contract).
    cond = make_conditions(vsl=[vsl], vsg=[vsg], D=D, theta=theta, mul=mul, rhog=rhog)
    sol = solve_separated(cond, BaselineClosure())
    if bool(sol.found[0]):
        assert 0 < float(sol.frac[0]) < 1
        assert math.isfinite(float(sol.holdup[0])) and math.isfinite(float(sol.pgrad.total[0]))
    else:
        assert int(sol.n_roots[0]) == 0
        assert math.isfinite(float(sol.frac[0]))  # finite placeholder, flagged by found=False
