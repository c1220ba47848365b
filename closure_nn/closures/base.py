"""The one closure interface shared by baseline correlations and neural closures.

A closure maps a batch of :class:`~closure_nn.physics.local_state.LocalState` (any batch shape;
evaluated elementwise, so it can be called on a grid of trial holdups) to the three Fanning
friction factors f_WL, f_WG, f_i. It is an ``nn.Module`` so that learned closures expose their
parameters to the implicit-gradient solver; baseline closures have none.
"""
from __future__ import annotations

from torch import nn

from ..physics.local_state import LocalState
from ..physics.momentum import FrictionFactors


class Closure(nn.Module):
    """Abstract closure: ``closure(state) -> FrictionFactors`` (each f shaped like the state).

    Contract: elementwise in the batch, finite and positive for finite positive states,
    differentiable in the state (and in parameters, if any).
    """

    #: a short human-readable description, written into results
    label: str = "closure"

    def forward(self, state: LocalState) -> FrictionFactors:  # pragma: no cover - interface
        raise NotImplementedError

    def describe(self) -> dict:
        """JSON-able description for run provenance."""
        return {"label": self.label, "class": type(self).__name__}
