"""Operating conditions of a batch of pipe-flow states.

Every field is a float64 tensor in SI units; all fields broadcast to one batch shape.
Symbols and units follow the glossary in README.md:

==========  ==========  ==========================================================
name        unit        meaning
==========  ==========  ==========================================================
vsl         m/s         superficial liquid velocity (>= 0, flow direction +x)
vsg         m/s         superficial gas velocity (>= 0)
D           m           pipe inner diameter
theta       rad         inclination from horizontal, positive upward
roughness   m           absolute wall roughness
rhol, rhog  kg/m3       liquid and gas density
mul, mug    Pa s        liquid and gas dynamic viscosity
sigma       N/m         gas-liquid surface tension
g           m/s2        gravitational acceleration (standard 9.80665)
==========  ==========  ==========================================================

Counter-current flow (negative superficial velocities) is out of scope.
"""
from __future__ import annotations

from dataclasses import dataclass, fields, replace

import torch

G_STANDARD = 9.80665  # m/s2, standard gravity (CGPM 1901; NIST SP 330)
R_UNIVERSAL = 8.314462618  # J/(mol K), CODATA 2018 molar gas constant

FIELD_NAMES = ("vsl", "vsg", "D", "theta", "roughness", "rhol", "rhog", "mul", "mug", "sigma", "g")


def _as_tensor(x: object) -> torch.Tensor:
    if isinstance(x, torch.Tensor):
        return x if x.dtype == torch.float64 else x.to(torch.float64)
    return torch.as_tensor(x, dtype=torch.float64)


@dataclass(frozen=True)
class Conditions:
    """A batch of two-phase pipe-flow conditions (SI units, see module docstring).

    All fields are broadcast to a common shape ``(*batch)`` on construction by
    :func:`make_conditions`; direct construction assumes the caller did so.
    """

    vsl: torch.Tensor
    vsg: torch.Tensor
    D: torch.Tensor
    theta: torch.Tensor
    roughness: torch.Tensor
    rhol: torch.Tensor
    rhog: torch.Tensor
    mul: torch.Tensor
    mug: torch.Tensor
    sigma: torch.Tensor
    g: torch.Tensor

    @property
    def shape(self) -> torch.Size:
        return self.vsl.shape

    @property
    def area(self) -> torch.Tensor:
        """Pipe cross-section A = pi D^2 / 4 [m2]."""
        return torch.pi * self.D**2 / 4

    @property
    def vm(self) -> torch.Tensor:
        """Mixture velocity u_M = v_SL + v_SG [m/s]."""
        return self.vsl + self.vsg

    def map(self, fn) -> "Conditions":
        """Apply ``fn`` to every field tensor (indexing, unsqueeze, detach...)."""
        return Conditions(**{f.name: fn(getattr(self, f.name)) for f in fields(self)})

    def __getitem__(self, idx) -> "Conditions":
        if isinstance(idx, torch.Tensor) and idx.dim() == 1 and idx.dtype == torch.int64:
            # positions along the first dimension: index_select, ~4x faster than t[idx]
            # (benchmarks/bench_op_costs.py)
            return self.map(lambda t: t.index_select(0, idx))
        return self.map(lambda t: t[idx])

    def unsqueeze(self, dim: int) -> "Conditions":
        return self.map(lambda t: t.unsqueeze(dim))

    def with_(self, **changes: object) -> "Conditions":
        """Copy with some fields replaced (broadcast to the batch shape)."""
        new = {k: _as_tensor(v).expand(self.shape).clone() for k, v in changes.items()}
        return replace(self, **new)

    def as_dict(self) -> dict[str, torch.Tensor]:
        return {f.name: getattr(self, f.name) for f in fields(self)}


def broadcast_shape(*shapes) -> torch.Size:
    """The broadcast shape of ``shapes`` by numpy's broadcasting rule (trailing dimensions align;
    a size-1 dimension stretches), as ``torch.broadcast_shapes`` gives it.

    Ours because ``torch.broadcast_shapes`` costs about 0.1 ms a call in torch 2.13 (it runs the
    symbolic-shape reference implementation), and the root finder calls it on every residual
    evaluation (benchmarks/README.md, issue 17).

    >>> tuple(broadcast_shape((4, 1), (1, 40), (4, 1))), tuple(broadcast_shape((), (3,)))
    ((4, 40), (3,))
    """
    ndim = max([len(s) for s in shapes] + [0])
    out = [1] * ndim
    for s in shapes:
        for i, d in enumerate(s, ndim - len(s)):
            if d != 1 and out[i] != d:
                if out[i] != 1:
                    raise ValueError(f"shapes {[tuple(x) for x in shapes]} do not broadcast")
                out[i] = d
    return torch.Size(out)


def make_conditions(
    vsl,
    vsg,
    D,
    theta=0.0,
    roughness=0.0,
    rhol=998.0,
    rhog=1.2,
    mul=1.0e-3,
    mug=1.8e-5,
    sigma=0.072,
    g=G_STANDARD,
) -> Conditions:
    """Build a :class:`Conditions` batch from scalars, arrays or tensors.

    Defaults are air-water near 20 degC and 1 atm (handbook values, e.g. Perry's, 8th ed.).
    Inputs are converted to float64 and broadcast to one shape; a single value stays one number
    seen through a stride-0 view (read-only: build new conditions with :meth:`Conditions.with_`).
    No validation happens here (see :func:`closure_nn.physics.checks.check_conditions`).

    >>> c = make_conditions(vsl=[0.1, 0.2], vsg=2.0, D=0.05)
    >>> tuple(c.shape), float(c.rhol[1])
    ((2,), 998.0)
    """
    vals = [_as_tensor(v) for v in (vsl, vsg, D, theta, roughness, rhol, rhog, mul, mug, sigma, g)]
    shape = broadcast_shape(*(v.shape for v in vals))
    # a single value (a fluid property, g) stays one number seen through a stride-0 view: no memory
    # per row (16 MB of a 1e6-row batch for sigma and g alone); arrays are made contiguous
    vals = [v.expand(shape) if v.numel() == 1 else v.expand(shape).contiguous() for v in vals]
    return Conditions(*vals)


def gas_density(p: torch.Tensor, T: torch.Tensor, molar_mass: torch.Tensor, z: torch.Tensor | float = 1.0) -> torch.Tensor:
    r"""Real-gas density from the compressibility form of the equation of state.

    .. math:: \rho_G = \frac{p M}{Z R T}

    Parameters: p [Pa] absolute pressure, T [K], molar_mass M [kg/mol], z Z [-] compressibility
    factor, R = 8.314462618 J/(mol K) (CODATA 2018). Returns rho_G [kg/m3].

    >>> round(float(gas_density(torch.tensor(101325.0), torch.tensor(288.15), torch.tensor(0.0289647))), 4)
    1.225
    """
    return p * molar_mass / (_as_tensor(z) * R_UNIVERSAL * T)
