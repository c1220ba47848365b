"""The measured-data domain of a neural closure: the domain of its fine-tune/update rows only.

Sources: the domain rule itself (inside the per-feature bounds AND within the nearest-neighbour
threshold of a stored point, :mod:`closure_nn.data.features`) is our definition, so states that
ARE stored points are inside by definition and states outside the bounds are outside by
definition. Byte-exact round trips and loading artefacts of an earlier format are common practice
for model files. The line checks are wiring checks against the definition of the count and the
intervals (:func:`closure_nn.line.results.intervals`).
"""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import torch

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.closures.bundle import MEASURED_KEYS, WEIGHTS_FILE, _sha256, export_plain, load_bundle, save_bundle
from closure_nn.closures.ensemble import ClosureEnsemble
from closure_nn.closures.neural import NeuralClosure
from closure_nn.config import load_config
from closure_nn.data.features import FeatureScaler, TrainingDomain, state_features, table_conditions
from closure_nn.physics.conditions import make_conditions
from closure_nn.physics.groups import FEATURE_NAMES, closure_features
from closure_nn.physics.holdup_roots import frac_grid, solve_separated
from closure_nn.physics.local_state import local_state
from closure_nn.training.member_fit import REPLAYED, start_closure


def features(vsl, vsg, D, n_frac: int = 8) -> torch.Tensor:
    """Closure features ``(M, F)`` of stratified states at the given conditions and a grid of h/D."""
    c = make_conditions(vsl=vsl, vsg=vsg, D=D, roughness=5e-5).unsqueeze(-1)
    s = local_state(c, frac_grid("stratified", n_frac).expand(len(vsl), -1), "stratified")
    return closure_features(s).reshape(-1, len(FEATURE_NAMES)).detach()


BROAD = features([0.01, 0.05, 0.2, 0.1], [1.0, 5.0, 20.0, 10.0], [0.05, 0.08, 0.1, 0.3])
NARROW = features([0.01, 0.012], [1.0, 1.2], [0.05, 0.05])
FAR = features([0.1], [10.0], [0.3])  # a BROAD condition, far from NARROW (other Reynolds numbers and diameter)


def closure_with_domains(measured: torch.Tensor | None) -> NeuralClosure:
    """A neural closure with scaler and training domain fitted on BROAD (+ NARROW) and, when given,
    the measured-data domain fitted on ``measured``."""
    net = NeuralClosure(hidden=(4,))
    x = torch.cat([BROAD, NARROW])
    sc = FeatureScaler.fit(x)
    net.set_scaler(sc.mean, sc.std)
    TrainingDomain.fit(x, sc).apply_to(net)
    if measured is not None:
        TrainingDomain.fit(measured, sc).apply_to(net, measured=True)
    return net


