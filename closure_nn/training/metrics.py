"""Accuracy of a closure on a table: holdup and pressure-gradient errors of its equilibrium (no Lightning).

For every separated-flow row with a measured target the closure's equilibrium is solved
(:func:`~closure_nn.physics.holdup_roots.solve_separated`, kind from the observed pattern, or, for
rows of unknown pattern under ``unknown_pattern='predicted'``, from the pattern the closure
predicts: :func:`~closure_nn.data.configurations.resolve_configurations`) and compared:

* ``holdup_rmse``, ``holdup_mae`` [-]: absolute holdup errors,
* ``pgrad_rel_rmse`` [-]: RMS of (predicted / measured - 1) over rows with |pgrad| >= 1 Pa/m,
* ``n_rows`` rows compared, ``n_no_root`` rows without an equilibrium (left out of the errors).

Held-out scoring (used by :mod:`closure_nn.pipeline.evaluate`): :func:`error_summary` (MAE, MAPE,
share within +-10/20/30 %), :func:`pattern_accuracy`, :func:`measured_state_residuals` (phase
balances at the measured states) and :func:`solver_state_residuals` (balances at the solver's
own outputs, zero by construction).
"""
from __future__ import annotations

import math

import numpy as np
import torch

from ..data.configurations import CONFIGURATION_CODE, SEPARATED_CONFIGURATIONS
from ..data.features import frac_from_holdup
from ..physics.holdup_roots import solve_separated
from ..physics.local_state import local_state
from ..physics.momentum import gas_residual, liquid_residual, shear_stresses
from ..physics.vocabulary import ANNULAR, CODE, STRATIFIED_PATTERNS
from .loss_batch import batch_conditions, batch_kinds
from .loss_terms import holdup_sensitivity

PGRAD_FLOOR = 1.0  # Pa/m: rows with a smaller |pgrad| are left out of the relative error


def predict_rows(closure, t: dict[str, torch.Tensor], select: str = "thinnest") -> dict[str, torch.Tensor]:
    """Predicted ``holdup``, ``pgrad`` and ``found`` ``(N,)`` for the separated rows of ``t`` (NaN elsewhere),
    and ``kind`` ``(N,)``, the kind codes used (predicted ones resolved with ``closure``)."""
    n = t["vsl"].shape[0]
    hold = torch.full((n,), float("nan"), dtype=torch.float64)
    pg = torch.full_like(hold, float("nan"))
    found = torch.zeros(n, dtype=torch.bool)
    with torch.no_grad():
        kinds = batch_kinds(t, closure, select)
        for kind in SEPARATED_CONFIGURATIONS:
            sel = kinds == CONFIGURATION_CODE[kind]
            if sel.any():
                sol = solve_separated(batch_conditions(t, sel), closure, kind, select=select)
                hold[sel] = torch.where(sol.found, sol.holdup, torch.nan)
                pg[sel] = torch.where(sol.found, sol.pgrad.total, torch.nan)
                found[sel] = sol.found
    return {"holdup": hold, "pgrad": pg, "found": found, "kind": kinds}


def sample_rows(t: dict[str, torch.Tensor], max_rows: int | None, seed: int = 0) -> dict[str, torch.Tensor]:
    """``t`` itself if it has at most ``max_rows`` rows (or ``max_rows`` is None), else a seeded
    uniform sample of ``max_rows`` rows without replacement (the same rows for the same table size
    and seed), in table order."""
    n = t["vsl"].shape[0]
    if max_rows is None or n <= max_rows:
        return t
    g = torch.Generator().manual_seed(seed)
    idx = torch.randperm(n, generator=g)[:max_rows].sort().values
    return {k: v[idx] for k, v in t.items()}


