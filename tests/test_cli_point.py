"""The `point` and `batch` commands: answers, one-line user errors, no Lightning import.

The reference values are the library's own solve (regression of the CLI wiring, not of physics);
the physics is checked against published sources in test_separated_solver.py and test_patterns.py.
"""
import json
import math
import subprocess
import sys

import pandas as pd
import pytest
import torch

from closure_nn.cli import main
from closure_nn.closures.baseline import BaselineClosure
from closure_nn.physics.conditions import make_conditions
from closure_nn.physics.point import solve_points


def test_point_json_matches_python_api(capsys):
    assert main(["point", "--vsl", "0.05", "--vsg", "2", "--D", "0.1", "--theta-deg", "1", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    ref = solve_points(make_conditions(vsl=[0.05], vsg=[2.0], D=0.1, theta=math.radians(1.0)), BaselineClosure())
    assert out["holdup"] == pytest.approx(float(ref.holdup[0]), rel=1e-12)
    assert out["pgrad"] == pytest.approx(float(ref.pgrad.total[0]), rel=1e-12)
    assert "CAUTION" in out["caution"]


def test_hydra_override_changes_the_closure(capsys):
    main(["point", "--vsl", "0.05", "--vsg", "2", "--D", "0.1", "--json", "closure.wall=churchill", "--roughness", "1e-3"])
    out = json.loads(capsys.readouterr().out)
    assert "churchill" in out["closure"]


@pytest.mark.parametrize(
    "args, words",
    [
        (["--D", "50"], ["D = 50 m", "unit slip"]),  # 50 "m" diameter
        (["--vsl", "-0.1"], ["vsl = -0.1", "counter-current"]),
        (["--mul", "0"], ["mul = 0 Pa s"]),
        (["--vsl", "nan"], ["vsl = nan", "not a number"]),
        (["closure.wall=nonsense"], ["unknown wall friction", "churchill"]),
    ],
)
def test_user_errors_are_one_line(args, words, capsys):
    base = {"--vsl": "0.05", "--vsg": "2", "--D": "0.1"}
    for a, b in zip(args[::2], args[1::2]):
        base[a] = b
    argv = [x for kv in base.items() for x in kv] + [a for a in args if "=" in a]
    assert main(["point", *argv]) == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1
    for w in words:
        assert w in err


def test_user_error_from_the_console_has_no_traceback():
    r = subprocess.run([sys.executable, "-m", "closure_nn.cli", "point", "--vsl", "0.05", "--vsg", "2", "--D", "50"],
                       capture_output=True, text=True)
    assert r.returncode == 2 and "Traceback" not in r.stderr and "D = 50 m" in r.stderr


def test_batch_writes_results_and_does_not_import_lightning(tmp_path):
    df = pd.DataFrame({"vsl": [0.01, 0.3, 0.1], "vsg": [0.5, 1.0, 30.0], "D [mm]": [50, 50, 50], "theta [deg]": [0, 0, 0],
                       "roughness": 0.0, "rhol": 998.0, "rhog": 1.2, "mul": 1e-3, "mug": 1.8e-5, "sigma": 0.072})
    src = tmp_path / "cond.csv"
    df.to_csv(src, index=False)
    code = (
        "import sys; from closure_nn.cli import main; rc = main(['batch', sys.argv[1], 'run_root=' + sys.argv[2]]);"
        "assert 'lightning' not in sys.modules and 'pytorch_lightning' not in sys.modules, 'lightning imported'; sys.exit(rc)"
    )
    r = subprocess.run([sys.executable, "-c", code, str(src), str(tmp_path / "runs")], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    (run,) = (tmp_path / "runs").iterdir()
    res = pd.read_csv(run / "results.csv")
    # horizontal air-water map of the trade (common practice), 5 cm pipe
    assert list(res["calc_pattern"]) == ["stratified_smooth", "intermittent", "annular"]
    assert (run / "CAUTION.txt").exists() and (run / "config.yaml").exists()


def test_point_uses_one_torch_thread_unless_told(capsys):
    """`threads` of conf/point.yaml (default 1, benchmarks/README.md "Threads") sets torch's
    intra-op threads; a check of our own settings, no outside source."""
    before = torch.get_num_threads()
    try:
        assert main(["point", "--vsl", "0.1", "--vsg", "3", "--D", "0.1", "threads=2"]) == 0
        assert torch.get_num_threads() == 2
        assert main(["point", "--vsl", "0.1", "--vsg", "3", "--D", "0.1"]) == 0
        assert torch.get_num_threads() == 1
    finally:
        torch.set_num_threads(before)
    capsys.readouterr()


@pytest.mark.parametrize("command", ["train", "fit", "evaluate"])
def test_help_of_training_commands_does_not_import_lightning(command):
    """`--help` lists the config keys with their checks and defaults without loading Lightning or
    scipy (closure_nn/training/choices.py; lazy closure_nn.data). Our own start-up rule, no outside source."""
    code = ("import sys; from closure_nn.cli import main\n"
            f"try: main(['{command}', '--help'])\nexcept SystemExit: pass\n"
            "print(sorted(m for m in ('lightning', 'pytorch_lightning', 'scipy') if m in sys.modules))")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    assert r.stdout.strip().splitlines()[-1] == "[]", r.stdout[-300:]
