"""LightningDataModule over in-memory training tensors (num_workers = 0, seeded epoch order)."""
from __future__ import annotations

import lightning as L
import torch
from torch.utils.data import DataLoader, Dataset, Sampler

from .loss_batch import measured_frac
from .tables import n_rows


class TensorRows(Dataset):
    """Row ``i`` of a dict of ``(N,)`` tensors; ``__getitems__`` fetches a whole batch at once.

    The columns are kept as one ``(N, K)`` matrix per dtype, so a batch is one row gather per
    dtype (row-contiguous memory) instead of one scattered gather per column; the batch values
    are the columns' own, each a contiguous ``(B,)`` tensor.
    """

    def __init__(self, tensors: dict[str, torch.Tensor]) -> None:
        self.tensors = tensors
        self._n = n_rows(tensors) if tensors else 0
        groups: dict[torch.dtype, list[str]] = {}
        for k, v in tensors.items():
            groups.setdefault(v.dtype, []).append(k)
        self._groups = [(keys, torch.stack([tensors[k] for k in keys], dim=1)) for keys in groups.values()]

    def __len__(self) -> int:
        return self._n

    def __getitem__(self, i: int) -> dict[str, torch.Tensor]:
        return {k: v[i] for k, v in self.tensors.items()}

    def __getitems__(self, idx: list[int]) -> dict[str, torch.Tensor]:
        ix = torch.as_tensor(idx, dtype=torch.int64)
        out: dict[str, torch.Tensor] = {}
        for keys, m in self._groups:
            cols = m.index_select(0, ix).T.contiguous()  # (K, B): each column contiguous
            out.update(zip(keys, cols.unbind(0)))
        return {k: out[k] for k in self.tensors}  # the caller's key order


def _identity(batch):
    return batch


def with_measured_frac(t: dict[str, torch.Tensor]) -> dict[str, torch.Tensor]:
    """``t`` plus the key ``frac_measured`` (:func:`closure_nn.training.loss_batch.measured_frac`): the
    level at the measured holdup depends on the row alone, so it is computed once per row here
    rather than in every batch of every epoch."""
    if not t or n_rows(t) == 0:
        return dict(t)
    return {**t, "frac_measured": measured_frac(t)}


class EpochSeededSampler(Sampler[int]):
    """Random order that depends only on (seed, epoch), so a resumed run sees the same batches.

    Lightning calls :meth:`set_epoch` at the start of every epoch. Under DDP Lightning replaces
    it by its distributed sampler (seeded from the global seed), so all ranks agree.
    """

    def __init__(self, n: int, seed: int, shuffle: bool = True) -> None:
        self.n, self.seed, self.shuffle, self.epoch = n, int(seed), shuffle, 0

    def set_epoch(self, epoch: int) -> None:
        self.epoch = int(epoch)

    def __len__(self) -> int:
        return self.n

    def __iter__(self):
        if not self.shuffle:
            return iter(range(self.n))
        g = torch.Generator().manual_seed(self.seed * 100003 + self.epoch)
        return iter(torch.randperm(self.n, generator=g).tolist())


class TableDataModule(L.LightningDataModule):
    """Train and validation tensors (from :func:`closure_nn.training.tables.table_tensors`), each
    with ``frac_measured`` added (:func:`with_measured_frac`)."""

    def __init__(self, train: dict[str, torch.Tensor], val: dict[str, torch.Tensor], batch_size: int, seed: int) -> None:
        super().__init__()
        self.train_t, self.val_t = with_measured_frac(train), with_measured_frac(val)
        self.batch_size, self.seed = int(batch_size), int(seed)

    def train_dataloader(self) -> DataLoader:
        ds = TensorRows(self.train_t)
        return DataLoader(ds, batch_size=self.batch_size, sampler=EpochSeededSampler(len(ds), self.seed),
                          collate_fn=_identity, num_workers=0)

    def val_dataloader(self) -> DataLoader:
        ds = TensorRows(self.val_t)
        return DataLoader(ds, batch_size=max(len(ds), 1), shuffle=False, collate_fn=_identity, num_workers=0)