def accuracy(closure, t: dict[str, torch.Tensor], select: str = "thinnest", max_rows: int | None = None,
             seed: int = 0) -> dict[str, float]:
    """Holdup and pgrad errors of ``closure`` on the tensor table ``t`` (see module docstring).

    ``max_rows``: monitor on a seeded sample of at most this many rows (:func:`sample_rows`);
    every row if None. The sampling error of an RMS over n rows is about RMS / sqrt(2 n)
    (common practice), i.e. 1.6 % of it for n = 2,000."""
    t = sample_rows(t, max_rows, seed)
    pred = predict_rows(closure, t, select)
    sep = pred["kind"] >= 0
    has_h, has_p = torch.isfinite(t["holdup"]) & sep, torch.isfinite(t["pgrad"]) & sep
    rows = has_h | has_p
    ok = pred["found"]
    eh = (pred["holdup"] - t["holdup"])[has_h & ok]
    use_p = has_p & ok & (t["pgrad"].abs() >= PGRAD_FLOOR)
    ep = pred["pgrad"][use_p] / t["pgrad"][use_p] - 1

    def rms(x: torch.Tensor) -> float:
        return float(torch.sqrt((x**2).mean())) if x.numel() else math.nan

    return {"holdup_rmse": rms(eh), "holdup_mae": float(eh.abs().mean()) if eh.numel() else math.nan,
            "pgrad_rel_rmse": rms(ep), "n_rows": int(rows.sum()), "n_no_root": int((rows & ~ok).sum())}


# --------------------------------------------------------------------------- held-out scoring
#: pgrad bands of the "share within +-x" measure [-]
BANDS = (0.10, 0.20, 0.30)


def error_summary(h_pred, h_meas, p_pred, p_meas, holdup_floor: float = 0.01,
                  pgrad_floor: float = PGRAD_FLOOR, bands: tuple[float, ...] = BANDS) -> dict[str, float]:
    r"""Common-practice error measures of predicted vs measured holdup and pgrad (arrays ``(N,)``).

    .. math::
        \mathrm{MAE}_H = \frac1n\sum |\hat H - H|,\qquad
        \mathrm{MAPE}_H = \frac{100}{n'}\sum_{H \ge H_0} \frac{|\hat H - H|}{H},\qquad
        \mathrm{MAPE}_p = \frac{100}{m}\sum_{|p| \ge p_0} \frac{|\hat p - p|}{|p|}

    and ``pgrad_within_<x>``, the share of those m rows with :math:`|\hat p/p - 1| \le x`. A NaN
    measurement means "not measured" and the row is left out of that target; a NaN prediction
    with a measurement is counted in ``n_*_missing`` and left out (the caller should score every
    model on the same rows). The floors :math:`H_0` = ``holdup_floor`` and :math:`p_0` =
    ``pgrad_floor`` [Pa/m] keep near-zero measurements out of the relative errors.
    """
    h_pred, h_meas = np.asarray(h_pred, np.float64), np.asarray(h_meas, np.float64)
    p_pred, p_meas = np.asarray(p_pred, np.float64), np.asarray(p_meas, np.float64)
    mh, mp = np.isfinite(h_meas), np.isfinite(p_meas)
    okh, okp = mh & np.isfinite(h_pred), mp & np.isfinite(p_pred)
    eh = np.abs(h_pred[okh] - h_meas[okh])
    rel_rows = okh & (h_meas >= holdup_floor)
    prow = okp & (np.abs(p_meas) >= pgrad_floor)
    ep = np.abs(p_pred[prow] - p_meas[prow]) / np.abs(p_meas[prow])

    def mean(x: np.ndarray) -> float:
        return float(x.mean()) if x.size else math.nan

    out = {"holdup_mae": mean(eh), "holdup_mape": 100 * mean(np.abs(h_pred[rel_rows] - h_meas[rel_rows]) / h_meas[rel_rows]),
           "pgrad_mape": 100 * mean(ep), "n_holdup": int(okh.sum()), "n_holdup_rel": int(rel_rows.sum()),
           "n_pgrad": int(prow.sum()), "n_holdup_missing": int((mh & ~okh).sum()), "n_pgrad_missing": int((mp & ~okp).sum())}
    for b in bands:
        out[f"pgrad_within_{round(100 * b)}"] = mean((ep <= b).astype(np.float64))
    return out


def pattern_accuracy(predicted, observed) -> dict[str, float]:
    """Share of rows with an observed pattern (non-empty string) whose predicted pattern is the
    same (``pattern_accuracy``), and the same with stratified smooth and wavy counted as one
    (``pattern_accuracy_coarse``). Arrays of pattern names ``(N,)``; None/NaN/'' = not observed."""
    pred = np.asarray(predicted, dtype=object)
    obs = np.asarray(observed, dtype=object)
    seen = np.array([isinstance(o, str) and o != "" for o in obs])
    if pred.size == 0 or not seen.any() or any(p is None or (isinstance(p, float)) for p in pred[seen]):
        return {"pattern_accuracy": math.nan, "pattern_accuracy_coarse": math.nan, "n_pattern": int(seen.sum())}
    coarse = lambda a: np.array(["stratified" if x in STRATIFIED_PATTERNS else x for x in a], dtype=object)  # noqa: E731
    return {"pattern_accuracy": float((pred[seen] == obs[seen]).mean()),
            "pattern_accuracy_coarse": float((coarse(pred[seen]) == coarse(obs[seen])).mean()),
            "n_pattern": int(seen.sum())}


