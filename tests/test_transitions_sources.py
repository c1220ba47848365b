"""The downward-flow and inclined-upflow criteria of the pattern decision tree, each against its source.

BST82 = Barnea, Shoham & Taitel (1982), Chem. Eng. Sci. 37(5):735-740 (downward inclined flow);
B86 = Barnea (1986), Int. J. Multiphase Flow 12(5):733-744; B87 = Barnea (1987), Int. J.
Multiphase Flow 13(1):1-12; TD76 = Taitel & Dukler (1976), AIChE J. 22(1):47-55; TBD80 = Taitel,
Barnea & Dukler (1980), AIChE J. 26(3):345-354; BSTD85 = Barnea, Shoham, Taitel & Dukler (1985),
Chem. Eng. Sci. 40(1):131-136 (inclined upflow). Equations from memory of the papers (the module
docstrings say so); their forms agree with independent open implementations of B87.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
import torch

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.physics.conditions import G_STANDARD, make_conditions
from closure_nn.physics.holdup_roots import solve_separated
from closure_nn.physics.local_state import local_state
from closure_nn.physics.patterns import classify, kh_gas_velocity, tbd_annular_vsg, wavy_gas_velocity
from closure_nn.physics.transitions_unified import (
    FROUDE_WAVY, barnea_annular_ok, barnea_dispersed, bst_annular_liquid_velocity, bst_wavy_froude,
)
from closure_nn.physics.vocabulary import CODE, PATTERNS

BASE = BaselineClosure()


def test_bst82_froude_number_by_hand_and_its_threshold():
    # BST82 (B87 below 0 deg): waves by gravity on a downward layer when u_L / (g h_L)^0.5 >= 1.5.
    c = make_conditions(vsl=0.2, vsg=1.0, D=0.05, theta=math.radians(-5))
    s = local_state(c, torch.tensor(0.2, dtype=torch.float64), "stratified")
    assert float(bst_wavy_froude(c, s)) == pytest.approx(float(s.u_L) / math.sqrt(G_STANDARD * 0.2 * 0.05), rel=1e-12)
    assert FROUDE_WAVY == 1.5


def test_downward_layers_wavy_by_gravity_where_wind_makes_no_waves():
    # BST82: at -1.5 deg and a low gas rate a faster layer is wavy (Fr >= 1.5) although TD76's
    # wind criterion calls it smooth; a slower layer (Fr < 1.5) at the same gas rate stays smooth.
    # At -5 deg every such layer is wavy: BST82 found smooth stratified downflow only within a few
    # degrees of horizontal (from memory).
    vsl = torch.logspace(-3, -1, 40, dtype=torch.float64)
    steep = make_conditions(vsl=vsl, vsg=0.3, D=0.05, theta=math.radians(-5))
    assert not bool((classify(steep, solve_separated(steep, BASE)) == CODE["stratified_smooth"]).any())
    c = make_conditions(vsl=vsl, vsg=0.3, D=0.05, theta=math.radians(-1.5))
    sol = solve_separated(c, BASE)
    code = classify(c, sol)
    stable = sol.state.u_G < kh_gas_velocity(c, sol.state)
    calm = sol.state.u_G < wavy_gas_velocity(c, sol.state)
    fr = bst_wavy_froude(c, sol.state)
    ok = stable & calm & (code != CODE["dispersed_bubble"])
    assert bool((ok & (fr >= 1.5)).any()) and bool((ok & (fr < 1.5)).any())
    assert bool((code[ok & (fr >= 1.5)] == CODE["stratified_wavy"]).all())
    assert bool((code[ok & (fr < 1.5)] == CODE["stratified_smooth"]).all())


def test_bst82_throw_grows_with_gas_space_and_vanishes_when_the_layer_fills_the_pipe():
    # BST82/B87: u_L,A^2 = g D (1 - h_L/D) cos(theta) / f_L: drops must cross the gas space.
    c = make_conditions(vsl=0.1, vsg=1.0, D=0.05, theta=math.radians(-30))
    f = torch.tensor(0.008, dtype=torch.float64)
    u = [float(bst_annular_liquid_velocity(c, local_state(c, torch.tensor(h, dtype=torch.float64), "stratified"), f))
         for h in (0.05, 0.3, 0.6, 1.0 - 1e-12)]
    assert u[0] > u[1] > u[2] > 0 and u[3] < 1e-4
    assert u[1] ** 2 == pytest.approx(G_STANDARD * 0.05 * 0.7 * math.cos(math.radians(30)) / 0.008, rel=1e-12)


def test_near_horizontal_downflow_never_thrown_at_ordinary_rates():
    # BST82 derived the drop criterion for steep downflow: near horizontal (-1 deg) the layer of a
    # Kelvin-Helmholtz-stable state is far slower than u_L,A (TD76's map holds there, BSTD80
    # compared it with data to -10 deg), so the BST82 criterion never decides.
    rng = np.random.default_rng(3)
    c = make_conditions(vsl=10 ** rng.uniform(-3, 0, 400), vsg=10 ** rng.uniform(-1, 1.3, 400), D=0.05,
                        theta=math.radians(-1))
    sol = solve_separated(c, BASE)
    stable = sol.found & (sol.state.u_G < kh_gas_velocity(c, sol.state))
    thrown = sol.state.u_L >= bst_annular_liquid_velocity(c, sol.state, sol.friction.f_wl)
    assert bool(stable.any()) and not bool((stable & thrown).any())


def test_inclined_upflow_follows_bstd85_lines_with_b86_dispersed_bubble():
    # BSTD85 (TBD80 extended to inclined upflow): annular above the Kutateladze line
    # vsg sqrt(rhog)/(sigma g drho)^0.25 = 3.1 at every steep angle; no bubble flow in a 51 mm pipe
    # (TBD80's smallest bubble-flow pipe is 51.5 mm for air-water); dispersed bubble by B86.
    rng = np.random.default_rng(11)
    n = 400
    deg = rng.uniform(20, 90, n)
    c = make_conditions(vsl=10 ** rng.uniform(-3, 0.7, n), vsg=10 ** rng.uniform(-1.3, 1.7, n), D=0.051,
                        theta=np.radians(deg))
    got = [PATTERNS[int(k)] for k in classify(c, solve_separated(c, BASE))]
    kut = 3.1 * (0.072 * G_STANDARD * 996.8) ** 0.25 / math.sqrt(1.2)  # written out: 14.6 m/s
    assert float(tbd_annular_vsg(c[:1])) == pytest.approx(kut, rel=1e-9)
    db = barnea_dispersed(c)
    for i, p in enumerate(got):
        expect = "dispersed_bubble" if db[i] else "annular" if c.vsg[i] >= kut else "intermittent"
        assert p == expect, (i, float(c.vsl[i]), float(c.vsg[i]), deg[i])
    assert {"annular", "intermittent", "dispersed_bubble"} <= set(got)


def test_steep_downflow_uses_the_film_rules_of_b86_at_every_angle():
    # B87 below -10 deg: a non-stratified, non-dispersed state is annular exactly where B86's film
    # is thinner than blockage (0.24) and stable, else intermittent; never TD76's h/D = 0.5 rule.
    rng = np.random.default_rng(12)
    n = 400
    c = make_conditions(vsl=10 ** rng.uniform(-3, 0.7, n), vsg=10 ** rng.uniform(-1.3, 1.7, n),
                        D=rng.choice([0.025, 0.051], n), theta=np.radians(rng.uniform(-90, -10.5, n)))
    code = classify(c, solve_separated(c, BASE))
    rest = ~torch.isin(code, torch.tensor([CODE["stratified_smooth"], CODE["stratified_wavy"], CODE["dispersed_bubble"]]))
    film = torch.where(barnea_annular_ok(c), CODE["annular"], CODE["intermittent"])
    assert int(rest.sum()) > 100
    assert bool((code[rest] == film[rest]).all())
    assert not bool((code == CODE["bubble"]).any())  # bubble flow is an upflow pattern (TBD80, B87)
