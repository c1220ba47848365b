"""Mechanistic baseline closure assembled from published correlations chosen by name."""
from __future__ import annotations

import torch

from ..physics.geometry import ANNULAR
from ..physics.local_state import LocalState
from ..physics.momentum import FrictionFactors
from .base import Closure
from .correlations import INTERFACE, WALL, lookup


class BaselineClosure(Closure):
    """Wall friction for both phases + interfacial friction, each a named correlation.

    Parameters
    ----------
    wall : {'taitel_dukler', 'churchill'}
        Wall friction of both phases on hydraulic-diameter Reynolds numbers.
    interface : {'smooth', 'andritsos_hanratty', 'wallis'}
        Interfacial friction for stratified states.
    annular_interface : str
        Interfacial friction for annular-film states (default 'wallis').
    interface_kwargs : dict, optional
        Extra constants passed to the interfacial correlation (e.g. Andritsos-Hanratty ``coef``).

    >>> BaselineClosure().label
    'baseline(wall=taitel_dukler, interface=andritsos_hanratty, annular=wallis)'
    """

    def __init__(
        self,
        wall: str = "taitel_dukler",
        interface: str = "andritsos_hanratty",
        annular_interface: str = "wallis",
        interface_kwargs: dict | None = None,
    ) -> None:
        super().__init__()
        self.wall_name, self.interface_name, self.annular_name = wall, interface, annular_interface
        self._wall = lookup(WALL, wall, "wall friction")
        self._interface = lookup(INTERFACE, interface, "interfacial friction")
        self._annular = lookup(INTERFACE, annular_interface, "interfacial friction")
        self.interface_kwargs = dict(interface_kwargs or {})
        self.label = f"baseline(wall={wall}, interface={interface}, annular={annular_interface})"

    def forward(self, state: LocalState) -> FrictionFactors:
        f_wl = self._wall(state, "liquid")
        f_wg = self._wall(state, "gas")
        if state.kind == ANNULAR:
            f_i = self._annular(state, f_wg)
        else:
            f_i = self._interface(state, f_wg, **self.interface_kwargs)
        # a correlation may depend on fewer inputs than the state has (Wallis: frac only)
        f_wl, f_wg, f_i = torch.broadcast_tensors(f_wl, f_wg, f_i)
        return FrictionFactors(f_wl=f_wl, f_wg=f_wg, f_i=f_i)

    def describe(self) -> dict:
        return {**super().describe(), "wall": self.wall_name, "interface": self.interface_name,
                "annular_interface": self.annular_name, "interface_kwargs": self.interface_kwargs}
