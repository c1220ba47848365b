"""Non-separated flow models (closure_nn.physics.intermittent) and entrainment.

Sources beside each check.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
import torch
from fluids.friction import friction_factor
from fluids.two_phase_voidage import homogeneous
from hypothesis import given, settings
from hypothesis import strategies as st

from closure_nn.physics.conditions import G_STANDARD, make_conditions
from closure_nn.physics.entrainment import E_MAX, ishii_mishima
from closure_nn.physics.intermittent import (
    bendiksen_drift, bubble_flow, dispersed_bubble_flow, gregory_slug_holdup, harmathy_rise_velocity,
    intermittent_flow,
)

MODELS = (intermittent_flow, dispersed_bubble_flow, bubble_flow)


@pytest.mark.parametrize("theta, vm, C0_ref, ud_ref", [
    (0.0, 0.5, 1.05, 0.54),  # Bendiksen (1984): horizontal, Fr_M < 3.5 -> 0.54 sqrt(gD)
    (math.pi / 2, 0.5, 1.20, 0.35),  # vertical -> 0.35 sqrt(gD) (Dumitrescu/Bendiksen value)
    (0.0, 5.0, 1.20, 0.0),  # Bendiksen (1984): Fr_M >= 3.5, horizontal drift vanishes
    (math.pi / 2, 5.0, 1.20, 0.35),
])
def test_bendiksen_limits(theta, vm, C0_ref, ud_ref):
    D = 0.05  # sqrt(gD) = 0.70 m/s, so vm 0.5 -> Fr 0.71 and vm 5 -> Fr 7.1
    c = make_conditions(vsl=vm / 2, vsg=vm / 2, D=D, theta=theta)
    C0, ud = bendiksen_drift(c)
    assert float(C0) == pytest.approx(C0_ref, abs=1e-12)
    assert float(ud / math.sqrt(G_STANDARD * D)) == pytest.approx(ud_ref, abs=1e-12)
    # holdup is the Zuber & Findlay (1965) drift-flux result with these coefficients
    H, _ = intermittent_flow(c)
    assert float(H) == pytest.approx(1 - (vm / 2) / (C0_ref * vm + ud_ref * math.sqrt(G_STANDARD * D)), rel=1e-12)


def test_gregory_slug_holdup_values():
    # Gregory, Nicholson & Aziz (1978): H_LS = 1/(1 + (u_M/8.66)^1.39), evaluated by hand.
    u = torch.tensor([0.0, 1.0, 8.66, 20.0], dtype=torch.float64)
    ref = [1.0, 1 / (1 + (1 / 8.66) ** 1.39), 0.5, 1 / (1 + (20 / 8.66) ** 1.39)]
    assert gregory_slug_holdup(u).tolist() == pytest.approx(ref, rel=1e-12)


def test_harmathy_air_water():
    # Harmathy (1960): u_inf = 1.53 (g sigma drho / rhol^2)^0.25 ~ 0.25 m/s for air-water (common practice).
    assert float(harmathy_rise_velocity(make_conditions(vsl=1.0, vsg=0.1, D=0.1))) == pytest.approx(0.25, abs=0.005)


def darcy_weisbach(vsl, D, roughness=0.0, rhol=998.0, mul=1e-3):
    """Single-phase -dp/dx with fluids' Colebrook (Clamond solution) Darcy factor."""
    fd = friction_factor(Re=rhol * vsl * D / mul, eD=roughness / D)
    return fd * rhol * vsl**2 / (2 * D)


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("vsl, D, rough", [(0.5, 0.05, 0.0), (2.0, 0.1, 4.5e-5), (5.0, 0.2, 1e-4)])
def test_single_phase_liquid_limit(model, vsl, D, rough):
    # Common practice (STYLE.md analytic limit): with no gas every model is single-phase
    # Darcy-Weisbach. Reference: fluids.friction.friction_factor (Colebrook via Clamond 2009);
    # Churchill (1977) reproduces Colebrook within ~1-2 % in turbulent flow (Churchill 1977).
    c = make_conditions(vsl=vsl, vsg=0.0, D=D, roughness=rough, theta=0.3)
    H, dp = model(c)
    assert float(H) == 1.0
    assert float(dp.friction) == pytest.approx(darcy_weisbach(vsl, D, rough), rel=0.02)
    assert float(dp.gravity) == pytest.approx(998.0 * G_STANDARD * math.sin(0.3), rel=1e-12)
    assert float(dp.total) == pytest.approx(float(dp.friction + dp.gravity), rel=1e-14)


