"""Design spaces and synthetic sets: Latin-hypercube stratification, marginal laws, determinism,
reports, the `synth` command.

Sources: Latin hypercube sampling, McKay, Beckman & Conover (1979), Technometrics 21(2):239-245
(each of the n equal-probability intervals of every dimension holds exactly one point);
scipy.stats.qmc.LatinHypercube and scipy.stats.loguniform / uniform as reference distributions;
ideal-gas density p M / (Z R T) with R = 8.314462618 J/(mol K) (CODATA 2018).
"""
import json
import math
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from omegaconf import OmegaConf
from scipy import stats

from closure_nn.cli import main
from closure_nn.closures.baseline import BaselineClosure
from closure_nn.config import load_config
from closure_nn.data.design_space import parse_design, parse_law
from closure_nn.data.synthetic import lhs_unit, solve_table, synthesize
from closure_nn.data.table_io import read_table
from closure_nn.data.validate import validate_table
from closure_nn.physics.checks import InputError
from closure_nn.physics.vocabulary import PATTERNS

R = 8.314462618  # J/(mol K), CODATA 2018


def small_design(**extra):
    variables = {
        "vsl": {"law": "log_uniform", "low": 0.005, "high": 1.0},
        "vsg": {"law": "log_uniform", "low": 0.2, "high": 30.0},
        "D": {"law": "choice", "values": [50, 100], "weights": [3, 1], "unit": "mm"},
        "theta": {"law": "mixture", "unit": "deg", "components": [
            {"weight": 0.7, "law": "uniform", "low": -5, "high": 5},
            {"weight": 0.3, "law": "uniform", "low": 20, "high": 40}]},
        "roughness": 0.0, "mug": 1.8e-5,
        "p": {"law": "uniform", "low": 1.0, "high": 3.0, "unit": "bara"},
        "T": {"law": "uniform", "low": 10, "high": 30, "unit": "degC"},
        "M_g": {"value": 28.96, "unit": "g/mol"},
    }
    variables.update(extra)
    return {"name": "small", "variables": variables,
            "fluid": {"law": "choice", "values": ["water", "oil"]},
            "fluids": {"water": {"rhol": 998.0, "mul": 1e-3, "sigma": 0.072},
                       "oil": {"rhol": {"law": "uniform", "low": 800, "high": 850},
                               "mul": {"law": "log_uniform", "low": 2, "high": 8, "unit": "cP"}, "sigma": 0.028}}}


@pytest.mark.parametrize("n, d, seed", [(1, 3, 0), (37, 4, 1), (500, 12, 7)])
def test_lhs_each_interval_hit_once_per_dimension(n, d, seed):
    # McKay, Beckman & Conover (1979): one point in each of the n intervals of every dimension
    u = lhs_unit(n, d, seed)
    assert u.shape == (n, d) and (u >= 0).all() and (u < 1).all()
    for j in range(d):
        assert sorted(np.floor(u[:, j] * n).astype(int)) == list(range(n))


def test_lhs_deterministic_by_seed():
    assert np.array_equal(lhs_unit(100, 5, 3), lhs_unit(100, 5, 3))
    assert not np.allclose(lhs_unit(100, 5, 3), lhs_unit(100, 5, 4))


def test_marginals_stratified_through_the_laws():
    n = 400
    space = parse_design(small_design())
    df = space.sample_unit(lhs_unit(n, len(space.dimensions), seed=11))
    for name in ("vsl", "vsg", "p", "T"):
        law = space.laws[name]
        k = np.floor(law.cdf(df[name].to_numpy()) * n).astype(int)
        assert sorted(k) == list(range(n)), name  # stratification survives the map
    # with one point per interval the empirical CDF is within 1/n of the law's CDF
    ks = stats.kstest(df["vsl"], stats.loguniform(0.005, 1.0).cdf).statistic
    assert ks <= 1.0 / n + 1e-12
    ks = stats.kstest(df["T"], stats.uniform(283.15, 20.0).cdf).statistic
    assert ks <= 1.0 / n + 1e-12


