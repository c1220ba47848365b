r"""A strong black box: gradient-boosted trees on the dimensionless groups of the operating point.

A second comparison model beside the plain MLP of :mod:`closure_nn.training.blackbox`: no
momentum balance, no closure, no flow pattern - a regression of the measured holdup and pressure
gradient on the groups a multiphase-flow practitioner would plot them against, by an established
library (scikit-learn's :class:`~sklearn.ensemble.HistGradientBoostingRegressor`), with its
settings chosen on development rows cut from its own training rows.

Inputs: :func:`group_features` (table there). Gradient-boosted trees split one feature at a time
and are unchanged by any monotone map of a single feature, so what matters is which COMBINATIONS
of the raw inputs are offered; the logs only make the table readable. The superficial velocity
ratio is left out because it is a monotone map of the no-slip holdup, which is in.

Targets, each its own regressor (a row with only one target measured trains only that one):

* holdup through the logit, offset by the logit of the no-slip holdup
  :math:`\lambda_L = v_{SL}/(v_{SL} + v_{SG})`:

  .. math:: y_H = \operatorname{logit} H - \operatorname{logit}\lambda_L
            = \ln\frac{H\,v_{SG}}{(1 - H)\,v_{SL}} = \ln\frac{u_G}{u_L}

  i.e. the log of the slip ratio :math:`u_G/u_L` (in-situ velocities :math:`u_L = v_{SL}/H`,
  :math:`u_G = v_{SG}/(1-H)`), zero for homogeneous (no-slip) flow, a quantity holdup
  correlations have long been written in (slip ratio, common practice). H and
  :math:`\lambda_L` are clipped to [1e-4, 1 - 1e-4] first; the prediction is
  :math:`\hat H = \sigma(\operatorname{logit}\lambda_L + \hat y_H)`, inside (0, 1).
* pgrad (-dp/dx [Pa/m], negative where pressure rises along a downhill flow) through a signed
  log of the ratio to the no-slip (homogeneous) frictional gradient:

  .. math:: y_p = \operatorname{asinh}\frac{p}{S_f},\qquad
            S_f = \frac{2 f(Re_{NS})\,\rho_{NS} v_M^2}{D},\quad
            \rho_{NS} = \lambda_L\rho_L + (1-\lambda_L)\rho_G,\quad
            \mu_{NS} = \lambda_L\mu_L + (1-\lambda_L)\mu_G

  with :math:`v_M = v_{SL} + v_{SG}`, :math:`Re_{NS} = \rho_{NS} v_M D/\mu_{NS}` and the
  Taitel & Dukler (1976) Blasius friction factor
  (:func:`closure_nn.physics.groups.superficial_pgrad`); no-slip mixture density and viscosity
  as in Beggs & Brill (1973), J. Pet. Technol. 25(5):607-617, doi:10.2118/4007-PA.
  :math:`S_f > 0` always, so the sign of p is kept; for :math:`|p| \gg S_f` asinh is
  :math:`\ln(2|p|/S_f)`, so the squared loss weighs RELATIVE errors of pgrad - the measure the
  evaluation scores (:func:`closure_nn.training.metrics.error_summary`). Back:
  :math:`\hat p = S_f \sinh\hat y_p`.

Choice of the targets and of the groups (a 1500-point synthetic set of the demo design space,
``conf/design/demo_loop.yaml``, solved by the baseline closure; a seeded 25 % of it held out,
the fit on the rest with the default :class:`BoostedSettings`; figures of our own, not a
published result): the slip-ratio target gave a held-out holdup MAE of 0.0137 against 0.0165
for the plain logit of H; the frictional scale :math:`S_f` gave a pgrad MAPE of 54 % (60 % of
rows within 20 %) against 101 % (39 %) for the scale
:math:`\rho_{NS} g + \tfrac12\rho_{NS} v_M^2/D`, which puts near-horizontal rows (|p| of a few
Pa/m against a scale of ~10^3 Pa/m) in the linear part of asinh where their relative errors
hardly count; leaving out ``asinh_Y`` raised the holdup MAE to 0.0173 and the pgrad MAPE to
78 %. On the same rows the MLP of :mod:`~closure_nn.training.blackbox` (default settings) gave
0.0246, 106 % (28 %). The pgrad MAPE is dominated by downhill rows where friction and gravity
nearly cancel (|p| << S_f), where any absolute error is a large relative one.

Settings (:class:`BoostedSettings`): a small grid (learning rate x max leaf nodes x min samples
per leaf, fixed l2 regularisation) and the number of boosting iterations are chosen per target
on a seeded development share of the rows that target has (:func:`development_split`): each
candidate is trained on the rest with ``max_iter`` iterations, its development score read at
every iteration (:meth:`~sklearn.ensemble.HistGradientBoostingRegressor.staged_predict`), the
best (score, iteration) kept; the chosen candidate is then refit on ALL rows of that target with
its chosen iteration count. Scores: holdup MAE [-]; pgrad mean :math:`|\hat y_p - y_p|` (about
the mean absolute log-ratio of predicted to measured pgrad where :math:`|p| \gg S_f`).
No early stopping inside the library (it would cut a second split of its own from the fit rows); the fit
is deterministic for a seed. Rows passed only to :meth:`BoostedGroupsRegressor.predict` take no
part in any choice.
"""
from __future__ import annotations

