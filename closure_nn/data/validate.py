"""Validation of a training table: clean rows, rejected rows with reasons, and warnings.

Two kinds of problem:

* **Structural** (the table cannot be used at all): a required column is missing, no data rows,
  two headers for one column, a unit that does not fit. These raise
  :class:`closure_nn.physics.checks.InputError`, with the nearest known column name suggested.
* **Row-level**: a value that is not a number, a missing input, a non-physical or out-of-range
  value (ranges from :data:`closure_nn.data.schema.COLUMNS`, which takes the input ranges from
  :data:`closure_nn.physics.checks.RANGES`), holdup outside [0, 1], a flow-pattern label outside
  :data:`closure_nn.physics.vocabulary.PATTERNS`, gas denser than liquid, no flow at all, an empty
  row, a duplicated row or a repeated run_id. Such rows go to the rejected table with a
  ``reason`` naming file, data row, column, value and expected range; nothing is dropped silently.

Row numbers: "data row N" counts data rows from 1 (the first row below the header, as a
spreadsheet user counts them); for a CSV the message adds the file line (header and ``#``
comment lines included), assuming no quoted field spans several lines.

Unknown columns are kept by default (``unknown='keep'``) and reported as a warning with the
nearest known name; ``unknown='drop'`` removes them (also reported).

How :func:`~closure_nn.data.table_io.read_table` had to read the file (encoding, separator,
decimal commas; ``df.attrs['read_notes']``) opens the warnings.

Fixes that are made, always with a warning: pattern labels are folded to the vocabulary spelling
(``'Stratified Wavy'`` -> ``'stratified_wavy'``); rhog is computed from p, T, M_g, Z where absent
(Z = 1 where not given); missing provenance is filled (source and campaign = file stem,
run_id = data row number).

The column checks live in :mod:`closure_nn.data.column_checks`, the result and its summary in
:mod:`closure_nn.data.validation_result` (:data:`CHECKS`, :data:`REASON_SEP`, :class:`DataWarning`
and :class:`ValidationResult` import from here as well).
"""
from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from .column_checks import Problems, check_numeric, check_patterns, check_structure, raw_bad
from .header_units import convert_headers
from .schema import COLUMN, COLUMNS, INPUTS, PROVENANCE, Z_DEFAULT, can_compute_rhog, fill_gas_density, ordered_columns
from .validation_result import CHECKS, REASON_SEP, DataWarning, ValidationResult

__all__ = ["CHECKS", "REASON_SEP", "DataWarning", "ValidationResult", "validate", "validate_table"]


def validate_table(df: pd.DataFrame, path: str | Path | None = None, unknown: str = "keep") -> ValidationResult:
    """Validate a training table (see module docstring). ``path`` names the file in messages
    (default: ``df.attrs['path']``, else "table")."""
    if unknown not in ("keep", "drop"):
        raise ValueError(f"unknown must be 'keep' or 'drop', not {unknown!r}")
    path = str(path) if path is not None else df.attrs.get("path", "")
    where = path or "table"
    first_line = df.attrs.get("first_data_line") if (path and path.lower().endswith(".csv")) else None
    read_notes = list(df.attrs.get("read_notes", []))
    df = convert_headers(df.reset_index(drop=True), where=where)
    df, notes = check_structure(df, where, unknown)
    notes = read_notes + notes
    pr = Problems(where, first_line, dict(df.attrs.get("units", {})))
    empty = df.isna().all(axis=1).to_numpy()
    for i in np.flatnonzero(empty):
        pr.add(i, "empty_row", None, "the row is empty")
    typebad = np.zeros(len(df), dtype=bool)
    values = _check_numbers(df, pr, typebad)
    df, filled = _gas_density(df, values, pr, typebad, notes, where)
    _check_missing(df, values, empty, pr)
    _check_pairs(values, pr)
    for name in ("pattern",) + PROVENANCE:
        if name not in df.columns:
            df[name] = pd.Series(np.nan, index=df.index, dtype="str")
    check_patterns(df, pr, notes, where)
    run_given = _fill_provenance(df, empty, path, notes, where)
    _check_duplicates(df, empty, run_given, pr)
    return _result(df[ordered_columns(df.columns)], pr, notes, path, first_line, filled)


