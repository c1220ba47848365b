r"""Ensembles of neural closures: spread of predicted holdup and pressure gradient (no Lightning).

Members differ by seed and/or bootstrap replicate of the training rows (a common-practice way
to estimate model uncertainty). :meth:`ClosureEnsemble.predict` solves the separated equilibrium
once per member and reports the mean and the standard deviation across members:

.. math:: \bar H = \frac1N\sum_m H_m,\qquad s_H = \sqrt{\frac1{N-1}\sum_m (H_m - \bar H)^2}

(likewise for pgrad). Used as a closure (``ensemble(state)``), the ensemble returns the
geometric mean of the members' friction factors, so the line solver can use it like any
other closure.

On disk an ensemble is a directory with ``ensemble.json`` (``format = "closure-nn-ensemble"``,
member directory names) and one bundle directory per member.
"""
from __future__ import annotations

import json
import os
import shutil
from dataclasses import dataclass
from pathlib import Path

import torch
from torch import nn

from ..physics.conditions import Conditions
from ..physics.geometry import STRATIFIED
from ..physics.holdup_roots import solve_separated
from ..physics.local_state import LocalState
from ..physics.momentum import FrictionFactors
from .base import Closure
from .bundle import BundleError, load_bundle, save_bundle

ENSEMBLE_FORMAT = "closure-nn-ensemble"
ENSEMBLE_FILE = "ensemble.json"


@dataclass(frozen=True)
class EnsemblePrediction:
    """Per-member and summary predictions; member arrays ``(N_members, B)``, summaries ``(B,)``."""

    holdup: torch.Tensor  # (N, B) [-], NaN where a member found no root
    pgrad: torch.Tensor  # (N, B) [Pa/m]
    found: torch.Tensor  # (N, B) bool

    @property
    def holdup_mean(self) -> torch.Tensor:
        return torch.nanmean(self.holdup, dim=0)

    @property
    def pgrad_mean(self) -> torch.Tensor:
        return torch.nanmean(self.pgrad, dim=0)

    @property
    def holdup_std(self) -> torch.Tensor:
        return _nanstd(self.holdup)

    @property
    def pgrad_std(self) -> torch.Tensor:
        return _nanstd(self.pgrad)

    @property
    def n_found(self) -> torch.Tensor:
        return self.found.sum(dim=0)


def _nanstd(x: torch.Tensor) -> torch.Tensor:
    ok = torch.isfinite(x)
    n = ok.sum(dim=0)
    mean = torch.nanmean(x, dim=0)
    ss = torch.where(ok, (x - mean) ** 2, torch.zeros_like(x)).sum(dim=0)
    return torch.where(n > 1, torch.sqrt(ss / (n - 1).clamp_min(1)), torch.full_like(mean, float("nan")))


class ClosureEnsemble(Closure):
    """A list of member closures (usually :class:`~closure_nn.closures.neural.NeuralClosure`)."""

    def __init__(self, members: list[Closure]) -> None:
        super().__init__()
        if not members:
            raise ValueError("an ensemble needs at least one member")
        self.members = nn.ModuleList(members)
        self.label = f"ensemble({len(members)} x {members[0].label})"

    def __len__(self) -> int:
        return len(self.members)

    def forward(self, state: LocalState) -> FrictionFactors:
        logs = torch.stack([torch.log(torch.stack(tuple(m(state)), dim=-1)) for m in self.members]).mean(dim=0)
        f = torch.exp(logs)
        return FrictionFactors(f_wl=f[..., 0], f_wg=f[..., 1], f_i=f[..., 2])

    def predict(self, cond: Conditions, kind: str = STRATIFIED, select: str = "thinnest") -> EnsemblePrediction:
        """Solve the equilibrium of every member for conditions ``(B,)`` (no gradients)."""
        hs, ps, fs = [], [], []
        with torch.no_grad():
            for m in self.members:
                sol = solve_separated(cond, m, kind, select=select)
                hs.append(torch.where(sol.found, sol.holdup, torch.nan))
                ps.append(torch.where(sol.found, sol.pgrad.total, torch.nan))
                fs.append(sol.found)
        return EnsemblePrediction(holdup=torch.stack(hs), pgrad=torch.stack(ps), found=torch.stack(fs))

    def in_domain(self, features: torch.Tensor) -> torch.Tensor:
        """Inside the domain of every member (members trained on bootstraps share one domain)."""
        masks = [m.in_domain(features) for m in self.members]
        return torch.stack(masks).all(dim=0)

    def in_measured_domain(self, features: torch.Tensor) -> torch.Tensor:
        """Inside the measured-data domain of every member (bootstrap members each hold the domain
        of their own replicate of the rows; requiring all of them is the cautious reading)."""
        masks = [m.in_measured_domain(features) for m in self.members]
        return torch.stack(masks).all(dim=0)

    @property
    def measured_domain_recorded(self) -> bool:
        """True when every member records a measured-data domain (older bundles do not)."""
        return all(getattr(m, "measured_domain_recorded", True) for m in self.members)

    def describe(self) -> dict:
        return {**super().describe(), "members": [m.describe() for m in self.members]}


