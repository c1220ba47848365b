"""Train/validation/test splits as positional index arrays, deterministic by seed.

* :func:`random_split` - rows shuffled with ``numpy.random.default_rng(seed)``.
* :func:`grouped_split` - whole groups held out, for out-of-distribution evaluation: by campaign
  (a new flow loop), by diameter (a pipe size never seen in training) or by inclination band.
  Groups come from :func:`group_labels`.
* :func:`kfold_split` - k folds of rows, or of groups when group labels are given (no group is
  split across folds).

Every function returns sorted ``int64`` arrays of row positions (use ``df.iloc[idx]``); the parts
are disjoint and together cover every row. The same seed and input always give the same split.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd

#: default inclination band edges [deg]: downward steep / slight, near horizontal, upward slight / steep
BAND_EDGES_DEG: tuple[float, ...] = (-90.0, -10.0, -1.0, 1.0, 10.0, 90.0)
GROUP_KEYS = ("campaign", "source", "D", "theta_band")


def _sorted(idx) -> np.ndarray:
    return np.sort(np.asarray(idx, dtype=np.int64))


def random_split(n: int, fractions: tuple[float, ...] = (0.8, 0.1, 0.1), seed: int = 0) -> tuple[np.ndarray, ...]:
    """Shuffle ``range(n)`` and cut it into parts of the given fractions (summing to 1).

    Part sizes are ``floor(f * n)``, the rows left over going one each to the first parts.

    >>> [len(p) for p in random_split(10, (0.7, 0.3), seed=1)]
    [7, 3]
    """
    f = np.asarray(fractions, dtype=np.float64)
    if f.ndim != 1 or len(f) < 2 or (f < 0).any() or not math.isclose(float(f.sum()), 1.0, abs_tol=1e-9):
        raise ValueError(f"fractions must be two or more non-negative numbers summing to 1, got {tuple(fractions)}")
    sizes = np.floor(f * n).astype(np.int64)
    sizes[: n - int(sizes.sum())] += 1
    perm = np.random.default_rng(seed).permutation(n)
    cuts = np.cumsum(sizes)[:-1]
    return tuple(_sorted(p) for p in np.split(perm, cuts))


def inclination_band(theta, edges_deg: tuple[float, ...] = BAND_EDGES_DEG) -> np.ndarray:
    """Label each inclination ``theta`` [rad, + upward] with its band, e.g. ``'[1, 10) deg'``.

    Bands are closed on the left, open on the right; the last one also holds its upper edge.

    >>> inclination_band(np.radians([-45.0, 0.0, 5.0, 90.0])).tolist()
    ['[-90, -10) deg', '[-1, 1) deg', '[1, 10) deg', '[10, 90] deg']
    """
    edges = np.asarray(edges_deg, dtype=np.float64)
    deg = np.degrees(np.asarray(theta, dtype=np.float64))
    k = np.clip(np.searchsorted(edges, deg, side="right") - 1, 0, len(edges) - 2)
    names = [f"[{edges[i]:g}, {edges[i + 1]:g}{']' if i == len(edges) - 2 else ')'} deg" for i in range(len(edges) - 1)]
    return np.array([names[i] for i in k], dtype=object)


def group_labels(df: pd.DataFrame, by: str, edges_deg: tuple[float, ...] = BAND_EDGES_DEG) -> np.ndarray:
    """Group label of every row: a column's values, ``'D'`` rounded to 1 um, or ``'theta_band'``."""
    if by == "theta_band":
        return inclination_band(df["theta"].to_numpy(np.float64), edges_deg)
    if by not in df.columns:
        raise KeyError(f"cannot group by {by!r}: no such column (try one of {', '.join(GROUP_KEYS)})")
    if by == "D":
        return np.round(df["D"].to_numpy(np.float64), 6).astype(object)
    return df[by].astype(object).to_numpy()