@pytest.mark.parametrize("vsl, vsg, rhog", [(4.0, 0.5, 1.2), (3.0, 2.0, 50.0), (6.0, 0.1, 10.0)])
def test_dispersed_bubble_is_homogeneous(vsl, vsg, rhog):
    # Homogeneous (no-slip) void fraction, fluids.two_phase_voidage.homogeneous (reviewed by
    # Xu & Fang 2014): alpha = 1 / (1 + (1-x)/x rhog/rhol) with the mass quality x.
    rhol = 998.0
    x = rhog * vsg / (rhog * vsg + rhol * vsl)
    c = make_conditions(vsl=vsl, vsg=vsg, D=0.05, rhog=rhog)
    H, _ = dispersed_bubble_flow(c)
    assert float(H) == pytest.approx(1 - homogeneous(x, rhol, rhog), rel=1e-12)


def test_bubble_flow_drift_flux_vertical():
    # Zuber & Findlay (1965) with C0 = 1.2 and Harmathy (1960) rise velocity, vertical upflow:
    # H = 1 - vsg/(1.2 u_M + u_inf), evaluated by hand for air-water.
    c = make_conditions(vsl=[0.5, 1.0], vsg=[0.1, 0.2], D=0.1, theta=math.pi / 2)
    u_inf = 1.53 * (G_STANDARD * 0.072 * (998 - 1.2) / 998**2) ** 0.25
    ref = [1 - 0.1 / (1.2 * 0.6 + u_inf), 1 - 0.2 / (1.2 * 1.2 + u_inf)]
    H, dp = bubble_flow(c)
    assert H.tolist() == pytest.approx(ref, rel=1e-12)
    rho_m = 998 * H + 1.2 * (1 - H)
    assert dp.gravity.tolist() == pytest.approx((rho_m * G_STANDARD).tolist(), rel=1e-12)


def test_intermittent_pressure_gradient_between_phase_limits():
    # Common practice: horizontal slug flow loses more pressure than the liquid flowing alone
    # and less than the whole mixture flowing as liquid at u_M (Dukler & Hubbard 1975 show the
    # slug-body friction dominates).
    c = make_conditions(vsl=[0.3, 1.0], vsg=[1.0, 3.0], D=0.05)
    _, dp = intermittent_flow(c)
    for i, (vsl, vm) in enumerate([(0.3, 1.3), (1.0, 4.0)]):
        assert darcy_weisbach(vsl, 0.05) < float(dp.friction[i]) < darcy_weisbach(vm, 0.05)


def test_intermittent_gravity_uses_drift_flux_holdup_upward():
    # Gravity term rho_m g sin(theta) of the mixture momentum balance (common practice).
    c = make_conditions(vsl=0.2, vsg=0.5, D=0.05, theta=math.radians(45))
    H, dp = intermittent_flow(c)
    assert float(dp.gravity) == pytest.approx((998 * float(H) + 1.2 * (1 - float(H))) * G_STANDARD * math.sin(math.radians(45)), rel=1e-12)
    assert float(H) > 0.2 / 0.7  # gas slips ahead of the liquid upward (Bendiksen 1984)


def test_gradients_match_finite_differences():
    # Correct derivatives of the drift-flux and friction formulas (torch.autograd.gradcheck,
    # central differences), away from Bendiksen's Fr = 3.5 switch.
    for model in MODELS:
        def f(vsl, vsg, model=model):
            c = make_conditions(vsl=vsl, vsg=vsg, D=0.05, theta=0.4)
            H, dp = model(c)
            return H, dp.total
        vsl = torch.tensor([0.3, 1.0], dtype=torch.float64, requires_grad=True)
        vsg = torch.tensor([0.8, 0.5], dtype=torch.float64, requires_grad=True)
        assert torch.autograd.gradcheck(f, (vsl, vsg))


