"""Orchestration of the stages into the user's workflows (above data/ and training/, below the commands).

Public API: :func:`fit` (``closure-nn fit``: lab table -> validated closure bundle),
:func:`validate_lab`, :func:`envelope_design`, :func:`line_conditions`, :class:`FitResult`, :class:`LabTable`.
"""
from __future__ import annotations

from .envelope import Margins, envelope_design, line_conditions
from .fit import FitResult, fit
from .lab_table import LabTable, validate_lab

__all__ = ["FitResult", "LabTable", "Margins", "envelope_design", "fit", "line_conditions", "validate_lab"]