def _check_numbers(df: pd.DataFrame, pr: Problems, typebad: np.ndarray) -> dict[str, np.ndarray]:
    """Types and ranges of the numeric columns; writes their float64 (int: Int64) values into
    ``df`` in place and returns them by name (NaN where bad)."""
    values: dict[str, np.ndarray] = {}
    for spec in COLUMNS:
        if spec.name in df.columns and spec.dtype in ("float", "int"):
            values[spec.name] = check_numeric(df, spec, pr, typebad)
            df[spec.name] = values[spec.name]
            if spec.dtype == "int":
                df[spec.name] = pd.array(np.where(np.isfinite(values[spec.name]), np.round(values[spec.name]), np.nan),
                                         dtype="Float64").astype("Int64")
    return values


def _gas_density(df: pd.DataFrame, values: dict[str, np.ndarray], pr: Problems, typebad: np.ndarray,
                 notes: list[str], where: str) -> tuple[pd.DataFrame, np.ndarray]:
    """rhog from the equation of state where it is absent (range-checked, noted); returns the
    table and the rows where rhog was computed."""
    if "Z" not in df.columns and can_compute_rhog(df.columns) and ("rhog" not in df.columns or df["rhog"].isna().any()):
        notes.append(f"{where}: no Z column; rhog computed with Z = {Z_DEFAULT:g} (ideal gas)")
    elif "Z" in df.columns and "rhog" in df.columns and can_compute_rhog(df.columns):
        nz = int((df["rhog"].isna() & df["Z"].isna()).sum())
        if nz:
            notes.append(f"{where}: {nz} row(s) have neither rhog nor Z; rhog computed with Z = {Z_DEFAULT:g}")
    df, filled = fill_gas_density(df)
    values["rhog"] = df["rhog"].to_numpy(np.float64)
    if filled.any():  # range check of the computed densities
        check_numeric(df.assign(rhog=np.where(filled, values["rhog"], np.nan)), COLUMN["rhog"], pr, typebad)
    return df, filled


def _check_missing(df: pd.DataFrame, values: dict[str, np.ndarray], empty: np.ndarray, pr: Problems) -> None:
    """A required input missing on a row that is not empty (and not already a type problem)."""
    for name in INPUTS:
        for i in np.flatnonzero(np.isnan(values[name]) & ~empty):
            if raw_bad(pr, i, name):
                continue
            extra = ""
            if name == "rhog":
                extra = (" (give rhog, or p, T and M_g on this row)" if can_compute_rhog(df.columns)
                         else " (give rhog, or add p, T and M_g columns)")
            pr.add(i, "missing", name, f"{name} is missing; a value in {COLUMN[name].unit} is required{extra}")


def _check_pairs(values: dict[str, np.ndarray], pr: Problems) -> None:
    """Gas not lighter than the liquid; no flow at all."""
    with np.errstate(invalid="ignore"):
        heavy = values["rhog"] >= values["rhol"]
        noflow = (values["vsl"] == 0) & (values["vsg"] == 0)
    for i in np.flatnonzero(heavy):
        pr.add(i, "nonphysical", "rhog", f"rhog = {values['rhog'][i]:.6g} kg/m3 is not below rhol = "
               f"{values['rhol'][i]:.6g} kg/m3 (the gas must be the lighter phase)")
    for i in np.flatnonzero(noflow):
        pr.add(i, "nonphysical", "vsl", "vsl = 0 and vsg = 0: no flow (at least one superficial velocity must be > 0)")


def _fill_provenance(df: pd.DataFrame, empty: np.ndarray, path: str, notes: list[str], where: str) -> pd.Series:
    """Blank source and campaign become the file stem, a blank run_id the data row number (noted);
    returns where the run_id was given."""
    stem = Path(path).stem if path else "table"
    for name, default in (("source", stem), ("campaign", stem)):
        blank = df[name].isna() & ~pd.Series(empty)
        if blank.any():
            df.loc[blank, name] = default
            notes.append(f"{where}: {name} not given on {int(blank.sum())} row(s); set to {default!r}")
    run_given = df["run_id"].notna()
    blank = ~run_given & ~pd.Series(empty)
    if blank.any():
        df.loc[blank, "run_id"] = [str(i + 1) for i in np.flatnonzero(blank)]
        notes.append(f"{where}: run_id not given on {int(blank.sum())} row(s); set to the data row number")
    return run_given


