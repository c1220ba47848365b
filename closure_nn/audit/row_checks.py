"""The checks of the dataset audit (:func:`closure_nn.audit.dataset.audit_dataset`), each a mask
over the rows and one reason per row, and their thresholds (:class:`AuditSettings`).

What each check means and when it fires: the table in :mod:`closure_nn.audit.dataset`. All
tensors are ``(N,)`` over the rows of the audited table, float64, in SI.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import torch

from ..physics.conditions import Conditions
from ..physics.geometry import stratified
from ..physics.groups import closure_features
from ..physics.local_state import local_state
from ..physics.momentum import pressure_gradient, shear_stresses
from ..physics.patterns import kh_gas_velocity
from ..physics.point import PointResult
from .residuals import KIND_STRATIFIED, MeasuredResiduals, robust_z

#: a check: (mask (N,) bool, one reason per row)
Check = tuple[torch.Tensor, list]

RESIDUALS = ("liquid", "gas", "combined")
#: residual scores checked with robust statistics (``joint``: both phase balances at once)
SCORES = RESIDUALS + ("joint",)
#: check code -> one-line meaning (report legend)
CHECKS: dict[str, str] = {
    "residual_liquid": "liquid momentum residual beyond k robust sd",
    "residual_gas": "gas momentum residual beyond k robust sd",
    "residual_combined": "combined momentum residual beyond k robust sd",
    "residual_joint": "both phase balances cannot close together within the measurement uncertainty",
    "holdup_vs_closure": "measured holdup far from the closure's, relative to the uncertainty",
    "holdup_above_stratified": "labelled stratified, holdup far above the thickest stratified root",
    "pgrad_vs_closure": "measured pgrad far from the closure's, relative to the uncertainty",
    "pgrad_sign": "pgrad sign opposite to the closure's",
    "pattern_kh": "labelled stratified, closure equilibrium Kelvin-Helmholtz unstable",
    "pgrad_below_head": "pgrad below the lightest possible hydrostatic head (negative friction)",
    "holdup_below_no_slip": "upward flow, holdup below the no-slip holdup",
    "outside_domain": "outside the closure's training domain",
}
#: checks that describe the closure's coverage, not the measurement: reported, never "suspect"
INFORMATIONAL = ("outside_domain",)


@dataclass(frozen=True)
class AuditSettings:
    """Thresholds of :func:`closure_nn.audit.dataset.audit_dataset` (see its module table). Units in brackets."""

    k_robust: float = 4.0  # [-] robust sd of a residual before a row is flagged
    residual_sd_floor: float = 1.0  # [-] floor of the robust sd of standardised residuals e = R/u_R
    k_sigma: float = 3.0  # [-] combined standard deviations for the uncertainty-based checks
    holdup_sd_default: float = 0.02  # [-] holdup sd where the table gives none
    pgrad_sd_rel: float = 0.05  # [-] relative pgrad sd where the table gives none
    pgrad_sd_abs: float = 1.0  # [Pa/m] absolute part of the default pgrad sd
    model_holdup_sd: float = 0.05  # [-] model uncertainty of the closure's holdup
    model_pgrad_rel: float = 0.25  # [-] relative model uncertainty of the closure's pgrad
    model_pgrad_abs: float = 2.0  # [Pa/m] absolute model uncertainty of the closure's pgrad
    kh_margin: float = 0.1  # [-] tolerance on u_G / u_G,KH > 1 for stratified labels

    @classmethod
    def from_mapping(cls, m) -> "AuditSettings":
        known = {f for f in cls.__dataclass_fields__}
        bad = [k for k in m if k not in known]
        if bad:
            raise ValueError(f"unknown audit setting(s) {', '.join(bad)}; known: {', '.join(sorted(known))}")
        return cls(**{k: float(v) for k, v in m.items()})


@dataclass(frozen=True)
class Measured:
    """The measurements of the rows: holdup ``H`` [-], pgrad ``P`` [Pa/m] and their standard
    uncertainties ``sdH``, ``sdP`` (NaN where not measured)."""

    H: torch.Tensor
    P: torch.Tensor
    sdH: torch.Tensor
    sdP: torch.Tensor


@dataclass(frozen=True)
class ClosureFit:
    """What the closure predicts at each row: ``holdup`` [-] and ``pgrad`` [Pa/m] (stratified rows
    at the root nearest to the measured level), ``holdup_thickest`` [-] (the thickest stratified
    root's holdup, NaN if none) and ``kh_ratio_eq`` [-] (u_G/u_G,KH at the selected stratified
    equilibrium, Taitel & Dukler 1976)."""

    holdup: torch.Tensor
    pgrad: torch.Tensor
    holdup_thickest: torch.Tensor
    kh_ratio_eq: torch.Tensor


@dataclass(frozen=True)
class Misfits:
    """Measurement minus closure in combined standard deviations (``z_holdup``, ``z_pgrad``),
    their robust scores within each predicted pattern (``rz_*``), and the combined sd ``sig_*``."""

    z_holdup: torch.Tensor
    z_pgrad: torch.Tensor
    rz_holdup: torch.Tensor
    rz_pgrad: torch.Tensor
    sig_holdup: torch.Tensor
    sig_pgrad: torch.Tensor


def _fmt(x: float) -> str:
    return f"{x:.3g}"


def _nearest_root(roots: torch.Tensor, frac: torch.Tensor) -> torch.Tensor:
    """The root of ``roots (N, 3)`` nearest to ``frac (N,)``; NaN where none."""
    d = (roots - frac[:, None]).abs()
    d = torch.where(torch.isfinite(d), d, torch.full_like(d, float("inf")))
    j = d.argmin(dim=1, keepdim=True)
    return torch.where(torch.isfinite(roots).any(dim=1), roots.gather(1, j)[:, 0], float("nan"))


def closure_fit(cond: Conditions, closure, pred: PointResult, res: MeasuredResiduals) -> ClosureFit:
    """The closure's holdup and pgrad; stratified rows at the root nearest to the measurement."""
    with torch.no_grad():
        is_strat = res.kind == KIND_STRATIFIED
        near = _nearest_root(pred.roots, torch.nan_to_num(res.frac, nan=0.5))
        use_near = is_strat & torch.isfinite(near)
        h_near = torch.where(use_near, near, 0.5)
        s_near = local_state(cond, h_near, "stratified")
        pg_near = pressure_gradient(s_near, shear_stresses(s_near, closure(s_near))).total
        H_pred = torch.where(use_near, s_near.holdup, pred.holdup)
        P_pred = torch.where(use_near, pg_near, pred.pgrad.total)
        thick = torch.where(torch.isfinite(pred.roots), pred.roots, -1.0).max(dim=1).values
        H_thick = torch.where(thick > 0, stratified(thick.clamp_min(1e-9), cond.D).liquid_fraction, float("nan"))
        # KH at the closure's selected stratified equilibrium (TD76)
        h_eq = torch.where(torch.isfinite(pred.roots[:, 0]), pred.roots[:, 0], 0.5)
        s_eq = local_state(cond, h_eq, "stratified")
        kh_eq = torch.where(torch.isfinite(pred.roots[:, 0]), s_eq.u_G / kh_gas_velocity(cond, s_eq), float("nan"))
    return ClosureFit(holdup=H_pred, pgrad=P_pred, holdup_thickest=H_thick, kh_ratio_eq=kh_eq)


