"""The LightningModule: wraps a plain :class:`~closure_nn.closures.neural.NeuralClosure` and the loss."""
from __future__ import annotations

import time

import lightning as L
import torch

from ..closures.neural import NeuralClosure
from .choices import LR_SCHEDULES
from .loss import TERMS, ClosureLoss, LossSettings
from .metrics import accuracy
from .tables import n_rows

#: learning-rate schedules of ``trainer.lr_schedule``


class ClosureTask(L.LightningModule):
    """Training/validation steps, logging of every loss term and the accuracy metrics.

    Logged keys: ``train/loss``, ``train/<term>``, ``val/loss``, ``val/<term>``,
    ``val/holdup_rmse``, ``val/pgrad_rel_rmse`` (terms of :data:`closure_nn.training.loss.TERMS`).
    """

    def __init__(self, closure: NeuralClosure, loss: LossSettings, lr: float, weight_decay: float = 0.0,
                 select: str = "thinnest", lr_schedule: str = "constant", lr_final_factor: float = 0.1,
                 max_epochs: int = 1) -> None:
        super().__init__()
        if lr_schedule not in LR_SCHEDULES:
            raise ValueError(f"trainer.lr_schedule = {lr_schedule!r}; expected one of {', '.join(LR_SCHEDULES)}")
        self.closure = closure
        self.loss = ClosureLoss(loss)
        self.lr, self.weight_decay, self.select = float(lr), float(weight_decay), select
        self.lr_schedule, self.lr_final_factor, self.max_epochs = lr_schedule, float(lr_final_factor), int(max_epochs)

    def _log_terms(self, prefix: str, total: torch.Tensor, terms: dict, n: int) -> None:
        kw = dict(batch_size=n, sync_dist=True, on_epoch=True, on_step=False)
        self.log(f"{prefix}/loss", total.detach(), prog_bar=True, **kw)
        for k in TERMS:
            if self.loss.settings.weights[k] > 0:
                self.log(f"{prefix}/{k}", terms[k].detach(), **kw)

    def training_step(self, batch: dict[str, torch.Tensor], batch_idx: int) -> torch.Tensor:
        total, terms, _ = self.loss(self.closure, batch)
        self._log_terms("train", total, terms, n_rows(batch))
        return total

    def validation_step(self, batch: dict[str, torch.Tensor], batch_idx: int) -> None:
        with torch.enable_grad():  # the smoothness term differentiates w.r.t. the features
            total, terms, _ = self.loss(self.closure, batch)
        n = n_rows(batch)
        self._log_terms("val", total, terms, n)
        acc = accuracy(self.closure, batch, self.select)
        for k in ("holdup_rmse", "pgrad_rel_rmse"):
            v = acc[k]
            self.log(f"val/{k}", torch.tensor(v if v == v else 0.0, dtype=torch.float64), batch_size=n,
                     sync_dist=True, prog_bar=(k == "holdup_rmse"))

    def configure_optimizers(self):
        params = [p for p in self.closure.parameters() if p.requires_grad]
        opt = torch.optim.Adam(params, lr=self.lr, weight_decay=self.weight_decay)
        if self.lr_schedule == "constant":
            return opt
        # cosine decay per epoch from lr to lr * lr_final_factor at max_epochs (Loshchilov & Hutter
        # 2017, SGDR, eq. 5 without restarts); its state is in the checkpoints, so resume continues it
        sched = torch.optim.lr_scheduler.CosineAnnealingLR(opt, T_max=max(self.max_epochs, 1),
                                                           eta_min=self.lr * self.lr_final_factor)
        return {"optimizer": opt, "lr_scheduler": {"scheduler": sched, "interval": "epoch"}}


class EpochTimer(L.Callback):
    """Wall time of every training epoch [s] (reported in the metrics, never asserted on)."""

    def __init__(self) -> None:
        self.seconds: list[float] = []
        self._t0 = 0.0

    def on_train_epoch_start(self, trainer, pl_module) -> None:
        self._t0 = time.perf_counter()

    def on_train_epoch_end(self, trainer, pl_module) -> None:
        self.seconds.append(time.perf_counter() - self._t0)


class EpochProgress(L.Callback):
    """One progress line every ``every`` epochs (and at the last): epoch, training and validation loss.

    ``say``: a function that prints one line (e.g. ``print``)."""

    def __init__(self, say, label: str, every: int = 10) -> None:
        self.say, self.label, self.every = say, label, max(int(every), 1)

    def on_validation_epoch_end(self, trainer, pl_module) -> None:
        e = trainer.current_epoch + 1
        if e % self.every and e != trainer.max_epochs:
            return
        m = trainer.callback_metrics
        val = m.get("val/loss")
        tr = m.get("train/loss")
        parts = [f"{self.label}: epoch {e}/{trainer.max_epochs}"]
        if tr is not None:
            parts.append(f"training loss {float(tr):.4g}")
        if val is not None:
            parts.append(f"validation loss {float(val):.4g}")
        self.say(", ".join(parts))
