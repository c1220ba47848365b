"""Every term of the training loss (closure_nn.training.loss_terms) against a value computed by hand
in numpy, independently of the package's geometry and balance code.

Sources:
- Stratified geometry of a half-full pipe (h/D = 1/2): A_L = A_G = pi D^2/8, S_L = S_G = pi D/2,
  S_i = D (circle geometry; Taitel & Dukler 1976, AIChE J. 22(1):47-55, fig. 2 / eqs. for the
  dimensionless areas and perimeters), and the general stratified geometry
  A_L/A = (phi - sin phi)/(2 pi), phi = 2 arccos(1 - 2 h/D) (same source).
- Phase balances and the combined balance: Taitel & Dukler (1976), eqs. 1-3.
- Baseline factors for the effective-variance check: Fanning f = 0.046 Re^-0.2 on the phase
  hydraulic diameters D_L = 4 A_L/S_L, D_G = 4 A_G/(S_G + S_i), smooth interface f_i = f_WG
  (Taitel & Dukler 1976, eqs. 5-8, the 'taitel_dukler' wall and 'smooth' interface of the baseline).
- The Cauchy loss c^2 ln(1 + r^2/c^2) (Holland & Welsch 1977, from memory) and the
  effective-variance scale sqrt(sigma_p^2 + (d(R/A)/dH sigma_H)^2) (Orear 1982, from memory).
"""
from __future__ import annotations

import math

import pandas as pd
import pytest
import torch

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.closures.neural import NeuralClosure
from closure_nn.data.features import FeatureScaler, state_features
from closure_nn.physics.conditions import make_conditions
from closure_nn.physics.local_state import local_state
from closure_nn.physics.momentum import Stresses
from closure_nn.training.loss import TERMS, ClosureLoss, LossSettings
from closure_nn.training.loss_terms import (cauchy, combined_residual_term, data_misfit_term, pattern_term,
                                            phase_residual_term, prior_term, smoothness)
from closure_nn.training.tables import table_tensors

T = lambda *v: torch.tensor(v, dtype=torch.float64)  # noqa: E731
G = 9.80665  # standard gravity [m/s2] (CGPM 1901), the default of make_conditions
D, RHOL, RHOG, THETA = 0.06, 998.0, 1.2, math.radians(2.0)
# half-full pipe, by hand
A_HALF, S_WET, S_I = math.pi * D**2 / 8, math.pi * D / 2, D
TAU = dict(tau_wl=1.7, tau_wg=0.31, tau_i=0.55)  # invented stresses [Pa]


def _half_state():
    cond = make_conditions(vsl=0.05, vsg=2.0, D=D, theta=THETA, rhol=RHOL, rhog=RHOG)
    return local_state(cond, T(0.5), "stratified")


def _tau() -> Stresses:
    return Stresses(*(T(TAU[k]) for k in ("tau_wl", "tau_wg", "tau_i")))


def _phase_misfits_by_hand(pgrad: float) -> tuple[float, float]:
    """R_L/A_L and R_G/A_G [Pa/m] at h/D = 1/2 (Taitel & Dukler 1976, eqs. 1-2)."""
    r_l = pgrad - TAU["tau_wl"] * S_WET / A_HALF + TAU["tau_i"] * S_I / A_HALF - RHOL * G * math.sin(THETA)
    r_g = pgrad - TAU["tau_wg"] * S_WET / A_HALF - TAU["tau_i"] * S_I / A_HALF - RHOG * G * math.sin(THETA)
    return r_l, r_g


def test_geometry_of_the_half_full_pipe_is_the_hand_value():
    g = _half_state().geom
    assert [float(x) for x in (g.A_L, g.A_G, g.S_L, g.S_G, g.S_i)] == pytest.approx(
        [A_HALF, A_HALF, S_WET, S_WET, S_I], rel=1e-12)


@pytest.mark.parametrize("c", [None, 3.0])
def test_phase_residual_term_by_hand(c):
    pgrad, sd_l, sd_g = 150.0, 4.0, 9.0
    r_l, r_g = _phase_misfits_by_hand(pgrad)
    rho = (lambda r: r**2) if c is None else (lambda r: c**2 * math.log1p(r**2 / c**2))
    want = 0.5 * (rho(r_l / sd_l) + rho(r_g / sd_g))
    got = phase_residual_term(_half_state(), _tau(), T(pgrad), T(sd_l), T(sd_g), c)
    assert float(got) == pytest.approx(want, rel=1e-12)


