r"""``distill``: a learned closure as a readable formula per factor, and how faithful it is.

Steps (:func:`distill`), each on objects:

1. :func:`sample_states` - the states where the formula must agree with the network: every
   condition of the fitting set (the fine-tune rows and a seeded sample of the pre-training
   design) is solved with the learned closure, and the closure is read at its equilibrium level
   and at levels around it (``level_factors``: the root finder evaluates the closure there too);
   only states inside the closure's training domain are kept. Target per state and factor: the
   learned log ratio :math:`y_k = \ln(f_k / f_{k,\mathrm{base}})`.
2. :func:`fit_formula` - per factor and region (:mod:`closure_nn.closures.formula`: stratified /
   annular, and the stratified region split at the baseline's Andritsos & Hanratty (1987) wave
   threshold only where the split lowers the penalised criterion), a sparse regression of
   :math:`y_k` on the library of :data:`~closure_nn.closures.formula.TERMS`
   (:func:`closure_nn.pipeline.sparse_fit.sparse_fit`: STLSQ with a BIC-type penalty).
3. :func:`fidelity` - the formula in place of the network inside the point solver: holdup MAE
   and pgrad share within +-20 % on the development rows (against the measurements, next to the
   network and the baseline) and on a grid of the pre-training design (against the network).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import torch

from ..closures.baseline import BaselineClosure
from ..closures.formula import FACTORS, TERM_NAMES, FormulaClosure, Piece, term_matrix, wave_threshold_mask
from ..data.schema import to_conditions
from ..physics.geometry import ANNULAR, STRATIFIED
from ..physics.groups import closure_features
from ..physics.local_state import local_state
from ..physics.point import solve_points
from ..physics.vocabulary import ANNULAR as V_ANNULAR, CODE
from ..training.scoring import predict_table, score_table
from .sparse_fit import sparse_fit

#: the measures of the fidelity table (holdup MAE [-], share of pgrad within +-20 %)
FIDELITY_MEASURES = ("holdup_mae", "pgrad_within_20")


@dataclass
class DistillSettings:
    """conf/distill.yaml ``distill``: what to sample and how to choose the formula."""

    level_factors: tuple[float, ...] = (0.6, 0.8, 1.0, 1.25, 1.6)  #: levels read, as factors on the equilibrium h/D (delta/D)
    max_terms: int = 4  #: terms per formula besides the constant
    penalty: float | None = None  #: price of one coefficient in the criterion (None: ln n, BIC)
    sd_floor: float = 0.02  #: [-, ln units] residual sd below which fits count as equal (2 % on f)
    min_states: int = 30  #: fewer states in a region: the baseline is kept there
    in_domain_only: bool = True  #: keep only states inside the closure's training domain


@dataclass
class StateSample:
    """States of one configuration (``kind``): library terms ``terms (n, T)``, targets ``y (n, 3)``
    (ln f / f_base of f_WL, f_WG, f_i), ``wavy (n,)`` (above the wave threshold; all False without one)."""

    kind: str
    terms: np.ndarray
    y: np.ndarray
    wavy: np.ndarray
    features: np.ndarray | None = None  #: the raw groups ``(n, F)`` of the states


@dataclass
class DistillResult:
    """The formula, the per-piece fit measures and the state counts."""

    formula: FormulaClosure
    fits: list[dict] = field(default_factory=list)
    n_states: dict = field(default_factory=dict)


def baseline_of_closure(closure) -> BaselineClosure:
    """The baseline a learned closure corrects (an ensemble: its first member's)."""
    members = getattr(closure, "members", None)
    base = getattr(members[0] if members is not None else closure, "baseline", None)
    if not isinstance(base, BaselineClosure):
        raise ValueError(f"{getattr(closure, 'label', closure)}: a closure with a baseline (a correction) is needed")
    return base


def _in_domain(closure, feats: torch.Tensor) -> torch.Tensor:
    check = getattr(closure, "in_domain", None)
    return check(feats) if check is not None else torch.ones(feats.shape[:-1], dtype=torch.bool)


def sample_states(closure, rows: pd.DataFrame, settings: DistillSettings, solver: dict | None = None) -> list[StateSample]:
    """States around the closure's own equilibria at the conditions of ``rows`` (module docstring)."""
    base = baseline_of_closure(closure)
    cond = to_conditions(rows, check=True)
    with torch.no_grad():
        r = solve_points(cond, closure, **(solver or {}))
    ann = (r.pattern == CODE[V_ANNULAR]) & r.separated & torch.isfinite(r.frac)
    strat_level = torch.where(torch.isfinite(r.roots[:, 0]), r.roots[:, 0], r.frac)
    out = []
    lf = torch.tensor(settings.level_factors, dtype=torch.float64)
    for kind, mask, level, hi in ((STRATIFIED, torch.isfinite(strat_level) & (r.n_roots > 0), strat_level, 0.98),
                                  (ANNULAR, ann, r.frac, 0.45)):
        idx = torch.nonzero(mask).flatten()
        if idx.numel() == 0:
            continue
        c = cond[idx]
        levels = (level[idx].unsqueeze(-1) * lf).clamp(1e-3, hi)  # (m, L)
        c2 = c.map(lambda t: t.unsqueeze(-1))
        with torch.no_grad():
            s = local_state(c2, levels, kind)
            feats = closure_features(s)
            keep = _in_domain(closure, feats) if settings.in_domain_only else torch.ones(levels.shape, dtype=torch.bool)
            fb = base(s)
            y = torch.log(torch.stack(tuple(closure(s)), -1)) - torch.log(torch.stack(tuple(fb), -1))
            wavy = wave_threshold_mask(s, base) if kind == STRATIFIED else None
        wavy = torch.zeros_like(keep) if wavy is None else torch.broadcast_to(wavy, keep.shape)
        ok = keep & torch.isfinite(y).all(-1)
        terms = term_matrix(feats, torch.log(fb.f_i / fb.f_wg))
        out.append(StateSample(kind, terms[ok].numpy(), y[ok].numpy(), wavy[ok].numpy(), feats[ok].numpy()))
    return out


def _fit_one(X: np.ndarray, y: np.ndarray, s: DistillSettings):
    return sparse_fit(X, y, TERM_NAMES, max_terms=s.max_terms, penalty=s.penalty, sd_floor=s.sd_floor)


def fit_formula(samples: list[StateSample], baseline: BaselineClosure, bound: dict, settings: DistillSettings,
                measured: dict | None = None) -> DistillResult:
    """One sparse formula per factor and region (module docstring, step 2); the formula's domain is
    the box of the states' groups, ``measured`` the box of the measured rows (or None)."""
    pieces: dict[str, list[Piece]] = {k: [] for k in FACTORS}
    fits, counts = [], {}
    for smp in samples:
        region = "annular" if smp.kind == ANNULAR else "stratified"
        counts[region] = int(len(smp.y))
        if len(smp.y) < settings.min_states:
            fits.append({"region": region, "factor": "all", "n": len(smp.y), "note": "too few states: baseline kept"})
            continue
        for j, k in enumerate(FACTORS):
            whole = _fit_one(smp.terms, smp.y[:, j], settings)
            chosen = [(region, whole, np.ones(len(smp.y), bool))]
            split_ok = (region == "stratified" and smp.wavy.any() and (~smp.wavy).any()
                        and min(smp.wavy.sum(), (~smp.wavy).sum()) >= settings.min_states)
            if split_ok:
                parts = [(name, _fit_one(smp.terms[m], smp.y[m, j], settings), m)
                         for name, m in (("stratified_wave_free", ~smp.wavy), ("stratified_wavy", smp.wavy))]
                n = len(smp.y)
                kappa = np.log(n) if settings.penalty is None else settings.penalty
                rss_floor = n * settings.sd_floor ** 2
                crit_split = n * np.log(max(sum(p[1].rss for p in parts), rss_floor) / n) \
                    + kappa * sum(len(p[1].coef) for p in parts)
                crit_whole = n * np.log(max(whole.rss, rss_floor) / n) + kappa * len(whole.coef)
                if crit_split < crit_whole:
                    chosen = parts
            for name, f, m in chosen:
                if f.coef:
                    pieces[k].append(Piece(name, f.coef))
                fits.append({"factor": k, "region": name, "n": int(m.sum()), "terms": len(f.coef),
                             "rms_log_error": f.rms, "r2": f.r2, "target_rms": float(np.sqrt(np.mean(smp.y[m, j] ** 2)))})
    feats = [smp.features for smp in samples if smp.features is not None and len(smp.features)]
    domain = None
    if feats:
        allf = np.concatenate(feats)
        domain = {"lo": allf.min(0).tolist(), "hi": allf.max(0).tolist()}
    formula = FormulaClosure({k: v for k, v in pieces.items() if v}, baseline=baseline, bound=bound, domain=domain,
                             measured_domain=measured)
    return DistillResult(formula=formula, fits=fits, n_states=counts)


def network_bound(closure) -> dict:
    """The learned closure's correction bound per factor (ln units); 4 where it has none."""
    members = getattr(closure, "members", None)
    m = members[0] if members is not None else closure
    b = getattr(m, "bound", 4.0)
    return {k: float(b[k] if isinstance(b, dict) else b) for k in FACTORS}


def distill(closure, fit_rows: pd.DataFrame, settings: DistillSettings | None = None,
            solver: dict | None = None) -> DistillResult:
    """Fit the formula of ``closure`` (a correction of a baseline) on states at the conditions of
    ``fit_rows`` (SI inputs; measured columns are not used)."""
    s = settings or DistillSettings()
    samples = sample_states(closure, fit_rows, s, solver)
    if not samples or sum(len(x.y) for x in samples) == 0:
        raise ValueError("distill: no state of the fitting conditions lies in the closure's training domain")
    return fit_formula(samples, baseline_of_closure(closure), network_bound(closure), s, measured_box(closure))


def measured_box(closure) -> dict | None:
    """The box (raw groups) of a neural closure's measured-data points (an ensemble: the
    intersection of its members' boxes); None without measured rows."""
    members = list(getattr(closure, "members", [closure]))
    los, his = [], []
    for m in members:
        pts = getattr(m, "measured_points", None)
        if pts is None or pts.shape[0] == 0:
            return None
        raw = pts * m.feature_std + m.feature_mean
        los.append(raw.min(0).values)
        his.append(raw.max(0).values)
    return {"lo": torch.stack(los).max(0).values.tolist(), "hi": torch.stack(his).min(0).values.tolist()}


def fidelity(models: dict, dev_rows: pd.DataFrame, grid: pd.DataFrame, reference: str = "network",
             solver: dict | None = None) -> pd.DataFrame:
    """Holdup MAE and pgrad within +-20 % of each closure in ``models`` (name -> closure): on the
    development rows against the measurements, and on the ``grid`` against ``models[reference]``.
    One row per (rows, closure)."""
    out = []
    if len(dev_rows):
        for name, m in models.items():
            sc = score_table(predict_table(m, dev_rows, solver), dev_rows)
            out.append({"rows": f"development ({len(dev_rows)}, measured)", "closure": name,
                        **{k: sc.get(k) for k in FIDELITY_MEASURES}})
    if len(grid):
        ref = predict_table(models[reference], grid, solver)
        target = grid.assign(holdup=ref["holdup"], pgrad=ref["pgrad"])
        for name, m in models.items():
            if name == reference:
                continue
            sc = score_table(predict_table(m, grid, solver), target)
            out.append({"rows": f"grid ({len(grid)}, vs {reference})", "closure": name,
                        **{k: sc.get(k) for k in FIDELITY_MEASURES}})
    return pd.DataFrame(out)


def fidelity_markdown(table: pd.DataFrame) -> str:
    """The fidelity table as Markdown (holdup MAE to 4 places, pgrad share in per cent)."""
    lines = ["| rows | closure | holdup MAE [-] | pgrad within +-20 % |", "|---|---|---|---|"]
    for r in table.itertuples(index=False):
        h = "-" if r.holdup_mae is None or r.holdup_mae != r.holdup_mae else f"{r.holdup_mae:.4f}"
        p = "-" if r.pgrad_within_20 is None or r.pgrad_within_20 != r.pgrad_within_20 else f"{100 * r.pgrad_within_20:.1f} %"
        lines.append(f"| {r.rows} | {r.closure} | {h} | {p} |")
    return "\n".join(lines)