def save_ensemble(members: list, path: str | os.PathLike, member_meta: list[dict] | None = None,
                  metrics: dict | None = None) -> Path:
    """Write members as bundles ``member_<i>/`` under ``path`` plus ``ensemble.json``."""
    p = Path(path)
    p.mkdir(parents=True, exist_ok=True)
    names = []
    for i, m in enumerate(members):
        name = f"member_{i}"
        save_bundle(m, p / name, **((member_meta or [{}] * len(members))[i]))
        names.append(name)
    return _write_description(p, names, metrics)


def _write_description(p: Path, names: list[str], metrics: dict | None, **extra) -> Path:
    """``ensemble.json`` of the ensemble directory ``p`` listing the member folders ``names``."""
    (p / ENSEMBLE_FILE).write_text(json.dumps({"format": ENSEMBLE_FORMAT, "format_version": 1, "members": names,
                                               "metrics": metrics or {}, **extra}, indent=2) + "\n")
    return p


def load_ensemble(path: str | os.PathLike) -> ClosureEnsemble:
    """Load an ensemble directory written by :func:`save_ensemble`."""
    p = Path(path)
    f = p / ENSEMBLE_FILE
    try:
        meta = json.loads(f.read_text())
        names = meta["members"]
    except FileNotFoundError:
        raise BundleError(f"{p}: not an ensemble ({ENSEMBLE_FILE} is missing)") from None
    except (json.JSONDecodeError, KeyError, TypeError) as exc:
        raise BundleError(f"{f}: corrupted ensemble description ({exc})") from None
    if meta.get("format") != ENSEMBLE_FORMAT:
        raise BundleError(f"{f}: format {meta.get('format')!r}, expected {ENSEMBLE_FORMAT!r}")
    ens = ClosureEnsemble([load_bundle(p / n) for n in names])
    ens.bundle_metadata = meta
    return ens


def member_bundles(path: str | os.PathLike) -> list[Path]:
    """The bundle directories behind ``path``: its members if it is an ensemble, else ``[path]``."""
    p = Path(path)
    if (p / ENSEMBLE_FILE).exists():
        load_ensemble(p)  # checks the description and every member
        return [p / n for n in json.loads((p / ENSEMBLE_FILE).read_text())["members"]]
    load_bundle(p)
    return [p]


def combine_ensembles(parts: list[str | os.PathLike], path: str | os.PathLike, metrics: dict | None = None) -> Path:
    """One ensemble directory at ``path`` from bundles and/or ensembles ``parts`` (in order): each
    member bundle is copied unchanged to ``member_<i>/``, so checksums and metadata carry over.
    E.g. a closure already fine-tuned plus extra bootstrap members, for an uncertainty band."""
    p = Path(path)
    p.mkdir(parents=True, exist_ok=True)
    names = []
    for src in (b for part in parts for b in member_bundles(part)):
        name = f"member_{len(names)}"
        shutil.copytree(src, p / name, dirs_exist_ok=True)
        names.append(name)
    return _write_description(p, names, metrics, combined_from=[str(x) for x in parts])