def test_combined_residual_term_by_hand():
    """F = tau_WG S_G/A_G - tau_WL S_L/A_L + tau_i S_i (1/A_L + 1/A_G) - (rho_L - rho_G) g sin(theta)
    (Taitel & Dukler 1976, eq. 3), over the sum of the magnitudes of its four terms with the
    baseline's stresses (here other invented stresses)."""
    terms = [TAU["tau_wg"] * S_WET / A_HALF, -TAU["tau_wl"] * S_WET / A_HALF, TAU["tau_i"] * S_I * 2 / A_HALF,
             -(RHOL - RHOG) * G * math.sin(THETA)]
    base = Stresses(T(2.0), T(0.4), T(0.1))
    scale = (2.0 * S_WET / A_HALF + 0.4 * S_WET / A_HALF + 0.1 * S_I * 2 / A_HALF + (RHOL - RHOG) * G * math.sin(THETA))
    got = combined_residual_term(_half_state(), _tau(), base)
    assert float(got) == pytest.approx((sum(terms) / scale) ** 2, rel=1e-12)


def test_data_misfit_pattern_and_prior_terms_by_hand():
    assert data_misfit_term(T(0.31), T(0.25), T(0.02), 3.0).item() == pytest.approx(9 * math.log1p(9 / 9), rel=1e-12)
    # margins -0.2 (stable layer), 0.3 (unstable): observed stratified, then observed intermittent
    got = pattern_term(T(-0.2, 0.3, -0.2, 0.3), T(1, 1, 0, 0).bool(), 0.05, 0.1).tolist()
    assert got == pytest.approx([0.0, ((0.3 + 0.05) / 0.1) ** 2, ((0.05 + 0.2) / 0.1) ** 2, 0.0], rel=1e-12)
    d = torch.tensor([[0.2, -0.1, 1.5]], dtype=torch.float64)
    assert prior_term(d, T(1.0, 1.0, 0.01)).item() == pytest.approx(0.04 + 0.01 + 0.01 * 2.25, rel=1e-12)
    assert cauchy(T(0.0), 3.0).item() == 0.0


def test_smoothness_is_the_squared_feature_gradient_by_finite_differences():
    """smooth = sum_k |dg_k/dz|^2 at a state, g the network's part of ln f and z the standardised
    features: compared with central differences of g(z) (common practice), independently of the
    per-branch autograd of :func:`smoothness`."""
    torch.manual_seed(3)
    net = NeuralClosure(hidden=(6,), base_input=True)
    with torch.no_grad():  # the output layer starts at zero (the baseline); give it weights
        for b in net.branches:
            b[-1].weight.normal_(0.0, 0.5)
    s = _half_state()
    ev = net.evaluate(s, input_grad=True)
    z0 = ev.inputs[0].detach().clone()
    g = lambda z: net.squash(net.network_outputs(z)).detach()  # noqa: E731
    h, total = 1e-6, 0.0
    for i in range(z0.shape[-1]):
        dz = torch.zeros_like(z0)
        dz[..., i] = h
        total += float((((g(z0 + dz) - g(z0 - dz)) / (2 * h)) ** 2).sum())
    assert total > 0
    assert float(smoothness(net, s, ev).detach()) == pytest.approx(total, rel=1e-6)


def _stratified_geometry(h: float) -> dict:
    """Taitel & Dukler (1976) circle-segment geometry of a layer of level h/D, by hand."""
    phi = 2 * math.acos(1 - 2 * h)
    A = math.pi * D**2 / 4
    a_l = A * (phi - math.sin(phi)) / (2 * math.pi)
    return dict(A_L=a_l, A_G=A - a_l, S_L=D * phi / 2, S_G=D * (math.pi - phi / 2), S_i=D * math.sin(phi / 2))


def _level(holdup: float) -> float:
    from scipy.optimize import brentq

    A = math.pi * D**2 / 4
    return brentq(lambda h: _stratified_geometry(h)["A_L"] / A - holdup, 1e-9, 1 - 1e-9, xtol=1e-15)


def _misfits_td(holdup: float, vsl: float, vsg: float, pgrad: float) -> tuple[float, float]:
    """R_L/A_L, R_G/A_G [Pa/m] with the Taitel-Dukler baseline (Blasius-type 0.046 Re^-0.2 walls,
    smooth interface), all by hand."""
    gm = _stratified_geometry(_level(holdup))
    u_l, u_g = vsl / holdup, vsg / (1 - holdup)
    d_l, d_g = 4 * gm["A_L"] / gm["S_L"], 4 * gm["A_G"] / (gm["S_G"] + gm["S_i"])
    f_l = 0.046 * (RHOL * u_l * d_l / 1e-3) ** -0.2
    f_g = 0.046 * (RHOG * u_g * d_g / 1.8e-5) ** -0.2
    t_wl, t_wg = f_l * RHOL * u_l**2 / 2, f_g * RHOG * u_g**2 / 2
    t_i = f_g * RHOG * (u_g - u_l) * abs(u_g - u_l) / 2
    r_l = pgrad - t_wl * gm["S_L"] / gm["A_L"] + t_i * gm["S_i"] / gm["A_L"] - RHOL * G * math.sin(THETA)
    r_g = pgrad - t_wg * gm["S_G"] / gm["A_G"] - t_i * gm["S_i"] / gm["A_G"] - RHOG * G * math.sin(THETA)
    return r_l, r_g


