"""Column checks of a training table (:func:`closure_nn.data.validate.validate_table`): required
and unknown columns, numbers and their ranges, flow-pattern labels.

Row-level problems are collected in a :class:`Problems` (position -> [(check, message)]); each
message names the file, data row (and the CSV file line), column, value and expected range.
"""
from __future__ import annotations

import difflib
import math
import re

import numpy as np
import pandas as pd

from ..physics.checks import InputError
from ..physics.vocabulary import PATTERNS
from .csv_reading import THOUSANDS
from .schema import COLUMN, INPUTS, ColumnSpec, can_compute_rhog
from .units import from_si, slip_hint

#: trade words that are not in our vocabulary -> the label we use for them
PATTERN_SYNONYMS: dict[str, str] = {
    "slug": "intermittent", "churn": "intermittent", "elongated_bubble": "intermittent",
    "plug": "intermittent", "bubbly": "bubble", "dispersed": "dispersed_bubble",
    "stratified": "stratified_smooth or stratified_wavy", "wavy": "stratified_wavy",
}



class Problems:
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


def check_structure(df: pd.DataFrame, where: str, unknown: str) -> tuple[pd.DataFrame, list[str]]:
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


def check_numeric(df: pd.DataFrame, spec: ColumnSpec, pr: Problems, typebad: np.ndarray) -> np.ndarray:
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


def pattern_label(raw: object) -> tuple[str | None, bool]:
    """(vocabulary label or None, whether the spelling was folded)."""
    s = str(raw).strip()
    folded = re.sub(r"[\s\-]+", "_", s.lower())
    if s in PATTERNS:
        return s, False
    if folded in PATTERNS:
        return folded, True
    return None, False


def check_patterns(df: pd.DataFrame, pr: Problems, notes: list[str], where: str) -> None:
    """Flow-pattern labels: unknown ones are problems (with the nearest label), other spellings of
    a vocabulary label are folded to it (with a note); ``df['pattern']`` is replaced in place."""
    folded: list[str] = []
    labels = np.array(df["pattern"].astype(object).tolist(), dtype=object)
    for i, raw in enumerate(labels):
        if not isinstance(raw, str):
            continue
        lab, was_folded = pattern_label(raw)
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
                     f"(e.g. {folded[0]!r} -> {pattern_label(folded[0])[0]!r})")
    df["pattern"] = pd.Series(labels, index=df.index).astype("str")


def raw_bad(pr: Problems, i: int, name: str) -> bool:
    """True when row i already has a type problem in column ``name`` (do not also call it missing)."""
    return any(c == "type" and f"column {name!r}" in m for c, m in pr.rows.get(i, []))
