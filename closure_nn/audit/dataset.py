r"""Consistency audit of a measurement table against a closure: residuals and suspect rows.

:func:`audit_dataset` takes a validated SI table (:mod:`closure_nn.data.schema`) and a closure
and returns, per row, the momentum-balance residuals at the measured state
(:mod:`closure_nn.audit.residuals`), the closure's own prediction (point solver) and the checks
below. A row is *suspect* when at least one measurement check fires; every check writes its reason.
``outside_domain`` describes the closure's coverage, not the measurement: it is reported, never suspect.

==========================  ===============================================================
check code                  fires when (k = ``k_robust``, c = ``k_sigma`` of :class:`AuditSettings`)
==========================  ===============================================================
residual_liquid / _gas      the standardised phase residual e = R / u_R (R over its first-order
                            measurement uncertainty) lies more than k robust standard
                            deviations from its median (median and 1.4826 MAD over the rows
                            of the same configuration; the robust sd floored at
                            ``residual_sd_floor``, 1 = the measurement uncertainty itself)
residual_combined           likewise for the combined residual (rows with a holdup)
residual_joint              likewise for e_joint, the measurement sd needed to close BOTH phase
                            balances at once: two equations in (H_L, pgrad) are closed only at
                            a closure equilibrium, so e_joint = min over the closure's
                            separated roots of max(|H_root - H|/sd_H, |pgrad_root - pgrad|/sd_p)
holdup_vs_closure           d_H = (H_meas - H_closure) / sqrt(sd_H^2 + model_holdup_sd^2) lies
                            beyond c AND beyond k robust sd of d_H over the rows of the same
                            predicted pattern (so a closure that is biased in one regime does
                            not flag the whole regime); for stratified rows H_closure is the
                            root nearest to the measurement
holdup_above_stratified     labelled stratified and the holdup lies more than c combined sd
                            above the thickest stratified root of the closure
pgrad_vs_closure            likewise for d_p = (pgrad_meas - pgrad_closure) / sqrt(sd_p^2 +
                            (model_pgrad_rel pgrad_closure)^2 + model_pgrad_abs^2)
pgrad_sign                  measured and predicted pgrad have opposite signs, each beyond c of
                            its own uncertainty (typical of an inclination or pgrad sign slip in
                            gravity-dominated downward flow)
pattern_kh                  labelled stratified, but u_G / u_G,KH > 1 + ``kh_margin`` (Taitel &
                            Dukler 1976 criterion) at the measured level, or at the closure's
                            stratified equilibrium where no holdup was measured
pgrad_below_head            pgrad_meas + c sd_p is below the hydrostatic head of the lightest
                            mixture the holdup allows, (rho_L H + rho_G (1-H)) g sin(theta) with
                            H at the end of its +-c sd range (0 or 1 when not measured): the wall
                            friction would have to be negative (co-current flow)
holdup_below_no_slip        upward flow and H_meas + c sd_H < v_SL / (v_SL + v_SG): the gas would
                            have to be slower than the liquid although buoyancy drives it ahead
outside_domain              the closure has ``in_domain(features)`` and the features at the
                            measured (else the predicted) state are outside it
==========================  ===============================================================

The two impossibility checks are facts of the trade (common practice): in co-current upward
flow buoyancy makes the gas faster than the liquid (H_L >= no-slip holdup), and wall friction
adds to the pressure drop, never subtracts from it. Measurement uncertainty: ``holdup_sd`` and
``pgrad_sd`` columns where given, else ``holdup_sd_default`` and ``pgrad_sd_rel`` |pgrad| +
``pgrad_sd_abs``.

All physics runs vectorised in torch on the whole batch; only the reason strings are assembled
per row. The checks and their thresholds (:class:`AuditSettings`) live in
:mod:`closure_nn.audit.row_checks`.
"""
from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np
import pandas as pd
import torch

from ..data.schema import to_conditions
from ..physics.entrainment import ishii_mishima
from ..physics.local_state import local_state
from ..physics.momentum import pressure_gradient, shear_stresses
from ..physics.point import solve_points
from ..physics.vocabulary import ANNULAR, PATTERNS, STRATIFIED_PATTERNS
from .residuals import KIND_ANNULAR, KIND_NONE, KIND_STRATIFIED, MeasuredResiduals, measured_residuals, robust_z
from .row_checks import (CHECKS, INFORMATIONAL, RESIDUALS, SCORES, AuditSettings, ClosureFit, Measured, Misfits,
                         closure_checks, closure_fit, domain_check, impossibility_checks, misfits, residual_checks)

__all__ = ["CHECKS", "RESIDUALS", "SCORES", "AuditResult", "AuditSettings", "audit_dataset"]


