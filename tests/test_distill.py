"""`closure-nn distill` on INVENTED truths whose correction of the baseline is a known power law.

The truths below are invented for these tests (not fitted to any experiment): each multiplies
the baseline (Churchill 1977 walls, Andritsos & Hanratty 1987 interface, Wallis 1969 annular
interface) by a product of powers of dimensionless groups, so the exponents a correct
distillation must find are known exactly. Groups: Taitel & Dukler (1976) definitions
(closure_nn/physics/groups.py). Sparse regression: STLSQ, Brunton, Proctor & Kutz (2016).
"""
from __future__ import annotations

import json
import math

import pandas as pd
import pytest
import torch

from closure_nn.api import load_closure
from closure_nn.cli import main
from closure_nn.closures.base import Closure
from closure_nn.closures.baseline import BaselineClosure
from closure_nn.closures.bundle import save_bundle
from closure_nn.closures.formula import FormulaClosure, Piece, load_formula, save_formula
from closure_nn.closures.loading import load_saved_closure
from closure_nn.closures.neural import NeuralClosure
from closure_nn.data.closure_table import noisy_table
from closure_nn.data.design_space import parse_design
from closure_nn.data.synthetic import sample_design
from closure_nn.physics.conditions import make_conditions
from closure_nn.physics.geometry import ANNULAR
from closure_nn.physics.groups import closure_features
from closure_nn.physics.local_state import local_state
from closure_nn.physics.momentum import FrictionFactors
from closure_nn.physics.vocabulary import CODE
from closure_nn.pipeline.distill import DistillSettings, distill, fidelity, sample_states

#: exponents and leading constants of the INVENTED truth (ratio to the baseline)
F_I_STRAT = {"1": math.log(3.0), "ln_frac": 0.4, "ln_Fr_G": 0.3}
F_WL_STRAT = {"1": math.log(0.8), "ln_Re_L": 0.03}
F_I_ANN = {"1": math.log(0.7), "ln_frac": -0.2}


def _fr_g(s) -> torch.Tensor:
    return torch.sqrt(s.rho_core / (s.cond.rhol - s.rho_core)) * s.u_G / torch.sqrt(s.cond.g * s.cond.D)


class PowerLawTruth(Closure):
    """INVENTED truth: f_i = 3 (h/D)^0.4 Fr_G^0.3 f_i,base and f_WL = 0.8 Re_L^0.03 f_WL,base in
    stratified flow, f_i = 0.7 (delta/D)^-0.2 f_i,base in annular flow, f_WG the baseline's."""

    label = "power_law_truth [INVENTED]"

    def __init__(self) -> None:
        super().__init__()
        self.baseline = BaselineClosure("churchill", "andritsos_hanratty")
        self.bound = 4.0

    def forward(self, s):
        b = self.baseline(s)
        if s.kind == ANNULAR:
            return FrictionFactors(b.f_wl, b.f_wg, b.f_i * 0.7 * s.geom.frac ** -0.2)
        return FrictionFactors(b.f_wl * 0.8 * s.Re_L ** 0.03, b.f_wg, b.f_i * 3.0 * s.geom.frac ** 0.4 * _fr_g(s) ** 0.3)


def loop_design(d_mm=(50.0, 100.0)) -> dict:
    """An INVENTED flow loop: air-water and air-oil, -3..+3 deg, 1-6 bara."""
    return {"name": "distill_test_loop",
            "variables": {"vsl": {"law": "log_uniform", "low": 0.005, "high": 0.5},
                          "vsg": {"law": "log_uniform", "low": 0.5, "high": 15.0},
                          "D": {"law": "choice", "values": list(d_mm), "unit": "mm"},
                          "theta": {"law": "uniform", "low": -3.0, "high": 3.0, "unit": "deg"},
                          "roughness": {"law": "uniform", "low": 0.0, "high": 20.0, "unit": "um"},
                          "p": {"law": "uniform", "low": 1.0, "high": 6.0, "unit": "bara"},
                          "T": 293.15, "M_g": {"law": "fixed", "value": 28.96, "unit": "g/mol"}, "Z": 1.0,
                          "mug": 1.8e-5},
            "fluid": {"law": "choice", "values": ["air_water", "air_oil"]},
            "fluids": {"air_water": {"rhol": 998.0, "mul": 1.0e-3, "sigma": 0.072},
                       "air_oil": {"rhol": 830.0, "mul": 3.0e-3, "sigma": 0.029}}}


