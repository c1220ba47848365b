"""Flow-pattern map (closure_nn.report.pattern_map) and the map/audit commands.

Known points of the horizontal air-water map of the trade in a 5 cm pipe (common practice, as on
the Taitel & Dukler 1976 / Mandhane et al. 1974 maps): v_SL 0.01 / v_SG 0.5 m/s stratified,
0.3 / 1 intermittent, 0.1 / 30 annular, 4 / 0.1 dispersed bubble.
"""
from __future__ import annotations

import json

import pytest

from closure_nn.cli import main
from closure_nn.closures.baseline import BaselineClosure
from closure_nn.report.pattern_map import compute_pattern_map, disagreement, plot_pattern_map
from closure_nn.audit.selfcheck import REFERENCE_CLOSURE, clean_campaign

KNOWN = [(0.01, 0.5, {"stratified_smooth", "stratified_wavy"}), (0.3, 1.0, {"intermittent"}),
         (0.1, 30.0, {"annular"}), (4.0, 0.1, {"dispersed_bubble"})]


@pytest.fixture(scope="module")
def maps():
    base = compute_pattern_map(BaselineClosure(), D=0.05, n=80)
    other = compute_pattern_map(BaselineClosure(**REFERENCE_CLOSURE), D=0.05, roughness=5e-5, n=80)
    return base, other


@pytest.mark.parametrize("vsl, vsg, expected", KNOWN)
def test_known_points_of_the_horizontal_air_water_map(maps, vsl, vsg, expected):
    for m in maps:
        assert m.pattern_at(vsl, vsg) in expected, (m.label, vsl, vsg)


def test_map_png_is_written(maps, tmp_path):
    base, other = maps
    data = clean_campaign(n=40, seed=1)
    p = plot_pattern_map(base, tmp_path / "map.png", other=other, data=data, data_note="test points")
    head = p.read_bytes()[:8]
    assert head == b"\x89PNG\r\n\x1a\n" and p.stat().st_size > 20_000
    assert 0 < disagreement(base, other) < 0.5  # other constants move the boundaries, not the whole map


def test_map_command_writes_a_run_folder(tmp_path):
    assert main(["map", "--out", str(tmp_path), "n=24", "theta_deg=2.0"]) == 0
    (run,) = tmp_path.iterdir()
    assert (run / "pattern_map.png").exists() and (run / "CAUTION.txt").exists()
    s = json.loads((run / "summary.json").read_text())
    assert s["theta_deg"] == 2.0 and "CAUTION" in s["caution"]


def test_map_command_bands_scores_every_row_per_inclination_band(tmp_path):
    # INVENTED observations: the baseline's own patterns over -90..+90 deg (noisy_table, no
    # observer errors), so the baseline reproduces all of them; the figure and the scores per
    # band land in the run folder.
    from closure_nn.data.closure_table import noisy_table
    from closure_nn.data.design_space import parse_design
    from closure_nn.report.pattern_bands import BANDS

    design = parse_design({"name": "bands", "variables": {
        "vsl": {"law": "log_uniform", "low": 0.003, "high": 5.0}, "vsg": {"law": "log_uniform", "low": 0.1, "high": 40.0},
        "D": {"law": "choice", "values": [25.0, 51.0], "unit": "mm"},
        "theta": {"law": "uniform", "low": -90.0, "high": 90.0, "unit": "deg"}, "roughness": 0.0,
        "rhol": 998.0, "rhog": 1.2, "mul": 1.0e-3, "mug": 1.8e-5, "sigma": 0.072}})
    table = noisy_table(design, 60, 5, BaselineClosure(), label_flip=0.0)
    table.to_csv(tmp_path / "obs.csv", index=False)
    assert main(["map", "--data", str(tmp_path / "obs.csv"), "--bands", "n=16", "--out", str(tmp_path / "m")]) == 0
    (run,) = (tmp_path / "m").iterdir()
    assert (run / "pattern_bands.png").stat().st_size > 20_000
    scores = json.loads((run / "summary.json").read_text())["band_scores"]
    assert [tuple(s["band"]) for s in scores] == list(BANDS)
    assert sum(s["n"] for s in scores) == 60 and all(s["correct"] == s["n"] for s in scores)
    assert main(["map", "--bands", "n=6", "--out", str(tmp_path / "x")]) != 0  # --bands needs --data


def test_audit_command_self_check(tmp_path):
    rc = main(["audit", "--self-check", "--out", str(tmp_path), "grid.n_sweep=41", "grid.n_map=12",
               "grid.D=[0.05]", "grid.theta_deg=[0.0]", "closure.wall=churchill", "+closure.interface_kwargs.coef=25.0"])
    assert rc == 0
    (run,) = tmp_path.iterdir()
    report = (run / "report.md").read_text()
    assert "CAUTION" in report and "precision" in report
    s = json.loads((run / "summary.json").read_text())
    assert s["score"]["recall"] >= 0.8 and s["score"]["precision"] >= 0.9
    for png in ("residuals.png", "measured_vs_closure.png", "multiple_roots.png"):
        assert (run / png).stat().st_size > 10_000