def _check_duplicates(df: pd.DataFrame, empty: np.ndarray, run_given: pd.Series, pr: Problems) -> None:
    """Rows equal in every input and target column, then a given run_id repeated within a campaign."""
    data_cols = [c for c in df.columns if c in COLUMN and COLUMN[c].role not in ("provenance",)]
    dup = df.duplicated(subset=data_cols, keep="first").to_numpy() & ~empty
    if dup.any():
        first = {}
        for i, key in enumerate(map(tuple, df[data_cols].astype(object).where(df[data_cols].notna(), None).to_numpy())):
            if dup[i]:
                pr.add(i, "duplicate", None, f"repeats data row {first[key] + 1} in every input and target column")
            else:
                first.setdefault(key, i)
    rid = df.loc[run_given & ~pd.Series(empty)]
    rep = rid.duplicated(subset=["source", "campaign", "run_id"], keep="first")
    for i in rep[rep].index:
        pr.add(int(i), "duplicate_run_id", "run_id", f"run_id {df['run_id'].iloc[i]!r} already used in source "
               f"{df['source'].iloc[i]!r}, campaign {df['campaign'].iloc[i]!r}")


def _result(df: pd.DataFrame, pr: Problems, notes: list[str], path: str, first_line: int | None,
            filled: np.ndarray) -> ValidationResult:
    """Split ``df`` into clean and rejected rows (with data row, file line, checks and reasons)."""
    n = len(df)
    bad_rows = np.array(sorted(pr.rows), dtype=np.int64)
    keep = np.ones(n, dtype=bool)
    keep[bad_rows] = False
    clean = df.loc[keep].reset_index(drop=True)
    clean.attrs = {k: v for k, v in df.attrs.items() if k == "comments"}
    rej = df.loc[~keep].reset_index(drop=True)
    head = {"data_row": bad_rows + 1}
    if first_line is not None:
        head["file_line"] = bad_rows + first_line
    head["check"] = [",".join(dict.fromkeys(c for c, _ in pr.rows[i])) for i in bad_rows]
    head["reason"] = [REASON_SEP.join(m for _, m in pr.rows[i]) for i in bad_rows]
    rejected = pd.concat([pd.DataFrame(head), rej], axis=1)
    rejected.attrs = {}
    return ValidationResult(clean=clean, rejected=rejected, warnings=notes, path=path, n_rows=n,
                            n_rhog_computed=int((filled & keep).sum()))


def validate(df: pd.DataFrame, path: str | Path | None = None, unknown: str = "keep") -> tuple[pd.DataFrame, pd.DataFrame]:
    """``(clean_df, rejected_df)`` of :func:`validate_table`; its warnings are issued as
    :class:`DataWarning`.

    >>> df = pd.DataFrame({"vsl": [0.1, 0.1], "vsg": [2.0, 2.0], "D [mm]": [50.0, 50.0], "theta": [0.0, 0.0],
    ...                    "roughness": [0.0, 0.0], "rhol": [998.0, 998.0], "rhog": [1.2, 1.2], "mul": [1e-3, 1e-3],
    ...                    "mug": [1.8e-5, 1.8e-5], "sigma": [0.072, 0.072], "holdup": [0.3, -0.1],
    ...                    "run_id": ["a", "b"]})
    >>> clean, rejected = validate(df)
    >>> float(clean["D"][0]), rejected["reason"][0]
    (0.05, "table, data row 2, column 'holdup': holdup = -0.1 is outside [0, 1]")
    """
    res = validate_table(df, path=path, unknown=unknown)
    for w in res.warnings:
        warnings.warn(w, DataWarning, stacklevel=2)
    return res.clean, res.rejected
