"""physics.conditions.broadcast_shape against torch.broadcast_shapes (the general-purpose reference,
PyPI torch 2.13) on random shape sets, including failures and zero-size dimensions."""
import random

import pytest
import torch

from closure_nn.physics.conditions import broadcast_shape


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