def test_effective_variance_scale_by_hand():
    """effective_variance: each phase residual over sqrt(sigma_p^2 + d^2), d half the change of
    R/A between H + sigma_H and H - sigma_H (Orear 1982, from memory), with a network whose
    correction is zero (the Taitel-Dukler baseline); every value recomputed by hand above."""
    H, sd_h, vsl, vsg, pgrad, sd_p = 0.22, 0.02, 0.03, 3.0, 40.0, 3.0
    row = pd.DataFrame(dict(vsl=[vsl], vsg=[vsg], D=[D], theta=[THETA], roughness=[0.0], rhol=[RHOL], rhog=[RHOG],
                            mul=[1e-3], mug=[1.8e-5], sigma=[0.072], holdup=[H], holdup_sd=[sd_h], pgrad=[pgrad],
                            pgrad_sd=[sd_p], pattern=["stratified_wavy"]))
    net = NeuralClosure(hidden=(4,), baseline=BaselineClosure("taitel_dukler", "smooth"))
    sc = FeatureScaler.fit(state_features(pd.concat([row] * 3), net.baseline))
    net.set_scaler(sc.mean, torch.ones_like(sc.std))
    with torch.no_grad():
        for b in net.branches:
            b[-1].weight.zero_()
            b[-1].bias.zero_()
    r_l, r_g = _misfits_td(H, vsl, vsg, pgrad)
    up, down = _misfits_td(H + sd_h, vsl, vsg, pgrad), _misfits_td(H - sd_h, vsl, vsg, pgrad)
    d_l, d_g = abs(up[0] - down[0]) / 2, abs(up[1] - down[1]) / 2
    want = 0.5 * ((r_l / math.hypot(sd_p, d_l)) ** 2 + (r_g / math.hypot(sd_p, d_g)) ** 2)
    plain = 0.5 * ((r_l / sd_p) ** 2 + (r_g / sd_p) ** 2)
    w = {k: 0.0 for k in TERMS} | {"phase_residual": 1.0}
    for ev_on, expected in ((True, want), (False, plain)):
        _, terms, _ = ClosureLoss(LossSettings(weights=w, effective_variance=ev_on))(net, table_tensors(row))
        assert float(terms["phase_residual"]) == pytest.approx(expected, rel=1e-8), ev_on
    assert want < plain  # the holdup uncertainty widens the scale


def test_residual_robust_scale_is_the_cauchy_loss_of_the_phase_residuals():
    """residual_robust_scale c: the phase-residual term becomes 0.5 [rho(r_L) + rho(r_G)] with
    rho the Cauchy loss of the standardised residuals (hand values as above)."""
    H, vsl, vsg, pgrad, sd_p, c = 0.22, 0.03, 3.0, 400.0, 3.0, 3.0
    row = pd.DataFrame(dict(vsl=[vsl], vsg=[vsg], D=[D], theta=[THETA], roughness=[0.0], rhol=[RHOL], rhog=[RHOG],
                            mul=[1e-3], mug=[1.8e-5], sigma=[0.072], holdup=[H], pgrad=[pgrad], pgrad_sd=[sd_p],
                            pattern=["stratified_wavy"]))
    net = NeuralClosure(hidden=(4,), baseline=BaselineClosure("taitel_dukler", "smooth"))
    with torch.no_grad():
        for b in net.branches:
            b[-1].weight.zero_()
            b[-1].bias.zero_()
    r_l, r_g = _misfits_td(H, vsl, vsg, pgrad)
    rho = lambda r: c**2 * math.log1p((r / c) ** 2)  # noqa: E731
    w = {k: 0.0 for k in TERMS} | {"phase_residual": 1.0}
    _, terms, _ = ClosureLoss(LossSettings(weights=w, residual_robust_scale=c))(net, table_tensors(row))
    assert float(terms["phase_residual"]) == pytest.approx(0.5 * (rho(r_l / sd_p) + rho(r_g / sd_p)), rel=1e-8)
