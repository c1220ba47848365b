r"""The terms of the physics-regularised training loss, one function each, per row, as their
equations read (plain torch, no Lightning); :class:`closure_nn.training.loss.ClosureLoss` selects
the rows each applies to and sums them. The momentum residuals come from
:mod:`closure_nn.physics.momentum` (``phase_misfits``, ``combined_residual``, ``term_scale``): the
loss, the training metrics and the audit share them.

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

"""
from __future__ import annotations

import torch

from ..closures.neural import NeuralClosure, NeuralEvaluation
from ..data.features import frac_from_holdup
from ..physics.conditions import Conditions
from ..physics.local_state import LocalState, local_state
from ..physics.momentum import Stresses, combined_residual, combined_terms, phase_misfits, shear_stresses, term_scale


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
    >>> term = float(phase_residual_term(st, tau, p + 2 * sd, sd, sd))  # r_L = 2: the liquid residual is 2 sd
    >>> abs(term - 0.5 * (2.0**2 + float((r_g - r_l) / sd + 2) ** 2)) < 1e-12 * term
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

