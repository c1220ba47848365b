r"""The physics-regularised training loss of a neural closure (plain torch, no Lightning).

A batch is a dict of ``(B,)`` tensors built by :func:`closure_nn.training.tables.table_tensors`:
the condition fields (:data:`closure_nn.physics.conditions.FIELD_NAMES`), the targets
``holdup``, ``pgrad`` (-dp/dx [Pa/m]), their 1-sigma ``holdup_sd``, ``pgrad_sd`` (NaN = not
measured / not given), the separated configuration ``kind`` (codes of
:data:`closure_nn.data.features.KIND_CODE`, -1 = not separated flow), the observed ``pattern``
(codes of :data:`closure_nn.physics.vocabulary.CODE`, -1 = not observed) and a row ``weight``;
optionally ``frac_measured``, the level at the measured holdup (:func:`measured_frac`), which the
training datamodule computes once per row instead of once per batch. Rows of kind
:data:`~closure_nn.data.features.KIND_PREDICTED` (no observed pattern, ``unknown_pattern='predicted'``)
take, at every evaluation of the loss, the configuration of the pattern the closure in training
predicts for them (:func:`~closure_nn.data.features.resolve_kinds`), so they feed every term
that a row observed in that pattern would feed, except the pattern term; rows of kind
:data:`~closure_nn.data.features.KIND_PREDICTED_CLEAR` (``'predicted_clear'``) likewise, but
only where that prediction is clear of a transition (else they feed no term).

Terms (each a weighted mean over the rows it applies to; weights in ``conf/loss/*.yaml``):

``phase_residual``
    Rows with holdup AND pgrad measured, at the MEASURED state (h/D from the holdup; only for
    0 < H < 1 - a clipped reading of 0 or 1 is no separated state and would give unbounded
    phase velocities). Both phase
    balances of :mod:`closure_nn.physics.momentum`, each divided by its phase area and by the
    pgrad uncertainty :math:`\sigma_p`:

    .. math:: r_L = \frac{R_L}{A_L\,\sigma_p},\qquad r_G = \frac{R_G}{A_G\,\sigma_p},\qquad
              \ell = \tfrac12 (r_L^2 + r_G^2)

    :math:`R_L/A_L` is the measured pgrad minus the pgrad that the liquid balance implies with
    the closure's stresses, so :math:`r_L` counts pgrad standard deviations (a stress scale
    :math:`A_L\sigma_p` per unit length).

    With ``effective_variance`` the holdup uncertainty is propagated too (the effective-variance
    method for errors in both variables, Orear 1982, Am. J. Phys. 50(10):912-916, citation from
    memory): each phase
    residual is divided by :math:`\sqrt{\sigma_p^2 + (\partial (R/A)/\partial H\,\sigma_H)^2}`,
    the derivative taken by a central difference at :math:`H \pm \sigma_H` without gradient.
    Measured on the demo campaign, the liquid balance at the measured state moves by tens of
    pgrad sd within one holdup sd at low holdup, so without it the term mostly fits holdup noise.
``combined_residual``
    Rows with only holdup measured: the combined balance F [Pa/m] at the measured state,
    divided by the sum of the magnitudes of its four terms evaluated with the BASELINE closure
    (a fixed, parameter-free scale per row), squared.
``data_holdup``, ``data_pgrad``
    Every row with a measured target and a separated pattern: the equilibrium of the closure
    (:func:`~closure_nn.physics.holdup_roots.solve_separated`, kind from the pattern; gradients
    by the implicit function theorem), misfit :math:`((\hat H - H)/\sigma_H)^2` and
    :math:`((\hat p - p)/\sigma_p)^2`. Rows without an equilibrium root are left out (counted).
    With ``data_robust_scale`` c the squares are Cauchy losses (:func:`cauchy`): a row labelled
    in the wrong pattern (an observer's call near a boundary) is solved in the wrong
    configuration, and its misfit of tens of sd would otherwise steer the closure.
``pattern``
    Rows with an observed pattern below ``patterns.THETA_STEEP`` (observed non-stratified ones only
    from ``patterns.THETA_DOWN`` up: below it the map's other criteria call a stable layer
    intermittent or annular, so such a label says nothing of the Kelvin-Helmholtz margin). By default
    (``pattern_rows='data_first'``) every such row except those observed stratified that also
    have holdup or pgrad: rows observed intermittent, annular or dispersed bubble - which have no
    stratified configuration and feed no other term - still tell the closure where stratified
    flow must be unstable, while a stratified row with data is left to its data term, so that
    where its label contradicts the Kelvin-Helmholtz map (a layer the map calls unstable) the
    measurement decides rather than the hinge pushing against it (such rows are counted in the
    report of ``closure-nn fit``). ``pattern_rows='pattern_only'``: only rows with neither
    holdup nor pgrad; ``'observed'``: every row with an observed pattern. The
    Kelvin-Helmholtz margin :math:`m = u_G/u_{G,KH} - 1` of the closure's stratified equilibrium
    (:func:`closure_nn.physics.patterns.kh_gas_velocity`, Taitel & Dukler 1976). Observed
    stratified but predicted unstable: :math:`[\max(m + \delta, 0)/t]^2`; observed intermittent,
    annular or dispersed bubble but predicted stable: :math:`[\max(\delta - m, 0)/t]^2`, with the
    margin :math:`\delta` = ``pattern_margin`` and the tolerance :math:`t` = ``pattern_tolerance``
    (the shortfall of margin that counts as much as a one-sigma misfit of a data term; default
    0.05, the margin itself. Before this scale existed the penalty was the bare
    :math:`[\max(\cdot, 0)]^2`, i.e. :math:`t = 1`: a wrong pattern then cost only
    :math:`\sim\delta^2 = 0.0025`, far less than one noisy holdup reading, and the term did
    next to nothing; docs/evaluation_log.md, 2026-12-02, "The pattern term and rows of unknown
    pattern").
``prior``
    :math:`\sum_k \lambda_k (\ln f_k - \ln f_{k,\mathrm{base}})^2` at the measured (or, without
    holdup, solved) states: pulls the closure toward the mechanistic baseline where data are
    silent. The per-factor weights :math:`\lambda_k` (``prior_factors``, default
    ``{f_wl: 1, f_wg: 1, f_i: 0.01}``) make the split between the factors physical (below).
    With ``prior_space='unbounded'`` (correction mode) the prior acts on the correction before
    its bound, :math:`\sum_k \lambda_k (b_k o_k)^2` with :math:`\ln(f_k/f_{k,\mathrm{base}}) = b_k\tanh o_k`:
    the same for small corrections, but its gradient does not vanish where the bound saturates
    (the gradient of :math:`(b\tanh o)^2` does, so a factor driven to its bound stays there,
    measured on the demo campaign: the gas wall factor sat at e^{+-0.5} on most states).
``smooth``
    :math:`\sum_k \lVert \partial g_k / \partial z \rVert^2`, g the network's part of ln f and z
    the standardised features, at the same states.

Identifiability. Holdup and pgrad at one state give two equations (the two phase balances) for
three unknown factors f_WL, f_WG, f_i: the data fix two combinations and leave one direction
free. Learning all three, we close that direction with physics rather than with the network's
whim: the wall factors are anchored to the baseline wall correlation (single-phase-like wall
friction on the phase hydraulic diameter, with the wall roughness of the data where the baseline
is Churchill 1977) a hundred times more strongly than the interfacial factor, so the data move
mainly f_i, the least certain closure of the two-fluid model. Whatever the data say about the
walls beyond that anchor is unidentifiable from holdup and pgrad alone; the evaluation report
states this limit.

Uncertainties: ``holdup_sd`` where given, else ``default_holdup_sd``; ``pgrad_sd`` where given,
else ``pgrad_rel_sd * |pgrad| + pgrad_sd_floor``. Row weights multiply every term.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import torch
from torch import nn

from ..closures.neural import OUTPUT_NAMES, NeuralClosure, NeuralEvaluation
from ..data.features import KIND_CODE, KIND_PREDICTED, KIND_PREDICTED_CLEAR, KINDS, frac_from_holdup, resolve_kinds
from ..physics.conditions import FIELD_NAMES, Conditions
from ..physics.geometry import STRATIFIED
from ..physics.holdup_roots import solve_separated
from ..physics.local_state import LocalState, local_state
from ..physics.momentum import (FrictionFactors, Stresses, combined_residual, combined_terms, phase_misfits,
                                shear_stresses, term_scale)
from ..physics.patterns import THETA_DOWN, THETA_STEEP, kh_gas_velocity
from ..physics.vocabulary import CODE, DISPERSED_BUBBLE, INTERMITTENT, STRATIFIED_PATTERNS
from ..physics.vocabulary import ANNULAR as ANNULAR_PATTERN

TERMS = ("phase_residual", "combined_residual", "data_holdup", "data_pgrad", "pattern", "prior", "smooth")
#: default per-factor prior weights (see "Identifiability" in the module docstring)
PRIOR_FACTORS = {"f_wl": 1.0, "f_wg": 1.0, "f_i": 0.01}
#: which rows feed the pattern term (see ``pattern`` in the module docstring)
PATTERN_ROWS = ("data_first", "pattern_only", "observed")
#: where the prior measures the distance to the baseline (see ``prior`` in the module docstring)
PRIOR_SPACES = ("log_factor", "unbounded")
_STRAT_CODES = tuple(CODE[p] for p in STRATIFIED_PATTERNS)
_UNSTABLE_CODES = (CODE[INTERMITTENT], CODE[ANNULAR_PATTERN], CODE[DISPERSED_BUBBLE])


@dataclass
class LossSettings:
    """Weights and uncertainty defaults of :class:`ClosureLoss`.

    The defaults of this class are the plain forms of the terms (squares, no propagated holdup sd,
    the prior on ln f, the pattern term on pattern-only rows), as the equations of the module
    docstring read. The method's settings, validated on development rows, are the defaults of
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
    pattern_rows: str = "pattern_only"  # 'data_first' | 'pattern_only' | 'observed' (see the module docstring)
    prior_space: str = "log_factor"  # 'log_factor' | 'unbounded' (see ``prior`` in the module docstring)
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


