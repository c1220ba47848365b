"""Tests of the Python API (closure_nn.api, re-exported as closure_nn.load_closure / solve).

Sources: single-phase pressure gradient = Darcy-Weisbach, -dp/dx = f_D rho v^2 / (2 D), plus the
hydrostatic head rho g sin(theta) (e.g. White, Fluid Mechanics, 7th ed., eq. 6.10), with the Darcy
factor of fluids.friction.Churchill_1977 (Churchill 1977, Chem. Eng. 84(24):91-92; PyPI ``fluids``);
a two-phase row whose liquid rate tends to zero must tend to that single-phase gas value (common
practice). The DataFrame path must give exactly what solve_points and ``closure-nn batch`` give
for the same rows. All conditions are invented.
"""
from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
import torch
from fluids.friction import Churchill_1977

from closure_nn import load_closure, solve
from closure_nn.cli import main
from closure_nn.closures.baseline import BaselineClosure
from closure_nn.closures.bundle import save_bundle
from closure_nn.data.result_tables import bare_names
from closure_nn.closures.ensemble import ClosureEnsemble, save_ensemble
from closure_nn.closures.neural import NeuralClosure
from closure_nn.data.features import FeatureScaler
from closure_nn.data.schema import to_conditions
from closure_nn.physics.checks import InputError
from closure_nn.physics.conditions import G_STANDARD, make_conditions
from closure_nn.physics.groups import closure_features
from closure_nn.physics.local_state import local_state
from closure_nn.physics.point import FLAG_SINGLE_PHASE, solve_points

AIR_WATER = {"rhol": 998.0, "rhog": 1.2, "mul": 1.0e-3, "mug": 1.8e-5, "sigma": 0.072}


def table() -> pd.DataFrame:
    """Seven invented rows: stratified, wavy, inclined up and down, high gas rate, single-phase gas
    and liquid; one row's gas density from p, T, M_g (ideal gas); an extra column and an index
    that is not 0..n-1, both to be carried through."""
    df = pd.DataFrame({
        "vsl": [0.02, 0.05, 0.1, 0.01, 0.05, 0.0, 0.5],
        "vsg": [1.0, 8.0, 3.0, 2.0, 30.0, 10.0, 0.0],
        "D": [0.05, 0.05, 0.1, 0.08, 0.05, 0.1, 0.05],
        "theta": [0.0, 0.0, 0.05, -0.05, 0.0, 0.0, 0.1],
        "roughness": [0.0, 4.5e-5, 4.5e-5, 0.0, 0.0, 4.5e-5, 4.5e-5],
        **{k: [v] * 7 for k, v in AIR_WATER.items()},
        "run_id": [f"r{i}" for i in range(7)],
    }, index=range(10, 17))
    df.loc[12, "rhog"] = np.nan
    df["p"], df["T"], df["M_g"] = 2.0e5, 293.15, 0.0289647
    return df


def test_solve_agrees_with_solve_points_called_directly():
    df = table()
    out = solve(df)
    cond = to_conditions(df.reset_index(drop=True))
    assert float(cond.rhog[2]) == pytest.approx(2.0e5 * 0.0289647 / (8.314462618 * 293.15), rel=1e-6)  # ideal gas
    with torch.no_grad():
        want = solve_points(cond, BaselineClosure(wall="churchill")).to_columns()
    assert list(out.columns[:len(df.columns)]) == list(df.columns) and list(out.index) == list(range(7))
    assert list(out["run_id"]) == list(df["run_id"])
    for k, v in want.items():
        got = out[f"calc_{k}"].to_numpy()
        if v.dtype == object:
            assert list(got) == list(v), k
        else:
            np.testing.assert_array_equal(got.astype(v.dtype), v, err_msg=k)
    assert out.attrs["caution"].startswith("CAUTION") and "churchill" in out.attrs["closure"]
    # every row answered; the test table does reach several flow patterns
    assert out["calc_holdup"].between(0, 1).all() and out["calc_pattern"].nunique() >= 4


def test_solve_gives_the_columns_closure_nn_batch_writes(tmp_path):
    df = table().reset_index(drop=True)
    df.to_csv(tmp_path / "rows.csv", index=False)
    assert main(["batch", str(tmp_path / "rows.csv"), "--output", str(tmp_path / "res.csv"),
                 "closure.wall=churchill", f"--out={tmp_path / 'runs'}"]) == 0
    batch = pd.read_csv(tmp_path / "res.csv", keep_default_na=False, na_values=[""])
    batch.columns = bare_names(batch.columns)  # the file's headers carry units: 'calc_pgrad [Pa/m]'
    out = solve(df)
    assert list(out.columns) == list(batch.columns)
    for col in ("calc_holdup", "calc_pgrad", "calc_pgrad_friction", "calc_n_roots", "calc_flags"):
        np.testing.assert_allclose(out[col].to_numpy(float), batch[col].to_numpy(float), rtol=1e-14, err_msg=col)
    assert list(out["calc_pattern"]) == list(batch["calc_pattern"])


def _row(**kw) -> pd.DataFrame:
    base = {"vsl": 0.0, "vsg": 0.0, "D": 0.1, "theta": 0.0, "roughness": 4.5e-5, **AIR_WATER}
    return pd.DataFrame([{**base, **kw}])


def _darcy_weisbach(rho: float, mu: float, v: float, D: float, eps: float) -> float:
    """-dp/dx [Pa/m] of a single phase, Darcy factor from fluids' Churchill (1977)."""
    return Churchill_1977(rho * v * D / mu, eps / D) * rho * v**2 / (2 * D)