def _unique(groups) -> tuple[np.ndarray, np.ndarray]:
    """Unique labels in a fixed order (by string form) and the code of each row."""
    g = np.asarray(groups, dtype=object)
    labels = sorted(set(g.tolist()), key=lambda x: (str(type(x)), str(x)))
    code = {lab: i for i, lab in enumerate(labels)}
    return np.array(labels, dtype=object), np.array([code[x] for x in g.tolist()], dtype=np.int64)


def grouped_split(groups, test_groups=None, test_fraction: float = 0.2, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """``(train_idx, test_idx)`` with whole groups in the test part.

    ``test_groups`` lists the held-out labels explicitly (e.g. the largest diameter); otherwise
    groups are drawn in a seeded random order until the test part holds at least
    ``test_fraction`` of the rows, always leaving at least one group for training.

    >>> tr, te = grouped_split(["a", "a", "b", "c", "c"], test_groups=["c"])
    >>> tr.tolist(), te.tolist()
    ([0, 1, 2], [3, 4])
    """
    labels, code = _unique(groups)
    if len(labels) < 2:
        raise ValueError(f"a grouped split needs at least two groups, found {len(labels)}")
    if test_groups is not None:
        wanted = list(test_groups)
        unknown = [g for g in wanted if g not in set(labels.tolist())]
        if unknown:
            raise ValueError(f"test group(s) {unknown} not found; groups are {labels.tolist()}")
        test_mask = np.isin(np.asarray(groups, dtype=object), np.asarray(wanted, dtype=object))
    else:
        if not 0 < test_fraction < 1:
            raise ValueError(f"test_fraction must lie in (0, 1), got {test_fraction}")
        order = np.random.default_rng(seed).permutation(len(labels))
        counts = np.bincount(code, minlength=len(labels))
        chosen, total = [], 0
        for g in order[:-1]:
            chosen.append(g)
            total += counts[g]
            if total >= test_fraction * len(code):
                break
        test_mask = np.isin(code, chosen)
    if test_mask.all():
        raise ValueError("the test groups hold every row; leave at least one group for training")
    return _sorted(np.flatnonzero(~test_mask)), _sorted(np.flatnonzero(test_mask))


def kfold_split(n_or_groups, k: int = 5, seed: int = 0) -> list[tuple[np.ndarray, np.ndarray]]:
    """``k`` pairs ``(train_idx, val_idx)``; each row is in exactly one validation fold.

    With an int ``n``: rows shuffled and cut into k near-equal folds. With group labels: groups
    shuffled, then placed largest first into the fold with the fewest rows so far, so no group
    is split and fold sizes stay close.

    >>> [len(v) for _, v in kfold_split(10, k=3, seed=0)]
    [4, 3, 3]
    """
    if isinstance(n_or_groups, (int, np.integer)):
        n = int(n_or_groups)
        if not 2 <= k <= n:
            raise ValueError(f"k must lie in [2, {n}] for {n} rows, got {k}")
        folds = np.array_split(np.random.default_rng(seed).permutation(n), k)
    else:
        labels, code = _unique(n_or_groups)
        n = len(code)
        if not 2 <= k <= len(labels):
            raise ValueError(f"k must lie in [2, {len(labels)}] for {len(labels)} groups, got {k}")
        counts = np.bincount(code, minlength=len(labels))
        order = np.random.default_rng(seed).permutation(len(labels))
        order = order[np.argsort(-counts[order], kind="stable")]
        load = np.zeros(k, dtype=np.int64)
        fold_of = np.empty(len(labels), dtype=np.int64)
        for g in order:
            f = int(np.argmin(load))
            fold_of[g] = f
            load[f] += counts[g]
        folds = [np.flatnonzero(fold_of[code] == f) for f in range(k)]
    out = []
    for f in range(k):
        val = _sorted(folds[f])
        mask = np.ones(n, dtype=bool)
        mask[val] = False
        out.append((_sorted(np.flatnonzero(mask)), val))
    return out