def cauchy(r: torch.Tensor, c: float | None) -> torch.Tensor:
    r"""Robust square of standardised residuals ``r``: :math:`c^2 \ln(1 + r^2/c^2)` (Cauchy or
    Lorentzian loss, e.g. Holland & Welsch 1977, Commun. Stat. A6(9):813-827, from memory), equal to
    :math:`r^2` for :math:`|r| \ll c` and growing only logarithmically beyond, so a few
    measured states far off (slips, clipped readings) cannot dominate. ``c = None``: :math:`r^2`.

    >>> r = torch.tensor([0.1, 30.0], dtype=torch.float64)
    >>> [round(x, 4) for x in cauchy(r, 3.0).tolist()], [round(x, 4) for x in cauchy(r, None).tolist()]
    ([0.01, 41.5361], [0.01, 900.0])
    """
    if c is None:
        return r**2
    return c**2 * torch.log1p((r / c) ** 2)


def batch_conditions(batch: dict[str, torch.Tensor], rows: torch.Tensor | None = None) -> Conditions:
    """Conditions of the batch rows selected by ``rows`` (a bool mask or int64 row indices; all
    rows if None)."""
    cols = {k: batch[k] if rows is None else batch[k][rows] for k in FIELD_NAMES}
    return Conditions(**cols)


