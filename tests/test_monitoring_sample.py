"""Monitoring metrics on a sample of rows (closure_nn.training.metrics.accuracy, ``max_rows``).

Invented truth (defined here): a table solved with the baseline closure itself, so its own
accuracy is zero on any sample; and a shifted copy whose errors are known row by row. No outside
source applies: a check of the tool's own sampling.
"""
import numpy as np
import torch

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.physics.conditions import make_conditions
from closure_nn.physics.holdup_roots import solve_separated
from closure_nn.training.metrics import accuracy, sample_rows


def _table(n=400):
    g = torch.Generator().manual_seed(0)
    r = lambda: torch.rand(n, generator=g, dtype=torch.float64)  # noqa: E731
    cond = make_conditions(vsl=10 ** (-3 + 2 * r()), vsg=10 ** (-1 + 1.5 * r()), D=0.05 + 0.05 * r())
    closure = BaselineClosure(wall="churchill")
    with torch.no_grad():
        sol = solve_separated(cond, closure)
    t = {k: v.clone() for k, v in cond.as_dict().items()}
    t.update(holdup=sol.holdup.clone(), pgrad=sol.pgrad.total.clone(), kind=torch.zeros(n, dtype=torch.int64))
    return t, closure


def test_sample_is_seeded_ordered_and_a_subset():
    t, _ = _table()
    a, b = sample_rows(t, 50, seed=3), sample_rows(t, 50, seed=3)
    assert a["vsl"].shape == (50,) and torch.equal(a["vsl"], b["vsl"])
    pos = [int(torch.nonzero(t["vsl"] == v)[0]) for v in a["vsl"]]
    assert pos == sorted(pos)
    assert sample_rows(t, 400) is t and sample_rows(t, None) is t


def test_accuracy_on_a_sample_equals_accuracy_of_the_sampled_rows():
    t, closure = _table()
    # invented truth: holdup readings off by +0.01 on every row, so the RMSE is 0.01 on any sample
    t["holdup"] = t["holdup"] - 0.01
    full = accuracy(closure, t)
    part = accuracy(closure, t, max_rows=60, seed=1)
    np.testing.assert_allclose([full["holdup_rmse"], part["holdup_rmse"]], 0.01, rtol=1e-6)
    assert part["n_rows"] == 60 and full["n_rows"] == 400
    assert part == accuracy(closure, sample_rows(t, 60, seed=1))
