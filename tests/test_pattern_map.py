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
