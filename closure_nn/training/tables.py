"""Training tables as in-memory tensors: conversion, seeded splits, bootstrap, replay (no Lightning)."""
from __future__ import annotations

import numpy as np
import pandas as pd
import torch

from ..data.configurations import configuration_codes
from ..data.features import table_conditions
from ..physics.conditions import FIELD_NAMES
from ..physics.vocabulary import CODE

#: keys of the tensor dict of a table (all ``(N,)``); see :mod:`closure_nn.training.loss`
TENSOR_KEYS = FIELD_NAMES + ("holdup", "pgrad", "holdup_sd", "pgrad_sd", "kind", "pattern", "weight")


def _float_col(df: pd.DataFrame, name: str) -> torch.Tensor:
    if name not in df.columns:
        return torch.full((len(df),), float("nan"), dtype=torch.float64)
    return torch.tensor(pd.to_numeric(df[name], errors="coerce").to_numpy(dtype=np.float64))


def pattern_codes(df: pd.DataFrame) -> torch.Tensor:
    """Observed pattern per row as codes of :data:`closure_nn.physics.vocabulary.CODE` (-1: none)."""
    if "pattern" not in df.columns:
        return torch.full((len(df),), -1, dtype=torch.int64)
    out = np.full(len(df), -1, dtype=np.int64)
    for i, p in enumerate(df["pattern"].tolist()):
        if p is None or (isinstance(p, float) and np.isnan(p)) or p == "":
            continue
        if p not in CODE:
            where = df.attrs.get("path", "training table")
            raise ValueError(f"{where}, row {i}: pattern {p!r} is not one of {', '.join(CODE)}")
        out[i] = CODE[p]
    return torch.as_tensor(out)


def table_tensors(df: pd.DataFrame, unknown_pattern: str = "skip", weight: float | np.ndarray = 1.0) -> dict[str, torch.Tensor]:
    """A training table as a dict of ``(N,)`` tensors with the keys :data:`TENSOR_KEYS`."""
    cond = table_conditions(df)
    out = {k: getattr(cond, k).clone() for k in FIELD_NAMES}
    for name in ("holdup", "pgrad", "holdup_sd", "pgrad_sd"):
        out[name] = _float_col(df, name)
    out["kind"] = configuration_codes(df["pattern"] if "pattern" in df.columns else None, len(df), unknown_pattern)
    out["pattern"] = pattern_codes(df)
    out["weight"] = torch.as_tensor(np.broadcast_to(np.asarray(weight, dtype=np.float64), (len(df),)).copy())
    return out


def concat_tensors(parts: list[dict[str, torch.Tensor]]) -> dict[str, torch.Tensor]:
    return {k: torch.cat([p[k] for p in parts]) for k in TENSOR_KEYS}


def select_rows(t: dict[str, torch.Tensor], idx: torch.Tensor) -> dict[str, torch.Tensor]:
    return {k: v[idx] for k, v in t.items()}


def n_rows(t: dict[str, torch.Tensor]) -> int:
    return int(t["vsl"].shape[0])


def split_table(df: pd.DataFrame, val_fraction: float, seed: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Seeded random split into (train, validation); at least one row in each when possible."""
    n = len(df)
    n_val = int(round(val_fraction * n))
    n_val = min(max(n_val, 1 if n > 1 and val_fraction > 0 else 0), n - 1 if n > 1 else 0)
    perm = np.random.default_rng(seed).permutation(n)
    val, train = np.sort(perm[:n_val]), np.sort(perm[n_val:])
    return df.iloc[train].reset_index(drop=True), df.iloc[val].reset_index(drop=True)


def bootstrap_table(df: pd.DataFrame, seed: int) -> pd.DataFrame:
    """Resample rows with replacement (seeded) - one bootstrap replicate for an ensemble member."""
    idx = np.random.default_rng(seed).integers(0, len(df), size=len(df))
    return df.iloc[np.sort(idx)].reset_index(drop=True)


def replay_sample(df: pd.DataFrame, fraction: float, seed: int) -> pd.DataFrame:
    """A seeded share of earlier rows replayed during an incremental update (all rows if >= 1)."""
    if fraction >= 1.0 or len(df) == 0:
        return df.reset_index(drop=True)
    k = max(1, int(round(fraction * len(df))))
    idx = np.sort(np.random.default_rng(seed).permutation(len(df))[:k])
    return df.iloc[idx].reset_index(drop=True)
