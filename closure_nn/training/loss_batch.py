"""Reading a training batch for the loss: conditions, separated configurations, measured states and
uncertainties of the rows (plain torch, no Lightning).

A batch is a dict of ``(B,)`` tensors built by :func:`closure_nn.training.tables.table_tensors`:
the condition fields (:data:`closure_nn.physics.conditions.FIELD_NAMES`), the targets
``holdup``, ``pgrad`` (-dp/dx [Pa/m]), their 1-sigma ``holdup_sd``, ``pgrad_sd`` (NaN = not
measured / not given), the separated configuration ``kind`` (codes of
:class:`closure_nn.data.configurations.RowConfiguration`, -1 = not separated flow), the observed ``pattern``
(codes of :data:`closure_nn.physics.vocabulary.CODE`, -1 = not observed) and a row ``weight``;
optionally ``frac_measured``, the level at the measured holdup (:func:`measured_frac`), which the
training datamodule computes once per row instead of once per batch. Rows of kind
``RowConfiguration.PREDICTED`` (no observed pattern, ``unknown_pattern='predicted'``)
take, at every evaluation of the loss, the configuration of the pattern the closure in training
predicts for them (:func:`~closure_nn.data.configurations.resolve_configurations`), so they feed every term
that a row observed in that pattern would feed, except the pattern term; rows of kind
``RowConfiguration.PREDICTED_CLEAR`` (``'predicted_clear'``) likewise, but
only where that prediction is clear of a transition (else they feed no term).

Uncertainties: ``holdup_sd`` where given, else ``default_holdup_sd``; ``pgrad_sd`` where given,
else ``pgrad_rel_sd * |pgrad| + pgrad_sd_floor``.
"""
from __future__ import annotations

import torch

from ..data.configurations import (CONFIGURATION_CODE, SEPARATED_CONFIGURATIONS, RowConfiguration,
                                   resolve_configurations)
from ..data.features import frac_from_holdup
from ..physics.conditions import FIELD_NAMES, Conditions


def batch_conditions(batch: dict[str, torch.Tensor], rows: torch.Tensor | None = None) -> Conditions:
    """Conditions of the batch rows selected by ``rows`` (a bool mask or int64 row indices; all
    rows if None)."""
    cols = {k: batch[k] if rows is None else batch[k][rows] for k in FIELD_NAMES}
    return Conditions(**cols)


def batch_kinds(batch: dict[str, torch.Tensor], closure, select: str = "thinnest", n_grid: int = 40) -> torch.Tensor:
    """``batch['kind']`` with the rows of kind predicted (or predicted-clear) resolved with ``closure``
    (:func:`~closure_nn.data.configurations.resolve_configurations`); the conditions are built only when such rows exist."""
    k = batch["kind"]
    if not bool(((k == RowConfiguration.PREDICTED) | (k == RowConfiguration.PREDICTED_CLEAR)).any()):
        return k
    return resolve_configurations(k, batch_conditions(batch), closure, select, n_grid)


def measured_state_rows(holdup: torch.Tensor) -> torch.Tensor:
    """Bool mask ``(B,)`` of rows with a measured separated state: holdup given and 0 < H < 1 (a
    reading of exactly 0 or 1, clipped by the data reduction, is no separated-flow state)."""
    return torch.isfinite(holdup) & (holdup > 0) & (holdup < 1)


def measured_frac(batch: dict[str, torch.Tensor]) -> torch.Tensor:
    """h/D (stratified rows) or delta/D (annular rows) [-] at the measured holdup, ``(B,)``, from
    :func:`~closure_nn.data.features.frac_from_holdup` (no gradient); NaN where a row has no
    measured separated state (:func:`measured_state_rows`, ``kind`` -1).

    :class:`ClosureLoss` computes it per batch unless the batch carries it as the key
    ``frac_measured`` (the training datamodule stores it once per row, since it depends on the
    row alone).
    """
    H = batch["holdup"]
    out = torch.full_like(H, float("nan"))
    rows = measured_state_rows(H)
    for kind in SEPARATED_CONFIGURATIONS:
        sel = rows & (batch["kind"] == CONFIGURATION_CODE[kind])
        if sel.any():
            out[sel] = frac_from_holdup(H[sel], kind).detach()
    return out


def uncertainties(batch: dict[str, torch.Tensor], cfg) -> tuple[torch.Tensor, torch.Tensor]:
    """Per-row sigma_H [-] and sigma_p [Pa/m] (given values, else the defaults), ``(B,)``."""
    sh = batch["holdup_sd"]
    sh = torch.where(torch.isfinite(sh) & (sh > 0), sh, torch.full_like(sh, cfg.default_holdup_sd))
    p = batch["pgrad"]
    default_p = cfg.pgrad_rel_sd * torch.nan_to_num(p).abs() + cfg.pgrad_sd_floor
    sp = batch["pgrad_sd"]
    sp = torch.where(torch.isfinite(sp) & (sp > 0), sp, default_p)
    return sh, sp

