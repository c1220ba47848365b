"""Stratified and annular geometry against exact identities and the `fluids` library."""
import math

import numpy as np
import pytest
import torch
from fluids.geometry import A_partial_circle, circle_segment_h_from_A

from closure_nn.physics.geometry import annular, h_from_holdup, stratified

T = lambda x: torch.tensor(x, dtype=torch.float64)  # noqa: E731


def test_half_full_pipe_exact():
    # Exact circle geometry at h/D = 1/2 (common practice): A_L = A/2, S_L = pi D/2, S_i = D.
    D = T(0.3)
    g = stratified(T(0.5), D)
    A = math.pi * 0.3**2 / 4
    assert float(g.A_L) == pytest.approx(A / 2, rel=1e-14)
    assert float(g.S_L) == pytest.approx(math.pi * 0.3 / 2, rel=1e-14)
    assert float(g.S_i) == pytest.approx(0.3, rel=1e-14)
    # hydraulic diameters at h/D = 1/2: D_L = 4(A/2)/(pi D/2) = D; D_G = 4(A/2)/(pi D/2 + D)
    assert float(g.D_L) == pytest.approx(0.3, rel=1e-14)
    assert float(g.D_G) == pytest.approx(4 * A / 2 / (math.pi * 0.3 / 2 + 0.3), rel=1e-14)


def test_partial_circle_area_matches_fluids():
    # Reference: fluids.geometry.A_partial_circle (Caleb Bell, fluids 1.x), circular segment area.
    rng = np.random.default_rng(1)
    h_D = rng.uniform(1e-4, 1 - 1e-4, 500)
    D = rng.uniform(0.01, 2.0, 500)
    g = stratified(T(h_D), T(D))
    ref = np.array([A_partial_circle(d, h * d) for h, d in zip(h_D, D)])
    np.testing.assert_allclose(g.A_L.numpy(), ref, rtol=1e-9)


def test_inverse_from_holdup_matches_fluids():
    # Reference: fluids.geometry.circle_segment_h_from_A (height of a segment from its area).
    # It answers for segments up to a half circle (it returns D/2 above), so fuller pipes use
    # the mirror identity h(H) = D - h(1 - H) (circle symmetry, common practice).
    rng = np.random.default_rng(2)
    H = rng.uniform(1e-4, 1 - 1e-4, 300)
    D = 0.2
    h = h_from_holdup(T(H)).numpy()
    seg = lambda x: circle_segment_h_from_A(x * math.pi * D**2 / 4, D) / D  # noqa: E731
    ref = np.array([seg(x) if x <= 0.5 else 1 - seg(1 - x) for x in H])
    np.testing.assert_allclose(h, ref, rtol=1e-8, atol=1e-10)
    # and the forward map returns the holdup (round trip)
    np.testing.assert_allclose(stratified(T(h), T(D)).liquid_fraction.numpy(), H, rtol=1e-12, atol=1e-14)


def test_interface_width_is_area_derivative():
    # dA_L/dh = S_i for both configurations (calculus identity, common practice).
    for make, fmax in ((stratified, 1.0), (annular, 0.5)):
        frac = torch.linspace(0.01, fmax - 0.01, 50, dtype=torch.float64, requires_grad=True)
        D = T(0.1)
        g = make(frac, D)
        (dA,) = torch.autograd.grad(g.A_L.sum(), frac)
        np.testing.assert_allclose((dA / D).detach().numpy(), g.S_i.detach().numpy(), rtol=1e-10)


def test_annular_film_area():
    # Uniform film of thickness delta: A_F = pi (D delta - delta^2) (annulus area, common practice).
    D, d = 0.1, 0.004
    g = annular(T(d / D), T(D))
    assert float(g.A_L) == pytest.approx(math.pi * (D * d - d**2), rel=1e-13)
    assert float(g.S_G) == 0.0
    assert float(g.D_G) == pytest.approx(D - 2 * d, rel=1e-13)
