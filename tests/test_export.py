"""Tests of the closure exports: ONNX graph (closure_nn.closures.export_onnx), plain JSON with its
numpy reference evaluator (docs/closure_json_reference.py) and the ``closure-nn export`` command.

Sources: the exported graph is run by ONNX Runtime (Microsoft, PyPI ``onnxruntime``), an
implementation of the ONNX operators independent of torch; the plain JSON is evaluated by the
numpy reference, independent of torch. Both must reproduce the torch closure at the same states
in float64 to 1e-9 in every Fanning factor (common practice for float64 re-implementations of
a small network: round-off is ~1e-16 relative, a wrong formula or input order is > 1e-3).
Closures are built without training (random weights, a scaler and domains fitted on a few
invented states), as in tests/test_bundle.py.
"""
from __future__ import annotations

import importlib.util
import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import torch

from closure_nn.cli import main
from closure_nn.closures.bundle import export_plain, save_bundle
from closure_nn.closures.ensemble import ClosureEnsemble, save_ensemble
from closure_nn.closures.export_onnx import INPUT_NAMES, OUTPUT_NAME, export_onnx
from closure_nn.closures.neural import NeuralClosure
from closure_nn.data.features import FeatureScaler, TrainingDomain
from closure_nn.physics.checks import InputError
from closure_nn.physics.conditions import make_conditions
from closure_nn.physics.groups import FEATURE_NAMES, closure_features
from closure_nn.physics.local_state import local_state

ort = pytest.importorskip("onnxruntime")
ROOT = Path(__file__).resolve().parents[1]
WALL_ONLY = {"f_wl": ["log10_Re_L", "frac", "rel_rough"], "f_wg": ["log10_Re_G", "frac", "rel_rough"], "f_i": None}


