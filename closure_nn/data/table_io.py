"""Read and write training tables (CSV or Parquet, chosen by the file suffix).

:func:`read_table` converts headers with field units (``D [mm]``) to canonical SI columns
(:mod:`closure_nn.data.units`) and gives known columns their schema dtype (float64, nullable
Int64, str). A cell that is not a number in a numeric column is kept as its raw text so that
:func:`closure_nn.data.validate.validate` can reject that row and say why.

CSV details (our own convention): lines at the top of the file starting with ``#`` are comments
(kept in ``df.attrs['comments']`` and written back by :func:`write_table`; Parquet keeps them in
its metadata). Blank lines are kept as empty rows so that data row numbers stay those of the
file; validation rejects them. :func:`write_table` writes comma-separated UTF-8 with decimal
point '.'; :func:`read_table` also reads files as spreadsheets export them (a byte-order mark,
Windows-1252/Latin-1 or UTF-16 text, ';' or tab separators, decimal commas) and lists what it
had to assume in ``df.attrs['read_notes']``. It refuses, with the file and line, what it cannot
read without guessing: binary content, a repeated header (pandas would quietly rename the second
one ``x.1``), values under an empty header, a row with more values than the header, a header
without data rows.

``df.attrs['path']`` and ``df.attrs['first_data_line']`` (1-based file line of data row 1; None
for Parquet) let validation messages name the file and line; ``df.attrs['units']`` records the
header unit of each converted column (to quote a value as typed).

The CSV text is read by :mod:`closure_nn.data.csv_reading`; headers are converted by
:func:`closure_nn.data.header_units.convert_headers`.

Round trip: ``read_table(write_table(df, p))`` equals ``df`` exactly for a validated table
(floats are written with the shortest repr that reads back to the same float64).
"""
from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd

from ..physics.checks import InputError
from ..run_folder import atomic_path
from .csv_reading import read_csv_raw
from .header_units import convert_headers
from .schema import COLUMN
from .units import from_si

CSV_SUFFIXES = (".csv",)
PARQUET_SUFFIXES = (".parquet", ".pq")


def _kind(path: Path) -> str:
    suf = path.suffix.lower()
    if suf in CSV_SUFFIXES:
        return "csv"
    if suf in PARQUET_SUFFIXES:
        return "parquet"
    raise InputError(f"{path}: unknown table format {suf or '(no suffix)'!r}; use .csv or .parquet")


def read_table(path: str | os.PathLike) -> pd.DataFrame:
    """Read a CSV or Parquet training table, converting unit headers to SI.

    CSV files as people have them are read: UTF-8 with or without a byte-order mark, UTF-16 with
    one, Windows-1252 / Latin-1 (with a note); fields separated by ',', ';' or tabs (from the
    header line); numbers with a decimal comma where the separator is ';' or a tab, or where the
    value is quoted. How a file was read, where that is not the plain convention, is listed in
    ``df.attrs['read_notes']`` (validation reports these as warnings).

    Raises ``FileNotFoundError`` for a missing file and :class:`InputError` (naming the file, and
    the line where one applies) for a folder, binary content, a repeated header, a row with more
    values than the header, or a header without data rows.
    """
    p = Path(path)
    kind = _kind(p)
    if not p.exists():
        raise FileNotFoundError(2, "No such file", str(p))
    if kind == "csv":
        raw, first_line = read_csv_raw(p)
    else:
        if p.is_dir():
            raise InputError(f"{p}: is a folder; give the path of a table file (.csv or .parquet)")
        try:
            raw = pd.read_parquet(p)
        except Exception as exc:  # pyarrow raises several types for a corrupt file
            raise InputError(f"{p}: cannot read as Parquet: {str(exc).splitlines()[0]}") from None
        if len(raw) == 0:
            raise InputError(f"{p}: the table has columns but no data rows")
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
    with atomic_path(p) as tmp:  # a failed write leaves the previous file (or none), never half a table
        if kind == "csv":
            with open(tmp, "w", encoding="utf-8", newline="") as fh:
                for line in keep.get("comments", []):
                    fh.write(f"# {line}\n")
                out.to_csv(fh, index=False, lineterminator="\n")
        else:
            out.to_parquet(tmp, index=False)
    return p
