"""Friction factors against the `fluids` library (Darcy = 4 x Fanning) and published constants."""
import numpy as np
import torch
from fluids.friction import Churchill_1977, Clamond

from closure_nn.physics.friction import fanning_blasius_td, fanning_churchill

RE = np.logspace(2, 8, 61)
ED = np.array([0.0, 1e-6, 1e-4, 1e-3, 0.01, 0.05])


def test_churchill_matches_fluids_churchill_1977():
    # Reference: fluids.friction.Churchill_1977 (Churchill 1977, Chem. Eng. 84(24):91-92).
    Re, eD = np.meshgrid(RE, ED)
    ours = 4 * fanning_churchill(torch.tensor(Re), torch.tensor(eD)).numpy()
    ref = np.vectorize(Churchill_1977)(Re, eD)
    np.testing.assert_allclose(ours, ref, rtol=1e-10)


def test_churchill_close_to_colebrook_in_turbulent_range():
    # Reference: fluids.friction.Clamond, an exact solution of Colebrook (1939). Churchill (1977)
    # is known to agree with Colebrook within a few percent for Re > 1e4 (common practice).
    Re, eD = np.meshgrid(np.logspace(4, 8, 41), ED)
    ours = 4 * fanning_churchill(torch.tensor(Re), torch.tensor(eD)).numpy()
    ref = np.vectorize(Clamond)(Re, eD)
    assert np.max(np.abs(ours / ref - 1)) < 0.04


def test_churchill_laminar_limit():
    # Hagen-Poiseuille: Darcy f = 64/Re (e.g. White, Fluid Mechanics, eq. 6.12).
    Re = torch.tensor([100.0, 500.0, 1000.0], dtype=torch.float64)
    np.testing.assert_allclose((4 * fanning_churchill(Re, 0.0)).numpy(), 64 / Re.numpy(), rtol=1e-3)


def test_taitel_dukler_constants():
    # Taitel & Dukler (1976), eqs. 5-6: turbulent C = 0.046, n = 0.2; laminar C = 16, n = 1.
    Re = torch.tensor([1e4, 1e5, 1e6], dtype=torch.float64)
    np.testing.assert_allclose(fanning_blasius_td(Re).numpy(), 0.046 * Re.numpy() ** -0.2, rtol=1e-14)
    assert float(fanning_blasius_td(torch.tensor(500.0, dtype=torch.float64))) == 16 / 500.0
    # continuous where the two branches cross (Re^0.8 = 16/0.046)
    Rc = (16 / 0.046) ** (1 / 0.8)
    lo, hi = fanning_blasius_td(torch.tensor([Rc * (1 - 1e-9), Rc * (1 + 1e-9)], dtype=torch.float64))
    assert abs(float(lo - hi)) < 1e-9
