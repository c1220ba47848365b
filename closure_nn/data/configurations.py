r"""The separated configuration of a training row, kept apart from its flow pattern.

A flow pattern (:data:`closure_nn.physics.vocabulary.PATTERNS`) is what an observer calls the
flow. A separated configuration is the geometry in which the two-fluid momentum balance is
solved for the row: stratified (a layer, h/D) or annular (a film, delta/D)
(:data:`closure_nn.physics.vocabulary.CONFIGURATION_OF_PATTERN`). Stratified smooth and wavy rows
are stratified, annular rows annular; every other pattern (intermittent, bubbly, single phase) has
no separated configuration and feeds no term that needs one.

A row without a pattern label follows a rule of its own, :class:`UnknownPatternRule`
(``data.unknown_pattern``), resolved in this module only: :func:`configuration_codes` turns a
table's labels into :class:`RowConfiguration` codes, and :func:`resolve_configurations` decides
the codes that wait for a closure (``PREDICTED``, ``PREDICTED_CLEAR``) when the row is used.
"""
from __future__ import annotations

from enum import Enum, IntEnum

import numpy as np
import pandas as pd
import torch

from ..physics.conditions import Conditions
from ..physics.geometry import ANNULAR, STRATIFIED
from ..physics.holdup_roots import solve_separated
from ..physics.patterns import classify
from ..physics.vocabulary import CODE, CONFIGURATION_OF_PATTERN


class RowConfiguration(IntEnum):
    """Code of a row's separated configuration (the batch key ``kind``, ``(N,)`` int64)."""

    STRATIFIED = 0
    ANNULAR = 1
    NONE = -1  #: not separated flow: the row feeds no separated-flow term
    PREDICTED = -2  #: decided when used: the configuration of the pattern a closure predicts
    PREDICTED_CLEAR = -3  #: the same, only where that prediction is clear of every transition


#: the separated configurations (geometry names of :mod:`closure_nn.physics.geometry`) and their codes
SEPARATED_CONFIGURATIONS = (STRATIFIED, ANNULAR)
CONFIGURATION_CODE = {STRATIFIED: RowConfiguration.STRATIFIED, ANNULAR: RowConfiguration.ANNULAR}


class UnknownPatternRule(str, Enum):
    """What a row without a pattern label is trained as (``data.unknown_pattern``).

    ``skip``: nothing (it feeds no separated-flow term). ``stratified``: a stratified row.
    ``predicted``: the configuration of the pattern a closure predicts for it, decided each time
    the row is used (as the point solver does when it scores such a row). ``predicted_clear``: the
    same, but only where that prediction is clear of every transition (:func:`clear_configuration_codes`),
    else skipped: the method's default (conf/train.yaml).
    """

    SKIP = "skip"
    STRATIFIED = "stratified"
    PREDICTED = "predicted"
    PREDICTED_CLEAR = "predicted_clear"

    @classmethod
    def parse(cls, name: "str | UnknownPatternRule") -> "UnknownPatternRule":
        try:
            return cls(name)
        except ValueError:
            raise ValueError(f"unknown_pattern must be one of {', '.join(r.value for r in cls)}, got {name!r}") from None

    @property
    def code(self) -> RowConfiguration:
        return {UnknownPatternRule.SKIP: RowConfiguration.NONE, UnknownPatternRule.STRATIFIED: RowConfiguration.STRATIFIED,
                UnknownPatternRule.PREDICTED: RowConfiguration.PREDICTED,
                UnknownPatternRule.PREDICTED_CLEAR: RowConfiguration.PREDICTED_CLEAR}[self]


UNKNOWN_PATTERN_RULES = tuple(r.value for r in UnknownPatternRule)
#: relative change of either superficial velocity that must leave a clear prediction unchanged [-]
#: (our choice: flow-pattern transition criteria are uncertain by tens of percent in velocity when
#: compared with data, common practice; a label near a boundary is itself often in doubt)
CLEAR_MARGIN = 0.2


def configuration_codes(patterns: pd.Series | None, n: int, unknown_pattern: str = "skip") -> torch.Tensor:
    """:class:`RowConfiguration` per row, ``(N,)`` int64, from the pattern labels.

    A pattern of :data:`~closure_nn.physics.vocabulary.CONFIGURATION_OF_PATTERN` gives its
    configuration, any other pattern ``NONE``; a missing label (NaN / empty) follows
    ``unknown_pattern`` (:class:`UnknownPatternRule`).

    >>> configuration_codes(pd.Series(["stratified_wavy", "annular", "intermittent", None]), 4, "predicted").tolist()
    [0, 1, -1, -2]
    """
    rule = UnknownPatternRule.parse(unknown_pattern)
    if patterns is None:
        patterns = pd.Series([None] * n)
    out = np.full(n, int(RowConfiguration.NONE), dtype=np.int64)
    for i, p in enumerate(patterns.tolist()):
        if p is None or (isinstance(p, float) and np.isnan(p)) or p == "":
            out[i] = int(rule.code)
        elif p in CONFIGURATION_OF_PATTERN:
            out[i] = int(CONFIGURATION_CODE[CONFIGURATION_OF_PATTERN[p]])
    return torch.as_tensor(out)


