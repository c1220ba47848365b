r"""The synthetic design space of a lab table: its envelope with margins, widened to a line.

``closure-nn fit`` pre-trains a closure on baseline-labelled synthetic points where it will be used:
the envelope of the lab rows (and, when a line is given, of the line's local conditions), with
margins so that the fine-tuned closure is not at the edge of its training domain on the lab rows
themselves. The margins (:class:`Margins`) are our own choice, stated here:

=====================  =================================  =========================================
variable               law                                range
=====================  =================================  =========================================
v_SL, v_SG             log-uniform                        [min / 2, max x 2]
D                      log-uniform (a mixture of the      [0.8 min, 1.25 max] per source
                       lab range and the line range)
theta                  uniform                            [min - 5 deg, max + 5 deg] in [-90, 90]
roughness              uniform                            [0, 1.5 max] (+ 1 um)
rho_G                  log-uniform (mixture, per source)  [min / 1.5, max x 1.5]
mu_G                   uniform                            [0.9 min, 1.1 max]
rho_L, sigma           uniform per fluid                  [0.95 min, 1.05 max]
mu_L                   log-uniform per fluid              [min / 1.2, max x 1.2]
=====================  =================================  =========================================

Fluids: the rows are grouped by their ``fluid`` column where the table has one, else by liquid
density (25 kg/m3 bins) and decade-quarter of liquid viscosity; each group becomes a named fluid
pair of :mod:`closure_nn.data.design_space` with its own property ranges, chosen with weights
proportional to its rows (the line's fluid is one more pair). Variables are sampled
independently inside these ranges (a Latin hypercube, :func:`closure_nn.data.synthetic.synthesize`),
so combinations the lab never ran are covered too.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
import torch

from ..closures.baseline import BaselineClosure
from ..data.design_space import DesignSpace, parse_design
from ..line.fluid import GasModel
from ..line.local import LocalSolver, Mesh
from ..line.march import Marcher, MarchSettings

#: columns of a conditions table that describe a state (SI)
STATE_COLUMNS = ("vsl", "vsg", "D", "theta", "roughness", "rhol", "rhog", "mul", "mug", "sigma")


@dataclass(frozen=True)
class Margins:
    """Margins of the envelope (module table)."""

    velocity: float = 2.0  # factor on v_SL and v_SG
    d_low: float = 0.8  # factor on the smallest diameter
    d_high: float = 1.25  # factor on the largest diameter
    theta_deg: float = 5.0  # degrees on each side
    roughness: float = 1.5  # factor on the largest roughness
    rhog: float = 1.5  # factor on gas density
    liquid: float = 0.05  # relative, on liquid density and surface tension
    mul: float = 1.2  # factor on liquid viscosity
    mug: float = 0.1  # relative, on gas viscosity


def _log_range(x: np.ndarray, factor: float) -> dict:
    x = x[np.isfinite(x) & (x > 0)]
    return {"law": "log_uniform", "low": float(x.min() / factor), "high": float(x.max() * factor)}


def _uniform(lo: float, hi: float) -> dict:
    if hi <= lo:
        hi = lo * (1 + 1e-6) + 1e-12
    return {"law": "uniform", "low": float(lo), "high": float(hi)}


def _mixture(parts: list[tuple[float, dict]]) -> dict:
    if len(parts) == 1:
        return parts[0][1]
    return {"law": "mixture", "components": [{"weight": w, **law} for w, law in parts]}


def fluid_groups(df: pd.DataFrame) -> pd.Series:
    """Fluid group name per row: the ``fluid`` column where present, else liquid-density and
    liquid-viscosity bins (module docstring).

    >>> df = pd.DataFrame({"rhol": [998.0, 997.0, 830.0], "mul": [1e-3, 1.05e-3, 3e-3]})
    >>> fluid_groups(df).tolist()
    ['liquid_1000kgm3_mu-3.00', 'liquid_1000kgm3_mu-3.00', 'liquid_825kgm3_mu-2.50']
    """
    if "fluid" in df.columns and df["fluid"].notna().all():
        return df["fluid"].astype(str).reset_index(drop=True)
    rho = np.round(df["rhol"].to_numpy(np.float64) / 25.0) * 25.0
    mu = np.round(np.log10(df["mul"].to_numpy(np.float64)) * 4.0) / 4.0
    return pd.Series([f"liquid_{r:.0f}kgm3_mu{m:+.2f}".replace("+", "") for r, m in zip(rho, mu)])


def _fluid_laws(rows: pd.DataFrame, m: Margins) -> dict:
    rhol, sigma, mul = (rows[c].to_numpy(np.float64) for c in ("rhol", "sigma", "mul"))
    return {"rhol": _uniform(rhol.min() * (1 - m.liquid), rhol.max() * (1 + m.liquid)),
            "sigma": _uniform(sigma.min() * (1 - m.liquid), sigma.max() * (1 + m.liquid)),
            "mul": _log_range(mul, m.mul)}


def envelope_design(lab: pd.DataFrame, line: pd.DataFrame | None = None, margins: Margins | None = None,
                    name: str = "lab_envelope") -> DesignSpace:
    """The design space of the lab rows ``lab`` (SI columns :data:`STATE_COLUMNS`), widened to the
    local conditions ``line`` of a line (same columns, e.g. :func:`line_conditions`) when given.

    >>> lab = pd.DataFrame({"vsl": [0.01, 0.5], "vsg": [1.0, 10.0], "D": [0.05, 0.1], "theta": [0.0, 0.05],
    ...                     "roughness": [0.0, 1e-5], "rhol": [998.0, 998.0], "rhog": [1.2, 6.0],
    ...                     "mul": [1e-3, 1e-3], "mug": [1.8e-5, 1.8e-5], "sigma": [0.072, 0.072]})
    >>> d = envelope_design(lab)
    >>> b = d.describe()["bounds_si"]
    >>> [round(x, 3) for x in b["vsl"]], [round(x, 3) for x in b["D"]]
    ([0.005, 1.0], [0.04, 0.125])
    """
    m = margins or Margins()
    sources = [("lab", lab.reset_index(drop=True))]
    if line is not None and len(line):
        sources.append(("line", line.reset_index(drop=True)))
    both = pd.concat([s for _, s in sources], ignore_index=True)
    weight = {"lab": 0.7 if len(sources) > 1 else 1.0, "line": 0.3}
    col = lambda df, c: df[c].to_numpy(np.float64)  # noqa: E731
    theta = np.degrees(col(both, "theta"))
    rough = col(both, "roughness")
    variables = {
        "vsl": _log_range(col(both, "vsl"), m.velocity),
        "vsg": _log_range(col(both, "vsg"), m.velocity),
        "D": _mixture([(weight[s], {"law": "log_uniform", "low": float(col(df, "D").min() * m.d_low),
                                    "high": float(col(df, "D").max() * m.d_high)}) for s, df in sources]),
        "theta": {**_uniform(max(-90.0, theta.min() - m.theta_deg), min(90.0, theta.max() + m.theta_deg)), "unit": "deg"},
        "roughness": _uniform(0.0, float(np.nanmax(rough)) * m.roughness + 1e-6),
        "rhog": _mixture([(weight[s], _log_range(col(df, "rhog"), m.rhog)) for s, df in sources]),
        "mug": _uniform(float(col(both, "mug").min()) * (1 - m.mug), float(col(both, "mug").max()) * (1 + m.mug)),
    }
    fluids: dict[str, dict] = {}
    weights: list[float] = []
    for s, df in sources:
        groups = fluid_groups(df)
        for g in sorted(set(groups)):
            rows = df[(groups == g).to_numpy()]
            key = f"{s}_{g}" if s == "line" else g
            fluids[key] = _fluid_laws(rows, m)
            weights.append(weight[s] * len(rows) / len(df))
    cfg = {"name": name, "description": "lab envelope" + (" and line conditions" if len(sources) > 1 else "")
           + " with margins (closure_nn.pipeline.envelope)", "variables": variables,
           "fluid": {"law": "choice", "values": list(fluids), "weights": weights}, "fluids": fluids}
    return parse_design(cfg)


def line_conditions(line, solver: dict | None = None) -> pd.DataFrame:
    """Local conditions (SI, :data:`STATE_COLUMNS`) at the start of every segment of ``line`` (a
    :class:`closure_nn.line.definition.LineDefinition`), at the pressures of a march with the
    baseline closure of conf/closure/baseline.yaml (Churchill wall, Andritsos-Hanratty interface)."""
    gas = GasModel(line.fluid, (float(np.min(line.T)), float(np.max(line.T))))
    local = LocalSolver(line, gas, dict(solver or {}))
    base = BaselineClosure(wall="churchill", interface="andritsos_hanratty")
    r = Marcher(local, base, MarchSettings(), "baseline").run(Mesh.from_line(line), line.p_boundary, line.boundary)
    mesh = r.mesh
    seg = torch.arange(mesh.n)
    cond = local.conditions(mesh, seg, torch.zeros(mesh.n, dtype=torch.float64), torch.as_tensor(r.p[:-1]))
    return pd.DataFrame({c: torch.broadcast_to(getattr(cond, c), (mesh.n,)).numpy().copy() for c in STATE_COLUMNS})


def describe_envelope(space: DesignSpace) -> list[str]:
    """Human-readable lines of a design space's ranges (display units)."""
    b = space.describe()["bounds_si"]
    out = []
    fmt = {"vsl": ("v_SL", 1.0, "m/s"), "vsg": ("v_SG", 1.0, "m/s"), "D": ("D", 1e3, "mm"),
           "theta": ("theta", 180 / math.pi, "deg"), "roughness": ("roughness", 1e6, "um"), "rhog": ("rho_G", 1.0, "kg/m3")}
    for k, (label, f, unit) in fmt.items():
        if k in b:
            lo, hi = b[k]
            out.append(f"{label} {lo * f:.4g}-{hi * f:.4g} {unit}")
    out.append(f"fluids: {', '.join(space.fluids) or 'one'}")
    return out
