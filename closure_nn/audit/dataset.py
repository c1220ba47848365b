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
per row.
"""
from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np
import pandas as pd
import torch

from ..data.schema import to_conditions
from ..physics.entrainment import ishii_mishima
from ..physics.geometry import stratified
from ..physics.local_state import local_state
from ..physics.momentum import pressure_gradient, shear_stresses
from ..physics.patterns import kh_gas_velocity
from ..physics.point import solve_points
from ..physics.vocabulary import ANNULAR, PATTERNS, STRATIFIED_PATTERNS
from .residuals import KIND_ANNULAR, KIND_NONE, KIND_STRATIFIED, measured_residuals, robust_z

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
    """Thresholds of :func:`audit_dataset` (see the module table). Units in brackets."""

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


def _nearest_root(roots: torch.Tensor, frac: torch.Tensor) -> torch.Tensor:
    """The root of ``roots (N, 3)`` nearest to ``frac (N,)``; NaN where none."""
    d = (roots - frac[:, None]).abs()
    d = torch.where(torch.isfinite(d), d, torch.full_like(d, float("inf")))
    j = d.argmin(dim=1, keepdim=True)
    return torch.where(torch.isfinite(roots).any(dim=1), roots.gather(1, j)[:, 0], float("nan"))


def _fmt(x: float) -> str:
    return f"{x:.3g}"


def audit_dataset(df: pd.DataFrame, closure, settings: AuditSettings | None = None,
                  solver: dict | None = None) -> AuditResult:
    """Audit every row of the SI table ``df`` against ``closure`` (module docstring).

    ``solver`` holds :func:`closure_nn.physics.point.solve_points` keywords (``select``,
    ``entrainment``, ``n_grid``, ``s_wave``), as in ``conf/solver/default.yaml``.
    """
    st = settings or AuditSettings()
    solver = dict(solver or {})
    cond = to_conditions(df, check=True, where=str(df.attrs.get("path", "audit table")))
    n = len(df)
    H, P = _col(df, "holdup"), _col(df, "pgrad")
    sdH = torch.where(torch.isfinite(_col(df, "holdup_sd")), _col(df, "holdup_sd"), st.holdup_sd_default)
    sdP = torch.where(torch.isfinite(_col(df, "pgrad_sd")), _col(df, "pgrad_sd"),
                      st.pgrad_sd_rel * P.abs() + st.pgrad_sd_abs)
    observed = _pattern_names(df)
    with torch.no_grad():
        pred = solve_points(cond, closure, **solver)
    predicted = np.array([PATTERNS[int(k)] for k in pred.pattern], dtype=object)
    kind = _kinds(np.where(observed == "", predicted, observed))
    E = _entrainment(cond, solver)
    res = measured_residuals(cond, closure, H, P, kind, E, holdup_sd=sdH, pgrad_sd=torch.nan_to_num(sdP, nan=0.0))

    e_joint = _joint_score(cond, closure, pred, res, H, P, sdH, sdP)
    # robust scores per configuration (stratified and annular scatter differently)
    z = {r: torch.full((n,), float("nan"), dtype=torch.float64) for r in SCORES}
    stats: dict = {}
    for code, name in ((KIND_STRATIFIED, "stratified"), (KIND_ANNULAR, "annular")):
        m = res.kind == code
        for r in SCORES:
            e = torch.where(m, e_joint if r == "joint" else res.standardised(r), float("nan"))
            zz, med, sd = robust_z(e, st.residual_sd_floor)
            z[r] = torch.where(m, zz, z[r])
            x = (e_joint if r == "joint" else getattr(res, r))
            x = x[m & torch.isfinite(x)]
            if r == "joint" and x.numel():
                stats[f"{name}/{r}"] = {"n": int(x.numel()), "standardised_median": med, "standardised_robust_sd": sd}
            elif x.numel():
                q = torch.quantile(x, torch.tensor([0.05, 0.5, 0.95], dtype=torch.float64)).tolist()
                stats[f"{name}/{r}"] = {"n": int(x.numel()), "normalised_q05": q[0], "normalised_q50": q[1],
                                        "normalised_q95": q[2], "standardised_median": med, "standardised_robust_sd": sd}

    # the closure's holdup and pgrad; stratified rows at the root nearest to the measurement
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

    sig_H = torch.sqrt(sdH**2 + st.model_holdup_sd**2)
    sig_P = torch.sqrt(sdP**2 + (st.model_pgrad_rel * P_pred) ** 2 + st.model_pgrad_abs**2)
    z_H = (H - H_pred) / sig_H
    z_P = (P - P_pred) / sig_P
    c = st.k_sigma
    # robust scores of the prediction misfit within each predicted pattern
    rz_H, rz_P = torch.full_like(z_H, float("nan")), torch.full_like(z_P, float("nan"))
    for code in torch.unique(pred.pattern):
        m = pred.pattern == code
        for zz, out in ((z_H, rz_H), (z_P, rz_P)):
            r, _, _ = robust_z(torch.where(m, zz, float("nan")), st.residual_sd_floor)
            out.copy_(torch.where(m, r, out))
    kh_used = torch.where(torch.isfinite(res.kh_ratio), res.kh_ratio, kh_eq)
    lab_strat = torch.as_tensor(np.isin(observed, STRATIFIED_PATTERNS))
    sin_t = torch.sin(cond.theta)
    lam = cond.vsl / cond.vm.clamp_min(1e-300)
    H_lo = torch.where(torch.isfinite(H), (H - c * sdH).clamp(0, 1), 0.0)
    H_hi = torch.where(torch.isfinite(H), (H + c * sdH).clamp(0, 1), 1.0)
    H_light = torch.where(sin_t >= 0, H_lo, H_hi)
    head_min = (cond.rhol * H_light + cond.rhog * (1 - H_light)) * cond.g * sin_t

    checks: dict[str, tuple[torch.Tensor, list]] = {}
    for r in RESIDUALS:
        zz, raw = z[r], getattr(res, r)
        checks[f"residual_{r}"] = (zz.abs() > st.k_robust,
                                   [f"{r} balance misses by {_fmt(a)} of its force scale ({_fmt(b)} robust sd)" for a, b in
                                    zip(raw.tolist(), zz.tolist())])
    checks["residual_joint"] = (z["joint"].abs() > st.k_robust, [
        f"both balances close only {_fmt(a)} measurement sd away ({_fmt(b)} robust sd)"
        for a, b in zip(e_joint.tolist(), z["joint"].tolist())])
    above = lab_strat & ((H - H_thick) / sig_H > c)
    checks["holdup_above_stratified"] = (above, [
        f"labelled stratified, holdup {_fmt(a)} above the thickest stratified root's {_fmt(b)}"
        for a, b in zip(H.tolist(), H_thick.tolist())])
    checks["holdup_vs_closure"] = ((z_H.abs() > c) & (rz_H.abs() > st.k_robust) & ~above, [
        f"holdup {_fmt(a)} vs closure {_fmt(b)} ({_fmt(zz)} sd)" for a, b, zz in zip(H.tolist(), H_pred.tolist(), z_H.tolist())])
    checks["pgrad_vs_closure"] = ((z_P.abs() > c) & (rz_P.abs() > st.k_robust), [
        f"pgrad {_fmt(a)} Pa/m vs closure {_fmt(b)} Pa/m ({_fmt(zz)} sd)"
        for a, b, zz in zip(P.tolist(), P_pred.tolist(), z_P.tolist())])
    opposite = (torch.sign(P) * torch.sign(P_pred) < 0) & (P.abs() > c * sdP) & (P_pred.abs() > c * (sig_P**2 - sdP**2).sqrt())
    checks["pgrad_sign"] = (opposite, [
        f"pgrad {_fmt(a)} Pa/m has the opposite sign of the closure's {_fmt(b)} Pa/m (inclination {_fmt(t)} deg)"
        for a, b, t in zip(P.tolist(), P_pred.tolist(), torch.rad2deg(cond.theta).tolist())])
    checks["pattern_kh"] = (lab_strat & (kh_used > 1 + st.kh_margin), [
        f"labelled stratified but u_G/u_G,KH = {_fmt(k)} at the {'measured level' if m else 'closure equilibrium'}"
        for k, m in zip(kh_used.tolist(), torch.isfinite(res.kh_ratio).tolist())])
    checks["pgrad_below_head"] = (P + c * sdP < head_min, [
        f"pgrad {_fmt(a)} Pa/m below the lightest hydrostatic head {_fmt(b)} Pa/m" for a, b in
        zip(P.tolist(), head_min.tolist())])
    checks["holdup_below_no_slip"] = ((sin_t > 0) & (H + c * sdH < lam), [
        f"upward flow with holdup {_fmt(a)} below the no-slip {_fmt(b)}" for a, b in zip(H.tolist(), lam.tolist())])
    in_dom = np.full(n, np.nan, dtype=object)
    if hasattr(closure, "in_domain"):
        feats = torch.where(torch.isfinite(res.features).all(dim=1, keepdim=True), res.features,
                            _predicted_features(cond, closure, pred))
        ok = torch.isfinite(feats).all(dim=1)
        inside = closure.in_domain(torch.nan_to_num(feats, nan=0.0)).reshape(-1) & ok
        in_dom = inside.numpy().astype(object)
        checks["outside_domain"] = (ok & ~inside, ["outside the closure's training domain"] * n)

    flags = np.zeros((n, len(checks)), dtype=bool)
    for j, (mask, _) in enumerate(checks.values()):
        flags[:, j] = mask.numpy()
    names, texts = list(checks), [t for _, t in checks.values()]
    codes = [",".join(names[j] for j in np.flatnonzero(flags[i])) for i in range(n)]
    reasons = ["; ".join(texts[j][i] for j in np.flatnonzero(flags[i])) for i in range(n)]
    kind_name = np.array(["-", "stratified", "annular"], dtype=object)[res.kind.numpy() + 1]
    t = pd.DataFrame({
        "run_id": df["run_id"].astype(str).to_numpy() if "run_id" in df else np.arange(1, n + 1).astype(str),
        "campaign": df["campaign"].to_numpy() if "campaign" in df else "",
        "pattern": observed, "pattern_pred": predicted, "config": kind_name,
        "theta_deg": torch.rad2deg(cond.theta).numpy(), "vsl": cond.vsl.numpy(), "vsg": cond.vsg.numpy(),
        "D": cond.D.numpy(), "holdup": H.numpy(), "pgrad": P.numpy(), "frac": res.frac.numpy(),
        **{f"res_{r}": getattr(res, r).numpy() for r in RESIDUALS},
        **{f"e_{r}": res.standardised(r).numpy() for r in RESIDUALS}, "e_joint": e_joint.numpy(),
        **{f"z_{r}": z[r].numpy() for r in SCORES},
        "holdup_pred": H_pred.numpy(), "pgrad_pred": P_pred.numpy(),
        "z_holdup": z_H.numpy(), "z_pgrad": z_P.numpy(), "kh_ratio_eq": kh_eq.numpy(), "kh_ratio_meas": res.kh_ratio.numpy(), "in_domain": in_dom,
        "suspect": flags[:, [j for j, k in enumerate(names) if k not in INFORMATIONAL]].any(axis=1),
        "checks": codes, "reasons": reasons,
    })
    counts = {k: int(flags[:, j].sum()) for j, k in enumerate(names)}
    label = getattr(closure, "label", type(closure).__name__)
    return AuditResult(table=t, stats=stats, settings=st, closure_label=label, counts=counts)


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


def _predicted_features(cond, closure, pred) -> torch.Tensor:
    """Closure features at the predicted stratified equilibrium (rows without a measured state)."""
    from ..physics.groups import closure_features

    h = torch.where(torch.isfinite(pred.roots[:, 0]), pred.roots[:, 0], float("nan"))
    with torch.no_grad():
        f = closure_features(local_state(cond, torch.nan_to_num(h, nan=0.5), "stratified"))
    return torch.where(torch.isfinite(h)[:, None], f, float("nan"))

