"""Implicit-function-theorem gradients for roots found without autograd.

If x* solves F(x*, p) = 0 for parameters p, then dx*/dp = -F_p / F_x (implicit function
theorem; e.g. Krantz & Parks, *The Implicit Function Theorem*, 2002, Thm 3.3.1). We return

.. math:: x = x^* - \frac{F(x^*, p) - \mathrm{sg}[F(x^*, p)]}{\mathrm{sg}[F_x(x^*, p)]}

where sg[.] stops the gradient. Its value is exactly x*, its first derivative with respect to
every tensor p that F depends on is -F_p/F_x, and the root-finding iterations are never
differentiated.
"""
from __future__ import annotations

from typing import Callable

import torch


def attach_implicit_grad(x_star: torch.Tensor, residual: Callable[[torch.Tensor], torch.Tensor],
                         needs_grad: bool | None = None) -> torch.Tensor:
    """Return ``x_star`` carrying implicit gradients of the root of ``residual``.

    Parameters
    ----------
    x_star : tensor (*batch)
        Converged roots, any dtype; detached on entry.
    residual : callable
        ``residual(x) -> F`` of the same shape, elementwise in x (state i's residual depends
        only on x[i]), built from tensors that may require grad.
    needs_grad : bool, optional
        Whether ``residual`` depends on a tensor that requires grad, if the caller knows: then F
        is evaluated once (at a leaf x, whose own gradient is discarded) instead of twice. None:
        found out by evaluating F without x tracked.

    Returns
    -------
    tensor (*batch): equal in value to ``x_star``; differentiable w.r.t. whatever ``residual``
    depends on. Where no gradient is needed (``torch.no_grad`` or nothing requires grad) it is
    ``x_star`` itself. Where F_x vanishes the gradient is zeroed rather than made infinite.
    """
    x0 = x_star.detach()
    if not torch.is_grad_enabled() or needs_grad is False:
        return x0
    x = x0.clone().requires_grad_(True)
    if needs_grad is None:
        F0 = residual(x0)  # graph to the parameters only
        if not F0.requires_grad:
            return x0
        (F_x,) = torch.autograd.grad(residual(x), x, torch.ones_like(F0))
    else:
        F0 = residual(x)  # one graph, to the parameters and to the leaf x (its gradient unused)
        (F_x,) = torch.autograd.grad(F0, x, torch.ones_like(F0), retain_graph=True)
    # F0 - sg[F0] is zero in value; its gradient w.r.t. the parameters is F_p
    F_p = F0 - F0.detach()
    nonzero = F_x != 0
    safe = torch.where(nonzero, F_x, torch.ones_like(F_x))
    return x0 - torch.where(nonzero, F_p / safe, torch.zeros_like(F_p))