def _piece(formula: FormulaClosure, factor: str, region: str) -> dict:
    (p,) = [p for p in formula.pieces.get(factor, []) if p.region == region]
    return p.coef


def test_exact_power_law_is_recovered_term_by_term():
    """Distilling the truth itself: the chosen terms are exactly the truth's, exponents within
    0.005 and leading constants within 0.5 %; f_WG (no correction) gets no formula, and the
    stratified region is not split at the wave threshold (the truth has no switch there)."""
    rows = sample_design(parse_design(loop_design()), 300, 0)
    r = distill(PowerLawTruth(), rows)
    for factor, region, want in (("f_i", "stratified", F_I_STRAT), ("f_wl", "stratified", F_WL_STRAT),
                                 ("f_i", "annular", F_I_ANN)):
        got = _piece(r.formula, factor, region)
        assert set(got) == set(want), (factor, region, got)
        assert abs(math.exp(got["1"]) / math.exp(want["1"]) - 1) < 0.005, (factor, region, got)
        for k in want:
            if k != "1":
                assert got[k] == pytest.approx(want[k], abs=0.005), (factor, region, k, got)
    assert "f_wg" not in r.formula.pieces
    assert {p.region for v in r.formula.pieces.values() for p in v} == {"stratified", "annular"}


class SwitchTruth(PowerLawTruth):
    """INVENTED truth with a switch where the baseline has one (the Andritsos-Hanratty threshold,
    v_SG = 5 m/s sqrt(1.2 / rho_G)): f_i = 1.5 (h/D)^0.2 f_i,base below, 4 (h/D)^0.6 f_i,base above."""

    def forward(self, s):
        b = self.baseline(s)
        if s.kind == ANNULAR:
            return b
        above = s.cond.vsg > 5.0 * torch.sqrt(1.2 / s.cond.rhog)
        ratio = torch.where(above, 4.0 * s.geom.frac ** 0.6, 1.5 * s.geom.frac ** 0.2)
        return FrictionFactors(b.f_wl, b.f_wg, b.f_i * ratio)


def test_the_formula_splits_at_the_baselines_published_switch_when_the_truth_does():
    rows = sample_design(parse_design(loop_design()), 300, 2)
    r = distill(SwitchTruth(), rows)
    below, above = _piece(r.formula, "f_i", "stratified_wave_free"), _piece(r.formula, "f_i", "stratified_wavy")
    assert below["ln_frac"] == pytest.approx(0.2, abs=0.005) and math.exp(below["1"]) == pytest.approx(1.5, rel=0.005)
    assert above["ln_frac"] == pytest.approx(0.6, abs=0.005) and math.exp(above["1"]) == pytest.approx(4.0, rel=0.005)


def _network_of(truth: Closure, rows: pd.DataFrame, steps: int = 1500, seed: int = 0) -> NeuralClosure:
    """A NeuralClosure (the default correction model's form, smaller) fitted by least squares to the
    truth's ln(f / f_base) at states around the truth's equilibria: a learned closure whose right
    answer is known. Scaler and training domain set from those states."""
    torch.manual_seed(seed)
    threads = torch.get_num_threads()
    torch.set_num_threads(1)  # a small network: one thread is faster than two contended ones
    net = NeuralClosure(hidden=(32, 32), bound={"f_wl": 0.5, "f_wg": 0.5, "f_i": 4.0},
                        baseline=truth.baseline, inputs={"f_wl": ["log10_Re_L", "frac", "rel_rough"],
                                                         "f_wg": ["log10_Re_G", "frac", "rel_rough"], "f_i": None})
    feats, targets = [], []
    for f, y in _feature_targets(truth, rows).values():
        feats.append(f)
        targets.append(y)
    x, y = torch.cat(feats), torch.cat(targets)
    net.set_scaler(x.mean(0), x.std(0).clamp_min(1e-6))
    z = net.standardise(x)
    net.set_domain(z.min(0).values, z.max(0).values, z[::4], threshold=10.0)
    opt = torch.optim.Adam(net.parameters(), lr=3e-3)
    try:
        for _ in range(steps):
            opt.zero_grad()
            loss = ((net.learned_log_factor(z) - y) ** 2).mean()
            loss.backward()
            opt.step()
    finally:
        torch.set_num_threads(threads)
    return net.eval()


