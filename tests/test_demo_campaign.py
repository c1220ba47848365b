"""The INVENTED demo campaign in data_demo/: reproducible byte for byte, valid, honest about its
noise, labels and corruptions, and different enough from the baseline to be worth learning.

There is no outside source for invented data; what is checked is the generator's contract
(data_demo/README.md): the committed files are exactly what the seeded generator writes; the
noise has the stated standard uncertainties (the spec's +-0.02 holdup and +-5 % pgrad read as
expanded uncertainties with coverage factor k = 2, JCGM 100:2008 sec. 6.2-6.3, so one sigma is
holdup 0.01 absolute, pgrad 2.5 % + 1 Pa/m); the listed corruptions are present as described;
everything else equals the reference closure's truth.
"""
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import torch

from closure_nn.config import load_config
from closure_nn.data import demo_campaign as dc
from closure_nn.data.demo_reference import ReferenceClosure
from closure_nn.data.design_space import parse_design
from closure_nn.data.schema import to_conditions
from closure_nn.data.table_io import read_table
from closure_nn.data.validate import validate_table
from closure_nn.physics.point import solve_points

DEMO = Path(__file__).resolve().parents[1] / "data_demo"


@pytest.fixture(scope="module")
def camp():
    return dc.generate()


@pytest.fixture(scope="module")
def clean():
    res = validate_table(read_table(DEMO / dc.CAMPAIGN_FILE), path=str(DEMO / dc.CAMPAIGN_FILE))
    assert len(res.rejected) == 0, res.summary_text()
    return res.clean


@pytest.fixture(scope="module")
def corruptions():
    return pd.read_csv(DEMO / dc.CORRUPTIONS_FILE)


def test_generator_reproduces_committed_files_byte_for_byte(camp, tmp_path):
    assert camp.campaign_csv().encode() == (DEMO / dc.CAMPAIGN_FILE).read_bytes()
    assert camp.corruptions_csv().encode() == (DEMO / dc.CORRUPTIONS_FILE).read_bytes()
    paths = dc.write_files(camp, tmp_path)  # what `python -m closure_nn.data.demo_campaign` writes
    for p in paths.values():
        assert p.read_bytes() == (DEMO / p.name).read_bytes()


def test_campaign_is_marked_invented_and_uses_field_units():
    text = (DEMO / dc.CAMPAIGN_FILE).read_text()
    assert text.startswith("# INVENTED DEMO DATA")
    header = [ln for ln in text.splitlines() if not ln.startswith("#")][0].split(",")
    for h in ("D [mm]", "theta [deg]", "pgrad [Pa/m]", "mul [cP]", "p [bara]", "T [degC]", "sigma [mN/m]"):
        assert h in header
    assert "INVENTED" in (DEMO / "README.md").read_text()


def test_campaign_passes_validation_in_si(clean):
    assert 2000 <= len(clean) <= 4000
    assert set(clean["D"]) == {0.05, 0.1}  # 'D [mm]' converted
    assert set(clean["campaign"]) == set(dc.CAMPAIGNS.values()) and (clean["source"] == "lab").all()
    deg = np.round(np.degrees(clean["theta"].to_numpy()), 6)
    assert deg.min() == -15 and deg.max() == 30 and ((deg >= -5) & (deg <= 5)).mean() > 0.75
    # rhog computed from p, T, M_g, Z: ideal gas p M / (Z R T), R from CODATA 2018
    assert np.allclose(clean["rhog"], clean["p"] * clean["M_g"] / (clean["Z"] * 8.314462618 * clean["T"]), rtol=1e-12)


def test_partial_labels_and_uncertainty_columns(clean):
    h, p, f = clean["holdup"].notna(), clean["pgrad"].notna(), clean["pattern"].notna()
    assert (h | p | f).all()
    assert (h & ~p & ~f).sum() > 100 and (p & ~h & ~f).sum() > 100 and (f & ~h & ~p).sum() > 100
    assert (h & p & f).sum() > 500
    # the sd columns carry the ONE-sigma values, not the spec's expanded (k = 2) +-0.02 / +-5 %
    assert dc.HOLDUP_SD == pytest.approx(0.02 / 2) and dc.PGRAD_SD_REL == pytest.approx(0.05 / 2)
    assert (clean["holdup_sd"].notna() == h).all() and (clean.loc[h, "holdup_sd"] == dc.HOLDUP_SD).all()
    assert (clean["pgrad_sd"].notna() == p).all()
    P = clean.loc[p, "pgrad"]
    expect = np.sqrt((dc.PGRAD_SD_REL * P) ** 2 + dc.PGRAD_SD_ABS**2)
    assert np.allclose(clean.loc[p, "pgrad_sd"], expect, rtol=6e-3, atol=6e-3)  # written to 3 digits


def test_corruption_list_matches_rows_present(camp, clean, corruptions):
    assert list(corruptions.columns) == ["run_id", "kind", "description"]
    assert 8 <= len(corruptions) <= 15 and corruptions["run_id"].is_unique
    assert set(corruptions["run_id"]) <= set(clean["run_id"])
    assert corruptions["kind"].value_counts().to_dict() == dc.CORRUPTIONS
    readme = (DEMO / "README.md").read_text()
    for rid in corruptions["run_id"]:
        assert rid in readme