import itertools
import math
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd
import torch
from threadpoolctl import threadpool_limits

from ..data.schema import to_conditions
from ..physics.conditions import Conditions
from ..physics.groups import lockhart_martinelli, superficial_pgrad

#: names of the columns of :func:`group_features`, in order
GROUP_NAMES: tuple[str, ...] = (
    "log10_Re_SL", "log10_Re_SG", "log10_X", "asinh_Y", "log10_Fr_SL", "log10_Fr_SG",
    "sin_theta", "log10_rho_ratio", "log10_mu_ratio", "log10_Eo", "rel_rough", "log10_lambda_L",
)
TARGETS = ("holdup", "pgrad")
_FLOOR = 1e-30  # floor of log arguments (a zero superficial velocity stays finite), as physics.groups
_H_CLIP = 1e-4  # holdup and no-slip holdup clipped to [_H_CLIP, 1 - _H_CLIP] before the logit
_Y_MAX = math.asinh(1e12)  # clamp of predicted transformed targets: finite far outside the data
#: OpenMP threads of the tree library: one. Tables here are small (hundreds to thousands of rows),
#: the evaluation runs independent jobs in parallel processes (training/processes.py), and on a
#: busy 2-core machine (load 2-5) a fit of 1000 rows took 6.4 s with one thread, 70 s with two.
_THREADS = 1


def _log10(x: torch.Tensor) -> torch.Tensor:
    return torch.log10(x.clamp_min(_FLOOR))


def _conditions(df: pd.DataFrame) -> Conditions:
    return to_conditions(df, check=True, where=str(df.attrs.get("path", "boosted black box table")))


def _groups(c: Conditions) -> torch.Tensor:
    """The groups of :func:`group_features` ``(N, 12)`` from a batch of conditions ``(N,)``."""
    X, Y = lockhart_martinelli(c)
    sqrt_gD = torch.sqrt(c.g * c.D)
    drho = c.rhol - c.rhog
    cols = [
        _log10(c.rhol * c.vsl * c.D / c.mul),
        _log10(c.rhog * c.vsg * c.D / c.mug),
        _log10(X),
        torch.asinh(Y),
        _log10(c.vsl / sqrt_gD),
        _log10(torch.sqrt(c.rhog / drho) * c.vsg / sqrt_gD),
        torch.sin(c.theta),
        _log10(c.rhog / c.rhol),
        _log10(c.mug / c.mul),
        _log10(drho * c.g * c.D**2 / c.sigma),
        c.roughness / c.D,
        _log10(_no_slip_holdup(c)),
    ]
    return torch.stack(cols, dim=-1)


