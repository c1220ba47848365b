"""Dataset audit (closure_nn.audit): residuals at measured states, suspect rows, precision/recall.

Sources beside each check. TD76 = Taitel & Dukler (1976), AIChE J. 22(1):47-55 (phase balances
eqs. 1-2, combined equation eq. 3). The invented corrupted campaign is closure_nn.audit.selfcheck.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import torch

from closure_nn.audit import AuditSettings, audit_dataset, measured_residuals, recall_by_kind, score_against
from closure_nn.audit.residuals import KIND_ANNULAR, KIND_STRATIFIED, robust_z
from closure_nn.audit.selfcheck import REFERENCE_CLOSURE, clean_campaign, corrupted_campaign
from closure_nn.closures.baseline import BaselineClosure
from closure_nn.physics.conditions import make_conditions
from closure_nn.physics.holdup_roots import solve_separated

REF = BaselineClosure(**REFERENCE_CLOSURE)


def _frame(cond, holdup, pgrad, pattern) -> pd.DataFrame:
    df = pd.DataFrame({k: v.numpy() for k, v in cond.as_dict().items() if k != "g"})
    df["holdup"], df["pgrad"], df["pattern"] = holdup, pgrad, pattern
    df["run_id"] = [f"T{i}" for i in range(len(df))]
    return df


def test_residuals_vanish_at_the_closures_own_equilibrium():
    # TD76 eqs. 1-3: at a root of the combined equation both phase balances close with the
    # mixture pgrad; the audit recovers h/D from the holdup, so this checks the inversion too.
    c = make_conditions(vsl=[0.01, 0.05, 0.2, 0.02], vsg=[1.0, 5.0, 3.0, 12.0], D=[0.05, 0.1, 0.05, 0.08],
                        theta=np.radians([0.0, -2.0, 1.0, 3.0]), roughness=5e-5, rhog=[1.2, 2.4, 1.2, 3.6])
    sol = solve_separated(c, REF)
    assert bool(sol.found.all())
    with torch.no_grad():
        r = measured_residuals(c, REF, sol.holdup.detach(), sol.pgrad.total.detach(),
                               torch.full((4,), KIND_STRATIFIED), holdup_sd=0.01, pgrad_sd=1.0)
    for name in ("liquid", "gas", "combined"):
        assert torch.allclose(getattr(r, name), torch.zeros(4, dtype=torch.float64), atol=1e-8), name
        assert float(getattr(r, f"{name}_e").abs().max()) < 1e-3, name  # sd needed to close: none
    assert torch.allclose(r.frac, sol.frac.detach(), atol=1e-10)


def test_annular_residuals_vanish_at_the_film_equilibrium():
    # same identity for the uniform-film annular balances (Wallis 1969 geometry), no entrainment
    c = make_conditions(vsl=[0.01, 0.03], vsg=[25.0, 40.0], D=0.05)
    sol = solve_separated(c, REF, kind="annular")
    assert bool(sol.found.all())
    r = measured_residuals(c, REF, sol.holdup.detach(), sol.pgrad.total.detach(), torch.full((2,), KIND_ANNULAR))
    assert torch.allclose(r.liquid, torch.zeros(2, dtype=torch.float64), atol=1e-8)
    assert torch.allclose(r.gas, torch.zeros(2, dtype=torch.float64), atol=1e-8)


def test_a_wrong_pgrad_shows_in_both_phase_residuals_but_not_in_the_combined_one():
    # TD76: the combined equation has no pgrad, the phase balances do (sign: R_L grows with pgrad)
    c = make_conditions(vsl=[0.02], vsg=[3.0], D=0.05)
    sol = solve_separated(c, REF)
    H, P = sol.holdup.detach(), sol.pgrad.total.detach()
    r = measured_residuals(c, REF, H, 1.3 * P, torch.tensor([KIND_STRATIFIED]), holdup_sd=1e-4, pgrad_sd=0.02 * P)
    assert float(r.liquid[0]) > 0.05 and float(r.gas[0]) > 0.05
    assert abs(float(r.combined[0])) < 1e-8
    assert float(r.liquid_e[0]) > 5 and float(r.gas_e[0]) > 5  # 30 % off with a 2 % pgrad sd
    # with a loose holdup a single balance can close by moving the level alone; both cannot
    loose = measured_residuals(c, REF, H, 1.3 * P, torch.tensor([KIND_STRATIFIED]), holdup_sd=0.01, pgrad_sd=0.02 * P)
    assert float(loose.liquid_e[0]) < float(r.liquid_e[0])


def test_noise_free_campaign_has_no_suspect_rows():
    df = clean_campaign(n=60, seed=4, holdup_noise=0.0, pgrad_noise=0.0)
    res = audit_dataset(df, REF)
    assert int(res.table["suspect"].sum()) == 0, res.suspects()[["run_id", "reasons"]].to_string()
    sep = res.table["config"] != "-"
    assert np.nanmax(np.abs(res.table.loc[sep, "res_liquid"])) < 1e-6


# measured when written (seeds 0-9, noise sd 0.01 / 2.5 %): precision mean 0.98, min 0.90;
# recall mean 0.92, min 0.80. With sd 0.02 / 5 %: precision mean 0.94, min 0.80; recall mean 0.91.
RECALL_FLOOR, PRECISION_FLOOR = 0.8, 0.9


@pytest.mark.parametrize("seed", [0, 2])
def test_corrupted_campaign_is_found(seed):
    df, truth = corrupted_campaign(n=120, seed=seed)
    assert len(truth) == 10 and truth["run_id"].is_unique
    res = audit_dataset(df, REF)
    s = score_against(res, truth["run_id"])
    assert s.recall >= RECALL_FLOOR, (s, recall_by_kind(res, truth))
    assert s.precision >= PRECISION_FLOOR, res.table[res.table["run_id"].isin(s.false_positives)]["reasons"].tolist()
    by_kind = recall_by_kind(res, truth).set_index("kind")
    # a sign error in pgrad and a manometer unit slip move pgrad far beyond 5 %: always found
    assert by_kind.loc["pgrad_sign", "recall"] == 1.0 and by_kind.loc["pgrad_mmH2O", "recall"] == 1.0


def test_physically_impossible_rows_are_named():
    # common practice: in co-current upward flow the gas outruns the liquid (H_L >= no-slip
    # holdup), and friction adds to the pressure drop (pgrad >= hydrostatic head of the mixture)
    c = make_conditions(vsl=[0.5, 0.05], vsg=[0.5, 2.0], D=0.05, theta=math.radians(10.0))
    df = _frame(c, holdup=[0.2, 0.3], pgrad=[1000.0, 5.0], pattern=["intermittent", "intermittent"])
    res = audit_dataset(df, REF).table.set_index("run_id")
    assert "holdup_below_no_slip" in res.loc["T0", "checks"]  # no-slip holdup 0.5
    assert "pgrad_below_head" in res.loc["T1", "checks"]  # head >= 0.3*998*g*sin(10 deg) = 510 Pa/m
    assert "below the no-slip" in res.loc["T0", "reasons"]


def test_stratified_label_with_an_unstable_equilibrium_is_flagged():
    # TD76 Kelvin-Helmholtz: at v_SL 0.3, v_SG 1 m/s (5 cm, air-water) the layer is unstable
    c = make_conditions(vsl=[0.3], vsg=[1.0], D=0.05)
    df = _frame(c, holdup=[np.nan], pgrad=[np.nan], pattern=["stratified_wavy"])
    res = audit_dataset(df, REF)
    assert res.table["checks"][0] == "pattern_kh" and res.table["kh_ratio_eq"][0] > 1.1


class DomainClosure(BaselineClosure):
    """A baseline with a training domain: inside only for h/D below 0.2 (feature 'frac')."""

    def in_domain(self, features: torch.Tensor) -> torch.Tensor:
        return features[..., 2] < 0.2


def test_rows_outside_the_training_domain_are_flagged():
    c = make_conditions(vsl=[0.005, 0.1], vsg=[2.0, 1.0], D=0.05)
    sol = solve_separated(c, REF)
    df = _frame(c, sol.holdup.detach().numpy(), sol.pgrad.total.detach().numpy(), ["stratified_smooth"] * 2)
    t = audit_dataset(df, DomainClosure(**REFERENCE_CLOSURE)).table
    assert float(t["frac"][0]) < 0.2 < float(t["frac"][1])
    assert list(t["in_domain"]) == [True, False]
    assert "outside_domain" not in t["checks"][0] and "outside_domain" in t["checks"][1]


def test_score_against_counts_run_ids():
    # the usual information-retrieval definitions (common practice)
    s = score_against(pd.Series([True, True, False, True], index=["a", "b", "c", "d"]), ["a", "c"])
    assert (s.precision, s.recall) == (pytest.approx(1 / 3), 0.5)
    assert s.missed == ("c",) and s.false_positives == ("b", "d")
    assert math.isnan(score_against([], ["a"]).precision)


def test_robust_z_ignores_one_outlier():
    # Rousseeuw & Croux (1993): 1.4826 MAD is a consistent sd estimate; one outlier barely moves it
    x = torch.tensor([-1.0, -0.5, 0.0, 0.5, 1.0, 50.0], dtype=torch.float64)
    z, med, sd = robust_z(x)
    assert med == 0.25 and sd == pytest.approx(1.4826 * 0.75)
    assert float(z[-1]) > 40 and float(z[:5].abs().max()) < 1.2


def test_settings_reject_unknown_keys():
    with pytest.raises(ValueError, match="unknown audit setting"):
        AuditSettings.from_mapping({"k_robst": 3})