def misfits(meas: Measured, fit: ClosureFit, pattern: torch.Tensor, st: AuditSettings) -> Misfits:
    """Standard scores of measurement minus closure, and their robust scores within each
    predicted pattern (so a closure biased in one regime does not flag the whole regime)."""
    sig_H = torch.sqrt(meas.sdH**2 + st.model_holdup_sd**2)
    sig_P = torch.sqrt(meas.sdP**2 + (st.model_pgrad_rel * fit.pgrad) ** 2 + st.model_pgrad_abs**2)
    z_H = (meas.H - fit.holdup) / sig_H
    z_P = (meas.P - fit.pgrad) / sig_P
    rz_H, rz_P = torch.full_like(z_H, float("nan")), torch.full_like(z_P, float("nan"))
    for code in torch.unique(pattern):
        m = pattern == code
        for zz, out in ((z_H, rz_H), (z_P, rz_P)):
            r, _, _ = robust_z(torch.where(m, zz, float("nan")), st.residual_sd_floor)
            out.copy_(torch.where(m, r, out))
    return Misfits(z_holdup=z_H, z_pgrad=z_P, rz_holdup=rz_H, rz_pgrad=rz_P, sig_holdup=sig_H, sig_pgrad=sig_P)


def residual_checks(res: MeasuredResiduals, z: dict[str, torch.Tensor], e_joint: torch.Tensor,
                    k_robust: float) -> dict[str, Check]:
    """residual_liquid, _gas, _combined and residual_joint: robust scores beyond ``k_robust``."""
    checks: dict[str, Check] = {}
    for r in RESIDUALS:
        zz, raw = z[r], getattr(res, r)
        checks[f"residual_{r}"] = (zz.abs() > k_robust,
                                   [f"{r} balance misses by {_fmt(a)} of its force scale ({_fmt(b)} robust sd)" for a, b in
                                    zip(raw.tolist(), zz.tolist())])
    checks["residual_joint"] = (z["joint"].abs() > k_robust, [
        f"both balances close only {_fmt(a)} measurement sd away ({_fmt(b)} robust sd)"
        for a, b in zip(e_joint.tolist(), z["joint"].tolist())])
    return checks


