"""`closure-nn fit TABLE ensemble.members=2 ensemble.bootstrap=true` ships an ensemble that `plan`
accepts (the README's "further steps"), at a small size.

The lab table is INVENTED (tests/invented_loop.py: noisy rows of the demo's invented truth closure on
a small loop design of our own); the envelope is the demo loop's (data_demo/loop_envelope.yaml, invented). Checks of
our own workflow, not of an outside source: the members are distinct fine-tunes (bootstrap
replicates) and the plan's disagreement is positive where they differ.
"""
from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest

from closure_nn.api import load_closure
from closure_nn.cli import main
from closure_nn.closures.ensemble import ClosureEnsemble
from invented_loop import write_lab_table

ROOT = Path(__file__).resolve().parents[1]
SMALL = ["fit.synth.n=300", "stage_trainer.pretrain.max_epochs=1", "stage_trainer.finetune.max_epochs=4",
         "ensemble.members=2", "ensemble.bootstrap=true"]


@pytest.mark.filterwarnings("ignore")
def test_fit_ships_an_ensemble_that_plan_ranks(tmp_path, capsys):
    lab = write_lab_table(tmp_path / "lab.csv")
    assert main(["fit", str(lab), "--out", str(tmp_path / "runs"), *SMALL]) == 0
    (run,) = (tmp_path / "runs").iterdir()
    report = json.loads((run / "report.json").read_text())
    ens = load_closure(report["bundle"])
    assert isinstance(ens, ClosureEnsemble) and len(ens.members) == 2
    assert report["rows_per_term"]["finetune"], "rows per loss term of an ensemble fine-tune are reported"
    a, b = (dict(m.named_parameters()) for m in ens.members)
    assert any(float((a[k] - b[k]).abs().max()) > 0 for k in a), "bootstrap members differ"
    out = tmp_path / "plan"
    assert main(["plan", report["bundle"], "--envelope", str(ROOT / "data_demo" / "loop_envelope.yaml"), "--n", "4",
                 "--out", str(out), "candidates=200"]) == 0
    (prun,) = out.iterdir()
    matrix = pd.read_csv(prun / "test_matrix.csv")
    assert len(matrix) == 4
    assert (matrix["holdup sd [-]"] > 0).all() and (matrix["disagreement [0-1]"] > 0).all()