def _feature_targets(truth: Closure, rows: pd.DataFrame) -> dict:
    """Features and the truth's ln(f / f_base) at states around its equilibria, per configuration."""
    from closure_nn.data.schema import to_conditions
    from closure_nn.physics.point import solve_points

    cond = to_conditions(rows)
    with torch.no_grad():
        r = solve_points(cond, truth)
    out = {}
    lf = torch.tensor([0.6, 0.8, 1.0, 1.25, 1.6], dtype=torch.float64)
    for kind, level, ok, hi in (("stratified", r.roots[:, 0], torch.isfinite(r.roots[:, 0]), 0.98),
                                (ANNULAR, r.frac, (r.pattern == CODE['annular']) & torch.isfinite(r.frac), 0.45)):
        idx = torch.nonzero(ok).flatten()
        c = cond[idx].map(lambda t: t.unsqueeze(-1))
        with torch.no_grad():
            s = local_state(c, (level[idx].unsqueeze(-1) * lf).clamp(1e-3, hi), kind)
            y = torch.log(torch.stack(tuple(truth(s)), -1)) - torch.log(torch.stack(tuple(truth.baseline(s)), -1))
            out[kind] = (closure_features(s).reshape(-1, 11), y.reshape(-1, 3))
    return out


@pytest.fixture(scope="module")
def trained(tmp_path_factory):
    """A learned closure of the power-law truth, its bundle and a lab table of the truth (INVENTED)."""
    root = tmp_path_factory.mktemp("distill")
    truth = PowerLawTruth()
    design = parse_design(loop_design())
    net = _network_of(truth, sample_design(design, 400, 3))
    bundle = save_bundle(net, root / "bundle")
    lab = noisy_table(design, 120, 4, truth)
    table = root / "lab.csv"
    lab.drop(columns=["holdup_true", "pgrad_true"]).to_csv(table, index=False)
    return {"root": root, "net": net, "truth": truth, "bundle": bundle, "table": table, "design": design}


def test_a_learned_closure_of_a_power_law_distils_to_its_exponents(trained):
    """The network learned the truth to within its fit; its distilled formula for the interface
    (the factor that matters) recovers the truth's exponents within 0.05 and its leading constant
    within 5 %, and put back in the solver it gives the network's holdup within 0.005 and pgrad
    within +-20 % of the network's on at least 95 % of grid rows not used to fit."""
    rows = sample_design(trained["design"], 400, 5)
    r = distill(trained["net"], rows)
    got = _piece(r.formula, "f_i", "stratified")  # one piece: the truth has no switch at the threshold
    assert {"ln_frac", "ln_Fr_G"} <= set(got), got
    assert got["ln_frac"] == pytest.approx(0.4, abs=0.05) and got["ln_Fr_G"] == pytest.approx(0.3, abs=0.05), got
    assert math.exp(got["1"]) == pytest.approx(3.0, rel=0.05), got
    grid = sample_design(trained["design"], 150, 6)
    fid = fidelity({"network": trained["net"], "formula": r.formula}, grid.head(0), grid)
    row = fid[fid["closure"] == "formula"].iloc[0]
    assert row["holdup_mae"] < 0.005 and row["pgrad_within_20"] >= 0.95, fid


