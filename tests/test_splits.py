"""Splits: determinism by seed, disjoint parts covering every row, whole groups held out."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from closure_nn.data.splits import grouped_split, group_labels, inclination_band, kfold_split, random_split


def _table(n: int = 60) -> pd.DataFrame:
    rng = np.random.default_rng(123)
    return pd.DataFrame({
        "campaign": rng.choice(["loop-A", "loop-B", "loop-C", "synth"], n),
        "D": rng.choice([0.0254, 0.0508, 0.1016], n),
        "theta": np.radians(rng.uniform(-90, 90, n)),
    })


def _partition(parts, n):
    allidx = np.concatenate(parts)
    assert np.array_equal(np.sort(allidx), np.arange(n)), "parts must cover every row exactly once"
    for p in parts:
        assert p.dtype == np.int64 and np.all(np.diff(p) > 0)


def test_random_split_deterministic_and_partition():
    a = random_split(101, (0.8, 0.1, 0.1), seed=7)
    b = random_split(101, (0.8, 0.1, 0.1), seed=7)
    c = random_split(101, (0.8, 0.1, 0.1), seed=8)
    assert all(np.array_equal(x, y) for x, y in zip(a, b))
    assert not all(np.array_equal(x, y) for x, y in zip(a, c))
    _partition(a, 101)
    assert [len(p) for p in a] == [81, 10, 10]


def test_random_split_rejects_bad_fractions():
    with pytest.raises(ValueError, match="summing to 1"):
        random_split(10, (0.8, 0.3))


@pytest.mark.parametrize("by", ["campaign", "D", "theta_band"])
def test_grouped_split_holds_out_whole_groups(by):
    df = _table()
    g = group_labels(df, by)
    tr, te = grouped_split(g, test_fraction=0.3, seed=3)
    _partition([tr, te], len(df))
    assert set(g[tr].tolist()).isdisjoint(set(g[te].tolist()))
    assert len(te) >= 0.3 * len(df) and len(tr) > 0
    tr2, te2 = grouped_split(g, test_fraction=0.3, seed=3)
    assert np.array_equal(tr, tr2) and np.array_equal(te, te2)


def test_grouped_split_explicit_largest_diameter():
    df = _table()
    g = group_labels(df, "D")
    tr, te = grouped_split(g, test_groups=[0.1016])
    assert np.all(df["D"].to_numpy()[te] == 0.1016) and np.all(df["D"].to_numpy()[tr] < 0.1016)
    with pytest.raises(ValueError, match="not found"):
        grouped_split(g, test_groups=[0.2])
    with pytest.raises(ValueError, match="at least one group for training"):
        grouped_split(g, test_groups=[0.0254, 0.0508, 0.1016])


def test_inclination_bands_edges():
    lab = inclination_band(np.radians([-90.0, -10.0, -1.0, 0.0, 1.0, 10.0, 90.0]))
    assert lab.tolist() == ["[-90, -10) deg", "[-10, -1) deg", "[-1, 1) deg", "[-1, 1) deg", "[1, 10) deg",
                            "[10, 90] deg", "[10, 90] deg"]


def test_kfold_rows_deterministic_partition():
    folds = kfold_split(23, k=4, seed=1)
    assert len(folds) == 4
    _partition([v for _, v in folds], 23)
    for tr, va in folds:
        _partition([tr, va], 23)
    again = kfold_split(23, k=4, seed=1)
    assert all(np.array_equal(a[1], b[1]) for a, b in zip(folds, again))


def test_kfold_groups_never_split():
    df = _table(200)
    g = group_labels(df, "campaign")
    folds = kfold_split(g, k=3, seed=0)
    _partition([v for _, v in folds], len(df))
    seen = {}
    for f, (tr, va) in enumerate(folds):
        assert set(g[tr].tolist()).isdisjoint(set(g[va].tolist()))
        for lab in set(g[va].tolist()):
            assert lab not in seen
            seen[lab] = f
    with pytest.raises(ValueError, match="groups"):
        kfold_split(g, k=5)


def test_group_by_unknown_column():
    with pytest.raises(KeyError, match="cannot group by 'rig'"):
        group_labels(_table(), "rig")
