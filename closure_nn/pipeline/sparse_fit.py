r"""Sparse regression of a target on a library of candidate terms, with a complexity penalty.

Sequentially thresholded least squares (STLSQ; Brunton, Proctor & Kutz 2016, PNAS 113(15):3932-3937,
doi:10.1073/pnas.1517384113, the SINDy algorithm): a least-squares fit, then repeatedly drop
the terms whose coefficient is below a threshold and refit on the rest, until the set of terms
stops changing. Thresholds act on standardised coefficients :math:`|c_j|\,\mathrm{sd}(t_j)`, the
effect of one standard deviation of the term on the target (natural-log units here).

Every threshold of a grid gives a set of terms. STLSQ thresholds coefficient magnitudes, so
strongly correlated terms (ln Re_G, ln Fr_G and ln(rho_G/rho_L) move together over a loop
campaign) can keep large opposite coefficients until the threshold removes them all at once,
and no small set appears on the path; for a library small enough (at most ``max_subsets``
sets of up to ``max_terms`` terms) every such set is therefore also a candidate (best-subset
selection). Among the candidate sets (and the constant alone, and the empty model) the one with
the smallest penalised criterion

.. math:: J = n \ln\big(\max(\mathrm{RSS}/n,\ s_0^2)\big) + \kappa\,k

wins, with k the number of coefficients (the constant included), :math:`\kappa = \ln n` by
default (the Bayesian information criterion, Schwarz 1978, Ann. Stat. 6(2):461-464) and a floor
:math:`s_0` on the residual standard deviation, below which a smaller error buys nothing (so
an exact law is not padded with terms that fit the round-off). Plain numpy.
"""
from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class SparseFit:
    """The chosen model: ``coef`` (intercept under key ``'1'``, then terms), its fit measures."""

    coef: dict[str, float]
    rss: float  #: residual sum of squares [target units^2]
    n: int  #: rows fitted
    criterion: float  #: J of the module docstring
    r2: float  #: 1 - RSS / total sum of squares about the mean (1 for a constant target)

    @property
    def rms(self) -> float:
        return math.sqrt(self.rss / max(self.n, 1))


def _lstsq(X: np.ndarray, y: np.ndarray, cols: list[int]) -> tuple[float, np.ndarray]:
    """Intercept and coefficients of y ~ 1 + X[:, cols] by least squares."""
    A = np.column_stack([np.ones(len(y)), X[:, cols]]) if cols else np.ones((len(y), 1))
    beta = np.linalg.lstsq(A, y, rcond=None)[0]
    return float(beta[0]), beta[1:]


def stlsq(X: np.ndarray, y: np.ndarray, threshold: float, max_iter: int = 20) -> list[int]:
    """Columns of ``X (n, T)`` kept by STLSQ at ``threshold`` (standardised coefficients)."""
    sd = X.std(axis=0)
    cols = [j for j in range(X.shape[1]) if sd[j] > 0]
    for _ in range(max_iter):
        if not cols:
            return []
        _, b = _lstsq(X, y, cols)
        keep = [j for j, c in zip(cols, b) if abs(c) * sd[j] >= threshold]
        if keep == cols:
            return cols
        cols = keep
    return cols


def sparse_fit(X: np.ndarray, y: np.ndarray, names: list[str] | tuple[str, ...], *, max_terms: int = 4,
               penalty: float | None = None, sd_floor: float = 1e-3, thresholds: np.ndarray | None = None,
               max_subsets: int = 5000) -> SparseFit:
    """Choose and fit a sparse model ``y ~ c0 + sum_j c_j X[:, j]`` (module docstring).

    Parameters
    ----------
    X : (n, T) candidate terms; y : (n,) target; names : T term names.
    max_terms : at most this many terms besides the constant.
    penalty : kappa, the criterion's price of one coefficient; default ln n (BIC).
    sd_floor : s_0, the residual standard deviation below which fits count as equal [target units].
    thresholds : STLSQ thresholds tried (default 40 values, 1e-4 to 3, geometric).
    max_subsets : every set of up to ``max_terms`` terms is tried too when there are at most this many.

    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(size=(400, 5))
    >>> y = 0.3 + 0.6 * X[:, 1] - 0.2 * X[:, 3] + rng.normal(0, 0.001, 400)
    >>> f = sparse_fit(X, y, ["a", "b", "c", "d", "e"])
    >>> sorted(f.coef), round(f.coef["b"], 2), round(f.coef["d"], 2)
    (['1', 'b', 'd'], 0.6, -0.2)
    """
    X, y = np.asarray(X, np.float64), np.asarray(y, np.float64)
    n = len(y)
    if n == 0:
        raise ValueError("sparse_fit: no rows")
    kappa = math.log(n) if penalty is None else float(penalty)
    grid = np.geomspace(1e-4, 3.0, 40) if thresholds is None else np.asarray(thresholds)
    supports: set[tuple[int, ...]] = {()}
    for t in grid:
        cols = stlsq(X, y, float(t))
        if len(cols) <= max_terms:
            supports.add(tuple(cols))
    usable = [j for j in range(X.shape[1]) if X[:, j].std() > 0]
    if sum(math.comb(len(usable), k) for k in range(1, max_terms + 1)) <= max_subsets:
        supports |= {c for k in range(1, max_terms + 1) for c in itertools.combinations(usable, k)}
    tss = float(((y - y.mean()) ** 2).sum())

    def score(rss: float, k: int) -> float:
        return n * math.log(max(rss / n, sd_floor ** 2)) + kappa * k

    rss0 = float((y ** 2).sum())  # the empty model: no correction
    best = SparseFit({}, rss0, n, score(rss0, 0), 1.0 - rss0 / tss if tss > 0 else 1.0)
    for cols in sorted(supports, key=len):
        c0, b = _lstsq(X, y, list(cols))
        resid = y - c0 - (X[:, list(cols)] @ b if cols else 0.0)
        rss = float((resid ** 2).sum())
        crit = score(rss, 1 + len(cols))
        if crit < best.criterion - 1e-9:
            coef = {"1": c0, **{names[j]: float(c) for j, c in zip(cols, b)}}
            best = SparseFit(coef, rss, n, crit, 1.0 - rss / tss if tss > 0 else 1.0)
    return best
