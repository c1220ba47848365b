r"""``plan``: the next flow-loop test points, where a measurement would teach the closure most.

A loop envelope (a YAML of our own, :func:`read_envelope`: velocity, diameter, inclination,
pressure, temperature and fluid limits of the rig) becomes a design space
(:mod:`closure_nn.data.design_space`); ``candidates`` Latin-hypercube points of it (McKay,
Beckman & Conover 1979) are scored by three reasons, each on a 0..1 scale:

* disagreement - the ensemble members' spread of holdup and of ln(pgrad), each solved by the
  point solver with its own predicted pattern; the mean of the two percentile ranks among the
  candidates (query by committee: Seung, Opper & Sompolinsky 1992, COLT, doi:10.1145/130385.130417);
* distance - from the measured-data domain the members store (the fine-tune rows' standardised
  groups, :meth:`closure_nn.closures.neural.NeuralClosure.in_measured_domain`): nearest-neighbour
  distance over the domain's threshold at the ensemble's equilibrium state, capped at
  ``distance_cap`` and divided by it;
* boundary - the share of the four neighbours (v_SL and v_SG times and divided by
  ``boundary_step``) and of the members whose flow pattern differs from the ensemble's at the point.

``score = sum_k weight_k reason_k``. The batch is chosen greedily by score with a least
separation between any two chosen points in the envelope's unit cube (continuous axes by their
sampling law's probability, choices at evenly spaced positions; the RMS over axes), halved
when the envelope runs out of room. Common practice in batch experimental design.
"""
from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import torch
import yaml

from ..closures.ensemble import ClosureEnsemble
from ..config_checks import check_keys  # unknown names: the nearest valid one
from ..data.design_space import DesignSpace, parse_design
from ..data.schema import to_conditions
from ..data.synthetic import lhs_unit
from ..physics.checks import InputError
from ..physics.groups import closure_features
from ..physics.local_state import local_state
from ..physics.point import solve_points
from ..physics.vocabulary import PATTERNS

#: keys of a loop envelope YAML (module docstring of :func:`read_envelope`)
ENVELOPE_KEYS = ("name", "description", "vsl", "vsg", "D_mm", "theta_deg", "p_bara", "T_degC", "roughness_um",
                 "gas", "liquids")
GAS_KEYS = ("M_g", "mug")
#: weights of the three reasons (conf/plan.yaml ``weights``)
DEFAULT_WEIGHTS = {"disagreement": 1.0, "distance": 0.5, "boundary": 0.5}
LIQUID_KEYS = ("rhol", "mul", "sigma")


def _range(spec: Mapping, key: str, where: str) -> list[float]:
    v = spec.get(key)
    if not (isinstance(v, list) and len(v) == 2 and all(isinstance(x, (int, float)) for x in v) and v[0] <= v[1]):
        raise InputError(f"{where}: {key} = {v!r}: expected [low, high] with low <= high")
    return [float(v[0]), float(v[1])]


def _law(lo: float, hi: float, unit: str) -> dict:
    """Uniform on [lo, hi], or fixed where the range is one value."""
    return {"law": "uniform", "low": lo, "high": hi, "unit": unit} if hi > lo else {"law": "fixed", "value": lo, "unit": unit}


def envelope_design(spec: Mapping, where: str = "envelope") -> DesignSpace:
    """A loop envelope (see :func:`read_envelope`) as a design space: v_SL, v_SG log-uniform,
    inclination and pressure uniform, the diameters and liquids a choice."""
    check_keys(spec, ENVELOPE_KEYS, where)
    for k in ("vsl", "vsg", "D_mm", "theta_deg", "p_bara", "liquids"):
        if k not in spec:
            raise InputError(f"{where}: {k} is required (keys: {', '.join(ENVELOPE_KEYS)})")
    gas, liquids = dict(spec.get("gas") or {"M_g": 28.96, "mug": 1.8e-5}), spec["liquids"]
    check_keys(gas, GAS_KEYS, f"{where}.gas")
    if not isinstance(liquids, Mapping) or not liquids:
        raise InputError(f"{where}: liquids: expected a mapping of names to {{rhol, mul, sigma}}")
    for name, props in liquids.items():
        check_keys(props or {}, LIQUID_KEYS, f"{where}.liquids.{name}")
    lo_l, hi_l = _range(spec, "vsl", where)
    lo_g, hi_g = _range(spec, "vsg", where)
    d = spec["D_mm"]
    if not (isinstance(d, list) and d and all(isinstance(x, (int, float)) for x in d)):
        raise InputError(f"{where}: D_mm = {d!r}: expected a list of the test-section diameters in mm")
    design = {"name": str(spec.get("name", "loop")), "description": str(spec.get("description", "")),
              "variables": {"vsl": {"law": "log_uniform", "low": lo_l, "high": hi_l},
                            "vsg": {"law": "log_uniform", "low": lo_g, "high": hi_g},
                            "D": {"law": "choice", "values": [float(x) for x in d], "unit": "mm"},
                            "theta": _law(*_range(spec, "theta_deg", where), "deg"),
                            "p": _law(*_range(spec, "p_bara", where), "bara"),
                            "T": {"law": "fixed", "value": float(spec.get("T_degC", 20.0)), "unit": "degC"},
                            "roughness": {"law": "fixed", "value": float(spec.get("roughness_um", 0.0)), "unit": "um"},
                            "M_g": {"law": "fixed", "value": float(gas.get("M_g", 28.96)), "unit": "g/mol"},
                            "mug": float(gas.get("mug", 1.8e-5)), "Z": 1.0},
              "fluid": {"law": "choice", "values": list(liquids)},
              "fluids": {k: dict(v) for k, v in liquids.items()}}
    return parse_design(design)


