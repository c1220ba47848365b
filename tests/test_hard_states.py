"""Holdup-root counts on the stored hard states against a peer independent of closure-nn's equations.

The peer below is written in numpy from the published equations, not from closure_nn's torch code:
the stratified geometry and combined momentum equation of Taitel & Dukler (1976), AIChE J.
22(1):47-55 (Appendix; eqs. 3-6, hydraulic diameters D_L = 4A_L/S_L, D_G = 4A_G/(S_G + S_i)),
the wall friction of Churchill (1977), Chem. Eng. 84(24):91-92 (Fanning f = f_Darcy/4), and the
interface either smooth (f_i = f_G, Taitel & Dukler 1976, p. 48) or wavy after Andritsos &
Hanratty (1987), AIChE J. 33(3):444-454 (f_i/f_G = 1 + 15 sqrt(h/D) (v_SG/v_SG,t - 1) above
v_SG,t = 5 m/s sqrt(1.2/rho_G); constants from memory, as in closure_nn.closures.correlations).
Its roots: sign changes on a fine grid (40 log-spaced points below h/D = 1e-3 and 4,000 uniform
points), refined with scipy.optimize.brentq (Brent 1973).

tests/data/hard_root_states.csv (provenance in tests/data/make_hard_states.py: 2e5 random states
per closure screened, seed 1717, the issue-17 example included) stores a fine-grid reference
computed with closure-nn's own residual; here the independent peer checks that reference and the
vectorised root finder.
"""
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import brentq

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.physics.conditions import FIELD_NAMES, make_conditions
from closure_nn.physics.holdup_roots import find_roots

DATA = Path(__file__).parent / "data"
CLOSURES = {"churchill_ah": BaselineClosure(wall="churchill", interface="andritsos_hanratty"),
            "churchill_smooth": BaselineClosure(wall="churchill", interface="smooth")}


def _churchill_fanning(Re, eD):
    """Churchill (1977): f_D = 8[(8/Re)^12 + (A + B)^-1.5]^(1/12); returns f_D / 4."""
    Re = np.maximum(Re, 1e-8)
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        A = np.where(Re > 10, (2.457 * np.log(1.0 / ((7.0 / Re) ** 0.9 + 0.27 * eD))) ** 16, 0.0)
        B = (37530.0 / Re) ** 16
        return 2.0 * ((8.0 / Re) ** 12 + (A + B) ** -1.5) ** (1.0 / 12)


def peer_residual(h, p: dict, wavy: bool):
    """Combined momentum residual [Pa/m] at h/D (array), Taitel & Dukler (1976) eq. 3."""
    D = p["D"]
    beta = 2 * np.arccos(1 - 2 * h)
    A = math.pi * D * D / 4
    A_L = D * D / 8 * (beta - np.sin(beta))
    A_G = A - A_L
    S_L, S_i = D * beta / 2, D * np.sin(beta / 2)
    S_G = math.pi * D - S_L
    u_L, u_G = p["vsl"] * A / A_L, p["vsg"] * A / A_G
    D_L, D_G = 4 * A_L / S_L, 4 * A_G / (S_G + S_i)
    f_L = _churchill_fanning(p["rhol"] * u_L * D_L / p["mul"], p["roughness"] / D_L)
    f_G = _churchill_fanning(p["rhog"] * u_G * D_G / p["mug"], p["roughness"] / D_G)
    f_i = f_G
    if wavy:
        vt = 5.0 * math.sqrt(1.2 / p["rhog"])
        f_i = f_G * (1 + 15 * np.sqrt(h) * max(p["vsg"] / vt - 1, 0.0))
    t_L, t_G = 0.5 * f_L * p["rhol"] * u_L * np.abs(u_L), 0.5 * f_G * p["rhog"] * u_G * np.abs(u_G)
    du = u_G - u_L
    t_i = 0.5 * f_i * p["rhog"] * du * np.abs(du)
    return (t_G * S_G / A_G - t_L * S_L / A_L + t_i * S_i * (1 / A_L + 1 / A_G)
            - (p["rhol"] - p["rhog"]) * p["g"] * math.sin(p["theta"]))


def peer_roots(p: dict, wavy: bool) -> list[float]:
    xs = np.concatenate([np.logspace(-7, -3, 40, endpoint=False), np.linspace(1e-3, 1 - 1e-7, 4000)])
    ys = peer_residual(xs, p, wavy)
    f = lambda x: float(peer_residual(np.array([x]), p, wavy)[0])  # noqa: E731
    return [brentq(f, a, b, xtol=1e-14) for a, b, ya, yb in zip(xs[:-1], xs[1:], ys[:-1], ys[1:])
            if np.isfinite(ya) and np.isfinite(yb) and np.signbit(ya) != np.signbit(yb)]


@pytest.fixture(scope="module")
def hard():
    df = pd.read_csv(DATA / "hard_root_states.csv", comment="#")
    peer = [peer_roots(row._asdict(), row.closure == "churchill_ah") for row in df.itertuples(index=False)]
    return df.assign(peer_n=[len(r) for r in peer],
                     peer_roots=[(r + [math.nan] * 3)[:3] for r in peer])


def test_issue_example_has_three_roots_in_the_independent_peer():
    # air-water, D 0.0402 m, vsl 0.0011 m/s, vsg 11.69 m/s, +2 deg, smooth interface (issue 17)
    p = dict(vsl=0.0011, vsg=11.69, D=0.0402, theta=math.radians(2.0), roughness=0.0, rhol=998.0, rhog=1.2,
             mul=1e-3, mug=1.8e-5, g=9.80665)
    r = peer_roots(p, wavy=False)
    assert len(r) == 3 and 0.03 < r[0] < r[1] < 0.06 and 0.4 < r[2] < 0.5


def test_stored_reference_counts_equal_the_independent_peer(hard):
    assert len(hard) > 500 and int((hard.ref_n_roots >= 3).sum()) >= 10
    same = hard.peer_n == hard.ref_n_roots
    assert same.all(), hard[~same][["closure", "vsl", "vsg", "D", "ref_n_roots", "peer_n"]]


@pytest.mark.parametrize("name", list(CLOSURES))
def test_root_finder_counts_and_roots_equal_the_independent_peer(hard, name):
    df = hard[hard.closure == name]
    cond = make_conditions(**{k: df[k].to_numpy().copy() for k in FIELD_NAMES})
    rs = find_roots(cond, CLOSURES[name])
    n = rs.n_roots.numpy()
    peer_n = df.peer_n.to_numpy()
    unres = rs.unresolved.numpy()
    # no silent miss: the count equals the peer's, or the state is flagged
    bad = (n != peer_n) & ~unres
    assert not bad.any(), df[bad][["vsl", "vsg", "D", "theta", "peer_n"]].assign(ours=n[bad])
    assert unres.mean() <= 0.05
    ok = n == peer_n
    peer = np.array(df.peer_roots.tolist())
    np.testing.assert_allclose(rs.roots.numpy()[ok], peer[ok], atol=1e-9, rtol=0, equal_nan=True)