def batch_kinds(batch: dict[str, torch.Tensor], closure, select: str = "thinnest", n_grid: int = 40) -> torch.Tensor:
    """``batch['kind']`` with the rows of kind predicted (or predicted-clear) resolved with ``closure``
    (:func:`~closure_nn.data.features.resolve_kinds`); the conditions are built only when such rows exist."""
    k = batch["kind"]
    if not bool(((k == KIND_PREDICTED) | (k == KIND_PREDICTED_CLEAR)).any()):
        return k
    return resolve_kinds(k, batch_conditions(batch), closure, select, n_grid)


def measured_state_rows(holdup: torch.Tensor) -> torch.Tensor:
    """Bool mask ``(B,)`` of rows with a measured separated state: holdup given and 0 < H < 1 (a
    reading of exactly 0 or 1, clipped by the data reduction, is no separated-flow state)."""
    return torch.isfinite(holdup) & (holdup > 0) & (holdup < 1)


def measured_frac(batch: dict[str, torch.Tensor]) -> torch.Tensor:
    """h/D (stratified rows) or delta/D (annular rows) [-] at the measured holdup, ``(B,)``, from
    :func:`~closure_nn.data.features.frac_from_holdup` (no gradient); NaN where a row has no
    measured separated state (:func:`measured_state_rows`, ``kind`` -1).

    :class:`ClosureLoss` computes it per batch unless the batch carries it as the key
    ``frac_measured`` (the training datamodule stores it once per row, since it depends on the
    row alone).
    """
    H = batch["holdup"]
    out = torch.full_like(H, float("nan"))
    rows = measured_state_rows(H)
    for kind in KINDS:
        sel = rows & (batch["kind"] == KIND_CODE[kind])
        if sel.any():
            out[sel] = frac_from_holdup(H[sel], kind).detach()
    return out