def predicted_configuration_codes(cond: Conditions, closure, select: str = "thinnest", n_grid: int = 40) -> torch.Tensor:
    """Configuration codes ``(N,)`` of the pattern ``closure`` predicts for ``cond`` (no gradient).

    The pattern is the point solver's (:func:`closure_nn.physics.patterns.classify` at the
    closure's stratified equilibrium); a pattern without a separated configuration (or no
    stratified root near horizontal) gives ``NONE``.
    """
    with torch.no_grad():
        code = classify(cond, solve_separated(cond, closure, STRATIFIED, select=select, n_grid=n_grid))
    out = torch.full(code.shape, int(RowConfiguration.NONE), dtype=torch.int64)
    for pattern, configuration in CONFIGURATION_OF_PATTERN.items():
        out = torch.where(code == CODE[pattern], int(CONFIGURATION_CODE[configuration]), out)
    return out


def clear_configuration_codes(cond: Conditions, closure, select: str = "thinnest", n_grid: int = 40,
                              margin: float = CLEAR_MARGIN) -> torch.Tensor:
    """Codes ``(N,)`` of :func:`predicted_configuration_codes` where the prediction is clear, else ``NONE``.

    Clear: the configuration stays the same when v_SL or v_SG alone is scaled by ``1 - margin`` or
    ``1 + margin`` (four neighbours, solved in one batch). Rows without an observed pattern near
    a predicted transition are thereby left out of training instead of being fitted in a
    configuration they may not have: a truly intermittent row fitted as stratified pulls the
    level down, which makes the stratified state more stable (Taitel & Dukler 1976), i.e. the
    misfit pushes the predicted pattern the wrong way.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> from closure_nn.closures.baseline import BaselineClosure
    >>> c = make_conditions(vsl=[0.01, 0.3, 0.1], vsg=[0.5, 1.0, 30.0], D=0.05)
    >>> clear_configuration_codes(c, BaselineClosure('taitel_dukler', 'smooth')).tolist()
    [0, -1, 1]
    """
    flat = lambda t: torch.broadcast_to(t, cond.shape).reshape(1, -1)  # noqa: E731
    n = flat(cond.vsl).shape[1]
    scale_l = torch.tensor([1.0, 1.0 - margin, 1.0 + margin, 1.0, 1.0], dtype=cond.vsl.dtype)[:, None]
    scale_g = torch.tensor([1.0, 1.0, 1.0, 1.0 - margin, 1.0 + margin], dtype=cond.vsl.dtype)[:, None]
    five = cond.map(lambda t: flat(t).expand(5, n).reshape(-1))
    five = five.with_(vsl=(scale_l * flat(cond.vsl)).reshape(-1), vsg=(scale_g * flat(cond.vsg)).reshape(-1))
    codes = predicted_configuration_codes(five, closure, select, n_grid).reshape(5, n)
    same = (codes == codes[0]).all(dim=0)
    return torch.where(same, codes[0], torch.full_like(codes[0], int(RowConfiguration.NONE))).reshape(cond.shape)


def resolve_configurations(codes: torch.Tensor, cond: Conditions, closure, select: str = "thinnest",
                           n_grid: int = 40) -> torch.Tensor:
    """``codes (N,)`` with every ``PREDICTED`` entry replaced by the configuration of the pattern
    ``closure`` predicts for that row (:func:`predicted_configuration_codes`) and every
    ``PREDICTED_CLEAR`` entry by :func:`clear_configuration_codes`; unchanged (the same tensor)
    when there is none. ``cond`` are the conditions of all N rows. The one place where the rule
    for rows of unknown pattern meets a closure."""
    pred, clear = codes == RowConfiguration.PREDICTED, codes == RowConfiguration.PREDICTED_CLEAR
    if not bool(pred.any() or clear.any()):
        return codes
    out = codes.clone()
    if pred.any():
        out[pred] = predicted_configuration_codes(cond[pred], closure, select, n_grid)
    if clear.any():
        out[clear] = clear_configuration_codes(cond[clear], closure, select, n_grid)
    return out
