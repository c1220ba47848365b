"""closure-nn: physics-regularised neural wall and interfacial shear closures for the steady
two-fluid model of gas-liquid pipe flow.

Public Python API (:mod:`closure_nn.api`):

* :func:`load_closure` - ``'baseline'``, a closure bundle folder or an ensemble folder -> a closure;
* :func:`solve` - a DataFrame of SI conditions -> the same rows with holdup, pressure gradient,
  flow pattern, roots and flags (``calc_*`` columns, as ``closure-nn batch`` writes them).
"""
from .api import load_closure, solve

__all__ = ["load_closure", "solve"]