def test_narrow_measured_rows_leave_far_states_outside_but_inside_training():
    net = closure_with_domains(NARROW)
    assert bool(net.in_domain(FAR).all())  # stored training points: inside by definition
    assert not bool(net.in_measured_domain(FAR).any())  # outside the measured rows' bounds
    assert bool(net.in_measured_domain(NARROW).all())  # the measured points themselves
    assert bool(net.in_domain(NARROW).all())
    assert net.in_measured_domain(FAR.reshape(2, -1, len(FEATURE_NAMES))).shape == (2, FAR.shape[0] // 2)


def test_pretrained_only_closure_has_no_measured_support():
    net = closure_with_domains(None)
    assert bool(net.in_domain(BROAD).all())
    assert not bool(net.in_measured_domain(torch.cat([BROAD, NARROW])).any())
    assert net.measured_points.shape == (0, len(FEATURE_NAMES)) and net.measured_domain_recorded


def _table(vsl, vsg, D, source: str) -> pd.DataFrame:
    """Stratified baseline equilibria as a training table (holdup and pgrad measured)."""
    df = pd.DataFrame(dict(vsl=vsl, vsg=vsg, D=D, theta=0.0, roughness=5e-5, rhol=998.0, rhog=1.2, mul=1e-3,
                           mug=1.8e-5, sigma=0.072))
    sol = solve_separated(table_conditions(df), BaselineClosure())
    assert bool(sol.found.all())
    df["holdup"], df["pgrad"], df["pattern"] = sol.holdup.numpy(), sol.pgrad.total.numpy(), "stratified_wavy"
    df["source"] = source
    return df


def test_finetune_and_update_record_their_own_rows_not_replayed_ones(tmp_path):
    """start_closure: a pre-trained bundle has no measured rows; a fine-tune records exactly the
    domain of its own rows (replayed synthetic rows left out); an update widens it (union)."""
    synth = _table([0.01, 0.05, 0.2, 0.1, 0.02], [1.0, 5.0, 20.0, 10.0, 3.0], [0.05, 0.08, 0.1, 0.3, 0.2], "synthetic")
    lab = _table([0.01, 0.012, 0.011], [1.0, 1.2, 1.1], [0.05, 0.05, 0.05], "lab")
    lab2 = _table([0.05, 0.06], [5.0, 5.5], [0.08, 0.08], "lab")
    cfg = load_config("train", ["data.train=unused.csv"])
    pre = start_closure(cfg, synth, 0)
    assert pre.measured_points.shape[0] == 0
    b = save_bundle(pre, tmp_path / "pre")
    ft_cfg = load_config("train", ["stage=finetune", f"init_bundle={b}", "data.train=unused.csv"])
    mixed = pd.concat([lab.assign(**{REPLAYED: False}), synth.assign(**{REPLAYED: True})], ignore_index=True)
    ft = start_closure(ft_cfg, mixed, 0)
    sc = FeatureScaler(mean=pre.feature_mean, std=pre.feature_std)
    want = TrainingDomain.fit(state_features(lab, pre.baseline), sc)
    got = TrainingDomain.from_closure(ft, measured=True)
    assert torch.equal(got.points, want.points) and torch.equal(got.lo, want.lo) and got.threshold == want.threshold
    x_lab, x_synth = state_features(lab, pre.baseline), state_features(synth, pre.baseline)
    assert bool(ft.in_measured_domain(x_lab).all()) and bool(ft.in_domain(x_synth).all())
    assert not bool(ft.in_measured_domain(x_synth[2:4]).any())  # the 20 m/s, 100 mm and 10 m/s, 300 mm rows
    up_cfg = load_config("train", ["stage=update", f"init_bundle={save_bundle(ft, tmp_path / 'ft')}",
                                   "data.train=unused.csv"])
    up = start_closure(up_cfg, lab2, 0)
    x_lab2 = state_features(lab2, pre.baseline)
    assert bool(up.in_measured_domain(torch.cat([x_lab, x_lab2])).all())
    assert up.measured_points.shape[0] == x_lab.shape[0] + x_lab2.shape[0]
    assert not bool(ft.in_measured_domain(x_lab2).any())  # the first fine-tune had not seen them


def test_bundle_round_trip_keeps_the_measured_domain_exactly(tmp_path):
    net = closure_with_domains(NARROW)
    back = load_bundle(save_bundle(net, tmp_path / "b"))
    for k in MEASURED_KEYS:
        assert torch.equal(getattr(back, k), getattr(net, k)), k
    assert back.measured_domain_recorded
    assert torch.equal(back.in_measured_domain(BROAD), net.in_measured_domain(BROAD))
    meta = back.bundle_metadata["measured_domain"]
    assert meta["n_points"] == NARROW.shape[0] and meta["nn_threshold"] == float(net.measured_threshold)
    plain = json.loads(export_plain(net, tmp_path / "plain.json").read_text())["measured_domain"]
    assert torch.equal(torch.tensor(plain["points"], dtype=torch.float64), net.measured_points)
    assert plain["threshold"] == float(net.measured_threshold) and plain["lo"] == net.measured_lo.tolist()
    empty = json.loads(export_plain(closure_with_domains(None), tmp_path / "p0.json").read_text())["measured_domain"]
    assert empty["n_points"] == 0 and empty["lo"] is None and empty["points"] == []


def test_older_bundle_without_measured_buffers_still_loads(tmp_path):
    """A bundle as written before the measured-data domain: weights without the measured_* keys
    and metadata without "measured_domain" (checksum consistent with those weights)."""
    net = closure_with_domains(NARROW)
    b = save_bundle(net, tmp_path / "old")
    state = torch.load(b / WEIGHTS_FILE, weights_only=True)
    torch.save({k: v for k, v in state.items() if k not in MEASURED_KEYS}, b / WEIGHTS_FILE)
    meta = json.loads((b / "bundle.json").read_text())
    assert meta["format_version"] == 2  # bundles with the measured-data domain
    meta.pop("measured_domain")
    meta["format_version"] = 1
    meta["checksums"][WEIGHTS_FILE] = _sha256(b / WEIGHTS_FILE)
    (b / "bundle.json").write_text(json.dumps(meta))
    old = load_bundle(b)
    assert not old.measured_domain_recorded
    assert not bool(old.in_measured_domain(NARROW).any())  # no measured-data domain recorded
    assert torch.equal(old.in_domain(BROAD), net.in_domain(BROAD)) and torch.equal(old.domain_points, net.domain_points)
    s = local_state(make_conditions(vsl=0.05, vsg=[2.0, 6.0], D=0.08), torch.tensor([0.2, 0.3]), "stratified")
    with torch.no_grad():
        assert torch.equal(old(s).f_i, net(s).f_i)


def test_ensemble_is_inside_only_where_every_member_is():
    a, b = closure_with_domains(NARROW[: NARROW.shape[0] // 2]), closure_with_domains(NARROW)
    ens = ClosureEnsemble([a, b])
    np.testing.assert_array_equal(ens.in_measured_domain(NARROW).numpy(),
                                  (a.in_measured_domain(NARROW) & b.in_measured_domain(NARROW)).numpy())
    assert bool(b.in_measured_domain(NARROW).all()) and not bool(ens.in_measured_domain(NARROW).all())
    assert ens.measured_domain_recorded


class HalfMeasured(BaselineClosure):
    """Test closure: baseline friction, in its training domain everywhere, measured only where the
    pipe climbs at sin(theta) < 0.03."""

    def in_domain(self, features: torch.Tensor) -> torch.Tensor:
        return torch.ones(features.shape[:-1], dtype=torch.bool)

    def in_measured_domain(self, features: torch.Tensor) -> torch.Tensor:
        return features[..., FEATURE_NAMES.index("sin_theta")] < 0.03


@pytest.fixture()
def line_dir(tmp_path):
    from test_line_run import LINE_YAML, PROFILE  # the tiny invented test line

    (tmp_path / "profile.csv").write_text(PROFILE)
    (tmp_path / "line.yaml").write_text(LINE_YAML)
    return tmp_path


def test_line_summary_table_plot_and_demo_table_carry_the_measured_count(line_dir):
    from closure_nn.pipeline.demo import _summary
    from closure_nn.line.definition import load_line
    from closure_nn.line.march import MarchSettings
    from closure_nn.line.run import run_line, write_line_run
    from closure_nn.report.line_plots import line_figure

    run = run_line(load_line(line_dir / "line.yaml"), {"half": HalfMeasured(), "baseline": BaselineClosure()},
                   settings=MarchSettings(tol=50.0), raise_errors=True)
    summ = run.summary()
    st = run.stations()
    half = st[st["closure"] == "half"]
    expect = np.sin(half["theta"].to_numpy()) >= 0.03
    assert (~half["in_measured_domain"].to_numpy() == expect).all() and expect.any() and not expect.all()
    m = summ["closures"]["half"]["out_of_measured_domain"]
    assert m["checked"] and m["stations"] == int(expect.sum()) and m["of"] == len(half)
    assert m["intervals_m"] == [[500.0, 500.0]] and m["recorded"]
    assert summ["closures"]["half"]["out_of_domain"]["stations"] == 0
    assert summ["closures"]["baseline"]["out_of_measured_domain"] == {"checked": False}
    files = write_line_run(run, line_dir, figure=line_figure)
    assert "in_measured_domain" in pd.read_csv(files["stations"], comment="#").columns
    assert files["plot"].stat().st_size > 10_000
    text = _summary({"splits": {}}, {"audit": {"rows": 0, "suspect_rows": 0}}, summ, {}, line_dir, line_dir)["text"]
    assert "stations outside the measured data |" in text
    assert f"| 0 | {int(expect.sum())} of {len(half)} |" in text and "no lab row supports" in text


def test_line_command_prints_the_measured_count(line_dir, capsys):
    """A pre-trained-only bundle (zero correction = the baseline, empty measured-data domain):
    every station is outside the measured data."""
    from closure_nn.cli import main

    save_bundle(closure_with_domains(None), line_dir / "pre")
    # the option's value written after a space (NAME=SPEC contains '=' but is no config override)
    rc = main(["line", str(line_dir / "line.yaml"), "--closure", f"pre={line_dir / 'pre'}", "--out",
               str(line_dir / "runs"), "--no-plot"])
    out = capsys.readouterr().out
    assert rc == 0
    (row,) = [ln for ln in out.splitlines() if ln.strip().startswith("pre ")]
    n = json.loads(next((line_dir / "runs").glob("line-*/summary.json")).read_text())["closures"]["pre"][
        "out_of_measured_domain"]["of"]
    assert f"outside measured data at {n} of {n} stations" in row