def _by_run(clean, camp):
    written = clean.set_index("run_id")
    truth = camp.truth.assign(run_id=camp.sheet["run_id"].to_numpy()).set_index("run_id")
    return written, truth


def test_each_corruption_is_what_it_says(camp, clean, corruptions):
    w, t = _by_run(clean, camp)
    for _, c in corruptions.iterrows():
        r, tr = w.loc[c.run_id], t.loc[c.run_id]
        if c.kind == "pgrad_mbar_as_pa":  # 100x too small, within the noise (one sigma 2.5 %)
            assert 0.8e-2 < r.pgrad / tr.pgrad < 1.25e-2
        elif c.kind == "theta_sign":
            assert r.theta == pytest.approx(-tr.theta) and abs(tr.theta) > 0
        elif c.kind == "vsg_ft_per_s":
            assert r.vsg == pytest.approx(tr.vsg / 0.3048, rel=1e-3)
        elif c.kind == "swap_pgrad":
            assert not (abs(r.pgrad - tr.pgrad) < 4 * (dc.PGRAD_SD_REL * abs(tr.pgrad) + dc.PGRAD_SD_ABS))  # > 4 sd
        elif c.kind in ("swap_holdup", "holdup_wrong_run"):
            assert abs(r.holdup - tr.holdup) > 0.15
        else:
            pytest.fail(f"unknown corruption kind {c.kind}")


def test_uncorrupted_rows_are_truth_plus_stated_noise(camp, clean, corruptions):
    w, t = _by_run(clean, camp)
    ok = ~w.index.isin(corruptions["run_id"])
    w, t = w[ok], t.loc[w.index[ok]]
    for col in ("vsl", "vsg", "D", "theta", "rhol", "mul", "rhog"):
        assert np.array_equal(w[col].to_numpy(), t[col].to_numpy()), col  # the truth is of the written inputs
    h = w["holdup"].notna() & (w["holdup"] > 0) & (w["holdup"] < 1)  # clipped rows left out
    dh = (w.loc[h, "holdup"] - t.loc[h, "holdup"]).to_numpy()
    # one sigma 0.01 (k = 2 reading of the spec's +-0.02); bounds +-10 % as for the old 0.02 reading,
    # the mean bound halved with the sd. Measured on the committed files: mean 0.0006, sd 0.0103 (1,423 rows)
    assert abs(dh.mean()) < 0.0015 and 0.009 < dh.std() < 0.011
    p = w["pgrad"].notna() & (t["pgrad"].abs() > 200)  # where the relative part dominates
    rel = ((w.loc[p, "pgrad"] - t.loc[p, "pgrad"]) / t.loc[p, "pgrad"]).to_numpy()
    # one sigma 2.5 % (k = 2 reading of +-5 %); bounds halved from the old 5 % reading.
    # Measured on the committed files: mean -0.0010, sd 0.0252 (790 rows)
    assert abs(rel.mean()) < 0.005 and 0.0225 < rel.std() < 0.028


def test_observed_patterns_mostly_true_with_some_confusions(camp, clean):
    w, t = _by_run(clean, camp)
    f = w["pattern"].notna()
    same = (w.loc[f, "pattern"] == t.loc[w.index[f], "pattern"]).to_numpy()
    assert 0.9 < same.mean() < 1.0 and (~same).sum() >= 10


def test_truth_is_the_reference_closure(camp):
    t = camp.truth
    with torch.no_grad():
        r = solve_points(to_conditions(t.iloc[::50]), ReferenceClosure()).to_columns()
    assert np.array_equal(r["holdup"], t["holdup"].to_numpy()[::50])


def test_baseline_clearly_off_in_stratified_flow(camp):
    rep = dc.baseline_vs_truth(camp)
    assert rep["stratified_rows"] > 500
    # well above the measurement noise: 3x the one-sigma 0.01 (the same 0.03 floor as 1.5 x the
    # old 0.02 reading); measured 0.0366 (--report)
    assert rep["holdup_mae_stratified"] > 3 * dc.HOLDUP_SD
    assert rep["holdup_median_rel_err_stratified"] > 0.15


def test_demo_design_covers_the_campaign_with_margin(clean):
    space = parse_design(load_config("synth", ["design=demo_loop"]).design)
    for var in ("vsl", "vsg", "D", "theta", "roughness", "mug", "p", "T"):
        lo, hi = space.laws[var].bounds()
        assert lo < clean[var].min() and clean[var].max() < hi, var
    for pair, camp_name in (("air_water", "thl_air_water"), ("air_light_oil", "thl_air_light_oil")):
        rows = clean[clean["campaign"] == camp_name]
        for var in ("rhol", "mul", "sigma"):
            lo, hi = space.fluids[pair][var].bounds()
            assert lo < rows[var].min() and rows[var].max() < hi, (pair, var)


@pytest.mark.parametrize("x, s", [(12345.6, "12350"), (0.000123456, "0.0001235"), (-3.0, "-3"), (math.nan, "")])
def test_sig_formatting(x, s):
    assert dc.sig(x) == s