@dataclass
class AuditResult:
    """Outcome of :func:`audit_dataset`.

    ``table``: one row per input row (same order), with run_id, campaign, observed and predicted
    pattern, configuration used, measured h/D or delta/D, normalised residuals ``res_*`` and their
    robust scores ``z_*``, predictions ``holdup_pred``/``pgrad_pred``, standard scores
    ``z_holdup``/``z_pgrad``, ``kh_ratio_eq`` (u_G/u_G,KH at the closure equilibrium),
    ``in_domain``, ``suspect``, ``checks`` (comma-separated codes) and ``reasons``.
    ``stats``: per residual the median, robust sd, row count and 5/50/95 % quantiles.
    """

    table: pd.DataFrame
    stats: dict
    settings: AuditSettings
    closure_label: str
    counts: dict = field(default_factory=dict)

    def suspects(self) -> pd.DataFrame:
        return self.table[self.table["suspect"]]

    def flagged_run_ids(self) -> list[str]:
        return [str(r) for r in self.suspects()["run_id"]]

    def summary(self) -> dict:
        return {"closure": self.closure_label, "rows": int(len(self.table)),
                "suspect_rows": int(self.table["suspect"].sum()), "checks": self.counts,
                "residuals": self.stats, "settings": asdict(self.settings)}


def _col(df: pd.DataFrame, name: str) -> torch.Tensor:
    if name not in df:
        return torch.full((len(df),), float("nan"), dtype=torch.float64)
    return torch.tensor(pd.to_numeric(df[name], errors="coerce").to_numpy(np.float64, copy=True))


def _kinds(patterns: np.ndarray) -> torch.Tensor:
    strat = np.isin(patterns, STRATIFIED_PATTERNS)
    ann = patterns == ANNULAR
    return torch.as_tensor(np.where(strat, KIND_STRATIFIED, np.where(ann, KIND_ANNULAR, KIND_NONE)))


def _pattern_names(df: pd.DataFrame) -> np.ndarray:
    if "pattern" not in df:
        return np.array([""] * len(df), dtype=object)
    return np.array(["" if (p is None or (isinstance(p, float) and np.isnan(p))) else str(p)
                     for p in df["pattern"].tolist()], dtype=object)


def _entrainment(cond, solver: dict) -> torch.Tensor:
    E = solver.get("entrainment", 0.0)
    if E == "ishii_mishima":
        return ishii_mishima(cond)
    return torch.full(cond.shape, float(E), dtype=torch.float64)


def audit_dataset(df: pd.DataFrame, closure, settings: AuditSettings | None = None,
                  solver: dict | None = None) -> AuditResult:
    """Audit every row of the SI table ``df`` against ``closure`` (module docstring).

    ``solver`` holds :func:`closure_nn.physics.point.solve_points` keywords (``select``,
    ``entrainment``, ``n_grid``, ``s_wave``), as in ``conf/solver/default.yaml``.
    """
    st = settings or AuditSettings()
    solver = dict(solver or {})
    cond = to_conditions(df, check=True, where=str(df.attrs.get("path", "audit table")))
    H, P = _col(df, "holdup"), _col(df, "pgrad")
    sdH = torch.where(torch.isfinite(_col(df, "holdup_sd")), _col(df, "holdup_sd"), st.holdup_sd_default)
    sdP = torch.where(torch.isfinite(_col(df, "pgrad_sd")), _col(df, "pgrad_sd"),
                      st.pgrad_sd_rel * P.abs() + st.pgrad_sd_abs)
    meas = Measured(H=H, P=P, sdH=sdH, sdP=sdP)
    observed = _pattern_names(df)
    with torch.no_grad():
        pred = solve_points(cond, closure, **solver)
    predicted = np.array([PATTERNS[int(k)] for k in pred.pattern], dtype=object)
    kind = _kinds(np.where(observed == "", predicted, observed))
    E = _entrainment(cond, solver)
    res = measured_residuals(cond, closure, H, P, kind, E, holdup_sd=sdH, pgrad_sd=torch.nan_to_num(sdP, nan=0.0))
    e_joint = _joint_score(cond, closure, pred, res, H, P, sdH, sdP)
    z, stats = _residual_scores(res, e_joint, st.residual_sd_floor)
    fit = closure_fit(cond, closure, pred, res)
    mis = misfits(meas, fit, pred.pattern, st)
    lab_strat = torch.as_tensor(np.isin(observed, STRATIFIED_PATTERNS))
    in_dom, outside = domain_check(cond, closure, pred, res)
    checks = {**residual_checks(res, z, e_joint, st.k_robust), **closure_checks(cond, meas, fit, mis, res, lab_strat, st),
              **impossibility_checks(cond, meas, st.k_sigma), **outside}
    flags = np.stack([mask.numpy() for mask, _ in checks.values()], axis=1)
    names, texts = list(checks), [t for _, t in checks.values()]
    n = len(df)
    t = pd.DataFrame({
        **_row_columns(df, cond, observed, predicted, meas, res, e_joint, z, fit, mis), "in_domain": in_dom,
        "suspect": flags[:, [j for j, k in enumerate(names) if k not in INFORMATIONAL]].any(axis=1),
        "checks": [",".join(names[j] for j in np.flatnonzero(flags[i])) for i in range(n)],
        "reasons": ["; ".join(texts[j][i] for j in np.flatnonzero(flags[i])) for i in range(n)],
    })
    counts = {k: int(flags[:, j].sum()) for j, k in enumerate(names)}
    label = getattr(closure, "label", type(closure).__name__)
    return AuditResult(table=t, stats=stats, settings=st, closure_label=label, counts=counts)