def measured_state_residuals(closure, t: dict[str, torch.Tensor], pgrad_sd: torch.Tensor,
                             holdup_sd: torch.Tensor | None = None) -> dict[str, np.ndarray]:
    r"""Phase momentum residuals of ``closure`` at the MEASURED states ``(N,)`` (NaN where not defined).

    For rows with holdup (0 < H < 1) AND pgrad measured and a separated observed pattern (``t['kind'] >= 0``;
    rows of kind predicted take the configuration ``closure`` predicts, :func:`batch_kinds`),
    the state is built from the measured holdup and the two phase balances of
    :mod:`closure_nn.physics.momentum` are evaluated with the measured pgrad:

    .. math:: r_L = \frac{R_L}{A_L\,\sigma_p},\qquad r_G = \frac{R_G}{A_G\,\sigma_p}

    i.e. the measured pgrad minus the pgrad each balance implies, in pgrad standard deviations
    (the ``phase_residual`` of the training loss). A closure consistent with the data has
    residuals of order one; ``pgrad_sd`` ``(N,)`` [Pa/m] is the per-row sigma_p. Given
    ``holdup_sd`` ``(N,)``, sigma_p is replaced by the effective sd that also carries the holdup
    uncertainty (:func:`closure_nn.training.loss_terms.holdup_sensitivity`, as in the loss).
    """

    n = t["vsl"].shape[0]
    r_l = torch.full((n,), float("nan"), dtype=torch.float64)
    r_g = r_l.clone()
    H, P = t["holdup"], t["pgrad"]
    with torch.no_grad():
        kinds = batch_kinds(t, closure)
        for kind in SEPARATED_CONFIGURATIONS:
            sel = (kinds == CONFIGURATION_CODE[kind]) & torch.isfinite(H) & torch.isfinite(P) & (H > 0) & (H < 1)
            if not sel.any():
                continue
            s = local_state(batch_conditions(t, sel), frac_from_holdup(H[sel], kind), kind)
            tau = shear_stresses(s, closure(s))
            s_l = s_g = pgrad_sd[sel]
            if holdup_sd is not None:
                d_l, d_g = holdup_sensitivity(closure, batch_conditions(t, sel), H[sel], holdup_sd[sel], kind, P[sel])
                s_l, s_g = torch.sqrt(s_l**2 + d_l**2), torch.sqrt(s_g**2 + d_g**2)
            r_l[sel] = liquid_residual(s, tau, P[sel]) / (s.geom.A_L * s_l)
            r_g[sel] = gas_residual(s, tau, P[sel]) / (s.geom.A_G * s_g)
    return {"r_liquid": r_l.numpy(), "r_gas": r_g.numpy()}


def solver_state_residuals(closure, cond, result) -> np.ndarray:
    r"""Largest relative phase residual of the solver's OWN outputs ``(B,)`` (NaN: not separated).

    At the returned state (``result.frac``, stratified or annular by the returned pattern, no
    entrainment) with the returned pgrad :math:`\hat p`:
    :math:`\max(|R_L/A_L|, |R_G/A_G|) / \max(|\hat p|, 1\,\mathrm{Pa/m})`. Zero up to the root
    finder's tolerance by construction; this measures that it is.
    """
    out = torch.full(cond.shape, float("nan"), dtype=torch.float64)
    with torch.no_grad():
        for kind, codes in (("stratified", [CODE[p] for p in STRATIFIED_PATTERNS]), ("annular", [CODE[ANNULAR]])):
            sel = torch.isin(result.pattern, torch.tensor(codes)) & result.separated & torch.isfinite(result.frac)
            if not sel.any():
                continue
            s = local_state(cond[sel], result.frac[sel], kind)
            tau = shear_stresses(s, closure(s))
            p = result.pgrad.total[sel]
            r = torch.maximum((liquid_residual(s, tau, p) / s.geom.A_L).abs(), (gas_residual(s, tau, p) / s.geom.A_G).abs())
            out[sel] = r / p.abs().clamp_min(1.0)
    return out.numpy()