def test_choice_and_mixture_shares_follow_the_weights():
    n = 1000
    space = parse_design(small_design())
    df = space.sample_unit(lhs_unit(n, len(space.dimensions), seed=2))
    # stratified u: the count in a weight interval is within one of n * weight
    assert abs((df["D"] == 0.05).sum() - 0.75 * n) <= 1
    assert set(df["D"]) == {0.05, 0.1}
    theta = np.degrees(df["theta"].to_numpy())
    near = (theta >= -5) & (theta <= 5)
    steep = (theta >= 20) & (theta <= 40)
    assert (near | steep).all()
    assert abs(near.sum() - 0.7 * n) <= 1
    assert abs((df["fluid"] == "water").sum() - 0.5 * n) <= 1


def test_fluid_pairs_set_their_properties():
    space = parse_design(small_design())
    df = space.sample_unit(lhs_unit(300, len(space.dimensions), seed=5))
    w, o = df[df["fluid"] == "water"], df[df["fluid"] == "oil"]
    assert (w["rhol"] == 998.0).all() and (w["mul"] == 1e-3).all()
    assert o["rhol"].between(800, 850).all() and o["mul"].between(2e-3, 8e-3).all()
    assert (o["sigma"] == 0.028).all()


def test_gas_density_from_pressure_and_temperature():
    space = parse_design(small_design())
    df = space.sample_unit(lhs_unit(50, len(space.dimensions), seed=1))
    expect = df["p"] * 0.02896 / (1.0 * R * df["T"])
    assert np.allclose(df["rhog"], expect, rtol=1e-12)
    assert df["p"].between(1e5, 3e5).all() and df["T"].between(283.15, 303.15).all()


def test_units_of_the_design_are_converted_to_si():
    assert parse_law({"law": "uniform", "low": -5, "high": 5, "unit": "deg"}, "theta",
                     dimension="angle").bounds() == pytest.approx((-math.radians(5), math.radians(5)))
    assert parse_law({"value": 2.0, "unit": "cP"}, "mul", dimension="dynamic viscosity").bounds() == (2e-3, 2e-3)
    assert parse_law([1, 2], "D", unit="in", dimension="length").values == pytest.approx((0.0254, 0.0508))


@pytest.mark.parametrize("change, words", [
    ({"vsl": {"law": "log_uniform", "low": "???", "high": 1.0}}, ["design.variables.vsl.low", "???"]),
    ({"vsl": {"law": "log_uniform", "low": 0.0, "high": 1.0}}, ["log_uniform needs low > 0"]),
    ({"vsg": {"law": "uniform", "low": 3.0, "high": 1.0}}, ["must be below high"]),
    ({"vsg": {"law": "gaussian", "low": 3.0, "high": 1.0}}, ["law 'gaussian' is not known"]),
    ({"vsl": {"law": "uniform", "low": 0.1, "high": 1.0, "unit": "furlong"}}, ["unknown unit [furlong]"]),
    ({"holdup": 0.5}, ["unknown variable", "holdup"]),
])
def test_design_errors_name_the_key(change, words):
    with pytest.raises(InputError) as exc:
        parse_design(small_design(**change))
    for w in words:
        assert w in str(exc.value)


def test_missing_input_is_reported():
    d = small_design()
    del d["variables"]["vsl"]
    with pytest.raises(InputError, match="no law for vsl"):
        parse_design(d)
    d = small_design()
    del d["variables"]["p"]
    with pytest.raises(InputError, match=r"rhog \(or p, T and M_g\)"):
        parse_design(d)


def test_template_design_asks_for_every_question_mark():
    cfg = load_config("synth", ["design=custom"])
    with pytest.raises(InputError) as exc:
        parse_design(cfg.design)
    assert "design.variables.vsl.low" in str(exc.value) and "design.name" in str(exc.value)


