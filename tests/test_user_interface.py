"""The user's interface of the commands: one option to choose a closure, ``--help`` generated from
the configs, result tables that are plain CSV with the unit in each header, old spellings that
still work with a one-line note.

References outside the code under test:
- defaults in ``--help`` are compared with the YAML files of conf/ as PyYAML reads them;
- units in result headers are read back with check-data's header parser and converted with the
  factors of NIST SP 811 (2008), Appendix B.8 (mm -> m: 1e-3, bar -> Pa: 1e5, both exact);
- the closure chosen by ``--closure`` is compared with the same closure loaded through the Python
  API (:func:`closure_nn.api.load_closure` / :func:`closure_nn.api.solve`) and with the old
  spelling; these are wiring checks (common practice), the physics is tested elsewhere.
The bundles are small untrained networks and the line is the invented test line of
tests/test_line_run.py: no real data.
"""
from __future__ import annotations

import argparse
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

from closure_nn.api import load_closure, solve
from closure_nn.cli import main
from closure_nn.closures.bundle import save_bundle
from closure_nn.closures.ensemble import save_ensemble
from closure_nn.config import CONF_DIR
from closure_nn.data.result_tables import bare_names, unit_of
from closure_nn.data.table_io import read_table
from closure_nn.data.units import UNITS, canonical_unit, factor, parse_header
from closure_nn.line.results import STATION_COLUMNS
from test_api import _neural
from test_line_run import LINE_YAML, PROFILE

POINT = ["point", "--vsl", "0.1", "--vsg", "2", "--D", "0.05", "--json"]


def _conf(path: str) -> dict:
    return yaml.safe_load((CONF_DIR / path).read_text())


def _help(capsys, command: str) -> str:
    assert main([command, "--help"]) == 0
    return capsys.readouterr().out


def _one_note(err: str, new: str) -> None:
    """Exactly one line on stderr: the deprecation note naming the new spelling."""
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and "deprecated" in lines[0] and new in lines[0], err


@pytest.fixture(scope="module")
def closures(tmp_path_factory) -> Path:
    """A bundle ``b0``, a training run folder ``trainrun`` whose ``bundle/`` is an ensemble of two,
    and a folder ``members`` holding two bundle folders (no ensemble.json)."""
    d = tmp_path_factory.mktemp("closures")
    save_bundle(_neural(0), d / "b0")
    save_ensemble([_neural(1), _neural(2)], d / "trainrun" / "bundle")
    save_bundle(_neural(3), d / "members" / "m_a")
    save_bundle(_neural(4), d / "members" / "m_b")
    (d / "line").mkdir()
    (d / "line" / "profile.csv").write_text(PROFILE)
    (d / "line" / "line.yaml").write_text(LINE_YAML)
    return d


# --- --help lists the main config keys, from the YAML files ---------------------------------------

def test_train_help_lists_the_keys_that_matter_with_defaults(capsys):
    out = _help(capsys, "train")
    train, trainer = _conf("train.yaml"), _conf("trainer/cpu.yaml")
    assert train["data"]["train"] == "???" and "data.train = ??? (required)" in out
    assert f"stage = {train['stage']}" in out and "pretrain | finetune | update" in out  # value and its comment
    assert train["init_bundle"] is None and "init_bundle = null" in out
    assert trainer["max_epochs"] is None and "trainer.max_epochs = null" in out
    assert "model=correction" in out and "choices: correction, direct" in out  # a config group and its files


def test_synth_and_fit_help_list_design_n_and_the_synthetic_set(capsys):
    out = _help(capsys, "synth")
    synth = _conf("synth.yaml")
    assert "design=demo_loop" in out and "demo_loop_and_line" in out
    assert f"n = {synth['n']}" in out and "number of points" in out
    out = _help(capsys, "fit")
    assert f"fit.synth.n = {_conf('fit.yaml')['fit']['synth']['n']}" in out


def test_help_shows_the_unit_of_a_key_in_brackets(capsys):
    out = _help(capsys, "map")
    assert f"D = {_conf('map.yaml')['D']} [m]" in out and "pipe inner diameter" in out
    assert "--closure baseline|PATH" in out


# --- one option to choose a closure ---------------------------------------------------------------