def uncertainties(batch: dict[str, torch.Tensor], cfg: LossSettings) -> tuple[torch.Tensor, torch.Tensor]:
    """Per-row sigma_H [-] and sigma_p [Pa/m] (given values, else the defaults), ``(B,)``."""
    sh = batch["holdup_sd"]
    sh = torch.where(torch.isfinite(sh) & (sh > 0), sh, torch.full_like(sh, cfg.default_holdup_sd))
    p = batch["pgrad"]
    default_p = cfg.pgrad_rel_sd * torch.nan_to_num(p).abs() + cfg.pgrad_sd_floor
    sp = batch["pgrad_sd"]
    sp = torch.where(torch.isfinite(sp) & (sp > 0), sp, default_p)
    return sh, sp


def smoothness(closure: NeuralClosure, s: LocalState, ev: NeuralEvaluation | None = None) -> torch.Tensor:
    r"""Per-state squared gradient norm of the learned log factor w.r.t. standardised features ``(M,)``:
    :math:`\sum_k \lVert \partial g_k / \partial z \rVert^2` (``smooth`` of the module docstring).

    ``ev``: an evaluation at ``s`` with per-branch input leaves
    (``closure.evaluate(s, input_grad=True)``), reused if given. Branch b reads only its own
    leaf, so one backward pass of the sum of every branch's j-th output gives each of those
    outputs' gradient separately, with no pass through the other branches: one pass for a model
    with one branch per factor, three for one shared network. Factors that are not learned have
    a zero gradient and add nothing.
    """
    if ev is None:
        ev = closure.evaluate(s, input_grad=True)
    zs, g = ev.inputs, ev.g
    total = torch.zeros(g.shape[:-1], dtype=g.dtype)
    for j in range(max(len(outs) for outs in closure.branch_outputs)):
        cols = [outs[j] for outs in closure.branch_outputs if len(outs) > j]
        grads = torch.autograd.grad(g[..., cols].sum(), zs, create_graph=True, allow_unused=True)
        for dz in grads:
            if dz is not None:
                total = total + (dz**2).sum(dim=-1)
    return total