@pytest.mark.parametrize("vsg", [5.0, 15.0])
def test_all_gas_row_is_darcy_weisbach_with_churchill(vsg):
    """Gas alone in a 100 mm commercial-steel pipe (eps = 45 um, a handbook roughness, e.g. Moody 1944)."""
    want = _darcy_weisbach(1.2, 1.8e-5, vsg, 0.1, 4.5e-5)
    out = solve(_row(vsg=vsg)).iloc[0]
    assert out["calc_pattern"] == "single_phase_gas" and out["calc_flags"] == FLAG_SINGLE_PHASE
    assert out["calc_holdup"] == 0.0
    assert out["calc_pgrad"] == pytest.approx(want, rel=1e-9)
    # the default baseline uses the roughness: smooth-pipe Taitel-Dukler constants are ~8 % lower here
    td = solve(_row(vsg=vsg), closure=BaselineClosure()).iloc[0]["calc_pgrad"]
    assert abs(td / want - 1) > 0.03


def test_nearly_all_gas_row_tends_to_the_single_phase_gas_gradient():
    """Horizontal stratified rows with v_SL -> 0 (smooth interface: v_SG = 5 m/s is at the
    Andritsos-Hanratty threshold): -dp/dx -> Darcy-Weisbach of the gas alone, the gap shrinking
    with the liquid rate."""
    want = _darcy_weisbach(1.2, 1.8e-5, 5.0, 0.1, 4.5e-5)
    gaps = []
    for vsl in (1e-4, 1e-5, 1e-6):
        out = solve(_row(vsl=vsl, vsg=5.0)).iloc[0]
        assert out["calc_pattern"].startswith("stratified") and out["calc_separated"]
        assert 0 < out["calc_holdup"] < 0.01
        gaps.append(out["calc_pgrad"] / want - 1)
    assert gaps[0] > gaps[1] > gaps[2] > 0 and gaps[2] < 1e-3


def test_liquid_only_inclined_row_is_darcy_weisbach_plus_hydrostatic_head():
    theta = 0.1
    out = solve(_row(vsl=1.5, theta=theta, D=0.05)).iloc[0]
    fric = _darcy_weisbach(998.0, 1.0e-3, 1.5, 0.05, 4.5e-5)
    grav = 998.0 * G_STANDARD * np.sin(theta)
    assert out["calc_pattern"] == "single_phase_liquid" and out["calc_holdup"] == 1.0
    # the solver takes the wall factor at h/D = 1 - 1e-9 (closure_nn.physics.point.single_phase_pgrad),
    # where the open-channel D_L = 4 A_L / S_L exceeds D by 2e-5 relative: f differs by ~5e-6
    assert out["calc_pgrad_friction"] == pytest.approx(fric, rel=5e-5)
    assert out["calc_pgrad_gravity"] == pytest.approx(grav, rel=1e-12)
    assert out["calc_pgrad"] == pytest.approx(fric + grav, rel=5e-5)


def _neural(seed: int) -> NeuralClosure:
    """An untrained closure with small random weights (corrections of a few per cent)."""
    net = NeuralClosure(hidden=(6,), baseline={"wall": "churchill"})
    c = make_conditions(vsl=[0.02, 0.1], vsg=[2.0, 10.0], D=0.05, roughness=4.5e-5).unsqueeze(-1)
    s = local_state(c, torch.linspace(0.05, 0.6, 6, dtype=torch.float64).expand(2, -1), "stratified")
    sc = FeatureScaler.fit(closure_features(s).reshape(-1, 11))
    net.set_scaler(sc.mean, sc.std)
    g = torch.Generator().manual_seed(seed)
    with torch.no_grad():
        for p in net.parameters():
            p.copy_(0.3 * torch.randn(p.shape, generator=g, dtype=p.dtype))
    return net.eval()


def test_load_closure_reads_baseline_bundle_and_ensemble(tmp_path):
    assert load_closure("baseline").wall_name == "churchill"
    net = _neural(0)
    b = save_bundle(net, tmp_path / "bundle")
    loaded = load_closure(b)
    assert isinstance(loaded, NeuralClosure)
    e = save_ensemble([net, _neural(1)], tmp_path / "ens")
    ens = load_closure(str(e))
    assert isinstance(ens, ClosureEnsemble) and len(ens) == 2
    df = table().iloc[:5]
    by_path, by_object = solve(df, closure=b), solve(df, closure=net)
    pd.testing.assert_frame_equal(by_path, by_object)
    # the learned closure does change the answer (so the closure argument is used)
    assert not np.allclose(by_path["calc_pgrad"], solve(df)["calc_pgrad"], rtol=1e-3)
    assert solve(df, closure=e)["calc_holdup"].between(0, 1).all()
    with pytest.raises(InputError, match="bundle.json is missing"):
        load_closure(tmp_path)


def test_solve_rejects_bad_tables_with_clear_errors():
    with pytest.raises(InputError, match="roughness"):
        solve(table().drop(columns="roughness"))
    with pytest.raises(InputError, match="DataFrame"):
        solve({"vsl": [0.1]})
    bad = table()
    bad.loc[11, "D"] = -0.05
    with pytest.raises(InputError, match=r"row with index 11: D = -0.05 m is out of range"):
        solve(bad)
    with pytest.raises(InputError, match="no rows"):
        solve(table().iloc[:0])


def test_importing_the_package_imports_neither_pandas_nor_lightning():
    code = ("import sys, closure_nn; bad = [m for m in sys.modules if m.split('.')[0] in "
            "('pandas', 'lightning', 'pytorch_lightning', 'hydra')]; assert not bad, bad")
    subprocess.run([sys.executable, "-c", code], check=True)
