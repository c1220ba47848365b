r"""Momentum-balance residuals of measured separated-flow states, normalised by a stress scale.

At a measured state the liquid level (or film thickness) comes from the measured holdup, the
closure gives the stresses there, and the measured pressure gradient closes the balances. If the
row and the closure agree, both phase balances of Taitel & Dukler (1976, eqs. 1-2; see
:mod:`closure_nn.physics.momentum`) vanish:

.. math::
    R_L = A_L\,\mathrm{pgrad} - \tau_{WL}S_L + \tau_i S_i - \rho_L A_L g\sin\theta \quad [N/m]

    R_G = A_G\,\mathrm{pgrad} - \tau_{WG}S_G - \tau_i S_i - \rho_G A_G g\sin\theta \quad [N/m]

Where only the holdup is measured the combined equation (ibid., eq. 3), which has no pgrad, is
used: :math:`F = \tau_{WG}S_G/A_G - \tau_{WL}S_L/A_L + \tau_i S_i(1/A_L + 1/A_G) - (\rho_L-\rho_G)g\sin\theta`
[Pa/m]. F is computed on every row with a holdup.

Normalisation (our definition). Each residual is divided by the sum of the magnitudes of its own
terms, e.g. for the liquid

.. math::
    r_L = \frac{R_L}{|A_L\,\mathrm{pgrad}| + \tau_{WL}S_L + |\tau_i| S_i + |\rho_L A_L g\sin\theta|}
        = \frac{R_L/(S_L + S_i)}{\sigma_L}

i.e. the mean stress imbalance on the phase's perimeter divided by the stress scale
:math:`\sigma_L` = (sum of the term magnitudes) / (S_L + S_i) [Pa], the mean magnitude of the
forces per unit perimeter. The gas uses S_G + S_i, the combined residual the sum of the
magnitudes of its four terms. So -1 <= r <= 1; r = 0.1 means the balance misses by a tenth of
its largest forces, whatever the pipe size, fluids or rates.

Configuration per row: ``0`` stratified (h/D from :func:`closure_nn.physics.geometry.h_from_holdup`),
``1`` annular (delta/D from the film area, the entrained liquid of the holdup taken out), ``-1``
no separated balance (intermittent, bubbly or single-phase rows). All in torch, vectorised.
"""
from __future__ import annotations

from dataclasses import dataclass

import torch

from ..physics.conditions import Conditions
from ..physics.geometry import ANNULAR, STRATIFIED, h_from_holdup
from ..physics.groups import closure_features
from ..physics.local_state import local_state
from ..physics.momentum import (combined_residual, gas_residual, liquid_residual, shear_stresses)
from ..physics.patterns import kh_gas_velocity

#: configuration codes of :class:`MeasuredResiduals.kind`
KIND_NONE, KIND_STRATIFIED, KIND_ANNULAR = -1, 0, 1
_EDGE = 1e-9
#: offsets t [sd] at which the balances are re-evaluated for the standardised residual
SD_OFFSETS: tuple[float, ...] = (0.0, 0.25, 0.5, 0.75, 1.0, 1.25, 1.5, 1.75, 2.0, 2.5, 3.0, 3.5, 4.0, 4.5, 5.0,
                                 6.0, 7.0, 8.0, 9.0, 10.0, 12.0, 14.0, 16.0, 20.0, 25.0, 30.0)
_TINY = 1e-300


@dataclass(frozen=True)
class MeasuredResiduals:
    """Residuals at the measured states of a batch ``(N,)``; NaN where not computed.

    ``liquid``, ``gas``, ``combined``: normalised residuals r_L, r_G, r_F [-] (module docstring);
    ``*_raw``: R_L, R_G [N/m] and F [Pa/m]; ``frac``: measured h/D or delta/D [-];
    ``kh_ratio``: u_G / u_G,KH at the measured stratified level [-] (TD76 criterion; NaN for
    annular rows); ``features``: closure features ``(N, F)`` at the measured state (NaN rows
    where no state); ``kind``: configuration codes (int64); ``*_e``: standardised residuals
    (measurement standard deviations needed to close the balance), see :func:`measured_residuals`.
    """

    kind: torch.Tensor
    frac: torch.Tensor
    liquid: torch.Tensor
    gas: torch.Tensor
    combined: torch.Tensor
    liquid_raw: torch.Tensor
    gas_raw: torch.Tensor
    combined_raw: torch.Tensor
    kh_ratio: torch.Tensor
    features: torch.Tensor
    liquid_e: torch.Tensor
    gas_e: torch.Tensor
    combined_e: torch.Tensor

    def standardised(self, name: str) -> torch.Tensor:
        """Standardised residual e [-] of ``name`` ('liquid', 'gas', 'combined'), see :func:`measured_residuals`."""
        return getattr(self, f"{name}_e")