def test_formula_file_round_trip_and_every_loader_reads_it(tmp_path):
    fc = FormulaClosure({"f_i": [Piece("stratified", dict(F_I_STRAT))], "f_wl": [Piece("stratified", dict(F_WL_STRAT))]},
                        baseline={"wall": "churchill"}, bound={"f_i": 4.0, "f_wl": 0.5, "f_wg": 0.5})
    path = save_formula(fc, tmp_path / "distilled.json", caution="c")
    s = local_state(make_conditions(vsl=0.05, vsg=[2.0, 9.0], D=0.08, rhog=5.0), torch.tensor([0.2, 0.15]), "stratified")
    for loaded in (load_formula(path), load_saved_closure(path), load_closure(path)):
        assert torch.allclose(torch.stack(tuple(loaded(s))), torch.stack(tuple(fc(s))), rtol=1e-12)
    truth = PowerLawTruth()  # the same formula as the truth (its f_WL and stratified f_i)
    assert torch.allclose(fc(s).f_i, truth(s).f_i, rtol=1e-12) and torch.allclose(fc(s).f_wl, truth(s).f_wl, rtol=1e-12)
    meta = json.loads(path.read_text())
    assert meta["format"] == "closure-nn-formula" and "Fr_G^0.3" in meta["text"][0] and r"\mathrm{Fr}_G" in meta["latex"][0]
    (tmp_path / "other.json").write_text('{"format": "something else"}')
    with pytest.raises(ValueError, match="closure-nn-formula"):
        load_formula(tmp_path / "other.json")
    # every command's --closure takes the file (commands/options.closure_path)
    from closure_nn.cli import main

    assert main(["point", "--vsl", "0.05", "--vsg", "2", "--D", "0.08", "--closure", str(path), "--json"]) == 0


def test_formula_closure_is_differentiable_in_the_state():
    """Gradient of f_i with respect to the level h/D against central differences (torch.autograd.gradcheck)."""
    fc = FormulaClosure({"f_i": [Piece("stratified", dict(F_I_STRAT))]}, baseline={"wall": "churchill"})
    cond = make_conditions(vsl=0.05, vsg=[2.0, 9.0], D=0.08, rhog=5.0)
    h = torch.tensor([0.2, 0.35], dtype=torch.float64, requires_grad=True)
    assert torch.autograd.gradcheck(lambda x: fc(local_state(cond, x, "stratified")).f_i, (h,))


def test_distill_command_writes_formula_fidelity_and_a_closure_file(trained, capsys):
    out = trained["root"] / "runs"
    rc = main(["distill", str(trained["bundle"]), "--table", str(trained["table"]), "--out", str(out),
               "sample.n_fit=300", "sample.n_grid=100"])
    assert rc == 0, capsys.readouterr().err
    (run,) = [p for p in out.iterdir() if p.is_dir()]
    for f in ("distilled.json", "formula.md", "fidelity.csv", "distill.json", "CAUTION.txt"):
        assert (run / f).is_file(), f
    fid = pd.read_csv(run / "fidelity.csv")
    assert set(fid["closure"]) == {"network", "formula", "baseline"}
    assert fid["rows"].str.startswith("development").sum() == 3 and fid["rows"].str.startswith("grid").sum() == 2
    text = (run / "formula.md").read_text()
    assert "CAUTION" in text and "```latex" in text and "f_i / f_i,base" in text
    formula = load_saved_closure(run / "distilled.json")
    assert isinstance(formula, FormulaClosure) and "f_i" in formula.pieces


def test_the_formula_carries_the_domain_it_was_fitted_on(trained, tmp_path):
    """States inside the fitting states' box are in the formula's domain, a 300 mm pipe at 20 m/s
    gas is not; the measured-data box comes from the network's measured rows (none here: outside)."""
    rows = sample_design(trained["design"], 200, 7)
    r = distill(trained["net"], rows)
    fc = load_formula(save_formula(r.formula, tmp_path / "f.json"))
    inside = torch.as_tensor(sample_states(trained["net"], rows, DistillSettings())[0].features)
    s_out = local_state(make_conditions(vsl=0.05, vsg=40.0, D=0.3, rhog=3.0), torch.tensor([0.2]), "stratified")
    assert bool(fc.in_domain(inside).all()) and not bool(fc.in_domain(closure_features(s_out))[0])
    assert not bool(fc.in_measured_domain(inside).any())
