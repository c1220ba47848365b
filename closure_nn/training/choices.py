"""Names the training configs choose from, as plain constants: the config checks
(closure_nn/config_rules.py) read them without importing Lightning, so `closure-nn train --help`
and `fit --help` stay quick."""
from __future__ import annotations

#: training stages (closure_nn.training.run.run_stage)
STAGES = ("pretrain", "finetune", "update")
#: learning-rate schedules (closure_nn.training.module)
LR_SCHEDULES = ("constant", "cosine")
