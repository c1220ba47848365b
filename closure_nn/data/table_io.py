"""Read and write training tables (CSV or Parquet, chosen by the file suffix).

:func:`read_table` converts headers with field units (``D [mm]``) to canonical SI columns
(:mod:`closure_nn.data.units`) and gives known columns their schema dtype (float64, nullable
Int64, str). A cell that is not a number in a numeric column is kept as its raw text so that
:func:`closure_nn.data.validate.validate` can reject that row and say why.

CSV details (our own convention): lines at the top of the file starting with ``#`` are comments
(kept in ``df.attrs['comments']`` and written back by :func:`write_table`; Parquet keeps them in
its metadata). Blank lines are kept as empty rows so that data row numbers stay those of the
file; validation rejects them. Fields are comma-separated, decimal point '.', UTF-8 (a byte-order
mark from spreadsheet exports is accepted).

``df.attrs['path']`` and ``df.attrs['first_data_line']`` (1-based file line of data row 1; None
for Parquet) let validation messages name the file and line; ``df.attrs['units']`` records the
header unit of each converted column (to quote a value as typed).

Round trip: ``read_table(write_table(df, p))`` equals ``df`` exactly for a validated table
(floats are written with the shortest repr that reads back to the same float64).
"""
from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np
import pandas as pd

from ..physics.checks import InputError
from .schema import COLUMN
from .units import from_si, parse_header, to_si

CSV_SUFFIXES = (".csv",)
PARQUET_SUFFIXES = (".parquet", ".pq")


def _kind(path: Path) -> str:
    suf = path.suffix.lower()
    if suf in CSV_SUFFIXES:
        return "csv"
    if suf in PARQUET_SUFFIXES:
        return "parquet"
    raise InputError(f"{path}: unknown table format {suf or '(no suffix)'!r}; use .csv or .parquet")


def _cell_to_float(x: object) -> object:
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
    cells = col.astype(object).map(_cell_to_float)
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


def _read_comments(path: Path) -> tuple[list[str], str]:
    comments: list[str] = []
    with open(path, encoding="utf-8-sig", newline="") as fh:
        for line in fh:
            if line.startswith("#"):
                comments.append(line[1:].rstrip("\r\n").removeprefix(" "))
                continue
            return comments, line
    return comments, ""


def read_table(path: str | os.PathLike) -> pd.DataFrame:
    """Read a CSV or Parquet training table, converting unit headers to SI.

    Raises ``FileNotFoundError`` for a missing file and :class:`InputError` for an unreadable one.
    """
    p = Path(path)
    kind = _kind(p)
    if not p.exists():
        raise FileNotFoundError(2, "No such file", str(p))
    if kind == "csv":
        comments, header = _read_comments(p)
        if not header.strip():
            raise InputError(f"{p}: no header line (the file is empty or holds only '#' comments)")
        if ";" in header and "," not in header:
            raise InputError(f"{p}, line {len(comments) + 1}: the header is separated by ';'. "
                             "Save the table as comma-separated values with '.' as decimal point")
        names = [parse_header(h)[0] for h in header.rstrip("\r\n").split(",")]
        text_cols = [i for i, n in enumerate(names) if n in COLUMN and COLUMN[n].dtype == "str"]
        try:
            raw = pd.read_csv(p, skiprows=len(comments), encoding="utf-8-sig", skip_blank_lines=False,
                              dtype={i: str for i in text_cols} or None)
        except (pd.errors.ParserError, UnicodeDecodeError) as exc:
            raise InputError(f"{p}: cannot read as CSV: {str(exc).splitlines()[0]}") from None
        raw.columns = [str(c).strip() for c in raw.columns]
        raw.attrs = {"comments": comments} if comments else {}
        first_line = len(comments) + 2
    else:
        try:
            raw = pd.read_parquet(p)
        except Exception as exc:  # pyarrow raises several types for a corrupt file
            raise InputError(f"{p}: cannot read as Parquet: {str(exc).splitlines()[0]}") from None
        raw = raw.reset_index(drop=True)
        first_line = None
    df = convert_headers(raw, where=str(p))
    df.attrs["path"] = str(p)
    df.attrs["first_data_line"] = first_line
    return df


def write_table(df: pd.DataFrame, path: str | os.PathLike, unit_headers: bool = False) -> Path:
    """Write ``df`` (SI, canonical names) as CSV or Parquet by suffix; returns the path.

    With ``unit_headers`` the CSV/Parquet headers carry the SI unit (``D [m]``), which
    :func:`read_table` reads back to the same table. ``df.attrs['comments']`` become leading
    ``#`` lines of a CSV (Parquet stores ``df.attrs`` in its metadata).
    """
    p = Path(path)
    kind = _kind(p)
    out = df.reset_index(drop=True)
    if unit_headers:
        ren = {}
        for c in out.columns:
            spec = COLUMN.get(c)
            if spec is not None and spec.unit:
                ren[c] = f"{c} [{spec.unit}]"
                out[c] = from_si(out[c].to_numpy(np.float64), spec.unit, spec.dimension) if spec.dtype == "float" else out[c]
        out = out.rename(columns=ren)
    keep = {k: v for k, v in df.attrs.items() if k == "comments"}
    out.attrs = keep
    p.parent.mkdir(parents=True, exist_ok=True)
    if kind == "csv":
        with open(p, "w", encoding="utf-8", newline="") as fh:
            for line in keep.get("comments", []):
                fh.write(f"# {line}\n")
            out.to_csv(fh, index=False, lineterminator="\n")
    else:
        out.to_parquet(p, index=False)
    return p
