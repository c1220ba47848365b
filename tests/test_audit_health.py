"""Closure health (closure_nn.audit.health): positivity, kinks, multiple roots, single-phase limits.

Sources: Churchill (1977), Chem. Eng. 84(24):91-92, through the independent implementation
``fluids.friction.Churchill_1977`` (Darcy factor) of the PyPI package ``fluids``; Taitel & Dukler
(1976) Blasius constants with the max(laminar, turbulent) switch; Andritsos & Hanratty (1987)
threshold v_SG,t = 5 m/s sqrt(1.2/rho_G); Barnea & Taitel (1992) for several roots in upward flow.
"""
from __future__ import annotations

import fluids.friction
import numpy as np
import pytest
import torch

from closure_nn.audit.health import HealthGridSpec, audit_closure
from closure_nn.closures.base import Closure
from closure_nn.closures.baseline import BaselineClosure
from closure_nn.physics.friction import fanning_churchill
from closure_nn.physics.momentum import FrictionFactors

SMALL = dict(D=(0.05,), theta_deg=(0.0, 5.0), base_rates=2, n_rates=8, n_frac=12, n_map=24,
             roots_theta_deg=(0.0, 5.0))
SMOOTH = BaselineClosure(wall="churchill", interface="smooth")


class Tweaked(Closure):
    """Churchill/smooth baseline with f_i replaced by ``fn(frac, f_i)`` (a deliberately bad closure)."""

    def __init__(self, fn, label: str) -> None:
        super().__init__()
        self.base, self.fn, self.label = SMOOTH, fn, label

    def forward(self, s) -> FrictionFactors:
        f = self.base(s)
        return FrictionFactors(f.f_wl, f.f_wg, self.fn(s.geom.frac, f.f_i))


@pytest.fixture(scope="module")
def smooth_report():
    return audit_closure(SMOOTH, HealthGridSpec(**SMALL))


def test_smooth_baseline_passes(smooth_report):
    h = smooth_report
    assert h.verdict == "pass", h.problems + h.warnings
    assert int(h.positivity[["non_finite", "non_positive"]].to_numpy().sum()) == 0
    assert int(h.smoothness["kink_bases"].sum()) == 0


def test_single_phase_limit_is_churchill_1977(smooth_report):
    # the closure's wall factor at the single-phase edge against fluids' Churchill_1977 (Darcy = 4 Fanning)
    sp = smooth_report.single_phase.set_index("check")
    edge = sp[sp.index.str.contains("single-phase edge")]
    assert float(edge["max_abs_dev"].max()) < 1e-4  # D_G -> D and D_L -> D at the edges
    for Re, eD in ((500.0, 0.0), (2.2e3, 1e-3), (3.0e4, 1e-3), (4e5, 2e-4)):
        ours = 4 * float(fanning_churchill(torch.tensor(Re, dtype=torch.float64), eD))
        assert ours == pytest.approx(fluids.friction.Churchill_1977(Re, eD), rel=1e-9)
    two = sp[sp.index.str.contains("two-phase")]
    assert float(two["max_abs_dev"].iloc[0]) < 0.02  # v_SL = 1e-6 m/s: pgrad within 2 % of gas alone


def test_negative_interfacial_friction_fails():
    bad = Tweaked(lambda frac, f_i: f_i * (1 - 3 * frac), "negative f_i above h/D = 1/3")
    h = audit_closure(bad, HealthGridSpec(**SMALL, sweeps=("frac",)))
    assert h.verdict == "fail"
    row = h.positivity.set_index(["config", "factor"]).loc[("stratified", "f_i")]
    assert row["non_positive"] > 0 and row["min"] < 0
    assert any("f_i (stratified)" in p and "non-positive" in p for p in h.problems)


def test_kinked_interfacial_friction_is_located():
    # slope jump of ln f_i along h/D at h/D = 0.4: f_i = f_G (1 + 5 max(0, h/D - 0.4))
    kinked = Tweaked(lambda frac, f_i: f_i * (1 + 5 * (frac - 0.4).clamp_min(0.0)), "kinked f_i at h/D = 0.4")
    h = audit_closure(kinked, HealthGridSpec(**SMALL, sweeps=("frac", "vsg")))
    assert h.verdict == "warn"
    sm = h.smoothness.set_index(["config", "sweep", "factor"])
    row = sm.loc[("stratified", "frac", "f_i")]
    assert row["kink_bases"] == row["bases"]
    assert row["worst_at"] == pytest.approx(0.4, abs=0.02)
    assert sm.loc[("stratified", "frac", "f_wl"), "kink_bases"] == 0
    assert sm.loc[("stratified", "vsg", "f_i"), "kink_bases"] == 0


def test_default_baseline_kinks_sit_where_the_correlations_switch():
    h = audit_closure(BaselineClosure(), HealthGridSpec(**SMALL, sweeps=("vsg",)))
    assert h.verdict == "warn" and not h.problems
    sm = h.smoothness.set_index(["config", "sweep", "factor"])
    # Andritsos & Hanratty (1987): f_i/f_G = 1 + 15 sqrt(h/D)(v_SG/v_SG,t - 1) above v_SG,t = 5 m/s at 1.2 kg/m3
    assert sm.loc[("stratified", "vsg", "f_i"), "worst_at"] == pytest.approx(5.0, rel=0.05)
    # Taitel & Dukler (1976) max(16/Re, 0.046 Re^-0.2) switches branch near Re = 1490: a kink in
    # f_WG that the all-regime Churchill (1977) wall does not have
    assert sm.loc[("stratified", "vsg", "f_wg"), "kink_bases"] > 0
    ch = audit_closure(BaselineClosure(wall="churchill"), HealthGridSpec(**SMALL, sweeps=("vsg",)))
    sc = ch.smoothness.set_index(["config", "sweep", "factor"])
    assert sc.loc[("stratified", "vsg", "f_wg"), "kink_bases"] == 0
    assert sc.loc[("stratified", "vsg", "f_i"), "kink_bases"] > 0  # the interface threshold stays


def test_several_roots_only_in_upward_flow(smooth_report):
    # Barnea & Taitel (1992, from memory): several stratified solutions in upward inclined flow
    # at low liquid rates; horizontal flow has one (TD76 single-valued map)
    r = smooth_report.roots_summary.set_index("theta_deg")
    assert r.loc[0.0, "several_roots"] == 0 and r.loc[0.0, "no_root"] == 0
    assert r.loc[5.0, "several_roots"] > 0
    n5 = smooth_report.roots[5.0]
    i, j = np.nonzero(n5["n_roots"] > 1)
    assert n5["vsl"][i].max() < 0.05  # thin films only
