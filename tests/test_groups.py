"""Tests of the dimensionless closure inputs (closure_nn.physics.groups).

Sources: the Weber number of the phase slip, We = rho_G (u_G - u_L)^2 D / sigma, is the standard
definition (common practice; the feature is asinh(sign(u_G - u_L) We^1/2), module docstring);
stratified phase velocities u_L = v_SL / H, u_G = v_SG / (1 - H) are the definition of the in-situ
velocities (Taitel & Dukler 1976). Values below are computed by hand from those definitions for
invented air-water states in a 50 mm pipe.
"""
from __future__ import annotations

import math

import torch

from closure_nn.physics.conditions import make_conditions
from closure_nn.physics.geometry import stratified
from closure_nn.physics.groups import FEATURE_NAMES, closure_features
from closure_nn.physics.local_state import local_state

WE = FEATURE_NAMES.index("asinh_We_slip")


def holdup_at(h_D: float) -> float:
    g = stratified(torch.tensor(h_D, dtype=torch.float64), torch.tensor(0.05, dtype=torch.float64))
    return float(g.A_L / g.area)


def state(vsl, vsg, h_D=0.3):
    c = make_conditions(vsl=vsl, vsg=vsg, D=0.05, theta=-0.26)  # air-water defaults, 15 deg downhill
    return local_state(c, torch.full(c.shape, h_D, dtype=torch.float64), "stratified")


def test_weber_feature_is_signed_by_the_slip_and_matches_the_definition():
    # a fast film under slow gas (u_L > u_G) and the mirror case give features of opposite sign
    s = state(vsl=[0.8, 0.05], vsg=[0.3, 3.0])
    H = holdup_at(0.3)
    uL = torch.tensor([0.8, 0.05], dtype=torch.float64) / H
    uG = torch.tensor([0.3, 3.0], dtype=torch.float64) / (1 - H)
    we = 1.2 * (uG - uL) ** 2 * 0.05 / 0.072
    expected = torch.asinh(torch.sign(uG - uL) * torch.sqrt(we))
    got = closure_features(s)[..., WE]
    assert float(got[0]) < 0 < float(got[1])
    assert torch.allclose(got, expected, rtol=1e-6)


def test_weber_feature_is_smooth_and_not_flat_through_zero_slip():
    # u_G - u_L crosses zero along v_SG: the feature asinh(du sqrt(rho_G D / sigma)) has the same
    # slope on both sides, equal to the analytic d/dv_SG = sqrt(rho_G D / sigma) / (1 - H) (calculus;
    # u_G = v_SG / (1 - H)), and not zero: a feature flat at zero slip gave the closure-health audit
    # an apparent jump in f_i along h/D (docs/evaluation_log.md, 2026-12-02, "A signed slip feature")
    H = holdup_at(0.3)
    vsl = 0.5
    vsg0 = vsl / H * (1 - H)  # zero slip
    d = torch.tensor([-2e-3, -1e-3, 0.0, 1e-3, 2e-3], dtype=torch.float64)
    f = closure_features(state(vsl=vsl, vsg=vsg0 + d))[..., WE]
    assert abs(float(f[2])) < 1e-12
    left, right = (f[2] - f[1]) / 1e-3, (f[3] - f[2]) / 1e-3
    slope = math.sqrt(1.2 * 0.05 / 0.072) / (1 - H)
    assert math.isclose(float(left), slope, rel_tol=1e-3) and math.isclose(float(right), slope, rel_tol=1e-3)
    assert float(f[0]) < float(f[1]) < float(f[2]) < float(f[3]) < float(f[4])  # monotone in the slip