def group_features(df: pd.DataFrame) -> tuple[np.ndarray, tuple[str, ...]]:
    r"""Dimensionless groups ``(N, 12)`` float64 of an SI table and their names (:data:`GROUP_NAMES`).

    ``df`` holds the input columns vsl, vsg [m/s], D [m], theta [rad, + upward], roughness [m],
    rhol, rhog [kg/m3] (or p, T, M_g for rhog), mul, mug [Pa s], sigma [N/m]; g is standard
    gravity. Out-of-range inputs raise :class:`~closure_nn.physics.checks.InputError`.

    ===============  ==================================================================  =========
    name             definition                                                          source
    ===============  ==================================================================  =========
    log10_Re_SL      log10(rho_L v_SL D / mu_L), superficial liquid Reynolds number      (a)
    log10_Re_SG      log10(rho_G v_SG D / mu_G)                                          (a)
    log10_X          log10 X, X^2 = (dp/dx)_SL / (dp/dx)_SG, Blasius constants of TD76   TD76 eq.9
    asinh_Y          asinh Y, Y = (rho_L - rho_G) g sin(theta) / (dp/dx)_SG (signed)     TD76 eq.10
    log10_Fr_SL      log10(v_SL / sqrt(g D))                                             (a)
    log10_Fr_SG      log10(sqrt(rho_G/(rho_L - rho_G)) v_SG / sqrt(g D)), densimetric    TD76 eq.25
    sin_theta        sin(theta)                                                          (a)
    log10_rho_ratio  log10(rho_G / rho_L)                                                (a)
    log10_mu_ratio   log10(mu_G / mu_L)                                                  (a)
    log10_Eo         log10((rho_L - rho_G) g D^2 / sigma), Eotvos (Bond) number           (a)
    rel_rough        roughness / D                                                       (a)
    log10_lambda_L   log10(v_SL / (v_SL + v_SG)), no-slip holdup                          (a)
    ===============  ==================================================================  =========

    (a) standard definitions, common practice. TD76 = Taitel & Dukler (1976), AIChE J.
    22(1):47-55, doi:10.1002/aic.690220105. X and Y come from
    :func:`closure_nn.physics.groups.lockhart_martinelli` (one implementation); the other groups
    of :mod:`closure_nn.physics.groups` belong to a LOCAL state at a trial h/D (in-situ
    velocities, hydraulic diameters), not to the superficial operating point, so they are not
    reused here. The same definitions as there where both exist: Fr_SG is TD76's F without the
    :math:`1/\sqrt{\cos\theta}` (as ``Fr_G`` there), which would diverge for vertical pipes and
    moves log10 F by at most 0.02 below 35 deg, while sin(theta) is an input of its own; Fr_SL
    is the plain Froude number (as ``Fr_L`` there). X and Y bring what practitioners map flow
    patterns and holdup on (TD76's generalised map has X as abscissa; Y carries the inclination);
    the Reynolds numbers the friction regime; the density and viscosity ratios and Eo the fluid
    pair and pipe size; lambda_L the homogeneous limit. Logs have a floor of 1e-30.

    >>> df = pd.DataFrame({"vsl": [0.1], "vsg": [2.0], "D": [0.05], "theta": [0.0], "roughness": [0.0],
    ...                    "rhol": [998.0], "rhog": [1.2], "mul": [1e-3], "mug": [1.8e-5], "sigma": [0.072]})
    >>> x, names = group_features(df)
    >>> round(10 ** x[0, names.index("log10_Re_SL")])
    4990
    """
    with torch.no_grad():
        x = _groups(_conditions(df))
    return x.numpy(), GROUP_NAMES


def _no_slip_holdup(c: Conditions) -> torch.Tensor:
    """lambda_L = v_SL / (v_SL + v_SG) [-] ``(N,)`` (0 where both are 0)."""
    return c.vsl / c.vm.clamp_min(_FLOOR)


def no_slip_friction_gradient(c: Conditions) -> torch.Tensor:
    r"""The pgrad scale :math:`S_f = 2 f(Re_{NS}) \rho_{NS} v_M^2 / D` [Pa/m] ``(N,)`` (module
    docstring): frictional -dp/dx of the no-slip mixture, Taitel & Dukler (1976) Blasius factor.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> c = make_conditions(vsl=1.0, vsg=0.0, D=0.1, mug=1e-3)
    >>> round(float(no_slip_friction_gradient(c)), 2)   # water alone: 2 * 0.046 * 99800^-0.2 * 998 / 0.1
    91.85
    """
    lam = _no_slip_holdup(c)
    rho = lam * c.rhol + (1 - lam) * c.rhog
    mu = lam * c.mul + (1 - lam) * c.mug
    return superficial_pgrad(rho, mu, c.vm, c.D).clamp_min(_FLOOR)


def _logit(p: np.ndarray) -> np.ndarray:
    p = np.clip(p, _H_CLIP, 1 - _H_CLIP)
    return np.log(p) - np.log1p(-p)