def film_frac_from_holdup(holdup: torch.Tensor, cond: Conditions, entrainment: torch.Tensor) -> torch.Tensor:
    r"""delta/D of a uniform annular film from the holdup, entrained liquid taken out [-].

    With the core liquid fraction :math:`c = E v_{SL}/(v_{SG} + E v_{SL})` (droplets at no slip,
    :mod:`closure_nn.physics.local_state`) the film area fraction is :math:`(H_L - c)/(1 - c)`, and
    :math:`A_L/A = 4(\tilde\delta - \tilde\delta^2)` (geometry module) gives
    :math:`\tilde\delta = (1 - \sqrt{1 - A_L/A})/2`.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> c = make_conditions(vsl=0.01, vsg=20.0, D=0.05)
    >>> round(float(film_frac_from_holdup(torch.tensor(0.19, dtype=torch.float64), c, torch.tensor(0.0))), 12)
    0.05
    """
    q_e = entrainment * cond.vsl
    core = q_e / (cond.vsg + q_e).clamp_min(_TINY)
    film = ((holdup - core) / (1 - core)).clamp(_EDGE, 1 - _EDGE)
    return (1 - torch.sqrt(1 - film)) / 2


def _terms_liquid(s, tau, pgrad):
    c, g = s.cond, s.geom
    return (g.A_L * pgrad, tau.tau_wl * g.S_L, tau.tau_i * g.S_i, c.rhol * g.A_L * c.g * torch.sin(c.theta))


def _terms_gas(s, tau, pgrad):
    c, g = s.cond, s.geom
    return (g.A_G * pgrad, tau.tau_wg * g.S_G, tau.tau_i * g.S_i, s.rho_core * g.A_G * c.g * torch.sin(c.theta))


def _terms_combined(s, tau):
    c, g = s.cond, s.geom
    return (tau.tau_wg * g.S_G / g.A_G, tau.tau_wl * g.S_L / g.A_L, tau.tau_i * g.S_i * (1 / g.A_L + 1 / g.A_G),
            (c.rhol - s.rho_core) * c.g * torch.sin(c.theta))


def _scale(terms) -> torch.Tensor:
    return sum(t.abs() for t in terms).clamp_min(_TINY)


def _at(cond: Conditions, frac: torch.Tensor, kind: str, closure, pgrad: torch.Tensor, entrainment):
    """Raw and normalised residuals of one configuration on the whole batch."""
    s = local_state(cond, frac, kind, entrainment)
    tau = shear_stresses(s, closure(s))
    p = torch.nan_to_num(pgrad, nan=0.0)
    RL, RG, F = liquid_residual(s, tau, p), gas_residual(s, tau, p), combined_residual(s, tau)
    out = {
        "liquid_raw": RL, "gas_raw": RG, "combined_raw": F,
        "liquid": RL / _scale(_terms_liquid(s, tau, p)), "gas": RG / _scale(_terms_gas(s, tau, p)),
        "combined": F / _scale(_terms_combined(s, tau)),
        "features": closure_features(s), "A_L": s.geom.A_L, "A_G": s.geom.A_G,
    }
    if kind == STRATIFIED:
        out["kh_ratio"] = s.u_G / kh_gas_velocity(cond, s).clamp_min(_TINY)
    else:
        out["kh_ratio"] = torch.full_like(frac, float("nan"))
    return out