def holdup_sensitivity(closure, cond: Conditions, holdup: torch.Tensor, holdup_sd: torch.Tensor, kind: str,
                       pgrad: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
    """Change of R_L/A_L and R_G/A_G [Pa/m] over one holdup sd, ``(M,)`` each (no gradient):
    half the difference between the residuals at H + sd and H - sd (clamped inside (0, 1))."""
    with torch.no_grad():
        out = []
        for sign in (1.0, -1.0):
            Hs = (holdup + sign * holdup_sd).clamp(1e-6, 1 - 1e-6)
            s = local_state(cond, frac_from_holdup(Hs, kind), kind)
            out.append(phase_misfits(s, shear_stresses(s, closure(s)), pgrad))
        return (0.5 * (out[0][0] - out[1][0])).abs(), (0.5 * (out[0][1] - out[1][1])).abs()


# --------------------------------------------------------------------------- the terms, one function each
def phase_residual_term(s: LocalState, tau: Stresses, pgrad: torch.Tensor, sd_l: torch.Tensor, sd_g: torch.Tensor,
                        c: float | None = None) -> torch.Tensor:
    r"""``phase_residual`` per row ``(M,)``: :math:`\tfrac12[\rho(r_L) + \rho(r_G)]` with
    :math:`r_L = (R_L/A_L)/\sigma_L`, :math:`r_G = (R_G/A_G)/\sigma_G` at the measured state and
    :math:`\rho` = :func:`cauchy` (scale ``c``; plain squares for None).

    >>> from closure_nn.physics.conditions import make_conditions
    >>> from closure_nn.closures.baseline import BaselineClosure
    >>> st = local_state(make_conditions(vsl=0.05, vsg=2.0, D=0.05), torch.tensor(0.3, dtype=torch.float64), "stratified")
    >>> tau = shear_stresses(st, BaselineClosure()(st))
    >>> r_l, r_g = phase_misfits(st, tau, torch.tensor(0.0, dtype=torch.float64))
    >>> p = torch.tensor(0.0, dtype=torch.float64) - r_l  # pgrad the liquid balance implies
    >>> sd = torch.tensor(2.0, dtype=torch.float64)
    >>> float(phase_residual_term(st, tau, p + 2 * sd, sd, sd)) == 0.5 * (2.0**2 + float((r_g - r_l) / sd + 2) ** 2)
    True
    """
    r_l, r_g = phase_misfits(s, tau, pgrad)
    return 0.5 * (cauchy(r_l / sd_l, c) + cauchy(r_g / sd_g, c))


def combined_residual_term(s: LocalState, tau: Stresses, tau_base: Stresses) -> torch.Tensor:
    r"""``combined_residual`` per row ``(M,)``: :math:`[F / \sum_k |F_k^\mathrm{base}|]^2`, the combined
    balance at the measured state over the magnitude of its four terms with the baseline's stresses
    ``tau_base`` (a fixed, parameter-free scale per row)."""
    return (combined_residual(s, tau) / term_scale(combined_terms(s, tau_base)).clamp_min(1e-12)) ** 2


def data_misfit_term(predicted: torch.Tensor, measured: torch.Tensor, sd: torch.Tensor, c: float | None = None) -> torch.Tensor:
    r"""``data_holdup`` / ``data_pgrad`` per row: :math:`\rho((\hat y - y)/\sigma)`, :math:`\rho` = :func:`cauchy`.

    >>> t = lambda *v: torch.tensor(v, dtype=torch.float64)
    >>> [round(x, 9) for x in data_misfit_term(t(0.32, 0.5), t(0.30, 0.2), t(0.01, 0.01)).tolist()]
    [4.0, 900.0]
    """
    return cauchy((predicted - measured) / sd, c)


def pattern_term(margin: torch.Tensor, observed_stratified: torch.Tensor, delta: float, tol: float) -> torch.Tensor:
    r"""``pattern`` per row: with the Kelvin-Helmholtz margin :math:`m = u_G/u_{G,KH} - 1` of the
    closure's stratified equilibrium, :math:`[\max(m + \delta, 0)/t]^2` for a row observed stratified
    and :math:`[\max(\delta - m, 0)/t]^2` for a row observed in a pattern where stratified flow is unstable.

    >>> t = lambda *v: torch.tensor(v, dtype=torch.float64)
    >>> [round(x, 9) for x in pattern_term(t(-0.10, 0.02, 0.02, 0.30), t(1, 1, 0, 0).bool(), 0.05, 0.05).tolist()]
    [0.0, 1.96, 0.36, 0.0]
    """
    short = torch.where(observed_stratified, torch.relu(margin + delta), torch.relu(delta - margin))
    return (short / tol) ** 2


def prior_term(dlog: torch.Tensor, lam: torch.Tensor) -> torch.Tensor:
    r"""``prior`` per row: :math:`\sum_k \lambda_k d_k^2` with ``dlog`` ``(M, 3)`` the distance to the
    baseline (:math:`\ln f_k - \ln f_{k,\mathrm{base}}`, or :math:`b_k o_k` in the unbounded space).

    >>> lam = torch.tensor([1.0, 1.0, 0.01], dtype=torch.float64)
    >>> [round(x, 9) for x in prior_term(torch.tensor([[0.1, 0.0, 2.0]], dtype=torch.float64), lam).tolist()]
    [0.05]
    """
    return (lam * dlog**2).sum(dim=-1)


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
    The terms are the functions above; this class only selects the rows each one applies to.
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
        for kind in KINDS:
            sel = kinds == KIND_CODE[kind]
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
        sol = solve_separated(c, closure, STRATIFIED, select=self.settings.select, n_grid=self.settings.n_grid)
        ok = sol.found
        m = sol.state.u_G / kh_gas_velocity(c, sol.state).clamp_min(1e-12) - 1
        pen = pattern_term(m, strat[rows], self.settings.pattern_margin, self.settings.pattern_tolerance)
        acc.add("pattern", pen[ok], batch["weight"][rows][ok])
        return int((~ok).sum())
