r"""The physics-regularised training loss of a neural closure (plain torch, no Lightning):
:class:`ClosureLoss` picks, for every term of :mod:`closure_nn.training.loss_terms` (where each
term's equation is written), the rows it applies to, and sums the weighted means. A batch and
its reading: :mod:`closure_nn.training.loss_batch`.

Identifiability. Holdup and pgrad at one state give two equations (the two phase balances) for
three unknown factors f_WL, f_WG, f_i: the data fix two combinations and leave one direction
free. Learning all three, we close that direction with physics rather than with the network's
whim: the wall factors are anchored to the baseline wall correlation (single-phase-like wall
friction on the phase hydraulic diameter, with the wall roughness of the data where the baseline
is Churchill 1977) a hundred times more strongly than the interfacial factor, so the data move
mainly f_i, the least certain closure of the two-fluid model. Whatever the data say about the
walls beyond that anchor is unidentifiable from holdup and pgrad alone; the evaluation report
states this limit.

Row weights multiply every term.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import torch
from torch import nn

from ..closures.neural import OUTPUT_NAMES, NeuralClosure, NeuralEvaluation
from ..data.configurations import CONFIGURATION_CODE, SEPARATED_CONFIGURATIONS
from ..data.features import frac_from_holdup
from ..physics.holdup_roots import solve_separated
from ..physics.local_state import LocalState, local_state
from ..physics.momentum import FrictionFactors, shear_stresses
from ..physics.near_root import solve_separated_near
from ..physics.patterns import THETA_DOWN, THETA_STEEP, kh_gas_velocity
from ..physics.transitions_unified import bst_annular_liquid_velocity
from ..physics.vocabulary import ANNULAR, CODE, CONFIG_STRATIFIED, DISPERSED_BUBBLE, INTERMITTENT, STRATIFIED_PATTERNS
from .loss_batch import batch_conditions, batch_kinds, measured_state_rows, uncertainties
from .loss_terms import (combined_residual_term, data_misfit_term, holdup_sensitivity, pattern_term,
                         phase_residual_term, prior_term, smoothness)

TERMS = ("phase_residual", "combined_residual", "data_holdup", "data_pgrad", "pattern", "prior", "smooth")
#: default per-factor prior weights (see "Identifiability" in the module docstring)
PRIOR_FACTORS = {"f_wl": 1.0, "f_wg": 1.0, "f_i": 0.01}
#: which rows feed the pattern term (see ``pattern`` in :mod:`closure_nn.training.loss_terms`)
PATTERN_ROWS = ("data_first", "pattern_only", "observed")
#: where the prior measures the distance to the baseline (see ``prior`` in :mod:`closure_nn.training.loss_terms`)
PRIOR_SPACES = ("log_factor", "unbounded")
_STRAT_CODES = tuple(CODE[p] for p in STRATIFIED_PATTERNS)
_UNSTABLE_CODES = (CODE[INTERMITTENT], CODE[ANNULAR], CODE[DISPERSED_BUBBLE])


@dataclass
class LossSettings:
    """Weights and uncertainty defaults of :class:`ClosureLoss`.

    The defaults of this class are the plain forms of the terms (squares, no propagated holdup sd,
    the prior on ln f, the pattern term on pattern-only rows), as the equations of
    :mod:`closure_nn.training.loss_terms` read. The method's settings, validated on development rows, are the defaults of
    ``conf/loss/physics.yaml`` (Cauchy scales 3, effective variance, the unbounded prior,
    ``pattern_rows='data_first'``): every command and :func:`closure_nn.pipeline.fit` use those.
    """

    weights: dict = field(default_factory=lambda: {"phase_residual": 1.0, "combined_residual": 1.0,
                                                   "data_holdup": 1.0, "data_pgrad": 1.0, "pattern": 1.0,
                                                   "prior": 1.0, "smooth": 1e-3})
    #: per-factor weights lambda_k of the prior term (walls anchored, interface free to move)
    prior_factors: dict = field(default_factory=lambda: dict(PRIOR_FACTORS))
    default_holdup_sd: float = 0.02  # [-]
    pgrad_rel_sd: float = 0.05  # [-]
    pgrad_sd_floor: float = 1.0  # [Pa/m]
    pattern_margin: float = 0.05  # [-]
    pattern_tolerance: float = 0.05  # [-] margin shortfall that counts as one unit of the pattern term
    pattern_rows: str = "pattern_only"  # 'data_first' | 'pattern_only' | 'observed' (see ``pattern`` in loss_terms)
    prior_space: str = "log_factor"  # 'log_factor' | 'unbounded' (see ``prior`` in :mod:`closure_nn.training.loss_terms`)
    effective_variance: bool = False  # propagate holdup_sd into the phase-residual scale
    #: Cauchy scale c of the phase-residual term (None: plain squares); see :func:`cauchy`
    residual_robust_scale: float | None = None
    #: Cauchy scale c of the data-misfit terms (None: plain squares); see ``data_holdup`` above
    data_robust_scale: float | None = None
    select: str = "thinnest"
    n_grid: int = 40

    def __post_init__(self) -> None:
        unknown = set(self.weights) - set(TERMS)
        if unknown:
            raise ValueError(f"unknown loss term(s) {', '.join(sorted(unknown))}; known: {', '.join(TERMS)}")
        self.weights = {k: float(self.weights.get(k, 0.0)) for k in TERMS}
        bad = set(self.prior_factors) - set(OUTPUT_NAMES)
        if bad:
            raise ValueError(f"prior_factors: unknown factor(s) {', '.join(sorted(bad))}; known: {', '.join(OUTPUT_NAMES)}")
        self.prior_factors = {k: float(self.prior_factors.get(k, PRIOR_FACTORS[k])) for k in OUTPUT_NAMES}
        if any(v < 0 for v in self.prior_factors.values()):
            raise ValueError(f"prior_factors must be >= 0, got {self.prior_factors}")
        if self.pattern_rows not in PATTERN_ROWS:
            raise ValueError(f"pattern_rows must be one of {', '.join(PATTERN_ROWS)}, got {self.pattern_rows!r}")
        if self.prior_space not in PRIOR_SPACES:
            raise ValueError(f"prior_space must be one of {', '.join(PRIOR_SPACES)}, got {self.prior_space!r}")
        if not self.pattern_tolerance > 0:
            raise ValueError(f"pattern_tolerance must be positive, got {self.pattern_tolerance}")

    def prior_vector(self) -> torch.Tensor:
        """``(3,)`` float64 weights lambda_k in the order f_wl, f_wg, f_i."""
        return torch.tensor([self.prior_factors[k] for k in OUTPUT_NAMES], dtype=torch.float64)


class _Acc:
    """Weighted sums and counts per term."""

    def __init__(self) -> None:
        self.sum = {k: torch.zeros((), dtype=torch.float64) for k in TERMS}
        self.wsum = {k: 0.0 for k in TERMS}
        self.count = {k: 0 for k in TERMS}

    def add(self, term: str, per_row: torch.Tensor, w: torch.Tensor) -> None:
        if per_row.numel():
            self.sum[term] = self.sum[term] + (w * per_row).sum()
            self.wsum[term] += float(w.sum())
            self.count[term] += int(per_row.numel())

    def mean(self, term: str) -> torch.Tensor:
        return self.sum[term] / self.wsum[term] if self.wsum[term] > 0 else self.sum[term]


class ClosureLoss(nn.Module):
    """``loss(closure, batch) -> (total, terms, counts)``; see the module docstring.

    ``terms`` maps every name of :data:`TERMS` to its (unweighted) mean, ``counts`` to the
    number of rows it used; ``counts['no_root']`` counts rows whose equilibrium was not found.
    The terms are the functions of :mod:`closure_nn.training.loss_terms`; this class only selects the rows each one applies to.
    """

    def __init__(self, settings: LossSettings | None = None) -> None:
        super().__init__()
        self.settings = settings or LossSettings()

    def forward(self, closure: NeuralClosure, batch: dict[str, torch.Tensor]):
        cfg, acc = self.settings, _Acc()
        # rows of unknown pattern under unknown_pattern='predicted': the configuration of the
        # pattern the closure in training predicts for them now (no gradient through the choice)
        kinds = batch_kinds(batch, closure, cfg.select, cfg.n_grid)
        has_target = torch.isfinite(batch["holdup"]) | torch.isfinite(batch["pgrad"])
        need_smooth = cfg.weights["smooth"] > 0 and torch.is_grad_enabled()
        # one closure evaluation per set of states, shared by the residuals, the prior and the
        # smoothness penalty: (state, row weights, evaluation or None = not evaluated yet)
        reg_states: list[tuple[LocalState, torch.Tensor, NeuralEvaluation | None]] = []
        no_root = 0
        for kind in SEPARATED_CONFIGURATIONS:
            sel = kinds == CONFIGURATION_CODE[kind]
            self._measured_state(closure, batch, kinds, sel, kind, need_smooth, acc, reg_states)
            no_root += self._equilibrium(closure, batch, sel, kind, acc, reg_states)
        if cfg.weights["pattern"] > 0:
            no_root += self._pattern(closure, batch, has_target, acc)
        self._regularisers(closure, reg_states, need_smooth, acc)
        terms = {k: acc.mean(k) for k in TERMS}
        total = sum(cfg.weights[k] * terms[k] for k in TERMS)
        # a zero-valued link to every trainable parameter, so that each (DDP) rank back-propagates
        # through all parameters even when its batch has no row for some term
        params = [p for p in closure.parameters() if p.requires_grad]
        if params:
            total = total + 0.0 * torch.stack([p.sum() for p in params]).sum()
        return total, terms, {**acc.count, "no_root": no_root}

    def _measured_state(self, closure, batch, kinds, sel, kind, need_smooth, acc, reg_states) -> None:
        """(1) ``phase_residual`` (holdup and pgrad) and (2) ``combined_residual`` (holdup only) at
        the measured states of configuration ``kind``. A measured state needs 0 < H < 1: a reading of
        exactly 0 or 1 (clipped by the data reduction) keeps only its data-misfit terms."""
        cfg, wt = self.settings, self.settings.weights
        H, P = batch["holdup"], batch["pgrad"]
        meas = sel & measured_state_rows(H)
        if not meas.any():
            return
        im = meas.nonzero().squeeze(-1)  # row indices: one mask conversion for every column
        c = batch_conditions(batch, im)
        frac_meas = batch.get("frac_measured")  # precomputed measured_frac(batch), if given
        frac = frac_from_holdup(H[im], kind) if frac_meas is None else frac_meas[im]
        if frac_meas is not None and bool((kinds[im] != batch["kind"][im]).any()):
            # rows whose kind was just predicted have no precomputed level
            frac = torch.where(kinds[im] != batch["kind"][im], frac_from_holdup(H[im], kind).detach(), frac)
        s = local_state(c, frac, kind)
        w = batch["weight"][im]
        use_res = wt["phase_residual"] > 0 or wt["combined_residual"] > 0
        ev = closure.evaluate(s, input_grad=need_smooth) if use_res else None
        reg_states.append((s, w, ev))
        if not use_res:
            return
        tau = shear_stresses(s, ev.friction())
        sh, sp = uncertainties(batch, cfg)
        both = torch.isfinite(P[im])
        if both.any():
            p, sig = P[im][both], sp[im][both]
            sb, tb = (s, tau) if bool(both.all()) else (local_state(c[both], s.geom.frac[both], kind),
                                                         type(tau)(*(t[both] for t in tau)))
            s_l = s_g = sig
            if cfg.effective_variance:
                d_l, d_g = holdup_sensitivity(closure, c[both], H[im][both], sh[im][both], kind, p)
                s_l, s_g = torch.sqrt(sig**2 + d_l**2), torch.sqrt(sig**2 + d_g**2)
            acc.add("phase_residual", phase_residual_term(sb, tb, p, s_l, s_g, cfg.residual_robust_scale), w[both])
        only = ~both
        if only.any():
            so = local_state(c[only], s.geom.frac[only], kind)
            to = type(tau)(*(t[only] for t in tau))
            with torch.no_grad():
                fb = closure.baseline(so) if ev.base is None else FrictionFactors(*ev.base[only].detach().unbind(dim=-1))
                tau_base = shear_stresses(so, fb)
            acc.add("combined_residual", combined_residual_term(so, to, tau_base), w[only])

    def _equilibrium(self, closure, batch, sel, kind, acc, reg_states) -> int:
        """(3) ``data_holdup`` and ``data_pgrad``: the closure's equilibrium against the measurements;
        returns the count of rows without an equilibrium root (left out)."""
        cfg, wt = self.settings, self.settings.weights
        H, P = batch["holdup"], batch["pgrad"]
        has_h, has_p = torch.isfinite(H), torch.isfinite(P)
        data = sel & (has_h | has_p)
        if not data.any() or not (wt["data_holdup"] > 0 or wt["data_pgrad"] > 0):
            return 0
        c = batch_conditions(batch, data)
        if cfg.select == "thinnest":
            # the root refined from the level at the measured holdup (all roots where there is none,
            # or where the row's configuration was predicted as another than it was stored with):
            # the closure is evaluated at 6-9 levels per row instead of the 40 of the bracketing grid
            same = batch["kind"][data] == CONFIGURATION_CODE[kind]
            frac_meas = batch.get("frac_measured")
            if frac_meas is None:
                meas = measured_state_rows(H[data]) & same
                guess = torch.full_like(H[data], float("nan"))
                guess[meas] = frac_from_holdup(H[data][meas], kind).detach()
            else:
                guess = torch.where(same, frac_meas[data], float("nan"))
            sol = solve_separated_near(c, closure, guess, kind, n_grid=cfg.n_grid)
        else:
            sol = solve_separated(c, closure, kind, select=cfg.select, n_grid=cfg.n_grid)
        ok = sol.found
        hh, hp = has_h[data] & ok, has_p[data] & ok
        wd = batch["weight"][data]
        sh, sp = uncertainties(batch, cfg)
        acc.add("data_holdup", data_misfit_term(sol.holdup[hh], H[data][hh], sh[data][hh], cfg.data_robust_scale), wd[hh])
        acc.add("data_pgrad", data_misfit_term(sol.pgrad.total[hp], P[data][hp], sp[data][hp], cfg.data_robust_scale), wd[hp])
        solved = ok & ~measured_state_rows(H)[data]
        if solved.any():
            reg_states.append((local_state(c[solved], sol.frac[solved].detach(), kind), wd[solved], None))
        return int((~ok).sum())

    def _regularisers(self, closure, reg_states, need_smooth, acc) -> None:
        """(5) ``prior`` toward the baseline and ``smooth`` at the collected states."""
        cfg, wt = self.settings, self.settings.weights
        if wt["prior"] == 0 and not need_smooth:
            return
        lam = cfg.prior_vector()
        for s, w, ev in reg_states:
            if ev is None:
                ev = closure.evaluate(s, input_grad=need_smooth)
            if wt["prior"] > 0:
                if cfg.prior_space == "unbounded" and closure.mode == "correction":
                    dlog = closure.bound_vec * ev.raw
                else:
                    base = ev.base if ev.base is not None else torch.stack(tuple(closure.baseline(s)), dim=-1)
                    dlog = torch.log(ev.factors) - torch.log(base)
                acc.add("prior", prior_term(dlog, lam), w)
            if need_smooth:
                acc.add("smooth", smoothness(closure, s, ev), w)

    def _pattern(self, closure: NeuralClosure, batch: dict, has_target: torch.Tensor, acc: _Acc) -> int:
        """(4) ``pattern`` on the rows ``pattern_rows`` selects; returns the count of rows without a root."""
        pat = batch["pattern"]
        strat = torch.zeros_like(pat, dtype=torch.bool)
        for code in _STRAT_CODES:
            strat |= pat == code
        unstable = torch.zeros_like(strat)
        for code in _UNSTABLE_CODES:
            unstable |= pat == code
        # the Kelvin-Helmholtz boundary decides a non-stratified pattern only from THETA_DOWN to
        # THETA_STEEP (closure_nn.physics.patterns); below THETA_DOWN other criteria (Barnea 1986)
        # call a stable layer intermittent or annular, so there only stratified labels tell the KH margin
        theta = batch["theta"]
        rows = (strat | (unstable & (theta >= THETA_DOWN))) & (theta < THETA_STEEP)
        if self.settings.pattern_rows == "pattern_only":
            rows = rows & ~has_target
        elif self.settings.pattern_rows == "data_first":
            rows = rows & ~(strat & has_target)
        if not rows.any():
            return 0
        c = batch_conditions(batch, rows)
        sol = solve_separated(c, closure, CONFIG_STRATIFIED, select=self.settings.select, n_grid=self.settings.n_grid)
        ok = sol.found
        m = sol.state.u_G / kh_gas_velocity(c, sol.state).clamp_min(1e-12) - 1
        pen = pattern_term(m, strat[rows], self.settings.pattern_margin, self.settings.pattern_tolerance)
        # in a downward pipe a Kelvin-Helmholtz-stable layer fast enough to throw drops onto the upper
        # wall is not stratified either (Barnea, Shoham & Taitel 1982; physics.patterns, step 3): a
        # non-stratified label there says nothing of the KH margin, so the hinge leaves it alone
        with torch.no_grad():
            thrown = (c.theta < 0) & (sol.state.u_L >= bst_annular_liquid_velocity(c, sol.state, sol.friction.f_wl))
        use = ok & ~(thrown & ~strat[rows])
        acc.add("pattern", pen[use], batch["weight"][rows][use])
        return int((~ok).sum())
