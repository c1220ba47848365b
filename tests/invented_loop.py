"""An INVENTED small flow loop (air-water-like, 50 and 100 mm, -2..+2 deg) and a noisy lab table of
the demo's invented truth closure on it: the user's own data in the workflow tests
(tests/test_quick_start.py, tests/test_fit_ensemble.py). Not a test module; no outside source."""
from __future__ import annotations

from pathlib import Path

from closure_nn.data.closure_table import noisy_table
from closure_nn.data.demo_reference import ReferenceClosure
from closure_nn.data.design_space import parse_design

SMALL_LOOP = {"name": "small_loop_invented", "variables": {
    "vsl": {"law": "log_uniform", "low": 0.01, "high": 0.3}, "vsg": {"law": "log_uniform", "low": 0.5, "high": 10.0},
    "D": {"law": "choice", "values": [50.0, 100.0], "unit": "mm"},
    "theta": {"law": "uniform", "low": -2.0, "high": 2.0, "unit": "deg"}, "roughness": 1e-5, "rhol": 998.0,
    "rhog": {"law": "uniform", "low": 1.2, "high": 6.0}, "mul": 1e-3, "mug": 1.8e-5, "sigma": 0.072}}


def write_lab_table(path: Path, n: int = 80, seed: int = 0) -> Path:
    """``n`` noisy rows of the invented truth on the small loop, as a lab CSV (no true columns)."""
    table = noisy_table(parse_design(SMALL_LOOP), n, seed, ReferenceClosure())
    table.drop(columns=["holdup_true", "pgrad_true"]).to_csv(path, index=False)
    return path
