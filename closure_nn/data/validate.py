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
"""
from __future__ import annotations

import difflib
import math
import re
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..physics.checks import InputError
from ..physics.vocabulary import PATTERNS
from .schema import (COLUMN, COLUMNS, INPUTS, PROVENANCE, Z_DEFAULT, ColumnSpec, can_compute_rhog,
                     fill_gas_density, ordered_columns)
from .csv_reading import THOUSANDS
from .header_units import convert_headers
from .units import from_si, slip_hint

#: check code -> what it means (used in the summary)
CHECKS: dict[str, str] = {
    "empty_row": "row has no values",
    "type": "value is not a number",
    "missing": "missing value in a required input",
    "nonphysical": "non-physical value",
    "range": "value outside the expected range (often a unit slip)",
    "holdup": "holdup outside [0, 1]",
    "pattern": "flow-pattern label not in the vocabulary",
    "duplicate": "row repeats an earlier row",
    "duplicate_run_id": "run_id repeats within its source and campaign",
}
#: separates the messages of one row in the ``reason`` column
REASON_SEP = " | "
#: trade words that are not in our vocabulary -> the label we use for them
PATTERN_SYNONYMS: dict[str, str] = {
    "slug": "intermittent", "churn": "intermittent", "elongated_bubble": "intermittent",
    "plug": "intermittent", "bubbly": "bubble", "dispersed": "dispersed_bubble",
    "stratified": "stratified_smooth or stratified_wavy", "wavy": "stratified_wavy",
}


class DataWarning(UserWarning):
    """A problem in a table that was fixed or tolerated (reported, never silent)."""


@dataclass
class ValidationResult:
    """Outcome of :func:`validate_table`.

    ``clean``: accepted rows, SI, canonical columns (always :data:`~closure_nn.data.schema.ALWAYS`),
    fresh 0-based index. ``rejected``: ``data_row`` (1-based), ``file_line`` (CSV only),
    ``check`` (codes of :data:`CHECKS`, comma-separated), ``reason`` (the messages, separated by
    :data:`REASON_SEP`), then the row's
    values in SI. ``warnings``: fixes and tolerated oddities, one sentence each.
    """

    clean: pd.DataFrame
    rejected: pd.DataFrame
    warnings: list[str] = field(default_factory=list)
    path: str = ""
    n_rows: int = 0
    n_rhog_computed: int = 0

    def counts(self) -> dict[str, int]:
        """Rejected rows per check code (a row with two problems counts under both)."""
        out: dict[str, int] = {}
        for codes in self.rejected.get("check", pd.Series(dtype=str)):
            for c in str(codes).split(","):
                out[c] = out.get(c, 0) + 1
        return out

    def summary_text(self, max_messages: int = 20) -> str:
        """A short plain-text summary: counts, warnings, rejected rows by reason, first messages."""
        lines = [f"file: {self.path or '(in-memory table)'}",
                 f"rows read: {self.n_rows}; accepted: {len(self.clean)}; rejected: {len(self.rejected)}"]
        if self.n_rhog_computed:
            lines.append(f"rhog computed from p, T, M_g, Z on {self.n_rhog_computed} row(s)")
        if self.warnings:
            lines.append("warnings:")
            lines += [f"  - {w}" for w in self.warnings]
        if len(self.rejected):
            lines.append("rejected rows by check:")
            for code, n in sorted(self.counts().items(), key=lambda kv: -kv[1]):
                rows = self.rejected.loc[self.rejected["check"].str.split(",").map(lambda c, k=code: k in c),
                                         "data_row"].tolist()
                shown = ", ".join(str(r) for r in rows[:8]) + (", ..." if len(rows) > 8 else "")
                lines.append(f"  {code:<17s} {n:6d} row(s)  {CHECKS.get(code, '')} (data rows {shown})")
            lines.append("first messages (all in rejected.csv, values there in SI):")
            msgs = [m for r in self.rejected["reason"] for m in str(r).split(REASON_SEP)]
            lines += [f"  {m}" for m in msgs[:max_messages]]
            if len(msgs) > max_messages:
                lines.append(f"  ... and {len(msgs) - max_messages} more")
        return "\n".join(lines) + "\n"

    def write(self, out_dir: str | Path) -> dict[str, Path]:
        """Write ``rejected.csv`` and ``validation_summary.txt`` into ``out_dir``; return the paths."""
        d = Path(out_dir)
        d.mkdir(parents=True, exist_ok=True)
        paths = {"rejected": d / "rejected.csv", "summary": d / "validation_summary.txt"}
        self.rejected.to_csv(paths["rejected"], index=False, lineterminator="\n")
        paths["summary"].write_text(self.summary_text())
        return paths


class _Problems:
    """Collects row-level problems: position -> [(check, message)]."""

    def __init__(self, where: str, first_line: int | None, units: dict[str, str]):
        self.where, self.first_line, self.units = where, first_line, units
        self.rows: dict[int, list[tuple[str, str]]] = {}

    def loc(self, i: int, column: str | None = None) -> str:
        s = f"{self.where}, data row {i + 1}"
        if self.first_line is not None:
            s += f" (file line {self.first_line + i})"
        return s + (f", column {column!r}" if column else "")

    def add(self, i: int, check: str, column: str | None, text: str) -> None:
        self.rows.setdefault(i, []).append((check, f"{self.loc(i, column)}: {text}"))

    def typed(self, column: str, value: float) -> str:
        """``value`` in SI, plus the value as typed when the header gave a field unit."""
        spec = COLUMN[column]
        s = f"{column} = {value:.6g}" + _unit(spec.unit)
        u = self.units.get(column)
        if u and math.isfinite(value):
            s += f" (typed as {float(from_si(value, u, spec.dimension)):.6g}{_unit(u)})"
        return s


def _unit(u: str) -> str:
    return "" if u in ("", "-") else f" {u}"


def _bare(name: str) -> str:
    """'D (mm)' -> 'D': a header whose unit is in parentheses instead of brackets."""
    return re.sub(r"\s*[\(\{].*$", "", name).strip()


def _nearest(name: str, candidates, cutoff: float = 0.6) -> str | None:
    """The candidate closest to ``name``: same name ignoring case or a parenthesised unit, else difflib."""
    cands = list(candidates)
    for c in cands:
        if c.lower() == name.lower() or _bare(c) == name or c == _bare(name):
            return c
    m = difflib.get_close_matches(name, cands, n=1, cutoff=cutoff)
    return m[0] if m else None


def _structure(df: pd.DataFrame, where: str, unknown: str) -> tuple[pd.DataFrame, list[str]]:
    """Check columns; raise InputError for missing required ones; warn for unknown ones."""
    notes: list[str] = []
    extra = [c for c in df.columns if c not in COLUMN]
    required = [n for n in INPUTS if not (n == "rhog" and can_compute_rhog(df.columns))]
    missing = [n for n in required if n not in df.columns]
    if missing:
        parts = []
        for n in missing:
            near = _nearest(n, extra, cutoff=0.5)
            if near is not None and re.search(r"[\(\{]", near):
                parts.append(f"{n!r} (found {near!r}: write the unit in square brackets, e.g. '{n} [unit]')")
            elif near is not None:
                parts.append(f"{n!r} (did you mean {near!r}?)")
            elif n == "rhog":
                parts.append("'rhog' (or give p, T and M_g to compute it)")
            elif n == "roughness":
                parts.append("'roughness' (write 0 for hydraulically smooth pipe)")
            else:
                parts.append(repr(n))
        raise InputError(f"{where}: missing required column(s) {', '.join(parts)}. Required: "
                         f"{', '.join(INPUTS)} (SI unless a unit is given in brackets, e.g. 'D [mm]')")
    if len(df) == 0:
        raise InputError(f"{where}: the table has a header but no data rows")
    for c in extra:
        near = _nearest(c, COLUMN)
        hint = f"; did you mean {near!r}?" if near else ""
        action = "kept as is" if unknown == "keep" else "dropped"
        notes.append(f"{where}: unknown column {c!r} {action}{hint}")
    if unknown == "drop":
        df = df.drop(columns=extra)
    return df, notes


def _check_numeric(df: pd.DataFrame, spec: ColumnSpec, pr: _Problems, typebad: np.ndarray) -> np.ndarray:
    """Type and range checks of one numeric column; returns its float64 values (NaN where bad)."""
    col = df[spec.name]
    if col.dtype == object or isinstance(col.dtype, pd.StringDtype):
        col = col.astype(object)
        isnum = np.array([isinstance(v, float) for v in col], dtype=bool)
        for i in np.flatnonzero(~isnum):
            raw = col.iloc[i]
            if THOUSANDS.fullmatch(str(raw).strip()):
                hint = ("; decimal comma or thousands separator? write it with '.' as decimal point "
                        "and no thousands separator")
            elif re.fullmatch(r"\s*-?\d+,\d+\s*", str(raw)):
                hint = "; use '.' as decimal point"
            else:
                hint = ""
            pr.add(i, "type", spec.name, f"{raw!r} is not a number (expected {spec.unit or 'a number'}){hint}")
            typebad[i] = True
        v = np.array([x if isinstance(x, float) else np.nan for x in col], dtype=np.float64)
    else:
        v = col.to_numpy(np.float64, na_value=np.nan)
    if spec.range is None:
        return v
    lo, hi = spec.range
    rng = f"[{lo:g}, {hi:g}]{_unit(spec.unit)}"
    with np.errstate(invalid="ignore"):
        bad = np.isinf(v) | (v < lo) | (v > hi) | (spec.positive & (v <= 0))
    for i in np.flatnonzero(bad):
        x = float(v[i])
        if spec.name == "holdup":
            check, text = "holdup", f"{pr.typed(spec.name, x)} is outside [0, 1]"
        elif not math.isfinite(x) or (spec.positive and x <= 0) or (lo == 0 and x < 0):
            need = "finite" if not math.isfinite(x) else "> 0" if spec.positive else ">= 0" if lo == 0 else f"in {rng}"
            check, text = "nonphysical", f"{pr.typed(spec.name, x)} is non-physical (must be {need}; expected {rng})"
        else:
            side = "low" if x < lo else "high"
            note = f" ({spec.range_note})" if spec.range_note and spec.note_side in (side, "both") else ""
            check, text = "range", f"{pr.typed(spec.name, x)} is outside the expected range {rng}{note}"
        hint = slip_hint(x, spec.dimension, lo, hi) if spec.name not in pr.units else ""
        pr.add(i, check, spec.name, text + (f"; {hint}" if hint else ""))
    if spec.dtype == "int":
        frac = np.isfinite(v) & (v != np.round(v))
        for i in np.flatnonzero(frac):
            pr.add(i, "type", spec.name, f"{spec.name} = {v[i]:g} is not a whole number")
    return v


def _pattern_label(raw: object) -> tuple[str | None, bool]:
    """(vocabulary label or None, whether the spelling was folded)."""
    s = str(raw).strip()
    folded = re.sub(r"[\s\-]+", "_", s.lower())
    if s in PATTERNS:
        return s, False
    if folded in PATTERNS:
        return folded, True
    return None, False


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
    df, notes = _structure(df, where, unknown)
    notes = read_notes + notes
    n = len(df)
    pr = _Problems(where, first_line, dict(df.attrs.get("units", {})))

    empty = df.isna().all(axis=1).to_numpy()
    for i in np.flatnonzero(empty):
        pr.add(i, "empty_row", None, "the row is empty")

    # numeric columns: types and ranges
    typebad = np.zeros(n, dtype=bool)
    values: dict[str, np.ndarray] = {}
    for spec in COLUMNS:
        if spec.name in df.columns and spec.dtype in ("float", "int"):
            values[spec.name] = _check_numeric(df, spec, pr, typebad)
            df[spec.name] = values[spec.name]
            if spec.dtype == "int":
                df[spec.name] = pd.array(np.where(np.isfinite(values[spec.name]), np.round(values[spec.name]), np.nan),
                                         dtype="Float64").astype("Int64")

    # gas density from the equation of state where rhog is absent
    if "Z" not in df.columns and can_compute_rhog(df.columns) and ("rhog" not in df.columns or df["rhog"].isna().any()):
        notes.append(f"{where}: no Z column; rhog computed with Z = {Z_DEFAULT:g} (ideal gas)")
    elif "Z" in df.columns and "rhog" in df.columns and can_compute_rhog(df.columns):
        nz = int((df["rhog"].isna() & df["Z"].isna()).sum())
        if nz:
            notes.append(f"{where}: {nz} row(s) have neither rhog nor Z; rhog computed with Z = {Z_DEFAULT:g}")
    df, filled = fill_gas_density(df)
    values["rhog"] = df["rhog"].to_numpy(np.float64)
    if filled.any():  # range check of the computed densities
        _check_numeric(df.assign(rhog=np.where(filled, values["rhog"], np.nan)), COLUMN["rhog"], pr, typebad)

    # missing required inputs
    for name in INPUTS:
        for i in np.flatnonzero(np.isnan(values[name]) & ~empty):
            if _raw_bad(pr, i, name):
                continue
            extra = ""
            if name == "rhog":
                extra = (" (give rhog, or p, T and M_g on this row)" if can_compute_rhog(df.columns)
                         else " (give rhog, or add p, T and M_g columns)")
            pr.add(i, "missing", name, f"{name} is missing; a value in {COLUMN[name].unit} is required{extra}")

    # pair checks
    with np.errstate(invalid="ignore"):
        heavy = values["rhog"] >= values["rhol"]
        noflow = (values["vsl"] == 0) & (values["vsg"] == 0)
    for i in np.flatnonzero(heavy):
        pr.add(i, "nonphysical", "rhog", f"rhog = {values['rhog'][i]:.6g} kg/m3 is not below rhol = "
               f"{values['rhol'][i]:.6g} kg/m3 (the gas must be the lighter phase)")
    for i in np.flatnonzero(noflow):
        pr.add(i, "nonphysical", "vsl", "vsl = 0 and vsg = 0: no flow (at least one superficial velocity must be > 0)")

    # text columns
    for name in ("pattern",) + PROVENANCE:
        if name not in df.columns:
            df[name] = pd.Series(np.nan, index=df.index, dtype="str")
    folded: list[str] = []
    labels = np.array(df["pattern"].astype(object).tolist(), dtype=object)
    for i, raw in enumerate(labels):
        if not isinstance(raw, str):
            continue
        lab, was_folded = _pattern_label(raw)
        if lab is None:
            key = re.sub(r"[\s\-]+", "_", raw.strip().lower())
            near = PATTERN_SYNONYMS.get(key) or (difflib.get_close_matches(key, PATTERNS, n=1, cutoff=0.6) or [None])[0]
            hint = f"; did you mean {near!r}?" if near else ""
            pr.add(i, "pattern", "pattern", f"{raw!r} is not a flow-pattern label (expected one of "
                   f"{', '.join(PATTERNS)}, or blank){hint}")
        elif was_folded:
            labels[i] = lab
            folded.append(raw)
    if folded:
        notes.append(f"{where}: {len(folded)} pattern label(s) written to the vocabulary spelling "
                     f"(e.g. {folded[0]!r} -> {_pattern_label(folded[0])[0]!r})")
    df["pattern"] = pd.Series(labels, index=df.index).astype("str")

    # provenance defaults
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

    # duplicates (all input and target columns equal), then repeated run_id within a campaign
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

    df = df[ordered_columns(df.columns)]
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


def _raw_bad(pr: _Problems, i: int, name: str) -> bool:
    """True when row i already has a type problem in column ``name`` (do not also call it missing)."""
    return any(c == "type" and f"column {name!r}" in m for c, m in pr.rows.get(i, []))


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