def _residual_scores(res: MeasuredResiduals, e_joint: torch.Tensor, sd_floor: float) -> tuple[dict, dict]:
    """Robust scores ``z`` (N,) of the standardised residuals per configuration (stratified and
    annular scatter differently) and their statistics by ``'<configuration>/<residual>'``."""
    n = int(res.kind.shape[0])
    z = {r: torch.full((n,), float("nan"), dtype=torch.float64) for r in SCORES}
    stats: dict = {}
    for code, name in ((KIND_STRATIFIED, "stratified"), (KIND_ANNULAR, "annular")):
        m = res.kind == code
        for r in SCORES:
            e = torch.where(m, e_joint if r == "joint" else res.standardised(r), float("nan"))
            zz, med, sd = robust_z(e, sd_floor)
            z[r] = torch.where(m, zz, z[r])
            x = (e_joint if r == "joint" else getattr(res, r))
            x = x[m & torch.isfinite(x)]
            if r == "joint" and x.numel():
                stats[f"{name}/{r}"] = {"n": int(x.numel()), "standardised_median": med, "standardised_robust_sd": sd}
            elif x.numel():
                q = torch.quantile(x, torch.tensor([0.05, 0.5, 0.95], dtype=torch.float64)).tolist()
                stats[f"{name}/{r}"] = {"n": int(x.numel()), "normalised_q05": q[0], "normalised_q50": q[1],
                                        "normalised_q95": q[2], "standardised_median": med, "standardised_robust_sd": sd}
    return z, stats


def _row_columns(df: pd.DataFrame, cond, observed: np.ndarray, predicted: np.ndarray, meas: Measured,
                 res: MeasuredResiduals, e_joint: torch.Tensor, z: dict, fit: ClosureFit, mis: Misfits) -> dict:
    """The per-row columns of :attr:`AuditResult.table` up to ``in_domain`` (in that order)."""
    n = len(df)
    kind_name = np.array(["-", "stratified", "annular"], dtype=object)[res.kind.numpy() + 1]
    return {
        "run_id": df["run_id"].astype(str).to_numpy() if "run_id" in df else np.arange(1, n + 1).astype(str),
        "campaign": df["campaign"].to_numpy() if "campaign" in df else "",
        "pattern": observed, "pattern_pred": predicted, "config": kind_name,
        "theta_deg": torch.rad2deg(cond.theta).numpy(), "vsl": cond.vsl.numpy(), "vsg": cond.vsg.numpy(),
        "D": cond.D.numpy(), "holdup": meas.H.numpy(), "pgrad": meas.P.numpy(), "frac": res.frac.numpy(),
        **{f"res_{r}": getattr(res, r).numpy() for r in RESIDUALS},
        **{f"e_{r}": res.standardised(r).numpy() for r in RESIDUALS}, "e_joint": e_joint.numpy(),
        **{f"z_{r}": z[r].numpy() for r in SCORES},
        "holdup_pred": fit.holdup.numpy(), "pgrad_pred": fit.pgrad.numpy(),
        "z_holdup": mis.z_holdup.numpy(), "z_pgrad": mis.z_pgrad.numpy(), "kh_ratio_eq": fit.kh_ratio_eq.numpy(),
        "kh_ratio_meas": res.kh_ratio.numpy(),
    }


def _joint_score(cond, closure, pred, res, H, P, sdH, sdP) -> torch.Tensor:
    """e_joint (module table): sd needed to reach the nearest separated equilibrium of the closure.

    Stratified rows: every stratified root (holdup and pgrad evaluated there, batch ``(N, 3)``);
    annular rows: the point solver's annular equilibrium. A term whose measurement is missing
    counts as zero; NaN where the row has no separated configuration or no measurement.
    """
    with torch.no_grad():
        roots = pred.roots
        ok = torch.isfinite(roots)
        s = local_state(cond.unsqueeze(-1), torch.where(ok, roots, 0.5), "stratified")
        P_r = pressure_gradient(s, shear_stresses(s, closure(s))).total
        H_r = s.holdup
        is_a = res.kind == KIND_ANNULAR
        H_r = torch.where(is_a[:, None], pred.holdup[:, None], H_r)
        P_r = torch.where(is_a[:, None], pred.pgrad.total[:, None], P_r)
        ok = torch.where(is_a[:, None], torch.isfinite(pred.holdup)[:, None].expand_as(ok), ok)
        tH = torch.nan_to_num((H_r - H[:, None]).abs() / sdH[:, None].clamp_min(1e-12), nan=0.0)
        tP = torch.nan_to_num((P_r - P[:, None]).abs() / sdP[:, None].clamp_min(1e-12), nan=0.0)
        t = torch.where(ok, torch.maximum(tH, tP), float("inf")).min(dim=1).values
        has = (res.kind >= 0) & torch.isfinite(t) & (torch.isfinite(H) | torch.isfinite(P))
    return torch.where(has, t, float("nan"))
