"""Result tables as plain CSV: one header line, the SI unit of each column in its header.

The headers follow the convention that ``closure-nn check-data`` and :func:`closure_nn.data.table_io.read_table`
read (:func:`closure_nn.data.units.parse_header`): ``name [unit]``, e.g. ``calc_pgrad [Pa/m]``,
``distance [m]``, ``holdup [-]``. Columns without a unit (names, codes, flags, yes/no) keep their
bare name. No comment line precedes the header, so ``pandas.read_csv`` and spreadsheets read the
table as it is; the caution of a run lives in its ``CAUTION.txt`` and ``summary.json``.

Units are those of the glossary (:mod:`closure_nn.data.schema`) plus :data:`RESULT_UNITS` for the
columns that only results have. A prefix such as ``calc_`` (batch) is looked through.
"""
from __future__ import annotations

import os
import re
from pathlib import Path

import pandas as pd

from ..run_folder import atomic_path
from .schema import COLUMN
from .units import ALIASES, UNITS, parse_header

#: unit and dimension (a table of :data:`closure_nn.data.units.UNITS`) of result-only columns
RESULT_UNITS: dict[str, tuple[str, str]] = {
    "pgrad_friction": ("Pa/m", "pressure gradient"), "pgrad_gravity": ("Pa/m", "pressure gradient"),
    "frac": ("-", "fraction"), "root_1": ("-", "fraction"), "root_2": ("-", "fraction"),
    "root_3": ("-", "fraction"), "holdup_pred": ("-", "fraction"), "pgrad_pred": ("Pa/m", "pressure gradient"),
    "distance": ("m", "length"), "elevation": ("m", "length"), "step_error": ("Pa", "pressure"),
}
#: prefixes looked through (``calc_pgrad`` has the unit of ``pgrad``)
PREFIXES = ("calc_",)
#: qualifiers of ensemble-band columns (``p_min`` has the unit of ``p``)
BAND_SUFFIXES = ("min", "max", "mean", "sd", "lo2sd", "hi2sd")
#: columns that stay bare whatever the glossary says (counts and codes, not quantities)
BARE = frozenset({"n_roots", "flags", "station"})


def unit_of(column: str) -> tuple[str, str] | None:
    """``(unit, dimension)`` of a result column in SI, or None for a column without a unit.

    >>> unit_of("calc_pgrad"), unit_of("p_min"), unit_of("pattern"), unit_of("calc_n_roots")
    (('Pa/m', 'pressure gradient'), ('Pa', 'pressure'), None, None)
    >>> unit_of("pgrad_learned"), unit_of("holdup_lo2sd"), unit_of("theta_deg"), unit_of("pattern_learned")
    (('Pa/m', 'pressure gradient'), ('-', 'fraction'), None, None)
    """
    name = str(column)
    for pre in PREFIXES:
        if name.startswith(pre):
            name = name[len(pre):]
    if name in BARE:
        return None
    if name in RESULT_UNITS:
        return RESULT_UNITS[name]
    spec = COLUMN.get(name)
    if spec is not None and spec.unit and spec.dtype == "float":
        return spec.unit, spec.dimension
    # '<quantity>_<qualifier>': an ensemble statistic (p_min, holdup_sd) or a model's prediction
    # (pgrad_learned) has the quantity's unit; a qualifier that is itself a unit (theta_deg) does not
    head, _, qualifier = name.rpartition("_")
    while head:
        if qualifier in BAND_SUFFIXES or not _is_unit_word(qualifier):
            found = unit_of(head) if head in COLUMN or head in RESULT_UNITS else None
            if found is not None:
                return found
        head, _, rest = head.rpartition("_")
        qualifier = f"{rest}_{qualifier}"
    return None


def _is_unit_word(word: str) -> bool:
    """True for a unit spelling (``deg``, ``bar``, ``mm``...) of :mod:`closure_nn.data.units`."""
    return word in ALIASES or any(word in units for units in UNITS.values())


def with_unit_headers(df: pd.DataFrame) -> pd.DataFrame:
    """``df`` with ``name [unit]`` headers (values unchanged: they are SI already). A header that
    already carries a unit is left as it is.

    >>> list(with_unit_headers(pd.DataFrame({"vsl": [0.1], "calc_pattern": ["annular"]})).columns)
    ['vsl [m/s]', 'calc_pattern']
    """
    ren = {}
    for c in df.columns:
        if parse_header(str(c))[1] is not None:
            continue
        u = unit_of(str(c))
        if u is not None:
            ren[c] = f"{c} [{u[0]}]"
    return df.rename(columns=ren)


def write_result_csv(df: pd.DataFrame, path: str | os.PathLike) -> Path:
    """Write ``df`` (SI) as a plain CSV with unit headers (Parquet where ``path`` ends in
    ``.parquet``), atomically; returns the path."""
    p = Path(path)
    with atomic_path(p) as tmp:  # never half a results file
        if p.suffix.lower() == ".parquet":
            with_unit_headers(df).to_parquet(tmp, index=False)
        else:
            with_unit_headers(df).to_csv(tmp, index=False, lineterminator="\n")
    return p


def bare_names(columns) -> list[str]:
    """Column names without their ``[unit]`` (for comparing with in-memory tables).

    >>> bare_names(["calc_pgrad [Pa/m]", "pattern"])
    ['calc_pgrad', 'pattern']
    """
    return [parse_header(str(c))[0] for c in columns]


_RESULT_PREFIX = re.compile(r"^(%s)" % "|".join(map(re.escape, PREFIXES)))


def drop_result_columns(df: pd.DataFrame) -> tuple[pd.DataFrame, list[str]]:
    """``df`` without the result columns of an earlier run (``calc_*``), and their headers."""
    old = [c for c in df.columns if _RESULT_PREFIX.match(parse_header(str(c))[0])]
    return df.drop(columns=old), old