def read_envelope(path) -> tuple[dict, DesignSpace]:
    """Read a loop envelope YAML (our own format)::

        name: my_loop
        vsl: [0.005, 1.0]          # m/s, superficial liquid velocity the pumps give
        vsg: [0.3, 25.0]           # m/s
        D_mm: [50, 100]            # test sections on hand
        theta_deg: [-10, 10]       # tilting range
        p_bara: [1.0, 6.0]
        T_degC: 20
        roughness_um: 5
        gas: {M_g: 28.96, mug: 1.8e-5}          # g/mol, Pa s
        liquids: {water: {rhol: 998, mul: 1.0e-3, sigma: 0.072}}   # kg/m3, Pa s, N/m

    Returns the mapping and its design space; :class:`InputError` naming the file for a bad one."""
    p = Path(path)
    spec = yaml.safe_load(p.read_text(encoding="utf-8"))
    if not isinstance(spec, dict):
        raise InputError(f"{p}: expected a mapping (name, vsl, vsg, D_mm, theta_deg, p_bara, liquids, ...)")
    return spec, envelope_design(spec, where=str(p))


@dataclass
class PlanSettings:
    """conf/plan.yaml: batch size, candidates, weights and the diversity rule."""

    n: int = 20
    candidates: int = 2000
    seed: int = 0
    weights: Mapping | None = None
    min_separation: float = 0.15
    distance_cap: float = 3.0
    boundary_step: float = 1.25


def unit_coordinates(space: DesignSpace, table: pd.DataFrame, u: np.ndarray) -> np.ndarray:
    """Points in the envelope's unit cube ``(n, dims)``: ``u`` for continuous axes; for a choice
    (diameter, fluid), the index of the chosen value over (number of values - 1)."""
    out = np.array(u, dtype=np.float64, copy=True)
    for j, d in enumerate(space.dimensions):
        law = space.fluid if d == "fluid" else space.laws.get(d)
        if law is not None and law.kind == "choice":
            vals = list(law.values)
            if d == "fluid":
                idx = np.array([vals.index(v) for v in table["fluid"]])
            else:
                idx = np.abs(table[d].to_numpy(np.float64)[:, None] - np.asarray(vals, np.float64)[None, :]).argmin(1)
            out[:, j] = idx / max(len(vals) - 1, 1)
    return out


def _percentile(x: np.ndarray) -> np.ndarray:
    """Rank of each value among the finite ones, scaled to 0..1 (NaN -> 1: a member found no answer)."""
    x = np.where(np.isfinite(x), x, np.inf)
    r = pd.Series(x).rank(method="average").to_numpy()
    return (r - 1) / max(len(x) - 1, 1)


def _pattern_names(codes: torch.Tensor) -> np.ndarray:
    return np.array([PATTERNS[int(c)] for c in codes], dtype=object)