def closure_checks(cond: Conditions, meas: Measured, fit: ClosureFit, mis: Misfits, res: MeasuredResiduals,
                   lab_strat: torch.Tensor, st: AuditSettings) -> dict[str, Check]:
    """holdup_above_stratified, holdup_vs_closure, pgrad_vs_closure, pgrad_sign, pattern_kh."""
    H, P, c = meas.H, meas.P, st.k_sigma
    checks: dict[str, Check] = {}
    above = lab_strat & ((H - fit.holdup_thickest) / mis.sig_holdup > c)
    checks["holdup_above_stratified"] = (above, [
        f"labelled stratified, holdup {_fmt(a)} above the thickest stratified root's {_fmt(b)}"
        for a, b in zip(H.tolist(), fit.holdup_thickest.tolist())])
    checks["holdup_vs_closure"] = ((mis.z_holdup.abs() > c) & (mis.rz_holdup.abs() > st.k_robust) & ~above, [
        f"holdup {_fmt(a)} vs closure {_fmt(b)} ({_fmt(zz)} sd)"
        for a, b, zz in zip(H.tolist(), fit.holdup.tolist(), mis.z_holdup.tolist())])
    checks["pgrad_vs_closure"] = ((mis.z_pgrad.abs() > c) & (mis.rz_pgrad.abs() > st.k_robust), [
        f"pgrad {_fmt(a)} Pa/m vs closure {_fmt(b)} Pa/m ({_fmt(zz)} sd)"
        for a, b, zz in zip(P.tolist(), fit.pgrad.tolist(), mis.z_pgrad.tolist())])
    opposite = (torch.sign(P) * torch.sign(fit.pgrad) < 0) & (P.abs() > c * meas.sdP) \
        & (fit.pgrad.abs() > c * (mis.sig_pgrad**2 - meas.sdP**2).sqrt())
    checks["pgrad_sign"] = (opposite, [
        f"pgrad {_fmt(a)} Pa/m has the opposite sign of the closure's {_fmt(b)} Pa/m (inclination {_fmt(t)} deg)"
        for a, b, t in zip(P.tolist(), fit.pgrad.tolist(), torch.rad2deg(cond.theta).tolist())])
    kh_used = torch.where(torch.isfinite(res.kh_ratio), res.kh_ratio, fit.kh_ratio_eq)
    checks["pattern_kh"] = (lab_strat & (kh_used > 1 + st.kh_margin), [
        f"labelled stratified but u_G/u_G,KH = {_fmt(k)} at the {'measured level' if m else 'closure equilibrium'}"
        for k, m in zip(kh_used.tolist(), torch.isfinite(res.kh_ratio).tolist())])
    return checks


def impossibility_checks(cond: Conditions, meas: Measured, c: float) -> dict[str, Check]:
    """pgrad_below_head (negative wall friction) and holdup_below_no_slip (gas slower than the
    liquid in upward flow), each beyond ``c`` measurement sd (facts of the trade, common practice)."""
    H, P, sdH, sdP = meas.H, meas.P, meas.sdH, meas.sdP
    sin_t = torch.sin(cond.theta)
    lam = cond.vsl / cond.vm.clamp_min(1e-300)
    H_lo = torch.where(torch.isfinite(H), (H - c * sdH).clamp(0, 1), 0.0)
    H_hi = torch.where(torch.isfinite(H), (H + c * sdH).clamp(0, 1), 1.0)
    H_light = torch.where(sin_t >= 0, H_lo, H_hi)
    head_min = (cond.rhol * H_light + cond.rhog * (1 - H_light)) * cond.g * sin_t
    return {
        "pgrad_below_head": (P + c * sdP < head_min, [
            f"pgrad {_fmt(a)} Pa/m below the lightest hydrostatic head {_fmt(b)} Pa/m" for a, b in
            zip(P.tolist(), head_min.tolist())]),
        "holdup_below_no_slip": ((sin_t > 0) & (H + c * sdH < lam), [
            f"upward flow with holdup {_fmt(a)} below the no-slip {_fmt(b)}" for a, b in zip(H.tolist(), lam.tolist())]),
    }


def domain_check(cond: Conditions, closure, pred: PointResult, res: MeasuredResiduals) -> tuple[np.ndarray, dict[str, Check]]:
    """``in_domain`` per row (object array: True/False, NaN where the closure has no domain) and
    the outside_domain check, at the measured state, else the predicted one."""
    n = int(cond.shape[0])
    if not hasattr(closure, "in_domain"):
        return np.full(n, np.nan, dtype=object), {}
    feats = torch.where(torch.isfinite(res.features).all(dim=1, keepdim=True), res.features,
                        _predicted_features(cond, closure, pred))
    ok = torch.isfinite(feats).all(dim=1)
    inside = closure.in_domain(torch.nan_to_num(feats, nan=0.0)).reshape(-1) & ok
    return inside.numpy().astype(object), {"outside_domain": (ok & ~inside, ["outside the closure's training domain"] * n)}


def _predicted_features(cond: Conditions, closure, pred: PointResult) -> torch.Tensor:
    """Closure features at the predicted stratified equilibrium (rows without a measured state)."""
    h = torch.where(torch.isfinite(pred.roots[:, 0]), pred.roots[:, 0], float("nan"))
    with torch.no_grad():
        f = closure_features(local_state(cond, torch.nan_to_num(h, nan=0.5), "stratified"))
    return torch.where(torch.isfinite(h)[:, None], f, float("nan"))
