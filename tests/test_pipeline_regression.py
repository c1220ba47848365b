"""Regression check (our own output, labelled as such): the in-memory stages of `fit` train exactly
what `closure-nn train` trains from files.

`closure_nn.pipeline.stages.finetune` hands tables and closures to `run_stage` in memory; the
`train` command reads the same table from a file, validates it and calls the same stage. With the
same config and seed the fine-tuned weights must be bitwise equal: the pipeline changed how data
travel, not what is computed. No outside reference applies. The lab rows are INVENTED (noisy rows of
the demo's invented truth closure).
"""
from __future__ import annotations

import torch

from closure_nn.config import load_config
from closure_nn.data.closure_table import noisy_table
from closure_nn.data.demo_reference import ReferenceClosure
from closure_nn.data.design_space import parse_design
from closure_nn.pipeline.envelope import envelope_design
from closure_nn.pipeline.lab_table import validate_lab
from closure_nn.pipeline.stages import finetune, pretrain, synthesize_design
from closure_nn.training.run import train

SMALL = ["stage_trainer.pretrain.max_epochs=1", "stage_trainer.finetune.max_epochs=2", "model.hidden=[8,8]"]


def test_in_memory_finetune_equals_the_train_command_from_a_file(tmp_path):
    design = parse_design({"name": "reg", "variables": {
        "vsl": {"law": "log_uniform", "low": 0.01, "high": 0.3}, "vsg": {"law": "log_uniform", "low": 0.5, "high": 10.0},
        "D": {"law": "choice", "values": [50.0, 100.0], "unit": "mm"}, "theta": 0.0, "roughness": 1e-5,
        "rhol": 998.0, "rhog": 1.2, "mul": 1e-3, "mug": 1.8e-5, "sigma": 0.072}})
    raw = noisy_table(design, 60, 0, ReferenceClosure()).drop(columns=["holdup_true", "pgrad_true"])
    path = tmp_path / "lab.csv"
    raw.to_csv(path, index=False)
    cfg = load_config("train", SMALL + [f"run_root={tmp_path}"])
    lab = validate_lab(path)
    pre = pretrain(cfg, synthesize_design(cfg, envelope_design(lab.rows), 200, 0).table, tmp_path / "pre")
    mem = finetune(cfg, pre.closure, lab.rows, tmp_path / "mem")
    files = train(load_config("train", SMALL + ["stage=finetune", f"init_bundle={pre.bundle}", f"data.train={path}",
                                               f"run_root={tmp_path}", "run_name=files"]))
    # the trained weights (the bundle holds the start where the do-no-harm rule kept it): best checkpoints
    ck = [torch.load(next((d / "checkpoints").glob("best-*.ckpt")), map_location="cpu", weights_only=False)["state_dict"]
          for d in (tmp_path / "mem", tmp_path / "files")]
    assert ck[0].keys() == ck[1].keys()
    for k in ck[0]:
        assert torch.equal(ck[0][k], ck[1][k]), k
    assert mem.metrics["development"] == files["development"]
    assert mem.metrics["selection"] == files["selection"]
