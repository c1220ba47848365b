r"""Closure health over a grid of conditions: positivity, smoothness, multiple roots, single-phase limits.

:func:`audit_closure` evaluates any closure (baseline or learned) on a design grid
(:class:`HealthGridSpec`) and reports four things.

1. **Positivity and finiteness** of f_WL, f_WG, f_i on a full grid of rates x diameters x
   inclinations x liquid levels (stratified h/D and annular delta/D).
2. **Smoothness**: one-dimensional sweeps of ln f along one input at a time from a set of base
   states, on a uniform coordinate s (:data:`SWEEPS`: log10 for rates and properties, logit for
   the level, degrees for the inclination). Each sweep moves one or more closure features
   (:data:`closure_nn.physics.groups.FEATURE_NAMES`), listed in :data:`SWEEPS`. Reported:

   * Lipschitz estimate :math:`L = \max_i |y_{i+1} - y_i|/\Delta s` (y = ln f),
   * curvature estimate :math:`\max_i |y_{i+1} - 2y_i + y_{i-1}|/\Delta s^2`,
   * kinks. A slope jump at a point gives second differences that do not shrink with the step:
     with :math:`J_i = (y_{i+1} - 2y_i + y_{i-1})/\Delta s` the largest sum of two neighbours
     :math:`|J_i| + |J_{i+1}|` is about the slope jump for a kink and about
     :math:`2|y''|\Delta s` for a smooth curve. It is computed on the sweep grid and on every
     other point of it; a kink shows a ratio fine/coarse near 1 (smooth: 1/2; a jump in f
     itself: near 2). Flagged when the ratio exceeds ``kink_ratio`` and the jump exceeds
     ``kink_jump`` (ln-units per unit s). Ratio above 1.5 is reported as a discontinuity.
     This is the usual Richardson-type refinement argument (common practice).
3. **Multiple roots**: the number of stratified equilibrium roots
   (:func:`closure_nn.physics.holdup_roots.find_all_roots`) on a log-log vsg x vsl map for a few
   inclinations.
4. **Single-phase limits**: as v_SL -> 0 the gas flows alone and the closure's f_WG (at
   h/D -> 0, where D_G -> D) must be the single-phase factor; as v_SG -> 0 likewise f_WL at
   h/D -> 1. Compared with Churchill (1977), Chem. Eng. 84(24):91-92
   (:func:`closure_nn.physics.friction.fanning_churchill`), as a ratio. Also the two-phase
   solution at v_SL = ``tiny_rate`` (horizontal): its pgrad against gas Darcy-Weisbach,
   :math:`2 f \rho_G v_{SG}^2 / D` with the Churchill factor. Deviations are given over the whole
   range and for Re >= 4000 only (the laminar-turbulent transition is where correlations differ
   most).

Verdict: ``fail`` for any non-positive or non-finite factor or a discontinuity; ``warn`` for
kinks or a single-phase deviation above ``single_phase_tol``; else ``pass``.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import pandas as pd
import torch

from ..physics.conditions import make_conditions
from ..physics.friction import fanning_churchill
from ..physics.geometry import ANNULAR, FRAC_MAX, STRATIFIED
from ..physics.holdup_roots import find_all_roots, solve_separated
from ..physics.local_state import local_state

FACTORS = ("f_wl", "f_wg", "f_i")
#: sweep name -> (condition field or 'frac', coordinate, lo, hi, features it moves)
SWEEPS: dict[str, tuple[str, str, float, float, str]] = {
    "frac": ("frac", "logit", 0.005, 0.995, "frac (and every velocity group)"),
    "vsl": ("vsl", "log10", 1e-3, 2.0, "log10_Re_L, Fr_L, asinh_We_slip"),
    "vsg": ("vsg", "log10", 0.1, 60.0, "log10_Re_G, Fr_G, asinh_We_slip"),
    "D": ("D", "log10", 0.02, 0.3, "Re_L, Re_G, Fr_L, Fr_G, We, rel_rough"),
    "rhog": ("rhog", "log10", 0.6, 120.0, "log10_rho_ratio, Re_G, Fr_G, We"),
    "mul": ("mul", "log10", 3e-4, 0.1, "log10_mu_ratio, Re_L"),
    "mug": ("mug", "log10", 8e-6, 3e-5, "log10_mu_ratio, Re_G"),
    "sigma": ("sigma", "log10", 0.01, 0.08, "asinh_We_slip"),
    "roughness": ("roughness", "log10", 1e-7, 1e-3, "rel_rough"),
    "theta": ("theta", "deg", -30.0, 30.0, "sin_theta"),
}
#: Reynolds number from which the single-phase deviation is also reported separately (common practice)
RE_TURBULENT = 4000.0
_AIR_WATER = dict(rhol=998.0, rhog=1.2, mul=1.0e-3, mug=1.8e-5, sigma=0.072)


@dataclass(frozen=True)
class HealthGridSpec:
    """Grid of :func:`audit_closure`. SI units; inclinations in degrees (people type them)."""

    fluids: dict = field(default_factory=lambda: dict(_AIR_WATER))
    D: tuple[float, ...] = (0.05, 0.15)
    theta_deg: tuple[float, ...] = (-5.0, 0.0, 5.0)
    roughness: float = 5e-5
    vsl: tuple[float, float] = (1e-3, 2.0)
    vsg: tuple[float, float] = (0.1, 60.0)
    n_rates: int = 14  # per rate axis of the positivity grid
    n_frac: int = 25  # levels of the positivity grid
    base_rates: int = 3  # per rate axis of the sweep base states
    base_fracs: tuple[float, ...] = (0.1, 0.3, 0.6)
    n_sweep: int = 321  # points per sweep (odd: the coarse grid is every other point)
    sweeps: tuple[str, ...] = tuple(SWEEPS)
    kink_jump: float = 0.05  # [ln f per unit s] smallest slope jump reported as a kink
    kink_ratio: float = 0.8  # [-] fine/coarse ratio above which a slope jump counts as a kink
    roots_theta_deg: tuple[float, ...] = (1.0, 5.0, 10.0)
    roots_vsl: tuple[float, float] = (1e-5, 1.0)  # several roots live at small v_SL in upward flow
    roots_vsg: tuple[float, float] = (0.3, 60.0)
    roots_D: float | None = None  # diameter of the root map (default: the first of ``D``)
    n_map: int = 60  # per axis of the root map
    single_phase_tol: float = 0.05  # [-] relative deviation from Churchill (1977) reported
    tiny_rate: float = 1e-6  # [m/s] the "zero" rate of the two-phase single-phase limit

    @classmethod
    def from_mapping(cls, m) -> "HealthGridSpec":
        m = dict(m)
        known = cls.__dataclass_fields__
        bad = [k for k in m if k not in known]
        if bad:
            raise ValueError(f"unknown health grid key(s) {', '.join(bad)}; known: {', '.join(known)}")
        for k, v in m.items():
            if isinstance(v, (list, tuple)) or hasattr(v, "__len__") and not isinstance(v, (str, dict)) and k != "fluids":
                m[k] = tuple(v)
        if "fluids" in m:
            m["fluids"] = {**_AIR_WATER, **dict(m["fluids"])}
        return cls(**m)


@dataclass
class HealthReport:
    """Outcome of :func:`audit_closure` (tables as DataFrames; see the module docstring)."""

    closure_label: str
    positivity: pd.DataFrame
    smoothness: pd.DataFrame
    roots: dict  # theta_deg -> {"vsg": (n,), "vsl": (n,), "n_roots": (n_vsl, n_vsg)}
    roots_summary: pd.DataFrame
    single_phase: pd.DataFrame
    problems: list[str]
    warnings: list[str]
    spec: HealthGridSpec

    @property
    def verdict(self) -> str:
        return "fail" if self.problems else ("warn" if self.warnings else "pass")

    def summary(self) -> dict:
        return {"closure": self.closure_label, "verdict": self.verdict, "problems": self.problems,
                "warnings": self.warnings,
                "positivity": self.positivity.to_dict(orient="records"),
                "kinks": self.smoothness[self.smoothness["kink_bases"] > 0].to_dict(orient="records"),
                "lipschitz_max": self.smoothness.groupby("factor")["lipschitz"].max().to_dict(),
                "roots": self.roots_summary.to_dict(orient="records"),
                "single_phase": self.single_phase.to_dict(orient="records")}


def _cond(spec: HealthGridSpec, **fields):
    f = {**spec.fluids, "roughness": spec.roughness, **fields}
    return make_conditions(**f)


def _factors(closure, s) -> torch.Tensor:
    f = closure(s)
    return torch.stack(torch.broadcast_tensors(f.f_wl, f.f_wg, f.f_i, s.geom.frac)[:3], dim=-1)


def _positivity(closure, spec: HealthGridSpec) -> pd.DataFrame:
    vsl = torch.logspace(math.log10(spec.vsl[0]), math.log10(spec.vsl[1]), spec.n_rates, dtype=torch.float64)
    vsg = torch.logspace(math.log10(spec.vsg[0]), math.log10(spec.vsg[1]), spec.n_rates, dtype=torch.float64)
    D = torch.tensor(spec.D, dtype=torch.float64)
    th = torch.deg2rad(torch.tensor(spec.theta_deg, dtype=torch.float64))
    L, G, DD, TT = torch.meshgrid(vsl, vsg, D, th, indexing="ij")
    c = _cond(spec, vsl=L.reshape(-1), vsg=G.reshape(-1), D=DD.reshape(-1), theta=TT.reshape(-1)).unsqueeze(-1)
    rows = []
    t = (torch.arange(spec.n_frac, dtype=torch.float64) + 0.5) / spec.n_frac
    for kind in (STRATIFIED, ANNULAR):
        frac = t * FRAC_MAX[kind]
        with torch.no_grad():
            F = _factors(closure, local_state(c, frac, kind))  # (B, n_frac, 3)
        for j, name in enumerate(FACTORS):
            v = F[..., j].reshape(-1)
            fin = torch.isfinite(v)
            rows.append({"config": kind, "factor": name, "states": int(v.numel()),
                         "non_finite": int((~fin).sum()), "non_positive": int((fin & (v <= 0)).sum()),
                         "min": float(v[fin].min()) if fin.any() else float("nan"),
                         "max": float(v[fin].max()) if fin.any() else float("nan")})
    return pd.DataFrame(rows)


def _sweep_values(name: str, s: torch.Tensor) -> torch.Tensor:
    coord = SWEEPS[name][1]
    if coord == "log10":
        return 10**s
    if coord == "logit":
        return 1 / (1 + torch.exp(-s))
    return torch.deg2rad(s)


def _sweep_coord(name: str, x: float) -> float:
    coord = SWEEPS[name][1]
    return math.log10(x) if coord == "log10" else (math.log(x / (1 - x)) if coord == "logit" else x)


def _kink_stats(y: torch.Tensor, ds: float) -> tuple[torch.Tensor, torch.Tensor, torch.Tensor, torch.Tensor]:
    """For sweeps ``y (..., n)``: Lipschitz, curvature, fine pair-jump (with index) and fine/coarse ratio."""
    lip = ((y[..., 1:] - y[..., :-1]).abs() / ds).amax(dim=-1)
    d2 = y[..., 2:] - 2 * y[..., 1:-1] + y[..., :-2]
    curv = (d2.abs() / ds**2).amax(dim=-1)
    J = d2.abs() / ds
    pair = J[..., 1:] + J[..., :-1]
    fine, idx = pair.max(dim=-1)
    yc = y[..., ::2]
    Jc = (yc[..., 2:] - 2 * yc[..., 1:-1] + yc[..., :-2]).abs() / (2 * ds)
    coarse = (Jc[..., 1:] + Jc[..., :-1]).amax(dim=-1)
    return lip, curv, torch.stack([fine, idx.to(fine.dtype) + 2], dim=-1), fine / coarse.clamp_min(1e-300)


def _smoothness(closure, spec: HealthGridSpec) -> pd.DataFrame:
    vsl_b = torch.logspace(math.log10(spec.vsl[0]), math.log10(spec.vsl[1]), spec.base_rates + 2, dtype=torch.float64)[1:-1]
    vsg_b = torch.logspace(math.log10(spec.vsg[0]), math.log10(spec.vsg[1]), spec.base_rates + 2, dtype=torch.float64)[1:-1]
    D = torch.tensor(spec.D, dtype=torch.float64)
    th = torch.deg2rad(torch.tensor(spec.theta_deg, dtype=torch.float64))
    fr = torch.tensor(spec.base_fracs, dtype=torch.float64)
    L, G, DD, TT, FF = [t.reshape(-1) for t in torch.meshgrid(vsl_b, vsg_b, D, th, fr, indexing="ij")]
    rows = []
    for kind in (STRATIFIED, ANNULAR):
        fbase = FF * FRAC_MAX[kind] if kind == STRATIFIED else (FF * 0.1)  # thin films for annular
        for name in spec.sweeps:
            if kind == ANNULAR and name != "frac":
                continue
            fld, coord, lo, hi, moves = SWEEPS[name]
            if fld == "frac" and kind == ANNULAR:
                lo, hi = 0.005, 0.995  # logit of delta/D / (1/2)
            s = torch.linspace(_sweep_coord(name, lo), _sweep_coord(name, hi), spec.n_sweep, dtype=torch.float64)
            ds = float(s[1] - s[0])
            x = _sweep_values(name, s)
            fields = dict(vsl=L[:, None], vsg=G[:, None], D=DD[:, None], theta=TT[:, None])
            frac = fbase[:, None].expand(-1, spec.n_sweep)
            if fld == "frac":
                frac = x[None, :].expand(L.numel(), -1) * FRAC_MAX[kind]
            else:
                fields[fld] = x[None, :]
            c = _cond(spec, **fields)
            shape = torch.broadcast_shapes(c.shape, frac.shape)
            c = c.map(lambda t: t.expand(shape))
            with torch.no_grad():
                y = torch.log(_factors(closure, local_state(c, frac.expand(shape), kind)))  # (B, n, 3)
            y = y.transpose(1, 2)  # (B, 3, n)
            fin = torch.isfinite(y).all(dim=-1)
            lip, curv, fine, ratio = _kink_stats(torch.nan_to_num(y, nan=0.0), ds)
            kink = fin & (fine[..., 0] > spec.kink_jump) & (ratio > spec.kink_ratio)
            jump = fin & (fine[..., 0] > spec.kink_jump) & (ratio > 1.5)
            for j, fname in enumerate(FACTORS):
                ok = fin[:, j]
                jj = torch.where(kink[:, j], fine[:, j, 0], -1.0)
                worst = int(jj.argmax())
                at = float(x[int(fine[worst, j, 1])]) if bool(kink[worst, j]) else float("nan")
                at = math.degrees(at) if coord == "deg" else (at * FRAC_MAX[kind] if fld == "frac" else at)
                rows.append({
                    "config": kind, "sweep": name, "factor": fname, "moves": moves, "bases": int(ok.sum()),
                    "lipschitz": float(lip[ok, j].max()) if ok.any() else float("nan"),
                    "curvature": float(curv[ok, j].max()) if ok.any() else float("nan"),
                    "kink_bases": int(kink[:, j].sum()), "jump_bases": int(jump[:, j].sum()),
                    "worst_slope_jump": float(fine[worst, j, 0]) if bool(kink[worst, j]) else 0.0,
                    "worst_at": at, "coordinate": coord,
                })
    return pd.DataFrame(rows)


def _root_map(closure, spec: HealthGridSpec) -> tuple[dict, pd.DataFrame]:
    D = spec.roots_D or spec.D[0]
    vsg = torch.logspace(math.log10(spec.roots_vsg[0]), math.log10(spec.roots_vsg[1]), spec.n_map, dtype=torch.float64)
    vsl = torch.logspace(math.log10(spec.roots_vsl[0]), math.log10(spec.roots_vsl[1]), spec.n_map, dtype=torch.float64)
    L, G = torch.meshgrid(vsl, vsg, indexing="ij")
    out, rows = {}, []
    for t in spec.roots_theta_deg:
        c = _cond(spec, vsl=L.reshape(-1), vsg=G.reshape(-1), D=D, theta=math.radians(t))
        _, n = find_all_roots(c, closure)
        n = n.reshape(L.shape)
        out[float(t)] = {"vsg": vsg.numpy(), "vsl": vsl.numpy(), "n_roots": n.numpy(), "D": D}
        rows.append({"theta_deg": float(t), "D": D, "states": int(n.numel()), "no_root": int((n == 0).sum()),
                     "one_root": int((n == 1).sum()), "several_roots": int((n > 1).sum()),
                     "share_several": float((n > 1).double().mean())})
    return out, pd.DataFrame(rows)


def _single_phase(closure, spec: HealthGridSpec) -> pd.DataFrame:
    rows = []
    D = torch.tensor(spec.D, dtype=torch.float64)
    for phase in ("gas", "liquid"):
        lo, hi = spec.vsg if phase == "gas" else spec.vsl
        v = torch.logspace(math.log10(max(lo, 1e-3)), math.log10(hi), 25, dtype=torch.float64)
        V, DD = [t.reshape(-1) for t in torch.meshgrid(v, D, indexing="ij")]
        if phase == "gas":
            c = _cond(spec, vsl=0.0, vsg=V, D=DD)
            s = local_state(c, torch.full_like(V, 1e-9), STRATIFIED)
            rho, mu, idx = c.rhog, c.mug, 1
        else:
            c = _cond(spec, vsl=V, vsg=0.0, D=DD)
            s = local_state(c, torch.full_like(V, 1 - 1e-9), STRATIFIED)
            rho, mu, idx = c.rhol, c.mul, 0
        with torch.no_grad():
            f = _factors(closure, s)[..., idx]
        Re = rho * V * DD / mu
        ref = fanning_churchill(Re, c.roughness / DD)
        dev = torch.nan_to_num((f / ref - 1).abs(), nan=float("inf"))
        k = int(dev.argmax())
        turb = Re >= RE_TURBULENT
        rows.append({"phase": phase, "check": f"closure f_w{'g' if phase == 'gas' else 'l'} at the single-phase edge vs Churchill (1977)",
                     "max_abs_dev": float(dev.max()),
                     "max_abs_dev_turbulent": float(dev[turb].max()) if turb.any() else float("nan"),
                     "at_velocity": float(V[k]), "at_D": float(DD[k]), "at_Re": float(Re[k])})
    # two-phase solution with a vanishing liquid rate, horizontal: pgrad -> gas Darcy-Weisbach
    v = torch.logspace(math.log10(max(spec.vsg[0], 0.5)), math.log10(spec.vsg[1]), 15, dtype=torch.float64)
    V, DD = [t.reshape(-1) for t in torch.meshgrid(v, D, indexing="ij")]
    c = _cond(spec, vsl=spec.tiny_rate, vsg=V, D=DD, theta=0.0)
    with torch.no_grad():
        sol = solve_separated(c, closure)
    dw = 2 * fanning_churchill(c.rhog * V * DD / c.mug, c.roughness / DD) * c.rhog * V**2 / DD
    dev = torch.where(sol.found, (sol.pgrad.total / dw - 1).abs(), float("inf"))
    k = int(dev.argmax())
    turb = c.rhog * V * DD / c.mug >= RE_TURBULENT
    rows.append({"phase": "gas", "check": f"two-phase pgrad at v_SL = {spec.tiny_rate:g} m/s vs gas Darcy-Weisbach "
                 "with Churchill (1977)", "max_abs_dev": float(dev.max()),
                 "max_abs_dev_turbulent": float(dev[turb].max()) if turb.any() else float("nan"),
                 "at_velocity": float(V[k]), "at_D": float(DD[k]), "at_Re": float(c.rhog[k] * V[k] * DD[k] / c.mug[k])})
    return pd.DataFrame(rows)


def audit_closure(closure, spec: HealthGridSpec | None = None) -> HealthReport:
    """Health of ``closure`` over the grid ``spec`` (module docstring). No gradients."""
    spec = spec or HealthGridSpec()
    pos = _positivity(closure, spec)
    smooth = _smoothness(closure, spec)
    roots, roots_tab = _root_map(closure, spec)
    sp = _single_phase(closure, spec)
    problems, warnings = [], []
    for r in pos.itertuples():
        if r.non_finite or r.non_positive:
            problems.append(f"{r.factor} ({r.config}): {r.non_positive} non-positive and {r.non_finite} non-finite "
                            f"values of {r.states} (min {r.min:.3g})")
    for r in smooth.itertuples():
        unit = {"log10": "per decade", "logit": "per unit logit", "deg": "per degree"}[r.coordinate]
        if r.jump_bases:
            problems.append(f"{r.factor} ({r.config}) jumps along {r.sweep} in {r.jump_bases} of {r.bases} sweeps")
        elif r.kink_bases:
            warnings.append(f"{r.factor} ({r.config}) has a kink along {r.sweep} in {r.kink_bases} of {r.bases} sweeps "
                            f"(slope jump up to {r.worst_slope_jump:.3g} in ln f {unit}, near {r.sweep} = {r.worst_at:.4g})")
    for r in sp.itertuples():
        if not r.max_abs_dev <= spec.single_phase_tol:
            warnings.append(f"{r.check}: deviation up to {100 * r.max_abs_dev:.3g} % (at {r.at_velocity:.3g} m/s, "
                            f"D = {r.at_D:g} m, Re = {r.at_Re:.3g}); {100 * r.max_abs_dev_turbulent:.3g} % for Re >= 4000")
    label = getattr(closure, "label", type(closure).__name__)
    return HealthReport(label, pos, smooth, roots, roots_tab, sp, problems, warnings, spec)
