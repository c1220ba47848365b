r"""Neural friction closures: a small MLP on the dimensionless groups of a local state.

The network reads the :data:`~closure_nn.physics.groups.FEATURE_NAMES` groups of a
:class:`~closure_nn.physics.local_state.LocalState` (any trial h/D or delta/D, any batch shape),
standardised with scaler buffers saved in the model, and returns three positive Fanning factors.

Two output modes (``mode``):

* ``'correction'`` - a bounded multiplicative correction of a mechanistic baseline,

  .. math:: f_k = f_{k,\mathrm{base}}\,\exp\!\big(b\,\tanh(o_k)\big),\qquad k \in \{WL, WG, i\}

  with the bound ``b`` (so :math:`e^{-b} \le f/f_\mathrm{base} \le e^{b}`). The last layer starts at
  zero, so an untrained model IS the baseline and a model far outside its data stays within
  a factor :math:`e^{b}` of it.
* ``'direct'`` - the friction factors themselves, :math:`\ln f_k = \ln f_{k,\mathrm{ref}} + s\tanh(o_k/s)`
  with reference levels ``log_f_ref`` (set from the baseline at the training states) and a soft
  span ``s`` (``direct_span``) that keeps the root finder finite.

Positivity holds by construction in both modes (exponential of a finite number).

Baseline input (``base_input=True``): the branches that predict f_i also read
:math:`\beta = \ln(f_{i,\mathrm{base}}/f_{WG,\mathrm{base}})`, the baseline's own interfacial
enhancement over the gas wall (not standardised; 0 for a smooth interface, and, with the
Andritsos & Hanratty (1987) interface, 0 below its gas-velocity threshold and rising above it).
A correction of a baseline with a switch has a kink where the switch is, at a place set by
dimensional quantities (Andritsos-Hanratty: :math:`v_{SG}\sqrt{\rho_G/\rho_0}` = 5 m/s) that
the dimensionless groups do not locate; the input tells the network where the baseline's switch
lies. Feeding the model that is being corrected to the correcting network is common practice
in residual learning.

The training domain (per-feature bounds plus a nearest-neighbour distance threshold in the
standardised feature space, fitted by :mod:`closure_nn.data.features`) is stored in buffers, so it
travels with the weights; :meth:`NeuralClosure.in_domain` flags states outside it.

A second domain of the same kind, the measured-data domain (buffers ``measured_*``), covers only the
rows of the fine-tune and update stages (flow-loop measurements), not the synthetic pre-training
points; :meth:`NeuralClosure.in_measured_domain` flags states outside it. A pre-trained-only closure
has an empty measured-data domain: every state is outside it.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import torch
from torch import nn

from ..physics.groups import FEATURE_NAMES, closure_features
from ..physics.local_state import LocalState
from ..physics.momentum import FrictionFactors
from .base import Closure
from .baseline import BaselineClosure

MODES = ("correction", "direct")
ACTIVATIONS: dict[str, type[nn.Module]] = {"silu": nn.SiLU, "tanh": nn.Tanh, "softplus": nn.Softplus, "gelu": nn.GELU}
N_OUT = 3  # f_WL, f_WG, f_i
OUTPUT_NAMES = ("f_wl", "f_wg", "f_i")


@dataclass(frozen=True)
class NeuralEvaluation:
    """One evaluation of a :class:`NeuralClosure` at a batch of states, with the intermediates that
    the training loss reuses (so it evaluates the features, the network and the baseline once).

    Shapes: ``factors``, ``base`` and ``g`` are ``(*batch, 3)`` in the order f_WL, f_WG, f_i;
    ``inputs`` holds the network input ``(*batch, F)`` (the standardised features, plus the baseline
    input as column F - 1 with ``base_input``) once per branch (one shared tensor,
    or one gradient leaf per branch with ``input_grad=True``) and ``g`` is computed from them.
    """

    factors: torch.Tensor  #: Fanning factors f_k [-]
    base: torch.Tensor | None  #: baseline factors f_k,base [-] (correction mode), else None
    g: torch.Tensor  #: the network's part of ln f [-] (see :meth:`NeuralClosure.learned_log_factor`)
    inputs: tuple[torch.Tensor, ...]  #: network input z [-] (see above), one entry per branch
    #: the network outputs o before the bound (``(*batch, 3)``, 0 for factors not learned): in
    #: correction mode ``g = b tanh(o)``, so ``b o`` is the log correction without the bound
    raw: torch.Tensor | None = None

    def friction(self) -> FrictionFactors:
        """``factors`` as :class:`~closure_nn.physics.momentum.FrictionFactors` (views, ``(*batch)`` each)."""
        f = self.factors
        return FrictionFactors(f_wl=f[..., 0], f_wg=f[..., 1], f_i=f[..., 2])


def domain_mask(z: torch.Tensor, lo: torch.Tensor, hi: torch.Tensor, points: torch.Tensor,
                threshold: torch.Tensor, margin: float = 0.0, chunk: int = 4096) -> torch.Tensor:
    """Bool mask ``(*batch)``: standardised features ``z (*batch, F)`` inside the training domain.

    A point is inside when every feature lies in ``[lo - margin, hi + margin]`` (standardised
    units) AND its Euclidean distance to the nearest training point ``points (M, F)`` is at most
    ``threshold``. With no stored points (``M = 0``) every point counts as outside.
    This is the one implementation of the check; :class:`closure_nn.data.features.TrainingDomain`
    calls it too.
    """
    flat = z.detach().reshape(-1, z.shape[-1])
    if points.shape[0] == 0:
        return torch.zeros(z.shape[:-1], dtype=torch.bool)
    box = ((flat >= lo - margin) & (flat <= hi + margin)).all(dim=-1)
    near = torch.empty_like(box)
    for i in range(0, flat.shape[0], chunk):
        d = torch.cdist(flat[i:i + chunk], points).min(dim=-1).values
        near[i:i + chunk] = d <= threshold
    return (box & near).reshape(z.shape[:-1])


def _factor_bounds(bound: float | dict, direct_span: float) -> list[float]:
    """The correction bound of each factor (f_wl, f_wg, f_i) [-], checked positive and known."""
    bounds = [float(bound.get(k, 1.0)) for k in OUTPUT_NAMES] if isinstance(bound, dict) else [float(bound)] * 3
    if isinstance(bound, dict) and set(bound) - set(OUTPUT_NAMES):
        raise ValueError(f"bound: unknown factor(s) {sorted(set(bound) - set(OUTPUT_NAMES))}; known: {', '.join(OUTPUT_NAMES)}")
    if min(bounds) <= 0 or direct_span <= 0:
        raise ValueError(f"bound and direct_span must be positive, got {bound} and {direct_span}")
    return bounds


def _branch_layout(inputs: dict | None, learn: list[str], base_input: bool) -> tuple[dict | None, list]:
    """The checked ``inputs`` table (output -> feature names or None) and the branches, each
    (input column indices, output indices). One branch for all learned factors when ``inputs`` is
    None; else one per learned factor. Column ``len(FEATURE_NAMES)`` is the baseline input, read
    by branches of f_i when ``base_input``."""
    n_in = len(FEATURE_NAMES)
    learned = [OUTPUT_NAMES.index(k) for k in learn]
    i_fi = OUTPUT_NAMES.index("f_i")
    extra = lambda outs: [n_in] if base_input and i_fi in outs else []  # noqa: E731
    if inputs is None:
        return None, [(list(range(n_in)) + extra(learned), learned)]
    unknown = set(inputs) - set(OUTPUT_NAMES)
    if unknown:
        raise ValueError(f"inputs: unknown output(s) {', '.join(sorted(unknown))}; known: {', '.join(OUTPUT_NAMES)}")
    table = {k: (None if inputs.get(k) is None else list(inputs[k])) for k in OUTPUT_NAMES}
    branches = []
    for j, k in enumerate(OUTPUT_NAMES):
        if k not in learn:
            continue
        names = table[k] or list(FEATURE_NAMES)
        bad = [n for n in names if n not in FEATURE_NAMES]
        if bad:
            raise ValueError(f"inputs.{k}: unknown feature(s) {', '.join(bad)}; known: {', '.join(FEATURE_NAMES)}")
        branches.append(([FEATURE_NAMES.index(n) for n in names] + extra([j]), [j]))
    return table, branches


def _branch_net(n_in: int, hidden: tuple[int, ...], activation: str, n_out: int) -> nn.Sequential:
    """An MLP ``n_in -> hidden... -> n_out`` whose last layer starts at zero (zero correction)."""
    layers: list[nn.Module] = []
    width = n_in
    for h in hidden:
        layers += [nn.Linear(width, h), ACTIVATIONS[activation]()]
        width = h
    head = nn.Linear(width, n_out)
    nn.init.zeros_(head.weight)
    nn.init.zeros_(head.bias)
    return nn.Sequential(*layers, head)


class NeuralClosure(Closure):
    """MLP closure ``state -> FrictionFactors`` (see module docstring for the two modes).

    Parameters
    ----------
    hidden : sequence of int
        Widths of the hidden layers, e.g. ``(32, 32)``.
    activation : {'silu', 'tanh', 'softplus', 'gelu'}
        Smooth activation, so the closure and its root-finder residual stay differentiable.
    mode : {'correction', 'direct'}
    bound : float
        ``b`` of the correction mode; the learned factor lies in ``[e^-b, e^b]``.
    direct_span : float
        ``s`` of the direct mode [-, natural log units].
    baseline : BaselineClosure or dict, optional
        The mechanistic baseline (constructor keywords if a dict); used by the correction mode
        and, in both modes, by the prior of the training loss. Default ``BaselineClosure()``.
    inputs : dict, optional
        Feature names each output sees, e.g. ``{'f_wl': ['log10_Re_L', 'frac', 'rel_rough'],
        'f_wg': [...], 'f_i': None}`` (None: all features). Given, the model is one MLP per
        output on its own features; absent, one shared MLP with three outputs. Restricting the
        wall factors to wall variables (their Reynolds number, roughness, level) mirrors the
        single-phase form of wall friction in two-fluid models (Taitel & Dukler 1976).
    base_input : bool
        The f_i branches also read the baseline's ln(f_i / f_WG) (module docstring). Default False
        (bundles written before this option load with it off).
    learn : sequence of str, optional
        The factors the network predicts (default all three); the others are the baseline's.
        Holdup and pressure-gradient data give two balance equations per state for three
        factors, so learning all three leaves one direction fixed only by the model structure,
        the prior and the smoothness penalty; learning ``['f_i']`` on a trusted wall
        correlation is fully determined by the data. Our default learns all three and makes the
        split physical in the loss: the wall factors are anchored to the baseline wall
        correlation about 100 times more strongly than f_i (``prior_factors`` of
        :class:`closure_nn.training.loss.LossSettings`); a wall-friction error of the baseline
        therefore shows up partly as a compensating f_i, not as a learned wall factor.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> from closure_nn.physics.local_state import local_state
    >>> s = local_state(make_conditions(vsl=0.05, vsg=[2.0, 4.0], D=0.05), torch.tensor([0.2, 0.3]), 'stratified')
    >>> net, base = NeuralClosure(hidden=(8,)), BaselineClosure()
    >>> bool(torch.equal(net(s).f_i, base(s).f_i))  # zero correction at initialisation
    True
    """

    def __init__(self, hidden: Sequence[int] = (32, 32), activation: str = "silu", mode: str = "correction",
                 bound: float | dict = 1.0, direct_span: float = 6.0,
                 baseline: BaselineClosure | dict | None = None, inputs: dict | None = None,
                 learn: Sequence[str] | None = None, base_input: bool = False) -> None:
        super().__init__()
        if mode not in MODES:
            raise ValueError(f"unknown neural closure mode {mode!r}; known: {', '.join(MODES)}")
        if activation not in ACTIVATIONS:
            raise ValueError(f"unknown activation {activation!r}; known: {', '.join(ACTIVATIONS)}")
        bounds = _factor_bounds(bound, direct_span)
        if baseline is None:
            baseline = BaselineClosure()
        elif isinstance(baseline, dict):
            baseline = BaselineClosure(**baseline)
        self.baseline = baseline
        self.mode, self.activation, self.direct_span = mode, activation, float(direct_span)
        self.base_input = bool(base_input)
        # one bound per factor (f_wl, f_wg, f_i): |ln(f / f_base)| <= bound in correction mode
        self.bound = dict(zip(OUTPUT_NAMES, bounds)) if isinstance(bound, dict) else float(bound)
        self.hidden = tuple(int(h) for h in hidden)
        n_in = len(FEATURE_NAMES)
        self.learn = list(OUTPUT_NAMES) if learn is None else [k for k in OUTPUT_NAMES if k in set(learn)]
        if learn is not None and (set(learn) - set(OUTPUT_NAMES) or not self.learn):
            raise ValueError(f"learn: expected a non-empty subset of {', '.join(OUTPUT_NAMES)}, got {list(learn)}")
        if self.learn != list(OUTPUT_NAMES) and mode != "correction":
            raise ValueError("learn: a subset of the factors needs mode='correction'")
        self.inputs, branches = _branch_layout(inputs, self.learn, self.base_input)
        self.branch_inputs = [b[0] for b in branches]
        # per branch: None where it reads every feature in order (no copy), else an index tensor
        self._branch_index = [None if idx == list(range(n_in)) else torch.tensor(idx, dtype=torch.int64)
                              for idx in self.branch_inputs]
        self.branch_outputs = [b[1] for b in branches]
        self.branches = nn.ModuleList(_branch_net(len(idx), self.hidden, activation, len(outs)) for idx, outs in branches)
        self.double()
        self._register_buffers(n_in, bounds)
        #: False for a closure loaded from a bundle written before the measured-data domain existed
        self.measured_domain_recorded = True
        self.label = f"neural({mode}, hidden={list(self.hidden)}, {activation})"

    def _register_buffers(self, n_in: int, bounds: list[float]) -> None:
        """Bounds, feature scaling, reference log-factors and the two domains (training data, and
        measured data: empty until a fine-tune or update stores its rows' domain)."""
        f64 = dict(dtype=torch.float64)
        self.register_buffer("bound_vec", torch.tensor(bounds, **f64))
        self.register_buffer("feature_mean", torch.zeros(n_in, **f64))
        self.register_buffer("feature_std", torch.ones(n_in, **f64))
        self.register_buffer("log_f_ref", torch.log(torch.tensor([0.005, 0.005, 0.01], **f64)))
        self.register_buffer("domain_lo", torch.full((n_in,), -torch.inf, **f64))
        self.register_buffer("domain_hi", torch.full((n_in,), torch.inf, **f64))
        self.register_buffer("domain_points", torch.zeros(0, n_in, **f64))
        self.register_buffer("domain_threshold", torch.tensor(0.0, **f64))
        self.register_buffer("measured_lo", torch.full((n_in,), torch.inf, **f64))
        self.register_buffer("measured_hi", torch.full((n_in,), -torch.inf, **f64))
        self.register_buffer("measured_points", torch.zeros(0, n_in, **f64))
        self.register_buffer("measured_threshold", torch.tensor(0.0, **f64))

    # ----------------------------------------------------------------- configuration
    @property
    def hparams(self) -> dict:
        """JSON-able constructor arguments (what a bundle needs to rebuild the model)."""
        b = self.baseline
        return {"hidden": list(self.hidden), "activation": self.activation, "mode": self.mode,
                "bound": self.bound, "direct_span": self.direct_span, "inputs": self.inputs,
                "learn": list(self.learn), "base_input": self.base_input,
                "baseline": {"wall": b.wall_name, "interface": b.interface_name,
                             "annular_interface": b.annular_name, "interface_kwargs": dict(b.interface_kwargs)}}

    def set_scaler(self, mean: torch.Tensor, std: torch.Tensor) -> None:
        """Store the feature standardisation ``z = (x - mean) / std`` (each ``(F,)``)."""
        self.feature_mean.copy_(torch.as_tensor(mean, dtype=torch.float64))
        self.feature_std.copy_(torch.as_tensor(std, dtype=torch.float64))

    def set_domain(self, lo: torch.Tensor, hi: torch.Tensor, points: torch.Tensor, threshold: float) -> None:
        """Store the training domain in standardised units: bounds ``(F,)``, points ``(M, F)``."""
        self.domain_lo = torch.as_tensor(lo, dtype=torch.float64).clone()
        self.domain_hi = torch.as_tensor(hi, dtype=torch.float64).clone()
        self.domain_points = torch.as_tensor(points, dtype=torch.float64).clone()
        self.domain_threshold = torch.as_tensor(float(threshold), dtype=torch.float64)

    def set_measured_domain(self, lo: torch.Tensor, hi: torch.Tensor, points: torch.Tensor, threshold: float) -> None:
        """Store the measured-data domain (standardised units, as :meth:`set_domain`): bounds ``(F,)``,
        points ``(M, F)`` of the fine-tune/update rows; ``M = 0`` means no measured rows."""
        self.measured_lo = torch.as_tensor(lo, dtype=torch.float64).clone()
        self.measured_hi = torch.as_tensor(hi, dtype=torch.float64).clone()
        self.measured_points = torch.as_tensor(points, dtype=torch.float64).clone()
        self.measured_threshold = torch.as_tensor(float(threshold), dtype=torch.float64)
        self.measured_domain_recorded = True

    def freeze_layers(self, n: int) -> None:
        """Stop training the first ``n`` hidden Linear layers of every branch (fine-tuning); the
        output layer always trains."""
        if n > len(self.hidden):
            raise ValueError(f"cannot freeze {n} layers: the model has {len(self.hidden)} hidden layers")
        for branch in self.branches:
            linears = [m for m in branch if isinstance(m, nn.Linear)]
            for i, lin in enumerate(linears):
                for p in lin.parameters():
                    p.requires_grad_(i >= n or i == len(linears) - 1)

    # ----------------------------------------------------------------- evaluation
    def standardise(self, x: torch.Tensor) -> torch.Tensor:
        """Features ``(*batch, F)`` -> standardised ``(*batch, F)``."""
        return (x - self.feature_mean) / self.feature_std

    def learned_log_factor(self, z: torch.Tensor | Sequence[torch.Tensor]) -> torch.Tensor:
        """The network's part of ln f, ``(*batch, 3)``: :meth:`network_outputs` through the bound."""
        return self.squash(self.network_outputs(z))

    def squash(self, out: torch.Tensor) -> torch.Tensor:
        """Network outputs o ``(*batch, 3)`` -> the network's part of ln f. Correction mode:
        :math:`b\\tanh(o)`, the log of f / f_base. Direct mode: :math:`s\\tanh(o/s)`, the log of f / f_ref."""
        if self.mode == "correction":
            return self.bound_vec * torch.tanh(out)
        return self.direct_span * torch.tanh(out / self.direct_span)

    def network_outputs(self, z: torch.Tensor | Sequence[torch.Tensor]) -> torch.Tensor:
        """The network outputs o ``(*batch, 3)`` (0 for factors not learned) from the network input ``z (*batch, F)``
        (standardised features, and the baseline input as the last column with ``base_input``;
        :meth:`evaluate` builds it); :meth:`squash` turns them into the network's part of ln f.

        ``z`` may also be a sequence of one features tensor per branch (``len(self.branches)``,
        each ``(*batch, F)``), branch ``b`` reading only ``z[b]``; with one gradient leaf per
        branch a single backward pass then gives every branch's input gradient separately (the
        smoothness penalty of :mod:`closure_nn.training.loss`).
        """
        zs = (z,) * len(self.branches) if isinstance(z, torch.Tensor) else tuple(z)
        if len(zs) != len(self.branches):
            raise ValueError(f"network_outputs: {len(zs)} feature tensors for {len(self.branches)} branches")
        parts = [branch(zb if ix is None else zb.index_select(-1, ix))
                 for branch, ix, zb in zip(self.branches, self._branch_index, zs)]
        out = parts[0] if len(parts) == 1 else torch.cat(parts, dim=-1)  # branches ordered by output
        if out.shape[-1] != N_OUT:  # factors not learned keep a zero log-correction
            full = torch.zeros(*out.shape[:-1], N_OUT, dtype=out.dtype)
            full[..., [j for outs in self.branch_outputs for j in outs]] = out
            out = full
        return out

    def log_friction(self, state: LocalState) -> torch.Tensor:
        """ln of (f_WL, f_WG, f_i), shape ``(*batch, 3)``."""
        return torch.log(torch.stack(tuple(self(state)), dim=-1))

    def evaluate(self, state: LocalState, input_grad: bool = False) -> NeuralEvaluation:
        """The factors at ``state`` with their intermediates (:class:`NeuralEvaluation`).

        ``input_grad``: the standardised features enter the network as one gradient leaf per
        branch (``inputs``, detached from the state), so that ``g`` can be differentiated with
        respect to the features. ``factors`` keep their gradient with respect to the state all
        the same: for a state that carries one, they come from a second pass on the attached
        features.
        """
        z = self.standardise(closure_features(state))
        base = torch.stack(tuple(self.baseline(state)), dim=-1) if self.mode == "correction" or self.base_input else None
        if self.base_input:
            z = torch.cat([z, torch.log(base[..., 2] / base[..., 1]).unsqueeze(-1)], dim=-1)
        if input_grad:
            zs = tuple(z.detach().requires_grad_(True) for _ in self.branches)
        else:
            zs = (z,) * len(self.branches)
        raw = self.network_outputs(zs)
        g = self.squash(raw)
        g_f = self.learned_log_factor(z) if input_grad and z.requires_grad else g
        if self.mode == "correction":
            # f_base * exp(g) rather than exp(ln f_base + g): exactly the baseline where g = 0
            f = base * torch.exp(g_f)
        else:
            f = torch.exp(self.log_f_ref + g_f)
            base = None
        return NeuralEvaluation(factors=f, base=base, g=g, inputs=zs, raw=raw)

    def forward(self, state: LocalState) -> FrictionFactors:
        return self.evaluate(state).friction()

    def in_domain(self, features: torch.Tensor, margin: float = 0.0) -> torch.Tensor:
        """Bool mask ``(*batch)``: raw features ``(*batch, F)`` inside the stored training domain."""
        return domain_mask(self.standardise(torch.as_tensor(features, dtype=torch.float64)), self.domain_lo,
                           self.domain_hi, self.domain_points, self.domain_threshold, margin)

    def in_measured_domain(self, features: torch.Tensor, margin: float = 0.0) -> torch.Tensor:
        """Bool mask ``(*batch)``: raw features ``(*batch, F)`` inside the measured-data domain (the
        fine-tune/update rows). All False for a closure without measured rows."""
        return domain_mask(self.standardise(torch.as_tensor(features, dtype=torch.float64)), self.measured_lo,
                           self.measured_hi, self.measured_points, self.measured_threshold, margin)

    def describe(self) -> dict:
        return {**super().describe(), **self.hparams, "feature_names": list(FEATURE_NAMES),
                "n_parameters": sum(p.numel() for p in self.parameters())}