@pytest.mark.parametrize("name", ["demo_loop", "wide"])
def test_shipped_designs_parse_and_give_valid_tables(name):
    cfg = load_config("synth", [f"design={name}"])
    s = synthesize(parse_design(cfg.design), 300, 0, BaselineClosure(), dict(cfg.solver), progress=False)
    res = validate_table(s.table)
    assert len(res.rejected) == 0 and len(res.clean) == 300
    assert res.warnings == []  # only schema columns, nothing to fix


def test_synthesize_deterministic_and_report_consistent():
    space = parse_design(small_design())
    a = synthesize(space, 400, 9, BaselineClosure(), progress=False)
    b = synthesize(space, 400, 9, BaselineClosure(), progress=False)
    pd.testing.assert_frame_equal(a.table, b.table)
    c = synthesize(space, 400, 10, BaselineClosure(), progress=False)
    assert not np.allclose(a.table["vsl"], c.table["vsl"])
    r = a.report
    assert sum(r["patterns"].values()) == r["n"] == 400
    assert set(r["patterns"]) == set(PATTERNS)
    assert r["patterns"] == {p: int((a.table["pattern"] == p).sum()) for p in PATTERNS}
    assert r["holdup_nan"] == int(a.table["holdup"].isna().sum())
    assert r["several_roots"] <= int((a.table["n_roots"] > 1).sum())
    assert (a.table["source"] == "synthetic").all() and (a.table["campaign"] == "small").all()
    assert a.table["run_id"].is_unique
    assert r["fluids"]["water"] + r["fluids"]["oil"] == 400


def test_chunking_does_not_change_the_answers():
    space = parse_design(small_design())
    df = space.sample_unit(lhs_unit(250, len(space.dimensions), seed=4))
    one, f1 = solve_table(df, BaselineClosure(), chunk=1000, progress=False)
    many, f2 = solve_table(df, BaselineClosure(), chunk=37, progress=False)
    pd.testing.assert_frame_equal(one, many, rtol=1e-12, atol=1e-12)
    assert np.array_equal(f1, f2)


def test_synth_command_writes_run_folder(tmp_path, capsys):
    assert main(["synth", "n=120", "seed=2", "table_format=csv", "--quiet", "--out", str(tmp_path)]) == 0
    (run,) = list(tmp_path.iterdir())
    names = {p.name for p in run.iterdir()}
    assert {"synthetic.csv", "synth_report.json", "config.yaml", "CAUTION.txt"} <= names
    rep = json.loads((run / "synth_report.json").read_text())
    assert sum(rep["patterns"].values()) == 120 and rep["design"] == "demo_loop"
    res = validate_table(read_table(run / "synthetic.csv"))
    assert len(res.clean) == 120 and len(res.rejected) == 0
    cfg = OmegaConf.load(run / "config.yaml")
    assert cfg.n == 120 and cfg.seed == 2 and cfg.design.name == "demo_loop" and cfg.closure.source == "baseline"
    out = capsys.readouterr().out
    assert "points per flow pattern" in out and "CAUTION" in out


def test_synth_command_user_errors_are_one_line(tmp_path, capsys):
    assert main(["synth", "n=0", "--out", str(tmp_path)]) == 2
    assert main(["synth", "design=custom", "--out", str(tmp_path)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 2 and "n = 0" in err[0] and "design.variables" in err[1]


def test_synth_command_does_not_import_lightning(tmp_path):
    code = ("import sys; from closure_nn.cli import main; "
            f"rc = main(['synth', 'n=20', '--quiet', '--out', {str(tmp_path)!r}]); "
            "assert rc == 0; assert not any(m.split('.')[0] in ('lightning', 'pytorch_lightning') for m in sys.modules)")
    subprocess.run([sys.executable, "-c", code], check=True, capture_output=True)
    (run,) = list(tmp_path.iterdir())  # default table_format: Parquet, read back exactly
    table = read_table(run / "synthetic.parquet")
    assert len(table) == 20 and (table["campaign"] == "demo_loop").all() and table["holdup"].notna().all()
