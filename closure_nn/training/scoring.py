r"""Scoring a closure on lab rows, and the do-no-harm rule that decides which closure ships.

:func:`predict_table` solves every row of an SI table with a closure through the point solver
(:func:`closure_nn.physics.point.solve_points`: the flow pattern is predicted and non-separated
rows get the published slug and drift-flux models), so every row with a measurement is scored,
not only the separated ones. :func:`score_table` gives the common-practice measures of
:func:`~closure_nn.training.metrics.error_summary` (holdup MAE and MAPE, pgrad MAPE and the share
within +-10/20/30 %) and :func:`~closure_nn.training.metrics.pattern_accuracy`.

Do no harm (:func:`no_harm`). A fine-tune, an update or an ensemble member is adopted only where it
beats its starting point on rows it was not fitted to (the development or validation rows). The
measure is the mean of two error ratios over those rows, new over start,

.. math:: J = \tfrac12\left(\frac{\overline{|\hat H_\mathrm{new} - H|}}{\overline{|\hat H_\mathrm{start} - H|}}
          + \frac{\overline{|\hat p_\mathrm{new}/p - 1|}}{\overline{|\hat p_\mathrm{start}/p - 1|}}\right),
          \qquad \mathrm{gain} = 1 - J

plus, where rows have an observed flow pattern, the ratio of misclassified rows (stratified smooth
and wavy counted as one), so that a table of pattern observations alone can adopt a closure
(one ratio per target that is observed; pgrad rows with :math:`|p| \ge p_0` only), with each
row's error capped (holdup 0.05, pgrad 50 %: ``holdup_cap``, ``pgrad_cap``) so that one row solved
in another flow pattern, hundreds of per cent off, cannot decide alone; the cap counts it as a clear
miss. Measured on an invented truth (docs/evaluation_log.md, 2026-12-03): without the caps a
fine-tune 35 % better on 80 development rows was refused, its bootstrap bound decided by two
rows that changed pattern. The new
closure ships when ``gain > min_gain`` AND the one-sided lower confidence bound of the gain from a
paired bootstrap of the rows (both closures on the same resampled rows; Efron & Tibshirani 1993,
An Introduction to the Bootstrap, ch. 13, percentile interval, from memory) is above zero: a gain
that the choice of rows alone could produce is treated as no gain.
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd
import torch

from ..closures.base import Closure
from ..closures.ensemble import ClosureEnsemble
from ..data.schema import to_conditions
from ..physics.point import solve_points
from .metrics import error_summary, pattern_accuracy, solver_state_residuals

#: default floors of the relative measures: holdup [-] and |pgrad| [Pa/m]
HOLDUP_FLOOR, PGRAD_FLOOR = 0.01, 1.0


def predict_table(model, df: pd.DataFrame, solver: dict | None = None) -> dict[str, np.ndarray]:
    """Holdup [-], pgrad [Pa/m], pattern (names; None for a model without one) and the solver-state
    residual of every row of the SI table ``df``, arrays ``(N,)``.

    ``model``: a closure (solved with ``solve_points(**solver)``) or any object with
    ``predict(df) -> {'holdup', 'pgrad'}`` (a black-box regressor).
    """
    if not _is_closure(model):
        p = model.predict(df)
        return {"holdup": np.asarray(p["holdup"], np.float64), "pgrad": np.asarray(p["pgrad"], np.float64),
                "pattern": np.full(len(df), None, dtype=object), "solver_residual": np.full(len(df), np.nan)}
    cond = to_conditions(df, check=True)
    with torch.no_grad():
        r = solve_points(cond, model, **(solver or {}))
        res = solver_state_residuals(model, cond, r)
    cols = r.to_columns()
    return {"holdup": cols["holdup"], "pgrad": cols["pgrad"], "pattern": cols["pattern"], "solver_residual": res}


def _is_closure(model) -> bool:
    return isinstance(model, (Closure, ClosureEnsemble))


def observed(df: pd.DataFrame, column: str) -> np.ndarray:
    """A measured column as float64 ``(N,)`` (NaN where not measured or absent)."""
    if column not in df.columns:
        return np.full(len(df), np.nan)
    return pd.to_numeric(df[column], errors="coerce").to_numpy(np.float64)


def observed_patterns(df: pd.DataFrame) -> np.ndarray:
    """Observed pattern names ``(N,)`` (None where not observed)."""
    if "pattern" not in df.columns:
        return np.full(len(df), None, dtype=object)
    return np.array([p if isinstance(p, str) and p else None for p in df["pattern"].tolist()], dtype=object)


def score_table(pred: dict[str, np.ndarray], df: pd.DataFrame, rows: np.ndarray | None = None,
                holdup_floor: float = HOLDUP_FLOOR, pgrad_floor: float = PGRAD_FLOOR) -> dict[str, float]:
    """Measures of one model's predictions on the rows ``rows`` (bool ``(N,)``, all if None) of ``df``:
    :func:`~closure_nn.training.metrics.error_summary` and :func:`~closure_nn.training.metrics.pattern_accuracy`.

    >>> df = pd.DataFrame({"holdup": [0.2, 0.4], "pgrad": [100.0, 200.0], "pattern": ["stratified_wavy", None]})
    >>> s = score_table({"holdup": np.array([0.25, 0.4]), "pgrad": np.array([110.0, 300.0]),
    ...                  "pattern": np.array(["intermittent", "annular"], dtype=object)}, df)
    >>> round(s["holdup_mae"], 3), round(s["pgrad_mape"], 1), s["pgrad_within_20"], s["pattern_accuracy"]
    (0.025, 30.0, 0.5, 0.0)
    """
    keep = np.ones(len(df), dtype=bool) if rows is None else np.asarray(rows, dtype=bool)
    H = np.where(keep, observed(df, "holdup"), np.nan)
    P = np.where(keep, observed(df, "pgrad"), np.nan)
    obs = np.where(keep, observed_patterns(df), None)
    return {**error_summary(pred["holdup"], H, pred["pgrad"], P, holdup_floor, pgrad_floor),
            **pattern_accuracy(pred["pattern"], obs)}


@dataclass
class NoHarmSettings:
    """The do-no-harm rule (module docstring); ``conf/train.yaml`` ``selection``."""

    min_gain: float = 0.02  # [-] relative gain the new closure must exceed
    confidence: float = 0.95  # one-sided confidence of the paired bootstrap
    n_bootstrap: int = 200
    seed: int = 0
    pgrad_floor: float = PGRAD_FLOOR  # [Pa/m]
    holdup_cap: float = 0.05  # [-] per-row holdup error counted at most this much
    pgrad_cap: float = 0.5  # [-] per-row relative pgrad error counted at most this much


@dataclass
class NoHarmDecision:
    """Outcome of :func:`no_harm`: ``adopt`` the new closure or keep the start; ``gain`` [-] and its
    bootstrap lower bound ``gain_lower``; ``n_holdup``/``n_pgrad``/``n_pattern`` rows compared;
    ``reason`` one line."""

    adopt: bool
    gain: float
    gain_lower: float
    n_holdup: int
    n_pgrad: int
    reason: str
    n_pattern: int = 0

    def to_dict(self) -> dict:
        return asdict(self)


def _row_errors(pred: dict[str, np.ndarray], H: np.ndarray, P: np.ndarray, s: NoHarmSettings) -> tuple[np.ndarray, np.ndarray]:
    eh = np.minimum(np.abs(pred["holdup"] - H), s.holdup_cap)
    ep = np.where(np.abs(P) >= s.pgrad_floor, np.abs(pred["pgrad"] / np.where(P == 0, np.nan, P) - 1.0), np.nan)
    return eh, np.minimum(ep, s.pgrad_cap)


def _pattern_errors(pred: dict[str, np.ndarray], obs: np.ndarray) -> np.ndarray:
    """1 where the predicted pattern differs from the observed one (stratified smooth and wavy
    counted as one), 0 where it agrees, NaN where nothing was observed or predicted."""
    p = pred.get("pattern")
    out = np.full(len(obs), np.nan)
    if p is None:
        return out
    coarse = lambda x: "stratified" if isinstance(x, str) and x.startswith("stratified") else x  # noqa: E731
    for i, (o, q) in enumerate(zip(obs, p)):
        if isinstance(o, str) and isinstance(q, str):
            out[i] = float(coarse(o) != coarse(q))
    return out


def _gain(pairs: list[tuple[np.ndarray, np.ndarray]]) -> float:
    """1 - the mean over targets of mean(new error) / mean(start error) (targets whose start has
    no error are left out)."""
    ratios = [np.mean(new) / np.mean(old) for new, old in pairs if new.size and np.mean(old) > 0]
    return 1.0 - float(np.mean(ratios)) if ratios else math.nan


def no_harm(new: dict[str, np.ndarray], start: dict[str, np.ndarray], df: pd.DataFrame,
            settings: NoHarmSettings | None = None) -> NoHarmDecision:
    """Adopt ``new`` (predictions of :func:`predict_table` on ``df``) over ``start`` only where it is
    better beyond the noise of the rows (module docstring).

    >>> df = pd.DataFrame({"holdup": np.linspace(0.1, 0.5, 40), "pgrad": np.linspace(50, 400, 40)})
    >>> exact = {"holdup": df["holdup"].to_numpy(), "pgrad": df["pgrad"].to_numpy()}
    >>> off = {"holdup": exact["holdup"] + 0.05, "pgrad": 1.3 * exact["pgrad"]}
    >>> near = {"holdup": exact["holdup"] + 0.0495, "pgrad": 1.295 * exact["pgrad"]}  # a 1.3 % gain
    >>> no_harm(exact, off, df).adopt, no_harm(near, off, df).adopt, no_harm(off, exact, df).adopt
    (True, False, False)
    """
    s = settings or NoHarmSettings()
    H, P = observed(df, "holdup"), observed(df, "pgrad")
    eh_n, ep_n = _row_errors(new, H, P, s)
    eh_s, ep_s = _row_errors(start, H, P, s)
    obs = observed_patterns(df)
    errors = [(eh_n, eh_s), (ep_n, ep_s), (_pattern_errors(new, obs), _pattern_errors(start, obs))]
    rows = [np.flatnonzero(np.isfinite(e_n) & np.isfinite(e_s)) for e_n, e_s in errors]
    if not any(r.size for r in rows):
        return NoHarmDecision(False, math.nan, math.nan, 0, 0, "no row with a measured holdup, pgrad or "
                              "pattern that both closures solve: kept the start")
    gain = _gain([(e_n[r], e_s[r]) for (e_n, e_s), r in zip(errors, rows)])
    rng = np.random.default_rng(s.seed)
    boots = np.empty(int(s.n_bootstrap))
    for b in range(boots.size):
        picks = [rng.choice(r, r.size) if r.size else r for r in rows]
        boots[b] = _gain([(e_n[i], e_s[i]) for (e_n, e_s), i in zip(errors, picks)])
    lower = float(np.nanquantile(boots, 1.0 - s.confidence)) if np.isfinite(boots).any() else math.nan
    adopt = bool(gain > s.min_gain and lower > 0)
    if adopt:
        reason = f"adopted: {100 * gain:.1f} % better than its start (bootstrap lower bound {100 * lower:+.1f} %)"
    else:
        reason = (f"not adopted: gain {100 * gain:+.1f} % (bootstrap lower bound {100 * lower:+.1f} %) is within the "
                  f"noise (needs > {100 * s.min_gain:.0f} % and a lower bound > 0): kept the start")
    return NoHarmDecision(adopt, gain, lower, int(rows[0].size), int(rows[1].size), reason, int(rows[2].size))
