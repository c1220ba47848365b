"""Training of neural closures. Lightning is imported only by the modules that need it
(``datamodule``, ``module``, ``run``); ``loss``, ``tables`` and ``metrics`` are plain torch.

Public API (imported lazily, so ``from closure_nn.training import ClosureLoss`` does not load
Lightning):
"""
from __future__ import annotations

import importlib

_EXPORTS = {
    "train": "run", "STAGES": "choices", "run_stage": "run", "StageResult": "run",
    "predict_table": "scoring", "score_table": "scoring", "no_harm": "scoring", "NoHarmSettings": "scoring",
    "ClosureLoss": "loss", "LossSettings": "loss", "TERMS": "loss",
    "accuracy": "metrics", "predict_rows": "metrics",
    "table_tensors": "tables", "split_table": "tables", "bootstrap_table": "tables", "replay_sample": "tables",
    "ClosureTask": "module", "TableDataModule": "datamodule",
    "run_sweep": "sweep", "plan": "sweep", "summarize": "sweep",
}
__all__ = sorted(_EXPORTS)


def __getattr__(name: str):
    if name in _EXPORTS:
        return getattr(importlib.import_module(f".{_EXPORTS[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
