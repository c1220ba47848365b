"""Local flow along a line: conditions at points of the mesh and the point solve there.

A point is (segment j, position t in [0, 1] along it, pressure p). Its conditions use the
segment's diameter, roughness and inclination, the temperature interpolated linearly between
the segment's stations, the gas density rho_G(p, T), and superficial velocities from the
constant mass rates at local conditions:

.. math:: v_{SG} = \\frac{\\dot m_G}{\\rho_G A},\\qquad v_{SL} = \\frac{\\dot m_L}{\\rho_L A}

The holdup, pattern and pressure gradient come from :func:`closure_nn.physics.point.solve_points`
with the chosen closure (intermittent and dispersed rows use the physics core's models).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import torch

from ..physics.conditions import Conditions, make_conditions
from ..physics.entrainment import ishii_mishima
from ..physics.geometry import ANNULAR, STRATIFIED
from ..physics.groups import closure_features
from ..physics.holdup_roots import select_root
from ..physics.local_state import local_state
from ..physics.point import PointResult, solve_points
from ..physics import vocabulary as V
from .definition import LineDefinition
from .fluid import GasModel

_EDGE = 1e-9  # single-phase limit of h/D, as in closure_nn.physics.point


@dataclass(frozen=True)
class Mesh:
    """Computational stations ``(n+1,)`` and segments ``(n,)`` of a line (torch float64, SI)."""

    s: torch.Tensor  # distance along the pipe [m]
    z: torch.Tensor  # elevation [m]
    T: torch.Tensor  # temperature [K]
    inserted: torch.Tensor  # bool: station added by step halving
    D: torch.Tensor  # (n,) [m]
    roughness: torch.Tensor  # (n,) [m]
    sin_theta: torch.Tensor  # (n,) [-]
    level: torch.Tensor  # (n,) int64: number of halvings of the profile segment

    @property
    def h(self) -> torch.Tensor:
        return self.s[1:] - self.s[:-1]

    @property
    def n(self) -> int:
        return int(self.D.shape[0])

    @staticmethod
    def from_line(line: LineDefinition) -> "Mesh":
        t = lambda a: torch.tensor(np.array(a, dtype=np.float64))  # noqa: E731
        n = line.n_segments
        return Mesh(s=t(line.distance), z=t(line.elevation), T=t(line.T), inserted=torch.zeros(n + 1, dtype=torch.bool),
                    D=t(line.D), roughness=t(line.roughness), sin_theta=t(line.sin_theta),
                    level=torch.zeros(n, dtype=torch.int64))

    def split(self, mask: torch.Tensor) -> tuple["Mesh", torch.Tensor]:
        """Halve the segments where ``mask`` (n,) is True. Returns the new mesh and, for each
        new station, the index of the old station it is (or -1 for a new midpoint)."""
        n = self.n
        reps = 1 + mask.long()
        seg_new = torch.repeat_interleave(torch.arange(n), reps)  # parent segment of each new segment
        first = torch.ones_like(seg_new, dtype=torch.bool)
        first[1:] = seg_new[1:] != seg_new[:-1]
        # stations: start of each new segment, then the final station
        mid = ~first
        frac = torch.where(mid, 0.5, 0.0).double()
        lerp = lambda a: torch.cat([a[seg_new] + frac * (a[seg_new + 1] - a[seg_new]), a[-1:]])  # noqa: E731
        old_idx = torch.cat([torch.where(mid, -1, seg_new), torch.tensor([n])])
        ins = torch.cat([torch.where(mid, True, self.inserted[seg_new]), self.inserted[-1:]])
        mesh = Mesh(s=lerp(self.s), z=lerp(self.z), T=lerp(self.T), inserted=ins, D=self.D[seg_new],
                    roughness=self.roughness[seg_new], sin_theta=self.sin_theta[seg_new],
                    level=self.level[seg_new] + mask[seg_new].long())
        return mesh, old_idx


@dataclass(frozen=True)
class LocalFlow:
    """Point results along a line for a batch ``(K,)`` (SI; pgrad = -dp/dx [Pa/m])."""

    pgrad: torch.Tensor
    friction: torch.Tensor
    gravity: torch.Tensor
    holdup: torch.Tensor
    pattern: torch.Tensor  # int64 codes of vocabulary.PATTERNS
    flags: torch.Tensor
    vsl: torch.Tensor
    vsg: torch.Tensor
    rhog: torch.Tensor
    cond: Conditions
    result: PointResult

    def take(self, idx) -> dict[str, torch.Tensor]:
        return {k: getattr(self, k)[idx] for k in ("pgrad", "friction", "gravity", "holdup", "pattern", "flags",
                                                   "vsl", "vsg", "rhog")}


class LocalSolver:
    """Evaluate the local flow at (segment, position, pressure) points of a mesh for a closure."""

    def __init__(self, line: LineDefinition, gas: GasModel, solver: dict | None = None) -> None:
        self.line, self.gas = line, gas
        self.solver = dict(solver or {})
        self.solver.setdefault("select", "thinnest")
        self.solver.setdefault("entrainment", 0.0)
        f = line.fluid
        self.rhol, self.mul, self.sigma = f.rhol, f.mul, f.sigma

    def conditions(self, mesh: Mesh, seg: torch.Tensor, t: torch.Tensor, p: torch.Tensor) -> Conditions:
        T = mesh.T[seg] + t * (mesh.T[seg + 1] - mesh.T[seg])
        D = mesh.D[seg]
        A = math.pi * D**2 / 4
        rhog = self.gas.density(p, T)
        return make_conditions(
            vsl=self.line.m_liquid / (self.rhol * A), vsg=self.line.m_gas / (rhog * A), D=D,
            theta=torch.asin(mesh.sin_theta[seg].clamp(-1.0, 1.0)), roughness=mesh.roughness[seg], rhol=self.rhol,
            rhog=rhog, mul=self.mul, mug=self.gas.viscosity(p, T), sigma=self.sigma)

    def __call__(self, closure, mesh: Mesh, seg: torch.Tensor, t: torch.Tensor, p: torch.Tensor) -> LocalFlow:
        cond = self.conditions(mesh, seg, t, p)
        with torch.no_grad():
            r = solve_points(cond, closure, **self.solver)
        return LocalFlow(pgrad=r.pgrad.total, friction=r.pgrad.friction, gravity=r.pgrad.gravity, holdup=r.holdup,
                         pattern=r.pattern, flags=r.flags, vsl=cond.vsl, vsg=cond.vsg, rhog=cond.rhog, cond=cond,
                         result=r)

    def features(self, flow: LocalFlow) -> torch.Tensor:
        """Closure features ``(K, n_features)`` at the state where the closure gave the answer.

        Separated rows: the solved stratified or annular state; intermittent / dispersed /
        bubble rows: the stratified equilibrium that decided the pattern; single-phase rows: the
        single-phase limit state. Rows without any equilibrium get NaN features.
        """
        c, r = flow.cond, flow.result
        sel = self.solver["select"]
        strat_frac, found = select_root(r.roots, sel)
        frac = torch.where(r.separated, r.frac, strat_frac)
        liq = r.pattern == V.CODE[V.SINGLE_PHASE_LIQUID]
        gas = r.pattern == V.CODE[V.SINGLE_PHASE_GAS]
        frac = torch.where(liq, 1 - _EDGE, torch.where(gas, _EDGE, frac))
        ok = r.separated | found | liq | gas
        ann = r.separated & (r.pattern == V.CODE[V.ANNULAR])
        safe = torch.where(ok, frac, 0.25)
        x_strat = closure_features(local_state(c, torch.where(ann, 0.25, safe), STRATIFIED))
        if bool(ann.any()):
            E = ishii_mishima(c) if self.solver["entrainment"] == "ishii_mishima" else float(self.solver["entrainment"])
            x_ann = closure_features(local_state(c, torch.where(ann, safe.clamp(max=0.49), 0.1), ANNULAR, E))
            x_strat = torch.where(ann[:, None], x_ann, x_strat)
        return torch.where(ok[:, None], x_strat, float("nan"))
