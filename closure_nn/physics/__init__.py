"""Physics core: steady two-fluid pipe flow in plain vectorised torch (float64, differentiable).

No Lightning, Hydra, pandas or matplotlib imports below this package.
"""
from .conditions import Conditions, gas_density, make_conditions
from .geometry import SeparatedGeometry, annular, h_from_holdup, stratified
from .groups import FEATURE_NAMES, closure_features, lockhart_martinelli
from .holdup_roots import SeparatedSolution, find_all_roots, solve_separated
from .local_state import LocalState, local_state
from .momentum import (
    FrictionFactors,
    PressureGradient,
    Stresses,
    combined_residual,
    gas_residual,
    liquid_residual,
    pressure_gradient,
    shear_stresses,
)
from .point import PointResult, solve_points

__all__ = [
    "Conditions", "make_conditions", "gas_density",
    "SeparatedGeometry", "stratified", "annular", "h_from_holdup",
    "LocalState", "local_state",
    "FrictionFactors", "Stresses", "PressureGradient", "shear_stresses", "liquid_residual", "gas_residual",
    "combined_residual", "pressure_gradient",
    "FEATURE_NAMES", "closure_features", "lockhart_martinelli",
    "SeparatedSolution", "find_all_roots", "solve_separated",
    "PointResult", "solve_points",
]