def measured_residuals(
    cond: Conditions, closure, holdup: torch.Tensor, pgrad: torch.Tensor, kind: torch.Tensor,
    entrainment: torch.Tensor | float = 0.0, holdup_sd: torch.Tensor | float = 0.0,
    pgrad_sd: torch.Tensor | float = 0.0,
) -> MeasuredResiduals:
    r"""Residuals of both phase balances and of the combined equation at measured states.

    Parameters
    ----------
    cond : Conditions ``(N,)``
    closure : any elementwise closure ``state -> FrictionFactors``
    holdup : ``(N,)`` measured liquid holdup [-], NaN where not measured
    pgrad : ``(N,)`` measured -dp/dx [Pa/m], NaN where not measured
    kind : ``(N,)`` int64 configuration (``KIND_*``)
    entrainment : entrained fraction E [-] of annular rows (scalar or ``(N,)``)
    holdup_sd, pgrad_sd : one-sd measurement uncertainties [-], [Pa/m] (scalar or ``(N,)``)

    Phase residuals need holdup and pgrad; the combined residual needs the holdup only.

    Standardised residual e (``*_e``): how many measurement standard deviations the measured
    state must move for the balance to close,

    .. math:: |e| = \min\{\,t \ge 0 : R(H_L + \delta_H,\ \mathrm{pgrad} + \delta_p) = 0
              \ \text{for some}\ |\delta_H| \le t\,s_H,\ |\delta_p| \le t\,s_p\}

    signed like R at the measured state (our definition; a max-norm distance in sd units).
    R is strongly nonlinear in thin layers, so a linearised uncertainty would mislead; instead R
    is evaluated on holdups H_L + t s_H for the offsets t of :data:`SD_OFFSETS` (clamped inside
    (1e-6, 1 - 1e-6)), and R is linear in pgrad with slope A_L or A_G. |e| is capped at
    ``SD_OFFSETS[-1]`` where no zero is reachable. Both configurations are evaluated on the
    whole batch and selected per row (no Python loop over rows). No gradients.
    """
    with torch.no_grad():
        H = holdup.detach().to(torch.float64)
        has_H = torch.isfinite(H) & (kind >= 0)
        has_both = has_H & torch.isfinite(pgrad)
        E = torch.as_tensor(entrainment, dtype=torch.float64).expand(cond.shape)
        sdH = torch.nan_to_num(torch.as_tensor(holdup_sd, dtype=torch.float64).expand(cond.shape), nan=0.0)
        sdP = torch.nan_to_num(torch.as_tensor(pgrad_sd, dtype=torch.float64).expand(cond.shape), nan=0.0)
        P = torch.nan_to_num(pgrad.detach().to(torch.float64), nan=0.0)
        Hc = torch.where(has_H, H, torch.full_like(H, 0.5)).clamp(_EDGE, 1 - _EDGE)
        T = torch.tensor(SD_OFFSETS, dtype=torch.float64)
        S = torch.cat([-T.flip(0), T[1:]])  # signed offsets (K,)
        Hg = (Hc[:, None] + S[None, :] * sdH[:, None]).clamp(1e-6, 1 - 1e-6)
        strat, ann = (_configuration(name, cond, closure, Hc, Hg, P, E, sdP, S) for name in (STRATIFIED, ANNULAR))
        picked = _pick(strat, ann, kind == KIND_ANNULAR, has_H, has_both)
    return MeasuredResiduals(kind=torch.where(has_H, kind, KIND_NONE), **picked)


def _configuration(name: str, cond: Conditions, closure, Hc: torch.Tensor, Hg: torch.Tensor, P: torch.Tensor,
                   E: torch.Tensor, sdP: torch.Tensor, S: torch.Tensor) -> dict[str, torch.Tensor]:
    """Every field of :class:`MeasuredResiduals` but ``kind`` for all rows taken in configuration
    ``name``: at the measured holdup ``Hc (N,)``, and the standardised residuals ``*_e`` from the
    balances on the holdup grid ``Hg (N, K)`` (signed offsets ``S (K,)`` [sd])."""
    cg = cond.unsqueeze(-1)
    if name == STRATIFIED:
        out = _at(cond, h_from_holdup(Hc), STRATIFIED, closure, P, 0.0)
        grid = _at(cg, h_from_holdup(Hg), STRATIFIED, closure, P[:, None], 0.0)
        out["frac"] = h_from_holdup(Hc)
    else:
        out = _at(cond, film_frac_from_holdup(Hc, cond, E), ANNULAR, closure, P, E)
        grid = _at(cg, film_frac_from_holdup(Hg, cg, E[:, None]), ANNULAR, closure, P[:, None], E[:, None])
        out["frac"] = film_frac_from_holdup(Hc, cond, E)
    for k, area in (("liquid", "A_L"), ("gas", "A_G"), ("combined", None)):
        t = _sd_to_close(grid[f"{k}_raw"], None if area is None else grid[area], sdP, S)
        out[f"{k}_e"] = torch.where(torch.signbit(out[f"{k}_raw"]), -t, t)
    return out


