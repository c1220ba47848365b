"""A lab table as the stages take it: read once, validated once (the checks of ``closure-nn
check-data``), accepted rows in SI with the validation result beside them. ``fit``, ``evaluate``,
the demo, ``distill`` and ``plan`` all start from :func:`validate_lab`."""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from ..data.table_io import read_table
from ..data.validate import ValidationResult, validate_table
from ..physics.checks import InputError


@dataclass
class LabTable:
    """A validated lab table: accepted ``rows`` (SI), the ``validation`` result (rejected rows, warnings)."""

    rows: pd.DataFrame
    validation: ValidationResult
    path: str



def validate_lab(table: str | Path | pd.DataFrame) -> LabTable:
    """Read (if a path) and validate a lab table; raise :class:`InputError` if no row is left."""
    path = "in-memory table" if isinstance(table, pd.DataFrame) else str(table)
    raw = table if isinstance(table, pd.DataFrame) else read_table(table)
    res = validate_table(raw, path=None if isinstance(table, pd.DataFrame) else table)
    if not len(res.clean):
        raise InputError(f"{path}: no row passed validation ({len(res.rejected)} rejected); "
                         f"run `closure-nn check-data {path}` for the reasons")
    rows = res.clean.reset_index(drop=True)
    rows.attrs["path"] = path
    return LabTable(rows=rows, validation=res, path=path)