@settings(max_examples=60, deadline=None)
@given(vsl=st.floats(1e-3, 20.0), vsg=st.floats(1e-3, 100.0), D=st.floats(0.01, 1.0),
       theta=st.floats(-math.pi / 2, math.pi / 2), rhog=st.floats(0.1, 300.0), mul=st.floats(1e-4, 1.0),
       sigma=st.floats(1e-3, 0.1))
def test_finite_holdup_in_unit_interval(vsl, vsg, D, theta, rhog, mul, sigma):
    # Physical bounds (common practice): 0 < H_L < 1 for two flowing phases; finite pgrad and
    # gradients anywhere in the input range, including steep downward flow.
    vs = torch.tensor([vsl, vsg], dtype=torch.float64, requires_grad=True)
    c = make_conditions(vsl=vs[0:1], vsg=vs[1:2], D=D, theta=theta, rhog=rhog, mul=mul, sigma=sigma)
    for model in MODELS:
        H, dp = model(c)
        assert 0.0 < float(H.detach()) < 1.0
        assert all(bool(torch.isfinite(t).all()) for t in (dp.total, dp.friction, dp.gravity))
        (grad,) = torch.autograd.grad(H.sum() + dp.total.sum(), vs)
        assert bool(torch.isfinite(grad).all())


def test_zero_rates_stay_finite():
    # No NaN even at the edges (both or one rate zero); common practice for batched solvers.
    c = make_conditions(vsl=[0.0, 0.0, 1.0], vsg=[0.0, 2.0, 0.0], D=0.05, theta=[-math.pi / 2, 0.0, math.pi / 2])
    for model in MODELS:
        H, dp = model(c)
        assert bool(torch.isfinite(H).all() and torch.isfinite(dp.total).all())


# -- entrainment -----------------------------------------------------------------------------


def test_ishii_mishima_hand_value():
    # Ishii & Mishima (1989) correlation (from memory), evaluated by hand for air-water, 5 cm:
    # We = 1.2 * 30^2 * 0.05/0.072 * (996.8/1.2)^(1/3), Re_f = 998 * 0.05 * 0.05 / 1e-3.
    we = 1.2 * 30**2 * 0.05 / 0.072 * ((998 - 1.2) / 1.2) ** (1 / 3)
    re_f = 998 * 0.05 * 0.05 / 1e-3
    E = ishii_mishima(make_conditions(vsl=0.05, vsg=30.0, D=0.05))
    assert float(E) == pytest.approx(math.tanh(7.25e-7 * we**1.25 * re_f**0.25), rel=1e-12)


def test_ishii_mishima_limits_and_monotone():
    # Ishii & Mishima (1989): E -> 0 at low gas rate, rises monotonically with the gas rate
    # (and the liquid rate), bounded below 1 (we clamp at 0.99).
    vsg = torch.logspace(-1, 2.3, 200, dtype=torch.float64)
    E = ishii_mishima(make_conditions(vsl=0.1, vsg=vsg, D=0.05))
    assert float(E[0]) < 1e-5
    assert bool((E.diff() >= 0).all()) and bool((E[:-1].diff() > 0).any())
    assert float(E.max()) == pytest.approx(E_MAX) and float(E.min()) >= 0.0
    E_l = ishii_mishima(make_conditions(vsl=torch.tensor([0.01, 0.1, 1.0], dtype=torch.float64), vsg=20.0, D=0.05))
    assert bool((E_l.diff() > 0).all())


def test_ishii_mishima_differentiable():
    # finite gradient in the annular range (torch.autograd.gradcheck, central differences)
    vsg = torch.tensor([10.0, 25.0], dtype=torch.float64, requires_grad=True)
    assert torch.autograd.gradcheck(lambda v: ishii_mishima(make_conditions(vsl=0.05, vsg=v, D=0.05)), (vsg,))
    assert np.isfinite(ishii_mishima(make_conditions(vsl=0.0, vsg=0.0, D=0.05)).item())