def test_point_closure_option_equals_the_api_and_the_old_spelling(closures, capsys):
    b = str(closures / "b0")
    assert main([*POINT, "--closure", b]) == 0
    new = json.loads(capsys.readouterr().out)
    assert main([*POINT, "closure=learned", f"closure.path={b}"]) == 0
    cap = capsys.readouterr()
    _one_note(cap.err, f"--closure {b}")
    assert json.loads(cap.out) == new
    row = pd.DataFrame({"vsl": [0.1], "vsg": [2.0], "D": [0.05], "theta": [0.0], "roughness": [0.0], "rhol": [998.0],
                        "rhog": [1.2], "mul": [1.0e-3], "mug": [1.8e-5], "sigma": [0.072]})
    api = solve(row, closure=b).iloc[0]
    assert new["holdup"] == pytest.approx(api["calc_holdup"], rel=1e-12) and new["closure"] == load_closure(b).label


def test_a_training_run_folder_names_its_bundle(closures, capsys):
    assert main([*POINT, "--closure", str(closures / "trainrun")]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["closure"] == load_closure(closures / "trainrun" / "bundle").label and out["closure"].startswith("ensemble(2")
    assert main([*POINT, "--closure", "baseline", "closure.interface=smooth"]) == 0  # the config's baseline
    assert "interface=smooth" in json.loads(capsys.readouterr().out)["closure"]


def test_line_compares_named_closures_and_takes_every_kind_of_ensemble_folder(closures, tmp_path, capsys):
    rc = main(["line", str(closures / "line" / "line.yaml"), "--closure", "baseline", "--closure",
               f"net={closures / 'b0'}", "--ensemble", str(closures / "trainrun"), str(closures / "members"),
               "--out", str(tmp_path)])
    out = capsys.readouterr().out
    assert rc == 0
    (run,) = tmp_path.iterdir()
    summ = json.loads((run / "summary.json").read_text())
    assert list(summ["closures"]) == ["baseline", "net"] and summ["ensemble"]["members"] == 4
    assert "march 1/6" in out and "march 6/6" in out  # one progress line per march
    # the old spelling of the config's closure still works, with one note
    assert main(["line", str(closures / "line" / "line.yaml"), "closure=learned", f"closure.path={closures / 'b0'}",
                 "--out", str(tmp_path / "old"), "--no-plot"]) == 0
    _one_note(capsys.readouterr().err, f"--closure {closures / 'b0'}")
    assert list(json.loads(next((tmp_path / "old").glob("line-*/summary.json")).read_text())["closures"]) == ["b0"]
    # line.png carries the key numbers; the table is the summary's
    assert (run / "line.png").stat().st_size > 10_000
    # stations.csv: a plain table, the SI unit in each header (check-data's convention)
    st = pd.read_csv(run / "stations.csv")
    assert bare_names(st.columns) == list(STATION_COLUMNS)
    assert "p [Pa]" in st.columns and "distance [m]" in st.columns and "pattern" in st.columns
    first = st[st["closure"] == "baseline"].iloc[0]
    assert first["p [Pa]"] == pytest.approx(30 * 1e5)  # 'inlet: 30 bara' of the line file; bar = 1e5 Pa (NIST SP 811)
    assert first["D [m]"] == pytest.approx(203.2 * 1e-3)  # 'D: 203.2 mm'; mm = 1e-3 m
    band = pd.read_csv(run / "band.csv")
    assert bare_names(band.columns)[:4] == ["distance", "elevation", "p_min", "p_max"] and "holdup_sd [-]" in band.columns
    for col in list(st.columns) + list(band.columns):
        _unit_round_trip(col)
    assert (run / "CAUTION.txt").exists() and "caution" in summ


def _unit_round_trip(header: str) -> None:
    """A header's unit is read by check-data's parser and belongs to the dimension of its column."""
    name, unit = parse_header(header)
    expected = unit_of(name)
    if expected is None:
        assert unit is None, header
        return
    assert unit == expected[0] and canonical_unit(unit) in UNITS[expected[1]], header
    assert factor(unit, expected[1]) == (1.0, 0.0)  # SI: nothing to convert


def test_batch_results_are_a_plain_table_with_units(closures, tmp_path, capsys):
    src = tmp_path / "cond.csv"
    pd.DataFrame({"vsl": [0.01, 0.3], "vsg": [0.5, 30.0], "D [mm]": [50, 50], "theta": 0.0, "roughness": 0.0,
                  "rhol": 998.0, "rhog": 1.2, "mul": 1e-3, "mug": 1.8e-5, "sigma": 0.072, "tag": ["a", "b"]}).to_csv(src, index=False)
    assert main(["batch", str(src), "--closure", str(closures / "b0"), "--out", str(tmp_path / "runs")]) == 0
    capsys.readouterr()
    (run,) = (tmp_path / "runs").iterdir()
    res = pd.read_csv(run / "results.csv")
    assert {"calc_pgrad [Pa/m]", "calc_holdup [-]", "D [m]", "calc_pattern", "tag"} <= set(res.columns)
    assert res["D [m]"].tolist() == pytest.approx([0.05, 0.05])  # 50 mm; mm = 1e-3 m (NIST SP 811)
    for col in res.columns:
        if col != "tag":
            _unit_round_trip(col)
    back = read_table(run / "results.csv")  # check-data's reader takes it back in SI
    assert back["D"].tolist() == pytest.approx([0.05, 0.05])
    api = solve(back[["vsl", "vsg", "D", "theta", "roughness", "rhol", "rhog", "mul", "mug", "sigma"]], closure=closures / "b0")
    np.testing.assert_allclose(res["calc_pgrad [Pa/m]"], api["calc_pgrad"], rtol=1e-12)
    # the old spelling --out FILE still writes the file, with one note
    assert main(["batch", str(src), "--out", str(tmp_path / "old.csv"), f"run_root={tmp_path / 'runs2'}"]) == 0
    _one_note(capsys.readouterr().err, f"--output {tmp_path / 'old.csv'}")
    assert "calc_pgrad [Pa/m]" in pd.read_csv(tmp_path / "old.csv").columns


def test_audit_and_map_old_spellings_work_with_one_note(closures, tmp_path, capsys):
    b = str(closures / "b0")
    cfg = tmp_path / "c.yaml"
    cfg.write_text(f"kind: bundle\npath: {b}\n")
    assert main(["audit", "--self-check", "--no-health", "--closure-config", str(cfg), "--out", str(tmp_path / "a")]) == 0
    cap = capsys.readouterr()
    _one_note(cap.err, f"--closure {b}")
    assert main(["audit", "--self-check", "--no-health", "--closure", b, "--out", str(tmp_path / "a")]) == 0
    cap2 = capsys.readouterr()
    assert cap2.err == "" and "dataset audit:" in cap2.out
    rows = pd.read_csv(next(p for p in (tmp_path / "a").iterdir() if (p / "audit_rows.csv").exists()) / "audit_rows.csv")
    assert {"run_id", "vsl [m/s]", "pgrad [Pa/m]", "pgrad_pred [Pa/m]", "theta_deg", "suspect"} <= set(rows.columns)
    for col in rows.columns:
        _unit_round_trip(col)
    count = [ln for ln in cap.out.splitlines() if "rows audited" in ln]
    assert count == [ln for ln in cap2.out.splitlines() if "rows audited" in ln] and load_closure(b).label in count[0]
    assert main(["map", "--learned", b, "n=6", "--out", str(tmp_path / "m")]) == 0
    _one_note(capsys.readouterr().err, f"--closure {b}")
    assert main(["map", "--closure", b, "n=6", "--out", str(tmp_path / "m")]) == 0
    assert capsys.readouterr().err == ""
    grid = pd.read_csv(next((tmp_path / "m").iterdir()) / "pattern_map.csv")
    assert list(grid.columns) == ["vsl [m/s]", "vsg [m/s]", "pattern", "pattern_learned"]


def test_evaluate_refuses_the_baseline_as_a_start_and_demo_keeps_runs(capsys):
    assert main(["evaluate", "--closure", "baseline"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "leave --closure out to pre-train" in err[0]
    from closure_nn.commands import demo

    p = argparse.ArgumentParser()
    demo.add_arguments(p)
    assert p.parse_args(["--runs", "x"]).out == "x" and p.parse_args(["--out", "y"]).out == "y"


def test_no_command_calls_another_command():
    """House rule (DEVELOPING.md): commands are thin shells over the pipeline; none imports another
    command module (only the shared option helpers, commands/options.py). The demo runs the audit
    and the line march as functions. No outside source applies."""
    import ast
    from pathlib import Path

    import closure_nn.commands as commands

    folder = Path(commands.__file__).parent
    names = {p.stem for p in folder.glob("*.py")} - {"__init__", "options"}
    for path in folder.glob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.ImportFrom):
                mod = node.module or ""
                targets = {a.name for a in node.names} if node.level == 1 and not mod else {mod.split(".")[-1]}
                if node.level == 1 or mod.startswith("closure_nn.commands"):
                    assert not (targets & names), f"{path.name} imports command module(s) {targets & names}"