def holdup_target(holdup: np.ndarray, lam: np.ndarray) -> np.ndarray:
    """Transformed holdup: logit H - logit lambda_L = ln of the slip ratio (module docstring)."""
    return _logit(holdup) - _logit(lam)


def holdup_from_target(y: np.ndarray, lam: np.ndarray) -> np.ndarray:
    """Inverse of :func:`holdup_target`: H = 1 / (1 + exp(-(logit lambda_L + y))), in (0, 1)."""
    z = np.clip(_logit(lam) + y, -_Y_MAX, _Y_MAX)
    return 1.0 / (1.0 + np.exp(-z))


@dataclass(frozen=True)
class Candidate:
    """One point of the settings grid (keyword arguments of HistGradientBoostingRegressor)."""

    learning_rate: float
    max_leaf_nodes: int
    min_samples_leaf: int


@dataclass
class BoostedSettings:
    """Seed, development share and the candidate grid of :class:`BoostedGroupsRegressor`.

    The grid is small on purpose (8 candidates): the rows are few (hundreds to thousands) and
    every candidate is scored on the same development rows, so a large grid would mostly fit
    their noise. ``l2_regularization`` is fixed (a mild ridge on leaf values, keeps leaves
    of few rows from taking extreme values).
    """

    seed: int = 0
    development_fraction: float = 0.2
    learning_rate: tuple[float, ...] = (0.05, 0.1)
    max_leaf_nodes: tuple[int, ...] = (15, 31)
    min_samples_leaf: tuple[int, ...] = (10, 20)
    max_iter: int = 300
    l2_regularization: float = 1.0
    max_bins: int = 255

    def candidates(self) -> list[Candidate]:
        """The grid, in a fixed order (ties of development score go to the first)."""
        return [Candidate(float(a), int(b), int(c)) for a, b, c in
                itertools.product(self.learning_rate, self.max_leaf_nodes, self.min_samples_leaf)]


