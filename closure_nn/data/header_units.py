"""Headers with field units (``D [mm]``) to canonical SI columns, and cells to schema dtypes.

:func:`convert_headers` renames ``name [unit]`` headers to the canonical names of
:mod:`closure_nn.data.schema` and converts the values to SI (:mod:`closure_nn.data.units`).
Known columns get their schema dtype (float64, nullable Int64, str); a cell that is not a number
in a numeric column is kept as its raw text so that :func:`closure_nn.data.validate.validate_table`
can reject that row and say why.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd

from ..physics.checks import InputError
from .schema import COLUMN
from .units import parse_header, to_si


def cell_to_float(x: object) -> object:
    """A float for a number or numeric text, NaN for a blank, else the cell unchanged."""
    if x is None or (isinstance(x, float) and math.isnan(x)) or x is pd.NA:
        return np.nan
    if isinstance(x, (bool, np.bool_)):
        return x
    if isinstance(x, (int, float, np.integer, np.floating)):
        return float(x)
    if isinstance(x, str):
        s = x.strip()
        if s == "":
            return np.nan
        try:
            return float(s)
        except ValueError:
            return x
    return x


def numeric_or_raw(col: pd.Series) -> pd.Series:
    """float64 if every cell is a number (or blank), else object with floats and the raw cells."""
    if pd.api.types.is_float_dtype(col.dtype) and not isinstance(col.dtype, pd.StringDtype):
        return col.astype(np.float64)
    if pd.api.types.is_integer_dtype(col.dtype):
        return col.astype("Float64").astype(np.float64) if col.hasnans else col.astype(np.float64)
    # a plain list: Series.map would give text-only results pandas' str dtype again
    cells = pd.Series([cell_to_float(x) for x in col.astype(object)], index=col.index, dtype=object)
    if all(isinstance(v, float) for v in cells):
        return cells.astype(np.float64)
    return cells


def _as_int(col: pd.Series) -> pd.Series:
    """Nullable Int64 when every value is integral, else the column unchanged."""
    if col.dtype == object:
        return col
    v = col.to_numpy(np.float64)
    ok = np.isnan(v) | (np.isfinite(v) & (v == np.round(v)))
    return col.astype("Int64") if ok.all() else col


def _as_str(col: pd.Series) -> pd.Series:
    """pandas str dtype, blanks as missing; numbers typed into a text column become their text."""
    def conv(x: object) -> object:
        if x is None or x is pd.NA or (isinstance(x, float) and math.isnan(x)):
            return np.nan
        if isinstance(x, (float, np.floating)) and float(x).is_integer():
            return str(int(x))
        s = str(x).strip()
        return s if s else np.nan

    return col.astype(object).map(conv).astype("str")


def convert_headers(df: pd.DataFrame, where: str = "") -> pd.DataFrame:
    """Rename ``name [unit]`` headers to ``name`` and convert the values to SI.

    Known columns get their schema dtype; unknown columns are left as they are (validation warns
    about them). Two headers that map to the same column raise :class:`InputError`.
    """
    out: dict[str, pd.Series] = {}
    origin: dict[str, str] = {}
    units: dict[str, str] = dict(df.attrs.get("units", {}))
    for header in df.columns:
        name, unit = parse_header(str(header))
        spec = COLUMN.get(name)
        if spec is None:
            key, col = str(header).strip(), df[header]
        else:
            key = name
            col = df[header]
            if spec.dtype == "str":
                if unit is not None:
                    raise InputError(f"{where + ': ' if where else ''}column {str(header)!r} takes no unit; "
                                     f"write the header as {name!r}")
                col = _as_str(col)
            else:
                col = numeric_or_raw(col)
                if unit is not None:
                    units[name] = unit
                    if col.dtype == object:
                        num = col.map(lambda v: isinstance(v, float))
                        vals = col.copy()
                        conv = to_si(np.array(col[num].tolist(), dtype=np.float64), unit, spec.dimension,
                                     str(header), where)
                        vals.loc[num] = list(conv)
                        col = vals
                    else:
                        col = pd.Series(to_si(col.to_numpy(), unit, spec.dimension, str(header), where),
                                        index=col.index)
                if spec.dtype == "int":
                    col = _as_int(col)
        if key in out:
            raise InputError(f"{where + ': ' if where else ''}headers {origin[key]!r} and {str(header)!r} "
                             f"both give column {key!r}; keep one")
        out[key], origin[key] = col, str(header)
    res = pd.DataFrame(out, index=df.index)
    res.attrs = dict(df.attrs)
    if units:
        res.attrs["units"] = units
    return res