def _reference():
    spec = importlib.util.spec_from_file_location("closure_json_reference", ROOT / "docs" / "closure_json_reference.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def states(kind: str):
    """Local states (8, n): invented conditions (air-water and a denser gas, 25-150 mm, inclined)
    at trial levels h/D 0.02-0.95 (8 x 25 = 200 stratified) or delta/D 0.001-0.3 (8 x 15 = 120 annular)."""
    c = make_conditions(vsl=[0.005, 0.02, 0.05, 0.1, 0.2, 0.5, 0.03, 0.08],
                        vsg=[0.5, 2.0, 5.0, 8.0, 15.0, 25.0, 3.0, 12.0],
                        D=[0.025, 0.05, 0.05, 0.1, 0.15, 0.1, 0.08, 0.05],
                        theta=[0.0, 0.0, 0.02, -0.05, 0.1, 0.0, -0.2, 0.5], roughness=[0.0, 5e-5] * 4,
                        rhog=[1.2, 1.2, 5.0, 20.0, 1.2, 50.0, 1.2, 10.0]).unsqueeze(-1)
    f64 = dict(dtype=torch.float64)
    frac = torch.linspace(0.02, 0.95, 25, **f64) if kind == "stratified" else torch.logspace(-3, math.log10(0.3), 15, **f64)
    return local_state(c, frac.expand(8, -1), kind)


def closure(seed: int = 0, scale: float = 0.4, **kw) -> NeuralClosure:
    """A closure with non-trivial weights, scaler and both domains (what training would leave)."""
    net = NeuralClosure(hidden=(8, 6), baseline={"wall": "churchill"}, **kw)
    x = torch.cat([closure_features(states(k)).reshape(-1, 11) for k in ("stratified", "annular")])
    sc = FeatureScaler.fit(x)
    net.set_scaler(sc.mean, sc.std)
    TrainingDomain.fit(x, sc).apply_to(net)
    TrainingDomain.fit(x[::3], sc).apply_to(net, measured=True)
    g = torch.Generator().manual_seed(seed)
    with torch.no_grad():
        for p in net.parameters():
            p.copy_(scale * torch.randn(p.shape, generator=g, dtype=p.dtype))
    return net.eval()


def inputs_and_truth(net: NeuralClosure):
    """(features (N, 11), ln f_base (N, 3), torch factors (N, 3), baseline factors (N, 3)), N = 320."""
    xs, lfs, fs, bs = [], [], [], []
    with torch.no_grad():
        for kind in ("stratified", "annular"):
            s = states(kind)
            base = torch.stack(tuple(net.baseline(s)), dim=-1).reshape(-1, 3)
            xs.append(closure_features(s).reshape(-1, 11))
            lfs.append(torch.log(base))
            fs.append(torch.stack(tuple(net(s)), dim=-1).reshape(-1, 3))
            bs.append(base)
    return tuple(torch.cat(t).numpy() for t in (xs, lfs, fs, bs))


CONFIGS = [
    {},
    {"inputs": WALL_ONLY, "base_input": True},
    {"mode": "direct", "activation": "softplus"},
    {"learn": ["f_i"], "base_input": True, "activation": "tanh"},
]


@pytest.mark.parametrize("kw", CONFIGS)
def test_onnx_graph_in_onnxruntime_matches_the_torch_closure(tmp_path, kw):
    net = closure(seed=1, **kw)
    path = export_onnx(net, tmp_path / "c.onnx")
    x, lfb, want, base = inputs_and_truth(net)
    assert x.shape == (320, 11)
    sess = ort.InferenceSession(str(path), providers=["CPUExecutionProvider"])
    assert [i.name for i in sess.get_inputs()] == list(INPUT_NAMES)
    assert all(i.type == "tensor(double)" for i in sess.get_inputs())
    (got,) = sess.run([OUTPUT_NAME], {"features": x, "log_f_base": lfb})
    assert got.dtype == np.float64 and got.shape == (320, 3)
    assert np.abs(got - want).max() <= 1e-9
    # the network does correct the baseline here, so a graph that ignored it would fail
    assert np.abs(np.log(want / base)).max() > 0.05
    # a batch of another size runs through the same graph (dynamic batch dimension)
    (one,) = sess.run([OUTPUT_NAME], {"features": x[:1], "log_f_base": lfb[:1]})
    assert np.abs(one - want[:1]).max() <= 1e-9


def test_onnx_metadata_names_the_inputs_and_carries_the_caution(tmp_path):
    import onnx

    net = closure()
    meta = {p.key: p.value for p in onnx.load(str(export_onnx(net, tmp_path / "c.onnx"))).metadata_props}
    assert json.loads(meta["feature_names"]) == list(FEATURE_NAMES)
    assert json.loads(meta["output_names"]) == ["f_wl", "f_wg", "f_i"]
    assert json.loads(meta["baseline"])["wall"] == "churchill"
    assert meta["caution"].startswith("CAUTION")


def test_onnx_export_refuses_an_ensemble_and_gelu(tmp_path):
    with pytest.raises(InputError, match="member by member"):
        export_onnx(ClosureEnsemble([closure(0), closure(1)]), tmp_path / "e.onnx")
    with pytest.raises(InputError, match="GELU.*--format json"):
        export_onnx(closure(activation="gelu"), tmp_path / "g.onnx")


@pytest.mark.parametrize("kw", CONFIGS + [{"activation": "gelu", "base_input": True}])
def test_plain_json_with_the_reference_evaluator_matches_the_torch_closure(tmp_path, kw):
    ref = _reference()
    net = closure(seed=2, **kw)
    spec = ref.load(str(export_plain(net, tmp_path / "c.json")))
    x, lfb, want, base = inputs_and_truth(net)
    got = ref.friction_factors(spec, x, lfb)
    assert np.abs(got - want).max() <= 1e-9
    assert np.abs(np.log(want / base)).max() > 0.05
    # the measured-data domain: the same points inside as the closure's own check (some in, some out)
    inside = ref.in_measured_domain(spec, x)
    assert np.array_equal(inside, net.in_measured_domain(torch.from_numpy(x)).numpy())
    assert 0 < inside.sum() < len(inside)


def test_reference_evaluator_runs_as_a_script(tmp_path):
    net = closure(seed=3, inputs=WALL_ONLY)
    spec_path = export_plain(net, tmp_path / "c.json")
    x, lfb, want, _ = inputs_and_truth(net)
    np.savetxt(tmp_path / "x.csv", x[:40], delimiter=",", fmt="%.17g")
    np.savetxt(tmp_path / "l.csv", lfb[:40], delimiter=",", fmt="%.17g")
    out = subprocess.run([sys.executable, str(ROOT / "docs" / "closure_json_reference.py"), str(spec_path),
                          str(tmp_path / "x.csv"), str(tmp_path / "l.csv")], check=True, capture_output=True, text=True)
    got = np.loadtxt(out.stdout.splitlines(), delimiter=",", ndmin=2)
    assert got.shape == (40, 3) and np.abs(got - want[:40]).max() <= 1e-9


def test_reference_evaluator_refuses_another_format(tmp_path):
    (tmp_path / "x.json").write_text(json.dumps({"format": "something-else", "format_version": 1}))
    with pytest.raises(ValueError, match="not a closure-nn plain-JSON closure"):
        _reference().load(str(tmp_path / "x.json"))


def test_export_command_writes_onnx_and_json_files(tmp_path, capsys):
    net = closure(seed=4)
    b = save_bundle(net, tmp_path / "bundle")
    assert main(["export", str(b), "--format", "onnx", "--out", str(tmp_path / "runs")]) == 0
    (run,) = (tmp_path / "runs").iterdir()
    assert sorted(p.name for p in run.iterdir()) == ["CAUTION.txt", "closure.onnx", "export.json"]
    summary = json.loads((run / "export.json").read_text())
    assert summary["files"] == ["closure.onnx"] and summary["feature_names"] == list(FEATURE_NAMES)
    assert summary["onnxruntime_check"]["max_abs_diff_vs_torch"]["closure.onnx"] <= 1e-9
    x, lfb, want, _ = inputs_and_truth(net)
    (got,) = ort.InferenceSession(str(run / "closure.onnx"), providers=["CPUExecutionProvider"]).run(
        None, {"features": x, "log_f_base": lfb})
    assert np.abs(got - want).max() <= 1e-9

    members = [closure(seed=5, inputs=WALL_ONLY), closure(seed=6, inputs=WALL_ONLY)]
    e = save_ensemble(members, tmp_path / "ens")
    assert main(["export", str(e), "--format", "json", "--out", str(tmp_path / "runs2")]) == 0
    (run2,) = (tmp_path / "runs2").iterdir()
    summary = json.loads((run2 / "export.json").read_text())
    assert summary["files"] == ["member_0.json", "member_1.json"] and summary["ensemble"]["members"] == 2
    assert summary["baseline"]["member_1.json"]["wall"] == "churchill"
    ref = _reference()
    for name, m in zip(summary["files"], members):
        assert np.abs(ref.friction_factors(ref.load(str(run2 / name)), x, lfb) - inputs_and_truth(m)[2]).max() <= 1e-9
    assert "CAUTION" in capsys.readouterr().out


@pytest.mark.parametrize("args, message", [
    (["--format", "json"], "not a closure bundle (bundle.json is missing)"),
    (["--format", "xml"], "--format 'xml': expected one of onnx, json"),
])
def test_export_command_rejects_bad_input_with_one_line(tmp_path, capsys, args, message):
    (tmp_path / "notes").mkdir()
    (tmp_path / "notes" / "readme.txt").write_text("not a bundle")
    assert main(["export", str(tmp_path / "notes"), *args, "--out", str(tmp_path / "runs")]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and message in err and err.startswith("closure-nn export: error:")
    assert not (tmp_path / "runs").exists()


def test_export_command_refuses_a_gelu_bundle_for_onnx_before_writing(tmp_path, capsys):
    b = save_bundle(closure(activation="gelu"), tmp_path / "bundle")
    assert main(["export", str(b), "--format", "onnx", "--out", str(tmp_path / "runs")]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "GELU" in err and "--format json" in err
    assert not (tmp_path / "runs").exists()
