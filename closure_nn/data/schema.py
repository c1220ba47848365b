"""The training-table schema: one table of column specs drives validation and the glossary.

A training table is a pandas DataFrame (stored as CSV or Parquet, see
:mod:`closure_nn.data.table_io`) with one row per steady flow condition. Inside the code every
column is in SI under its canonical name; field units are allowed only in file headers
(:mod:`closure_nn.data.units`).

Roles
-----
``input``        required: the operating condition (fields of
                 :class:`closure_nn.physics.conditions.Conditions`). ``rhog`` may be left out (or
                 blank on some rows) when ``p``, ``T`` and ``M_g`` are given; it is then computed
                 with :func:`closure_nn.physics.conditions.gas_density`.
``gas_state``    optional p, T, M_g, Z for the gas density. ``Z`` defaults to 1 (ideal gas),
                 with a warning.
``target``       optional measurements: holdup, pgrad (= -dp/dx, positive when pressure falls
                 along the flow), pattern (one of :data:`closure_nn.physics.vocabulary.PATTERNS`).
                 A missing value is NaN (blank pattern).
``uncertainty``  optional one-standard-deviation absolute uncertainties of the targets.
``provenance``   source ('synthetic', 'lab' or a dataset name), campaign, run_id. When a file
                 lacks them, validation fills source and campaign with the file stem and run_id
                 with the data row number, and says so.
``solver``       n_roots: number of stratified equilibrium roots (synthetic sets only).

``roughness`` is required: write 0 for hydraulically smooth pipe (acrylic, glass). We do not
default it because gas wall friction in rough steel differs markedly from smooth pipe.

Ranges of the input columns are those of :data:`closure_nn.physics.checks.RANGES` (one table
for the physics and the data layer); the other columns carry their own ranges here.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import torch

from ..physics import checks as _checks
from ..physics.checks import POSITIVE, RANGES, InputError, check_conditions
from ..physics.conditions import Conditions, gas_density, make_conditions
from ..physics.vocabulary import PATTERNS
from .units import UNITS

ROLES = ("input", "gas_state", "target", "uncertainty", "provenance", "solver")


@dataclass(frozen=True)
class ColumnSpec:
    """One column of the training table.

    ``range`` is the accepted closed interval in SI (None: no range check); ``positive`` means
    the value must also be strictly above zero. ``dimension`` names a table of
    :data:`closure_nn.data.units.UNITS` (``'none'``: no unit allowed in the header).
    """

    name: str
    unit: str
    dimension: str
    dtype: str  # 'float' | 'int' | 'str'
    role: str
    description: str
    range: tuple[float, float] | None = None
    range_note: str = ""
    positive: bool = False
    required: bool = False
    note_side: str = "both"  # 'low' | 'high' | 'both': the side of the range the note explains


def _note_side(name: str) -> str:
    """Side of the range the physics note of ``name`` explains (closure_nn.physics.checks)."""
    low = name in _checks.LOW_NOTE
    high = name in _checks.HIGH_NOTE
    return "both" if low == high else "low" if low else "high"


def _inp(name: str, dimension: str, description: str) -> ColumnSpec:
    lo, hi, unit, note = RANGES[name]
    return ColumnSpec(name, unit, dimension, "float", "input", description, (lo, hi), note,
                      name in POSITIVE, required=True, note_side=_note_side(name))


#: THE table of columns, in canonical order.
COLUMNS: tuple[ColumnSpec, ...] = (
    _inp("vsl", "velocity", "superficial liquid velocity (flow direction +x)"),
    _inp("vsg", "velocity", "superficial gas velocity"),
    _inp("D", "length", "pipe inner diameter"),
    _inp("theta", "angle", "inclination from horizontal, positive upward"),
    _inp("roughness", "length", "absolute wall roughness (0 for hydraulically smooth pipe)"),
    _inp("rhol", "density", "liquid density"),
    _inp("rhog", "density", "gas density (may be computed from p, T, M_g, Z)"),
    _inp("mul", "dynamic viscosity", "liquid dynamic viscosity"),
    _inp("mug", "dynamic viscosity", "gas dynamic viscosity"),
    _inp("sigma", "surface tension", "gas-liquid surface tension"),
    ColumnSpec("p", "Pa", "pressure", "float", "gas_state", "absolute pressure (for rhog)",
               (1e3, 1e8), "absolute pressure 0.01 - 1000 bar; gauge pressure must be marked [barg]", True,
               note_side="both"),
    ColumnSpec("T", "K", "temperature", "float", "gas_state", "temperature (for rhog)",
               (150.0, 600.0), "absolute temperature in K", True),
    ColumnSpec("M_g", "kg/mol", "molar mass", "float", "gas_state", "gas molar mass (for rhog)",
               (2e-3, 0.3), "molar mass in kg/mol (air 0.029)", True),
    ColumnSpec("Z", "-", "dimensionless", "float", "gas_state",
               "gas compressibility factor (for rhog; default 1)", (0.05, 3.0), "", True),
    ColumnSpec("holdup", "-", "fraction", "float", "target", "liquid holdup H_L (area fraction)",
               (0.0, 1.0), "holdup is a fraction in [0, 1]"),
    ColumnSpec("pgrad", "Pa/m", "pressure gradient", "float", "target",
               "pressure gradient -dp/dx, positive when pressure falls along the flow",
               (-1e6, 1e6), "a magnitude above 10 bar/m is not plausible", note_side="both"),
    ColumnSpec("pattern", "", "none", "str", "target",
               "flow pattern, one of: " + ", ".join(PATTERNS)),
    ColumnSpec("holdup_sd", "-", "fraction", "float", "uncertainty",
               "one standard deviation of holdup (absolute)", (0.0, 1.0)),
    ColumnSpec("pgrad_sd", "Pa/m", "pressure gradient", "float", "uncertainty",
               "one standard deviation of pgrad (absolute)", (0.0, 1e6)),
    ColumnSpec("source", "", "none", "str", "provenance", "'synthetic', 'lab' or a dataset name"),
    ColumnSpec("campaign", "", "none", "str", "provenance", "test campaign or synthetic set name"),
    ColumnSpec("run_id", "", "none", "str", "provenance", "identifier of the run within its campaign"),
    ColumnSpec("n_roots", "-", "dimensionless", "int", "solver",
               "number of stratified equilibrium roots (synthetic sets)", (0.0, 10.0)),
)
COLUMN: dict[str, ColumnSpec] = {c.name: c for c in COLUMNS}
INPUTS: tuple[str, ...] = tuple(c.name for c in COLUMNS if c.role == "input")
GAS_STATE: tuple[str, ...] = ("p", "T", "M_g", "Z")
TARGETS: tuple[str, ...] = ("holdup", "pgrad", "pattern")
UNCERTAINTIES: tuple[str, ...] = ("holdup_sd", "pgrad_sd")
PROVENANCE: tuple[str, ...] = ("source", "campaign", "run_id")
#: columns a validated table always has (targets NaN where not measured)
ALWAYS: tuple[str, ...] = INPUTS + TARGETS + PROVENANCE
Z_DEFAULT = 1.0


def ordered_columns(names) -> list[str]:
    """Known columns in canonical order, then the others in their given order."""
    names = list(names)
    known = [c.name for c in COLUMNS if c.name in names]
    return known + [n for n in names if n not in COLUMN]


def can_compute_rhog(columns) -> bool:
    """True when ``p``, ``T`` and ``M_g`` are all present (``Z`` defaults to 1)."""
    return all(c in columns for c in ("p", "T", "M_g"))


def fill_gas_density(df: pd.DataFrame) -> tuple[pd.DataFrame, np.ndarray]:
    """Copy of ``df`` whose rhog is computed from p, T, M_g, Z where rhog is absent or NaN.

    Given rhog values are kept (a measured density wins over the equation of state). Returns the
    new frame and a bool mask of the rows that were filled.
    """
    out = df.copy()
    rhog = out["rhog"].to_numpy(np.float64) if "rhog" in out else np.full(len(out), np.nan)
    need = np.isnan(rhog)
    if need.any() and can_compute_rhog(out.columns):
        z = out["Z"].to_numpy(np.float64) if "Z" in out else np.full(len(out), Z_DEFAULT)
        z = np.where(np.isnan(z), Z_DEFAULT, z)
        calc = gas_density(*(torch.tensor(out[c].to_numpy(np.float64, copy=True)) for c in ("p", "T", "M_g")),
                           torch.as_tensor(z)).numpy()
        filled = need & np.isfinite(calc)
        rhog = np.where(filled, calc, rhog)
    else:
        filled = np.zeros(len(out), dtype=bool)
    out["rhog"] = rhog
    return out[ordered_columns(out.columns)], filled


def to_conditions(df: pd.DataFrame, check: bool = True, where: str = "") -> Conditions:
    """Build a :class:`Conditions` batch ``(len(df),)`` of float64 tensors from a table.

    ``df`` is in SI (as returned by :func:`closure_nn.data.validate.validate`). rhog is taken from
    the column or, where missing, from p, T, M_g, Z. g is standard gravity. With ``check`` the
    batch goes through :func:`closure_nn.physics.checks.check_conditions` (raises ``InputError``).

    >>> df = pd.DataFrame({"vsl": [0.1], "vsg": [2.0], "D": [0.05], "theta": [0.0], "roughness": [0.0],
    ...                    "rhol": [998.0], "mul": [1e-3], "mug": [1.8e-5], "sigma": [0.072],
    ...                    "p": [101325.0], "T": [288.15], "M_g": [0.0289647]})
    >>> c = to_conditions(df)
    >>> tuple(c.shape), round(float(c.rhog[0]), 3)
    ((1,), 1.225)
    """
    where = where or str(df.attrs.get("path", ""))
    loc = f"{where}: " if where else ""
    missing = [n for n in INPUTS if n not in df and not (n == "rhog" and can_compute_rhog(df.columns))]
    if missing:
        raise InputError(f"{loc}table lacks input column(s) {', '.join(missing)} "
                         "(`closure-nn check-data FILE` lists every problem of a table)")
    for n in INPUTS + GAS_STATE:
        if n in df and df[n].dtype == object:  # raw text kept by read_table for a cell that is no number
            bad = [(i, v) for i, v in enumerate(df[n]) if not isinstance(v, float)]
            if bad:
                raise InputError(f"{loc}data row {bad[0][0] + 1}, column {n!r}: {bad[0][1]!r} is not a number "
                                 "(`closure-nn check-data FILE` lists every problem of a table)")
    if "rhog" not in df or df["rhog"].isna().any():
        df, _ = fill_gas_density(df)
    kw = {n: torch.tensor(df[n].to_numpy(np.float64, copy=True)) for n in INPUTS}
    cond = make_conditions(**kw)
    if check:
        check_conditions(cond, where=where)
    return cond


def _fmt(x: float) -> str:
    return f"{x:.4g}"


def glossary_markdown(roles: tuple[str, ...] = ROLES) -> str:
    """Markdown table of the columns (for the README glossary), generated from :data:`COLUMNS`.

    >>> print(glossary_markdown(("solver",)))
    | column | unit | role | meaning | accepted range (SI) | header units |
    |---|---|---|---|---|---|
    | `n_roots` | - | solver | number of stratified equilibrium roots (synthetic sets) | 0 - 10 | - |
    """
    lines = ["| column | unit | role | meaning | accepted range (SI) | header units |", "|---|---|---|---|---|---|"]
    for c in COLUMNS:
        if c.role not in roles:
            continue
        if c.range is None:
            rng = "-"
        else:
            lo = f"> {_fmt(c.range[0])}" if c.positive and c.range[0] <= 0 else _fmt(c.range[0])
            rng = f"{lo} - {_fmt(c.range[1])}"
        req = " (required)" if c.required else ""
        units = ", ".join(UNITS[c.dimension]) if len(UNITS[c.dimension]) > 1 else "-"
        lines.append(f"| `{c.name}` | {c.unit or '-'} | {c.role}{req} | {c.description} | {rng} | {units} |")
    return "\n".join(lines)


if __name__ == "__main__":  # pragma: no cover
    print(glossary_markdown())