def development_split(n: int, fraction: float, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Seeded split of ``n`` rows: ``(fit_rows, development_rows)``, sorted index arrays.

    The development rows are the first ``max(1, round(fraction n))`` of
    ``numpy.random.default_rng(seed).permutation(n)`` (at most n - 1 of them).

    >>> f, d = development_split(10, 0.2, seed=0)
    >>> len(f), len(d), sorted(set(f) | set(d)) == list(range(10))
    (8, 2, True)
    """
    if n < 2:
        raise ValueError(f"boosted black box: {n} row(s) with a measured target; need at least 2")
    perm = np.random.default_rng(int(seed)).permutation(n)
    n_dev = min(max(int(round(fraction * n)), 1), n - 1)
    return np.sort(perm[n_dev:]), np.sort(perm[:n_dev])


def _dev_scores(model, x_dev: np.ndarray, y_dev: np.ndarray, target: str, aux_dev: np.ndarray) -> np.ndarray:
    """Development score after every boosting iteration ``(n_iter,)``: holdup MAE [-] or mean
    |asinh(p/S_f) error| [-]."""
    out = []
    for yp in model.staged_predict(x_dev):
        if target == "holdup":
            out.append(np.abs(holdup_from_target(yp, aux_dev) - holdup_from_target(y_dev, aux_dev)).mean())
        else:
            out.append(np.abs(yp - y_dev).mean())
    return np.asarray(out)


class BoostedGroupsRegressor:
    """``model.fit(df).predict(df) -> {'holdup': (N,), 'pgrad': (N,)}`` numpy arrays (module docstring).

    After :meth:`fit`: ``chosen[target]`` = the chosen candidate's settings, ``n_iter`` and
    development ``score`` (plus ``n_fit``, ``n_development`` rows), for 'holdup' and 'pgrad'
    (a target with fewer than 2 measured rows is absent and predicted NaN); ``history`` = one
    dict per (target, candidate) with its best development score and iteration.

    >>> rng = np.random.default_rng(0)
    >>> df = pd.DataFrame({"vsl": 10 ** rng.uniform(-2, 0, 60), "vsg": 10 ** rng.uniform(0, 1, 60),
    ...                    "D": 0.05, "theta": 0.0, "roughness": 0.0, "rhol": 998.0, "rhog": 1.2,
    ...                    "mul": 1e-3, "mug": 1.8e-5, "sigma": 0.072})
    >>> df["holdup"], df["pgrad"] = 0.3, 100.0
    >>> bb = BoostedGroupsRegressor(BoostedSettings(max_iter=100, min_samples_leaf=(5,))).fit(df)
    >>> p = bb.predict(df.iloc[:2])
    >>> bool(np.allclose(p["holdup"], 0.3, atol=0.02)), bool(np.allclose(p["pgrad"], 100.0, rtol=0.05))
    (True, True)
    """

    label = "black-box boosted trees (groups)"

    def __init__(self, settings: BoostedSettings | None = None) -> None:
        self.settings = settings or BoostedSettings()
        self.models: dict[str, object] = {}
        self.chosen: dict[str, dict] = {}
        self.history: list[dict] = []
        self.feature_names = GROUP_NAMES

    @staticmethod
    def _design(df: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Groups ``(N, 12)``, lambda_L ``(N,)`` and S_f ``(N,)`` [Pa/m] of a table."""
        with torch.no_grad():
            c = _conditions(df)
            return _groups(c).numpy(), _no_slip_holdup(c).numpy(), no_slip_friction_gradient(c).numpy()

    def _model(self, cand: Candidate, max_iter: int):
        from sklearn.ensemble import HistGradientBoostingRegressor  # here: scikit-learn loads only when trees are trained

        s = self.settings
        return HistGradientBoostingRegressor(
            loss="squared_error", learning_rate=cand.learning_rate, max_leaf_nodes=cand.max_leaf_nodes,
            min_samples_leaf=cand.min_samples_leaf, max_iter=int(max_iter), l2_regularization=float(s.l2_regularization),
            max_bins=int(s.max_bins), early_stopping=False, random_state=int(s.seed))

    def fit(self, df: pd.DataFrame) -> "BoostedGroupsRegressor":
        """Choose settings on development rows and refit on every row, per target (module docstring)."""
        with threadpool_limits(limits=_THREADS, user_api="openmp"):
            return self._fit(df)

    def _fit(self, df: pd.DataFrame) -> "BoostedGroupsRegressor":
        s = self.settings
        x, lam, sf = self._design(df)
        aux = {"holdup": lam, "pgrad": sf}
        self.models, self.chosen, self.history = {}, {}, []
        for target in TARGETS:
            raw = pd.to_numeric(df[target], errors="coerce").to_numpy(np.float64) if target in df else np.full(len(df), np.nan)
            rows = np.flatnonzero(np.isfinite(raw))
            if rows.size < 2:
                continue
            y = holdup_target(raw[rows], lam[rows]) if target == "holdup" else np.arcsinh(raw[rows] / sf[rows])
            xt, at = x[rows], aux[target][rows]
            fit_rows, dev_rows = development_split(rows.size, s.development_fraction, s.seed)
            best = None
            for cand in s.candidates():
                m = self._model(cand, s.max_iter).fit(xt[fit_rows], y[fit_rows])
                scores = _dev_scores(m, xt[dev_rows], y[dev_rows], target, at[dev_rows])
                k = int(np.argmin(scores))
                rec = {"target": target, **asdict(cand), "n_iter": k + 1, "score": float(scores[k])}
                self.history.append(rec)
                if best is None or rec["score"] < best["score"]:
                    best = rec
            self.chosen[target] = {**best, "n_fit": int(fit_rows.size), "n_development": int(dev_rows.size)}
            cand = Candidate(best["learning_rate"], best["max_leaf_nodes"], best["min_samples_leaf"])
            self.models[target] = self._model(cand, best["n_iter"]).fit(xt, y)
        if not self.models:
            raise ValueError("boosted black box: no target (holdup or pgrad) has 2 or more measured rows")
        return self

    def predict(self, df: pd.DataFrame) -> dict[str, np.ndarray]:
        """Holdup [-] in (0, 1) and pgrad [Pa/m] ``(N,)`` for the conditions of an SI table."""
        x, lam, sf = self._design(df)
        out = {t: np.full(len(df), np.nan) for t in TARGETS}
        with threadpool_limits(limits=_THREADS, user_api="openmp"):
            if "holdup" in self.models:
                out["holdup"] = holdup_from_target(self.models["holdup"].predict(x), lam)
            if "pgrad" in self.models:
                out["pgrad"] = sf * np.sinh(np.clip(self.models["pgrad"].predict(x), -_Y_MAX, _Y_MAX))
        return out
