"""Tests of the closure bundle and ensembles (closure_nn.closures.bundle, .ensemble).

Sources: byte-exact round trip and checksum rejection are common practice for model artefacts;
the plain-JSON export is re-evaluated here with numpy from its documented formula, an
implementation independent of torch.
"""
from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest
import torch

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.closures.bundle import BundleError, export_plain, load_bundle, save_bundle
from closure_nn.closures.ensemble import ClosureEnsemble, load_ensemble, save_ensemble
from closure_nn.closures.loading import load_saved_closure
from closure_nn.closures.neural import NeuralClosure
from closure_nn.closures.registry import build_closure
from closure_nn.data.features import FeatureScaler, TrainingDomain
from closure_nn.physics.conditions import make_conditions
from closure_nn.physics.groups import closure_features
from closure_nn.physics.holdup_roots import frac_grid
from closure_nn.physics.local_state import local_state

WALL_ONLY = {"f_wl": ["log10_Re_L", "frac", "rel_rough"], "f_wg": ["log10_Re_G", "frac", "rel_rough"], "f_i": None}


def states(kind: str = "stratified"):
    c = make_conditions(vsl=[0.01, 0.05, 0.2], vsg=[1.0, 5.0, 20.0], D=[0.05, 0.08, 0.1], roughness=5e-5).unsqueeze(-1)
    return local_state(c, frac_grid(kind, 12).expand(3, -1), kind)


def trained_like(seed: int = 0, **kw) -> NeuralClosure:
    """A closure with non-trivial weights, scaler and domain (what training would leave)."""
    net = NeuralClosure(hidden=(6, 5), baseline={"wall": "churchill"}, **kw)
    x = closure_features(states()).reshape(-1, 11)
    sc = FeatureScaler.fit(x)
    net.set_scaler(sc.mean, sc.std)
    TrainingDomain.fit(x, sc).apply_to(net)
    g = torch.Generator().manual_seed(seed)
    with torch.no_grad():
        for p in net.parameters():
            p.copy_(0.5 * torch.randn(p.shape, generator=g, dtype=p.dtype))
    return net


@pytest.mark.parametrize("kw", [{}, {"inputs": WALL_ONLY}, {"mode": "direct"}, {"learn": ["f_i"]},
                                {"inputs": WALL_ONLY, "base_input": True}])
def test_round_trip_is_exact(tmp_path, kw):
    net = trained_like(**kw)
    save_bundle(net, tmp_path / "b", metrics={"val.holdup_rmse": 0.01}, provenance={"stage": "pretrain"})
    back = load_bundle(tmp_path / "b")
    for kind in ("stratified", "annular"):
        s = states(kind)
        with torch.no_grad():
            for a, b in zip(net(s), back(s)):
                assert torch.equal(a, b)
    for k, v in net.state_dict().items():
        assert torch.equal(v, back.state_dict()[k])
    assert back.bundle_metadata["metrics"] == {"val.holdup_rmse": 0.01}
    assert back.hparams == net.hparams


def test_bundle_loads_without_lightning(tmp_path):
    save_bundle(trained_like(), tmp_path / "b")
    code = ("import sys; from closure_nn.closures.bundle import load_bundle; load_bundle(sys.argv[1]); "
            "bad = [m for m in sys.modules if m.split('.')[0] in ('lightning', 'pytorch_lightning', 'hydra')]; "
            "assert not bad, bad")
    subprocess.run([sys.executable, "-c", code, str(tmp_path / "b")], check=True)


