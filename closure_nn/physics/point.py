r"""The point solver: holdup, pressure gradient and flow pattern for a batch of conditions.

One call, any closure (baseline or learned), every state answered:

1. Single-phase rows (v_SL = 0 or v_SG = 0) get Darcy-Weisbach friction plus hydrostatic head,
   with the closure's own wall friction evaluated in the single-phase limit of the stratified
   geometry (h/D -> 1 for liquid, h/D -> 0 for gas).
2. All other rows: the stratified equilibrium of the closure, with all roots
   (:func:`~closure_nn.physics.holdup_roots.solve_separated`).
3. The flow pattern from that equilibrium (:func:`~closure_nn.physics.patterns.classify`), so a
   learned closure moves the pattern boundaries.
4. Annular rows: the annular-film equilibrium of the same closure (entrained fraction given or
   from Ishii & Mishima 1989). Intermittent, dispersed-bubble and bubble rows: the published
   models of :mod:`closure_nn.physics.intermittent`.

Every output is finite or explicitly flagged (``flags``), never a silent NaN. Results with
``separated = True`` carry gradients with respect to the closure parameters.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import torch

from . import vocabulary as V
from .conditions import Conditions
from .entrainment import ishii_mishima
from .geometry import ANNULAR, STRATIFIED
from .holdup_roots import MAX_ROOTS, solve_separated
from .intermittent import bubble_flow, dispersed_bubble_flow, intermittent_flow
from .local_state import local_state
from .momentum import PressureGradient
from .patterns import classify

#: no stratified equilibrium root was found in 0 < h/D < 1
FLAG_NO_SEPARATED_ROOT = 1
#: the stratified equation has more than one root (see ``select``)
FLAG_MULTIPLE_ROOTS = 2
#: one phase rate is zero: single-phase answer
FLAG_SINGLE_PHASE = 4
#: annular predicted but the film equation had no root; stratified equilibrium reported
FLAG_ANNULAR_NO_ROOT = 8
#: the holdup equation touches zero at a tangency: a pair of roots may exist there below the
#: solver's resolution, so ``n_roots`` and the selected root may be off (holdup_roots, step 2)
FLAG_ROOT_PAIR_UNRESOLVED = 16
FLAG_TEXT = {
    FLAG_NO_SEPARATED_ROOT: "no separated-flow equilibrium",
    FLAG_MULTIPLE_ROOTS: "several holdup roots",
    FLAG_SINGLE_PHASE: "single-phase",
    FLAG_ANNULAR_NO_ROOT: "no annular-film root, stratified value reported",
    FLAG_ROOT_PAIR_UNRESOLVED: "a holdup root pair may be unresolved (tangency)",
}
_EDGE = 1e-9
#: rows per chunk of :func:`solve_points` (peak memory of a 1e6-row solve, benchmarks/README.md)
POINT_CHUNK = 65536


@dataclass(frozen=True)
class PointResult:
    """Results for a batch ``(B,)``. Units: holdup [-], pgrad -dp/dx [Pa/m], frac [-]."""

    holdup: torch.Tensor
    pgrad: PressureGradient
    pattern: torch.Tensor  # int64 codes into vocabulary.PATTERNS
    n_roots: torch.Tensor  # number of stratified equilibrium roots
    roots: torch.Tensor  # (B, 3) stratified roots h/D, NaN-padded
    frac: torch.Tensor  # h/D (stratified rows) or delta/D (annular rows); NaN elsewhere
    separated: torch.Tensor  # bool: holdup from the two-fluid equilibrium
    flags: torch.Tensor  # int64 bit flags FLAG_*

    def to_columns(self) -> dict[str, np.ndarray]:
        """Plain numpy columns for tables (pattern as names, flags as text)."""
        d = lambda t: t.detach().cpu().numpy()  # noqa: E731
        flags = d(self.flags)
        cols = {
            "holdup": d(self.holdup), "pgrad": d(self.pgrad.total),
            "pgrad_friction": d(self.pgrad.friction), "pgrad_gravity": d(self.pgrad.gravity),
            "pattern": np.array([V.PATTERNS[i] for i in d(self.pattern)], dtype=object),
            "n_roots": d(self.n_roots), "frac": d(self.frac), "separated": d(self.separated),
        }
        for k in range(MAX_ROOTS):
            cols[f"root_{k + 1}"] = d(self.roots[:, k])
        cols["flags"] = flags
        cols["flag_text"] = np.array(
            ["; ".join(t for bit, t in FLAG_TEXT.items() if f & bit) for f in flags], dtype=object)
        return cols


def single_phase_pgrad(cond: Conditions, closure, liquid: bool) -> PressureGradient:
    r"""Single-phase -dp/dx [Pa/m] with the closure's wall friction in the single-phase limit:

    .. math:: -\frac{dp}{dx} = \frac{2 f \rho v^2}{D} + \rho g \sin\theta

    (Darcy-Weisbach with Fanning f, e.g. White, *Fluid Mechanics*, 7th ed., eq. 6.10, plus the
    hydrostatic head). f is the closure's f_WL at h/D = 1 - 1e-9 (liquid) or f_WG at h/D = 1e-9
    (gas), where the phase hydraulic diameter tends to D.
    """
    frac = torch.full_like(cond.D, 1 - _EDGE if liquid else _EDGE)
    c = cond.with_(vsg=0.0) if liquid else cond.with_(vsl=0.0)
    s = local_state(c, frac, STRATIFIED)
    f = closure(s)
    rho, v, fw = (c.rhol, c.vsl, f.f_wl) if liquid else (c.rhog, c.vsg, f.f_wg)
    fric = 2 * fw * rho * v * v.abs() / c.D
    grav = rho * c.g * torch.sin(c.theta)
    return PressureGradient(total=fric + grav, friction=fric, gravity=grav)


def _merge(mask: torch.Tensor, a: PressureGradient, b: PressureGradient) -> PressureGradient:
    return PressureGradient(*(torch.where(mask, x, y) for x, y in zip(a, b)))


def solve_points(
    cond: Conditions, closure, select: str = "thinnest", entrainment: float | str = 0.0,
    n_grid: int = 40, s_wave: float = 0.01, chunk: int = POINT_CHUNK,
) -> PointResult:
    """Solve a flat batch ``(B,)`` of conditions with ``closure`` (see module docstring).

    Parameters
    ----------
    select : root selection rule for several stratified roots ('thinnest' | 'thickest').
    entrainment : entrained liquid fraction E [-] for annular rows, or 'ishii_mishima'.
    n_grid : bracketing grid size of the holdup root finder.
    s_wave : Jeffreys sheltering coefficient of the smooth/wavy transition (Taitel & Dukler 1976).
    chunk : rows solved at a time (bounds memory for any batch size; results do not depend on it).

    >>> from closure_nn.physics.conditions import make_conditions
    >>> from closure_nn.closures.baseline import BaselineClosure
    >>> r = solve_points(make_conditions(vsl=[0.01, 0.0], vsg=[1.0, 5.0], D=0.05), BaselineClosure())
    >>> [r.to_columns()["pattern"][i] for i in range(2)], int(r.flags[1]) == FLAG_SINGLE_PHASE
    (['stratified_smooth', 'single_phase_gas'], True)
    """
    if len(cond.shape) != 1:
        raise ValueError(f"solve_points expects a flat batch (B,), got shape {tuple(cond.shape)}")
    B = cond.shape[0]
    if B <= chunk:
        return _solve_points_chunk(cond, closure, select, entrainment, n_grid, s_wave)
    per_row = isinstance(entrainment, torch.Tensor) and entrainment.dim() > 0
    part = lambda i: _solve_points_chunk(  # noqa: E731
        cond[i:i + chunk], closure, select, entrainment[i:i + chunk] if per_row else entrainment, n_grid, s_wave)
    if torch.is_grad_enabled():  # keep the autograd graph of every chunk
        parts = [part(i) for i in range(0, B, chunk)]
        cat = lambda name: torch.cat([getattr(p, name) for p in parts])  # noqa: E731
        pg = PressureGradient(*(torch.cat([p.pgrad[k] for p in parts]) for k in range(3)))
        return PointResult(holdup=cat("holdup"), pgrad=pg, pattern=cat("pattern"), n_roots=cat("n_roots"),
                           roots=cat("roots"), frac=cat("frac"), separated=cat("separated"), flags=cat("flags"))
    # no graph: fill preallocated outputs (peak memory = the outputs + one chunk)
    first = part(0)
    full = lambda t: t.new_empty((B, *t.shape[1:]))  # noqa: E731
    names = ("holdup", "pattern", "n_roots", "roots", "frac", "separated", "flags")
    out = {k: full(getattr(first, k)) for k in names}
    pg = PressureGradient(*(full(t) for t in first.pgrad))
    for i in range(0, B, chunk):
        r = first if i == 0 else part(i)
        for k in names:
            out[k][i:i + chunk] = getattr(r, k)
        for x, y in zip(pg, r.pgrad):
            x[i:i + chunk] = y
    return PointResult(pgrad=pg, **out)


def _solve_points_chunk(cond: Conditions, closure, select: str, entrainment: float | str, n_grid: int,
                        s_wave: float) -> PointResult:
    """:func:`solve_points` for one chunk of rows."""
    gas_only = cond.vsl <= 0
    liq_only = (cond.vsg <= 0) & ~gas_only
    single = gas_only | liq_only
    # two-phase solve on every row; single-phase rows get harmless stand-in rates
    c2 = cond.with_(vsl=torch.where(single, 0.1, cond.vsl), vsg=torch.where(single, 1.0, cond.vsg))
    strat = solve_separated(c2, closure, STRATIFIED, select=select, n_grid=n_grid)
    pattern = classify(c2, strat, s_wave)

    holdup = strat.holdup
    pg = strat.pgrad
    frac = strat.frac
    flags = torch.where(strat.found, 0, FLAG_NO_SEPARATED_ROOT) + torch.where(strat.n_roots > 1, FLAG_MULTIPLE_ROOTS, 0)
    flags = flags + torch.where(strat.unresolved, FLAG_ROOT_PAIR_UNRESOLVED, 0)

    # annular rows: the film equilibrium of the same closure
    is_ann = pattern == V.CODE[V.ANNULAR]
    if bool(is_ann.any()):
        idx = is_ann.nonzero(as_tuple=True)[0]
        ca = c2[idx]
        E = ishii_mishima(ca) if entrainment == "ishii_mishima" else torch.as_tensor(float(entrainment), dtype=torch.float64).expand(ca.shape)
        ann = solve_separated(ca, closure, ANNULAR, entrainment=E, select=select, n_grid=n_grid)
        ok = torch.zeros_like(is_ann).index_put((idx,), ann.found)
        scatter = lambda full, part: torch.where(ok, full.index_put((idx,), part), full)  # noqa: E731
        holdup, frac = scatter(holdup, ann.holdup), scatter(frac, ann.frac)
        pg = PressureGradient(*(scatter(x, y) for x, y in zip(pg, ann.pgrad)))
        flags = flags + torch.where(is_ann & ~ok, FLAG_ANNULAR_NO_ROOT, 0)
        ann_unres = torch.zeros_like(is_ann).index_put((idx,), ann.unresolved)
        flags = flags | torch.where(ann_unres, FLAG_ROOT_PAIR_UNRESOLVED, 0)

    # non-separated patterns: published drift-flux / slug models
    for code, model in ((V.CODE[V.INTERMITTENT], intermittent_flow), (V.CODE[V.DISPERSED_BUBBLE], dispersed_bubble_flow),
                        (V.CODE[V.BUBBLE], bubble_flow)):
        m = pattern == code
        if bool(m.any()):
            h_m, pg_m = model(c2)
            holdup, pg = torch.where(m, h_m, holdup), _merge(m, pg_m, pg)

    # single-phase rows
    if bool(single.any()):
        pg = _merge(gas_only, single_phase_pgrad(cond, closure, liquid=False), pg)
        pg = _merge(liq_only, single_phase_pgrad(cond, closure, liquid=True), pg)
        holdup = torch.where(gas_only, 0.0, torch.where(liq_only, 1.0, holdup))
        pattern = torch.where(gas_only, V.CODE[V.SINGLE_PHASE_GAS], torch.where(liq_only, V.CODE[V.SINGLE_PHASE_LIQUID], pattern))
        flags = torch.where(single, FLAG_SINGLE_PHASE, flags)

    # which rows got their holdup from a two-fluid equilibrium
    strat_rows = torch.isin(pattern, torch.tensor([V.CODE[p] for p in V.STRATIFIED_PATTERNS]))
    ann_rows = pattern == V.CODE[V.ANNULAR]
    strat_ok = strat.found
    ann_ok = ann_rows & ((flags & FLAG_ANNULAR_NO_ROOT) == 0)
    separated = ((strat_rows | ann_rows) & strat_ok) | ann_ok
    # a separated pattern without any equilibrium has no holdup: NaN, flagged
    no_eq = (strat_rows | ann_rows) & ~separated
    holdup = torch.where(no_eq, float("nan"), holdup)
    pg = PressureGradient(*(torch.where(no_eq, float("nan"), x) for x in pg))
    n_roots = torch.where(single, 0, strat.n_roots)
    roots = torch.where(single[:, None], float("nan"), strat.roots)
    frac = torch.where(separated, frac, float("nan"))
    return PointResult(holdup=holdup, pgrad=pg, pattern=pattern, n_roots=n_roots, roots=roots,
                       frac=frac, separated=separated, flags=flags.to(torch.int64))
