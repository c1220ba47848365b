r"""Closure features of a training table: conditions, measured states, scaler and training domain.

A training table (see the data contract in :mod:`closure_nn.data.schema`) holds one operating
point per row. For the neural closure we need, per row,

* the :class:`~closure_nn.physics.conditions.Conditions` (SI columns ``vsl ... sigma``),
* the separated-flow configuration the row belongs to (``kind``: stratified, annular or none,
  from the observed ``pattern``),
* the local state at the MEASURED holdup (h/D from the holdup, :func:`frac_from_holdup`) or, where
  no holdup was measured, at the baseline equilibrium,

and from the features of those states

* a :class:`FeatureScaler` (mean / standard deviation per feature, ``z = (x - mean) / std``), and
* a :class:`TrainingDomain`: per-feature bounds and a nearest-neighbour distance threshold in the
  standardised space. A query point is "in domain" when it lies inside the bounds AND within the
  threshold of some training point. The threshold is ``factor`` times the ``quantile`` of the
  leave-one-out nearest-neighbour distances among the training points (default 2 x the 95th
  percentile) - a common-practice rule for distance-based applicability domains, our choice of
  constants.

The same class describes the measured-data domain of a neural closure: the domain of the rows of
its fine-tune and update stages only (``measured=True`` in :meth:`TrainingDomain.apply_to` and
:meth:`TrainingDomain.from_closure`), in the pre-training scaler's standardised units.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import torch

from ..closures.neural import domain_mask
from ..physics.conditions import Conditions
from ..physics.geometry import STRATIFIED, h_from_holdup
from ..physics.groups import FEATURE_NAMES, closure_features
from ..physics.holdup_roots import solve_separated
from ..physics.local_state import LocalState, local_state
from .configurations import CONFIGURATION_CODE, SEPARATED_CONFIGURATIONS, configuration_codes, resolve_configurations
from .schema import to_conditions


def table_conditions(df: pd.DataFrame) -> Conditions:
    """Conditions ``(N,)`` of an SI training table (:func:`closure_nn.data.schema.to_conditions`)."""
    return to_conditions(df, check=True, where=str(df.attrs.get("path", "training table")))


def frac_from_holdup(holdup: torch.Tensor, kind: str) -> torch.Tensor:
    r"""h/D (stratified) or delta/D (annular film, no entrainment) from the holdup A_L/A [-].

    Stratified: :func:`closure_nn.physics.geometry.h_from_holdup`. Annular: inverting
    :math:`A_L/A = 4(\tilde\delta - \tilde\delta^2)` (geometry module docstring) gives
    :math:`\tilde\delta = (1 - \sqrt{1 - H_L})/2`. Entrained liquid is neglected here.
    """
    H = holdup.clamp(1e-12, 1 - 1e-12)
    if kind == STRATIFIED:
        return h_from_holdup(H)
    return (1 - torch.sqrt(1 - H)) / 2


def table_states(df: pd.DataFrame, baseline, unknown_pattern: str = "skip") -> list[LocalState]:
    """Local states of the separated-flow rows of a table, one :class:`LocalState` per kind and source.

    At the measured holdup where there is one, else at the ``baseline`` closure's equilibrium
    (thinnest root; rows without a root are left out). Rows that are not separated flow are
    left out; with ``unknown_pattern='predicted'`` a row without an observed pattern counts as the
    configuration the ``baseline`` predicts for it. No gradients.
    """
    cond = table_conditions(df)
    kinds = configuration_codes(df["pattern"] if "pattern" in df.columns else None, len(df), unknown_pattern)
    kinds = resolve_configurations(kinds, cond, baseline)
    holdup = torch.tensor(pd.to_numeric(df["holdup"], errors="coerce").to_numpy(dtype=np.float64)) \
        if "holdup" in df.columns else torch.full((len(df),), float("nan"), dtype=torch.float64)
    states: list[LocalState] = []
    with torch.no_grad():
        for kind in SEPARATED_CONFIGURATIONS:
            sel = kinds == CONFIGURATION_CODE[kind]
            meas = sel & torch.isfinite(holdup)
            if meas.any():
                states.append(local_state(cond[meas], frac_from_holdup(holdup[meas], kind), kind))
            solve = sel & ~torch.isfinite(holdup)
            if solve.any():
                sol = solve_separated(cond[solve], baseline, kind)
                if sol.found.any():
                    states.append(local_state(cond[solve][sol.found], sol.frac[sol.found], kind))
    return states


def state_features(df: pd.DataFrame, baseline, unknown_pattern: str = "skip") -> torch.Tensor:
    """Closure features ``(M, F)`` at the :func:`table_states` of a table (finite rows only).

    Used to fit the scaler and the training domain.
    """
    feats = [closure_features(s) for s in table_states(df, baseline, unknown_pattern)]
    if not feats:
        return torch.zeros(0, len(FEATURE_NAMES), dtype=torch.float64)
    x = torch.cat(feats)
    return x[torch.isfinite(x).all(dim=-1)]


@dataclass
class FeatureScaler:
    """Per-feature standardisation ``z = (x - mean) / std`` (each ``(F,)``)."""

    mean: torch.Tensor
    std: torch.Tensor
    names: tuple[str, ...] = FEATURE_NAMES

    @classmethod
    def fit(cls, x: torch.Tensor) -> "FeatureScaler":
        """Fit on features ``(N, F)``. A (nearly) constant feature keeps std = 1 so it passes unscaled."""
        if x.shape[0] == 0:
            raise ValueError("cannot fit a feature scaler on zero separated-flow rows")
        mean = x.mean(dim=0)
        std = x.std(dim=0, unbiased=False) if x.shape[0] > 1 else torch.ones_like(mean)
        const = std <= 1e-9 * mean.abs().clamp_min(1.0)
        return cls(mean=mean, std=torch.where(const, torch.ones_like(std), std))

    def transform(self, x: torch.Tensor) -> torch.Tensor:
        return (x - self.mean) / self.std

    def to_dict(self) -> dict:
        return {"names": list(self.names), "mean": self.mean.tolist(), "std": self.std.tolist()}

    @classmethod
    def from_dict(cls, d: dict) -> "FeatureScaler":
        return cls(mean=torch.tensor(d["mean"], dtype=torch.float64), std=torch.tensor(d["std"], dtype=torch.float64),
                   names=tuple(d["names"]))


@dataclass
class TrainingDomain:
    """Bounds ``lo, hi (F,)`` and reference points ``(M, F)``, all in standardised units."""

    lo: torch.Tensor
    hi: torch.Tensor
    points: torch.Tensor
    threshold: float
    names: tuple[str, ...] = FEATURE_NAMES
    rule: dict = field(default_factory=dict)

    @classmethod
    def fit(cls, x: torch.Tensor, scaler: FeatureScaler, max_points: int = 1000, quantile: float = 0.95,
            factor: float = 2.0, seed: int = 0) -> "TrainingDomain":
        """Fit on raw features ``(N, F)``; at most ``max_points`` points (seeded subsample) are kept."""
        z = scaler.transform(x)
        if z.shape[0] > max_points:
            idx = torch.randperm(z.shape[0], generator=torch.Generator().manual_seed(seed))[:max_points]
            z = z[idx.sort().values]
        if z.shape[0] >= 2:
            d = torch.cdist(z, z)
            d.fill_diagonal_(torch.inf)
            nn_d = d.min(dim=1).values
            threshold = factor * float(torch.quantile(nn_d, quantile))
        else:
            threshold = 0.0
        return cls(lo=z.min(dim=0).values, hi=z.max(dim=0).values, points=z, threshold=threshold,
                   rule={"quantile": quantile, "factor": factor, "max_points": max_points})

    @classmethod
    def empty(cls, n_features: int = len(FEATURE_NAMES)) -> "TrainingDomain":
        """A domain without points (every state outside); bounds +inf / -inf (an empty box)."""
        f64 = dict(dtype=torch.float64)
        return cls(lo=torch.full((n_features,), torch.inf, **f64), hi=torch.full((n_features,), -torch.inf, **f64),
                   points=torch.zeros(0, n_features, **f64), threshold=0.0)

    def merged(self, other: "TrainingDomain", max_points: int | None = None, seed: int = 0) -> "TrainingDomain":
        """Union with another domain in the same standardised space (fine-tuning, updates). A side
        without points contributes nothing (not its bounds, nor its threshold)."""
        if other.points.shape[0] == 0 or self.points.shape[0] == 0:
            keep = self if other.points.shape[0] == 0 else other
            rule = dict(self.rule or other.rule)
            return TrainingDomain(lo=keep.lo.clone(), hi=keep.hi.clone(), points=keep.points.clone(),
                                  threshold=keep.threshold, names=self.names, rule=rule)
        pts = torch.cat([self.points, other.points])
        cap = max_points or int(self.rule.get("max_points", 1000))
        if pts.shape[0] > cap:
            idx = torch.randperm(pts.shape[0], generator=torch.Generator().manual_seed(seed))[:cap]
            pts = pts[idx.sort().values]
        return TrainingDomain(lo=torch.minimum(self.lo, other.lo), hi=torch.maximum(self.hi, other.hi), points=pts,
                              threshold=max(self.threshold, other.threshold), names=self.names, rule=dict(self.rule))

    def in_domain(self, x: torch.Tensor, scaler: FeatureScaler, margin: float = 0.0) -> torch.Tensor:
        """Bool mask ``(*batch)`` for raw features ``(*batch, F)``."""
        return domain_mask(scaler.transform(x), self.lo, self.hi, self.points, torch.tensor(self.threshold), margin)

    def apply_to(self, closure, measured: bool = False) -> None:
        """Store this domain in a :class:`~closure_nn.closures.neural.NeuralClosure`'s buffers: the
        training domain, or with ``measured=True`` the measured-data domain."""
        setter = closure.set_measured_domain if measured else closure.set_domain
        setter(self.lo, self.hi, self.points, self.threshold)

    @classmethod
    def from_closure(cls, closure, measured: bool = False) -> "TrainingDomain":
        """The training domain (or with ``measured=True`` the measured-data domain) stored in a closure."""
        pre = "measured" if measured else "domain"
        return cls(lo=getattr(closure, f"{pre}_lo").clone(), hi=getattr(closure, f"{pre}_hi").clone(),
                   points=getattr(closure, f"{pre}_points").clone(), threshold=float(getattr(closure, f"{pre}_threshold")))

    def to_dict(self) -> dict:
        """Readable summary for bundle metadata (the points themselves travel in the weights);
        bounds are None for a domain without points."""
        none = self.points.shape[0] == 0
        return {"names": list(self.names), "lo": None if none else self.lo.tolist(), "hi": None if none else self.hi.tolist(),
                "n_points": int(self.points.shape[0]), "nn_threshold": self.threshold, "rule": self.rule,
                "units": "standardised features z = (x - mean) / std"}