def test_damaged_bundles_raise_clear_errors(tmp_path):
    b = save_bundle(trained_like(), tmp_path / "b")
    meta = json.loads((b / "bundle.json").read_text())

    def variant(name, edit_meta=None, weights=None):
        d = tmp_path / name
        d.mkdir()
        m = json.loads(json.dumps(meta))
        text = json.dumps(edit_meta(m) if edit_meta else m)
        (d / "bundle.json").write_text(text)
        (d / "weights.pt").write_bytes(weights if weights is not None else (b / "weights.pt").read_bytes())
        return d

    with pytest.raises(BundleError, match="bundle.json is missing"):
        load_bundle(tmp_path)
    bad_json = variant("json")
    (bad_json / "bundle.json").write_text("{not json")
    with pytest.raises(BundleError, match="not valid JSON"):
        load_bundle(bad_json)
    with pytest.raises(BundleError, match="lacks the key"):
        load_bundle(variant("key", lambda m: {k: v for k, v in m.items() if k != "model"}))
    with pytest.raises(BundleError, match="trained on features"):
        load_bundle(variant("feat", lambda m: {**m, "feature_names": m["feature_names"][::-1]}))
    raw = bytearray((b / "weights.pt").read_bytes())
    raw[len(raw) // 2] ^= 0xFF
    with pytest.raises(BundleError, match="checksum mismatch"):
        load_bundle(variant("sum", weights=bytes(raw)))
    with pytest.raises(BundleError, match="do not fit the model"):
        load_bundle(variant("shape", lambda m: {**m, "model": {**m["model"], "hidden": [7, 5]}}))
    with pytest.raises(BundleError, match="version"):
        load_bundle(variant("ver", lambda m: {**m, "format_version": 99}))


def _silu(x):
    return x / (1 + np.exp(-x))


def test_plain_export_gives_the_same_friction_factors(tmp_path):
    """Evaluate the exported JSON with numpy from its documented formula (independent code)."""
    for kw in ({"inputs": WALL_ONLY}, {"mode": "direct"}, {"inputs": WALL_ONLY, "base_input": True},
               {"base_input": True}):
        net = trained_like(seed=3, **kw)
        spec = json.loads(export_plain(net, tmp_path / "plain.json").read_text())
        s = states()
        x = closure_features(s).detach().numpy()
        z = (x - np.array(spec["scaler"]["mean"])) / np.array(spec["scaler"]["std"])
        fb = np.stack([t.detach().numpy() for t in BaselineClosure(**spec["baseline"])(s)], axis=-1)
        if spec["base_input"]:
            z = np.concatenate([z, np.log(fb[..., 2:3] / fb[..., 1:2])], axis=-1)
        o = np.zeros(x.shape[:-1] + (3,))
        for br in spec["branches"]:
            y = z[..., br["inputs"]]
            for i, layer in enumerate(br["layers"]):
                y = y @ np.array(layer["W"]).T + np.array(layer["b"])
                if i < len(br["layers"]) - 1:
                    y = _silu(y)
            o[..., br["outputs"]] = y
        if spec["mode"] == "correction":
            f = fb * np.exp(spec["bound"] * np.tanh(o))
        else:
            span = spec["direct_span"]
            f = np.exp(np.array(spec["log_f_ref"]) + span * np.tanh(o / span))
        with torch.no_grad():
            ref = np.stack([t.numpy() for t in net(s)], axis=-1)
        np.testing.assert_allclose(f, ref, rtol=1e-12)


def test_ensemble_directory_round_trip_and_spread(tmp_path):
    members = [trained_like(seed=i, inputs=WALL_ONLY) for i in range(3)]
    for m in members:  # keep corrections moderate so every member has an equilibrium
        with torch.no_grad():
            for p in m.branches.parameters():
                p.mul_(0.2)
    p = save_ensemble(members, tmp_path / "ens")
    ens = load_saved_closure(p)
    assert isinstance(ens, ClosureEnsemble) and len(ens) == 3
    assert isinstance(build_closure({"kind": "bundle", "path": str(p)}), ClosureEnsemble)
    c = make_conditions(vsl=[0.02, 0.05], vsg=[3.0, 8.0], D=0.05, roughness=5e-5)
    pred = ens.predict(c)
    h = pred.holdup
    assert bool(pred.found.all())
    np.testing.assert_allclose(pred.holdup_mean, h.mean(0), rtol=1e-14)
    np.testing.assert_allclose(pred.holdup_std, h.std(0, unbiased=True), rtol=1e-12)
    assert bool((pred.pgrad_std > 0).all())
    s = states()
    with torch.no_grad():
        geo = torch.exp(torch.stack([torch.log(m(s).f_i) for m in members]).mean(0))
        assert torch.allclose(ens(s).f_i, geo, rtol=1e-14)
    (p / "ensemble.json").write_text("[]")
    with pytest.raises(BundleError, match="corrupted ensemble"):
        load_ensemble(p)


def test_combined_ensemble_keeps_every_member_unchanged(tmp_path):
    """combine_ensembles: a bundle + a 2-member ensemble -> 3 members, each with the same factors
    (byte copies, checksums verified on load)."""
    from closure_nn.closures.ensemble import combine_ensembles

    one, two = trained_like(seed=0), [trained_like(seed=i) for i in (1, 2)]
    b = save_bundle(one, tmp_path / "single")
    e = save_ensemble(two, tmp_path / "pair")
    ens = load_saved_closure(combine_ensembles([b, e], tmp_path / "band"))
    assert isinstance(ens, ClosureEnsemble) and len(ens) == 3
    s = states()
    with torch.no_grad():
        for got, want in zip(ens.members, [one, *two]):
            assert torch.equal(got(s).f_i, want(s).f_i) and torch.equal(got(s).f_wg, want(s).f_wg)
    with pytest.raises(BundleError):
        combine_ensembles([tmp_path / "missing"], tmp_path / "bad")