def _sd_to_close(R: torch.Tensor, area: torch.Tensor | None, sdP: torch.Tensor, S: torch.Tensor) -> torch.Tensor:
    """|e| (N,): the fewest measurement sd that close a balance whose residual on the holdup grid is
    ``R (N, K)``; ``area (N, K)`` [m2] is its slope in pgrad (None: the balance has no pgrad),
    capped at the largest offset of ``S``."""
    t_need = torch.full_like(R, float("inf"))
    if area is not None:
        t_need = (R.abs() / (area.abs() * sdP[:, None]).clamp_min(_TINY))
    t_need = torch.where(R == 0, 0.0, t_need)
    t_j = torch.maximum(S.abs().expand_as(R), t_need)
    cross = torch.signbit(R[:, 1:]) != torch.signbit(R[:, :-1])
    # zero of R by linear interpolation inside a cell whose ends differ in sign
    w = R[:, :-1] / (R[:, :-1] - R[:, 1:]).where(cross, torch.ones_like(R[:, 1:]))
    s_zero = S[:-1] + (S[1:] - S[:-1]) * w.clamp(0.0, 1.0)
    t_cross = torch.where(cross, s_zero.abs(), float("inf"))
    return torch.minimum(t_j.min(dim=1).values, t_cross.min(dim=1).values).clamp_max(S[-1])


def _pick(strat: dict, ann: dict, is_a: torch.Tensor, has_H: torch.Tensor, has_both: torch.Tensor) -> dict:
    """Per row the annular or stratified values; NaN where the balance lacks its measurements
    (phase balances need holdup and pgrad, the combined one the holdup)."""
    picked: dict[str, torch.Tensor] = {}
    for k in MeasuredResiduals.__dataclass_fields__:
        if k == "kind":
            continue
        sel = is_a[:, None] if k == "features" else is_a
        picked[k] = torch.where(sel, ann[k], strat[k])
    nan = float("nan")
    for k in ("liquid", "gas", "liquid_raw", "gas_raw", "liquid_e", "gas_e"):
        picked[k] = torch.where(has_both, picked[k], nan)
    for k in ("combined", "combined_raw", "combined_e", "kh_ratio", "frac"):
        picked[k] = torch.where(has_H, picked[k], nan)
    picked["features"] = torch.where(has_H[:, None], picked["features"], nan)
    return picked


def _median(v: torch.Tensor) -> float:
    """Median of a 1-D tensor (mean of the two middle values for an even count)."""
    s, n = v.sort().values, v.numel()
    return float(s[(n - 1) // 2: n // 2 + 1].mean())


def robust_z(x: torch.Tensor, sd_floor: float = 0.0) -> tuple[torch.Tensor, float, float]:
    r"""Robust standard scores :math:`z = (x - \mathrm{med})/(1.4826\,\mathrm{MAD})` over the finite entries.

    1.4826 MAD estimates the standard deviation of a normal sample (Rousseeuw & Croux 1993,
    J. Am. Stat. Assoc. 88(424):1273-1283). The robust sd is floored at ``sd_floor`` so that
    noise-free data do not turn round-off into huge scores. Returns (z with NaN kept, median, sd).

    >>> z, med, sd = robust_z(torch.tensor([0.0, 1.0, -1.0, 2.0, -2.0, 100.0], dtype=torch.float64))
    >>> round(med, 3), round(sd, 3), float(z[-1]) > 30
    (0.5, 2.224, True)
    """
    ok = torch.isfinite(x)
    if not bool(ok.any()):
        return torch.full_like(x, float("nan")), float("nan"), float("nan")
    v = x[ok]
    med = _median(v)
    mad = _median((v - med).abs())
    sd = max(1.4826 * mad, sd_floor)
    sd = sd if sd > 0 else float("inf")
    return (x - med) / sd, med, sd
