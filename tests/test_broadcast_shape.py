"""physics.conditions.broadcast_shape against torch.broadcast_shapes (the general-purpose reference,
PyPI torch 2.13) on random shape sets, including failures and zero-size dimensions; make_conditions'
single values kept as stride-0 views, with the point solver's answers unchanged by it."""
import random

import pytest
import torch

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.physics.conditions import Conditions, broadcast_shape, make_conditions
from closure_nn.physics.point import solve_points


def test_broadcast_shape_equals_torch_on_random_shapes():
    rng = random.Random(0)
    n_fail = 0
    for _ in range(3000):
        shapes = [tuple(rng.choice([0, 1, 2, 3]) for _ in range(rng.randint(0, 3))) for _ in range(rng.randint(1, 4))]
        try:
            want = torch.broadcast_shapes(*shapes)
        except RuntimeError:
            n_fail += 1
            with pytest.raises(ValueError):
                broadcast_shape(*shapes)
            continue
        assert broadcast_shape(*shapes) == want, shapes
    assert n_fail > 100  # the sample holds shapes that do not broadcast


def test_single_values_are_views_and_solve_like_materialised_rows():
    # make_conditions keeps a single value (here sigma, g and the fluid properties) as a stride-0
    # view instead of one copy per row; the point solver must give bit-identical answers either way
    g = torch.Generator().manual_seed(3)
    n = 300
    views = make_conditions(vsl=10 ** (-3 + 3 * torch.rand(n, generator=g, dtype=torch.float64)),
                            vsg=10 ** (-1 + 2 * torch.rand(n, generator=g, dtype=torch.float64)), D=0.1,
                            theta=torch.deg2rad(-5 + 10 * torch.rand(n, generator=g, dtype=torch.float64)))
    assert views.sigma.stride() == (0,) and views.vsl.stride() == (1,)
    rows = Conditions(**{k: v.contiguous() for k, v in views.as_dict().items()})
    with torch.no_grad():
        a, b = solve_points(views, BaselineClosure()), solve_points(rows, BaselineClosure())
    for name in ("holdup", "pattern", "n_roots", "flags"):
        assert torch.equal(getattr(a, name).nan_to_num(-1), getattr(b, name).nan_to_num(-1)), name
    assert torch.equal(a.pgrad.total.nan_to_num(-1), b.pgrad.total.nan_to_num(-1))
