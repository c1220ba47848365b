"""The demo command end to end at a tiny budget, through the same stages as `closure-nn fit`:
it calls the audit and the line march as functions (no command calls another command) and
writes every part of its run folder. A check of the tool's own wiring on its invented demo data
(data_demo/README.md); no outside source applies. The numbers of a full demo are in
docs/evaluation_log.md."""
from __future__ import annotations

import argparse
import json

from closure_nn.commands import demo

TINY_EVALUATE = ["kfold.k=0", "plots=false", "processes=1", "experiment.synth.n=300",
                 "splits.grouped.enabled=false", "boosted.enabled=false",
                 "stage_trainer.pretrain.max_epochs=1", "stage_trainer.finetune.max_epochs=1",
                 "stage_trainer.update.max_epochs=1"]
TINY_AUDIT = ["grid.n_sweep=9", "grid.n_map=6", "grid.roots_theta_deg=[1.0]", "grid.D=[0.05]", "grid.theta_deg=[0.0]"]


def _listing(items: list[str]) -> str:
    return "[" + ",".join(f"'{x}'" for x in items) + "]"


def test_demo_runs_every_stage_in_one_process(tmp_path, capsys):
    overrides = [f"evaluate_overrides={_listing(TINY_EVALUATE)}", f"audit_overrides={_listing(TINY_AUDIT)}",
                 "line_overrides=['plot=false']",
                 "ensemble_members=2", "ensemble_processes=1"]
    assert demo.run(argparse.Namespace(out=str(tmp_path)), overrides) == 0
    (run,) = [p for p in tmp_path.iterdir() if p.is_dir()]
    summary = json.loads((run / "summary.json").read_text())
    assert set(summary["line"]) >= {"baseline", "learned", "ensemble"}
    assert summary["line"]["ensemble"]["members"] == 2
    assert summary["audit"]["summary"]["rows"] > 0 and summary["audit"]["score"] is not None
    for f in ("audit/summary.json", "audit/report.md", "line/summary.json", "line/stations.csv",
              "ensemble/band/ensemble.json", "summary.md"):
        assert (run / f).exists(), f
    assert "INVENTED" in (run / "summary.md").read_text()