def score_candidates(ensemble: ClosureEnsemble, table: pd.DataFrame, s: PlanSettings, solver: dict | None = None) -> pd.DataFrame:
    """The three reasons and the score of every candidate condition (module docstring)."""
    solver = solver or {}
    cond = to_conditions(table, check=True)
    with torch.no_grad():
        per = [solve_points(cond, m, **solver) for m in ensemble.members]
        mean = solve_points(cond, ensemble, **solver)
    H = torch.stack([r.holdup for r in per]).numpy()
    P = torch.stack([r.pgrad.total for r in per]).numpy()
    sd_h = np.nanstd(H, axis=0, ddof=1)
    sd_lp = np.nanstd(np.log(np.clip(np.abs(P), 1e-6, None)), axis=0, ddof=1)
    disagreement = 0.5 * (_percentile(sd_h) + _percentile(sd_lp))
    # distance from the measured data, at the ensemble's equilibrium (thinnest stratified root, else the film)
    level = torch.where(torch.isfinite(mean.roots[:, 0]), mean.roots[:, 0], torch.full_like(mean.holdup, 0.5))
    with torch.no_grad():
        feats = closure_features(local_state(cond, level.clamp(1e-3, 0.98), "stratified"))
    m0 = ensemble.members[0]
    dist = _measured_distance(m0, feats)
    distance = np.minimum(dist, s.distance_cap) / s.distance_cap
    # closeness to a pattern boundary: neighbours in v_SL, v_SG and the members' own patterns
    pat = _pattern_names(mean.pattern)
    differ = []
    for col, f in (("vsl", s.boundary_step), ("vsl", 1 / s.boundary_step), ("vsg", s.boundary_step), ("vsg", 1 / s.boundary_step)):
        nb = table.copy()
        nb[col] = nb[col] * f
        with torch.no_grad():
            differ.append(_pattern_names(solve_points(to_conditions(nb), ensemble, **solver).pattern) != pat)
    differ += [_pattern_names(r.pattern) != pat for r in per]
    boundary = np.mean(differ, axis=0)
    w = {**DEFAULT_WEIGHTS, **dict(s.weights or {})}
    score = w["disagreement"] * disagreement + w["distance"] * distance + w["boundary"] * boundary
    return pd.DataFrame({"pattern": pat, "holdup_mean": np.nanmean(H, 0), "holdup_sd": sd_h,
                         "pgrad_mean": np.nanmean(P, 0), "pgrad_sd_rel": sd_lp, "disagreement": disagreement,
                         "distance": dist, "boundary": boundary, "score": score})


def _measured_distance(member, feats: torch.Tensor) -> np.ndarray:
    """Nearest-neighbour distance of the states to the member's measured-data points over its
    threshold (standardised groups); infinite where the member records no measured rows."""
    pts = getattr(member, "measured_points", None)
    if pts is None or pts.shape[0] == 0:
        return np.full(feats.shape[0], np.inf)
    z = member.standardise(feats)
    d = torch.cat([torch.cdist(z[i:i + 4096], pts).min(dim=-1).values for i in range(0, z.shape[0], 4096)])
    return (d / member.measured_threshold.clamp_min(1e-12)).numpy()


def choose_batch(score: np.ndarray, coords: np.ndarray, n: int, min_separation: float) -> tuple[list[int], float]:
    """Greedy: the best-scoring candidate not within ``min_separation`` (RMS over axes of the unit
    cube) of one already chosen; the separation is halved until ``n`` are chosen. Returns the
    chosen indices (best first) and the separation finally used."""
    order = np.argsort(-score, kind="stable")
    chosen: list[int] = []
    sep = float(min_separation)
    while len(chosen) < min(n, len(score)):
        for i in order:
            if len(chosen) >= n:
                break
            if i in chosen:
                continue
            if not chosen or np.sqrt(((coords[chosen] - coords[i]) ** 2).mean(axis=1)).min() >= sep:
                chosen.append(int(i))
        if len(chosen) < n:
            sep /= 2
    return chosen, sep


def plan(ensemble: ClosureEnsemble, space: DesignSpace, settings: PlanSettings | None = None,
         solver: dict | None = None) -> tuple[pd.DataFrame, pd.DataFrame, dict]:
    """Score ``settings.candidates`` points of ``space`` and choose ``settings.n`` of them.
    Returns (chosen rows ranked best first, every candidate with its reasons, a summary)."""
    s = settings or PlanSettings()
    if not isinstance(ensemble, ClosureEnsemble) or len(ensemble) < 2:
        raise InputError("plan: an ensemble of at least two members is needed (their disagreement ranks the points)")
    u = lhs_unit(int(s.candidates), len(space.dimensions), int(s.seed))
    table = space.sample_unit(u)
    reasons = score_candidates(ensemble, table, s, solver)
    cand = pd.concat([table.reset_index(drop=True), reasons], axis=1)
    idx, sep = choose_batch(cand["score"].to_numpy(), unit_coordinates(space, table, u), int(s.n), s.min_separation)
    chosen = cand.iloc[idx].reset_index(drop=True)
    chosen.insert(0, "rank", np.arange(1, len(chosen) + 1))
    summary = {"candidates": len(cand), "chosen": len(chosen), "separation_used": sep,
               "separation_asked": s.min_separation, "seed": s.seed,
               "weights": {**DEFAULT_WEIGHTS, **dict(s.weights or {})}}
    return chosen, cand, summary
