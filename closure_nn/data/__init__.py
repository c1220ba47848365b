"""Training data: schema, field units, validation, table I/O, splits and synthetic sets (pandas lives here).

Public API, imported lazily (PEP 562 module ``__getattr__``): ``import closure_nn.data.configurations``
(as the config checks do) does not load scipy and the table readers with it.
"""
from __future__ import annotations

import importlib

_EXPORTS = {
    **dict.fromkeys(("ALWAYS", "COLUMN", "COLUMNS", "INPUTS", "PROVENANCE", "TARGETS", "UNCERTAINTIES", "ColumnSpec",
                     "fill_gas_density", "glossary_markdown", "to_conditions"), "schema"),
    **dict.fromkeys(("DesignSpace", "Law", "parse_design", "parse_law"), "design_space"),
    **dict.fromkeys(("grouped_split", "group_labels", "inclination_band", "kfold_split", "random_split"), "splits"),
    **dict.fromkeys(("SyntheticSet", "lhs_unit", "sample_design", "solution_report", "solve_table", "synthesize"),
                    "synthetic"),
    **dict.fromkeys(("read_table", "write_table"), "table_io"),
    **dict.fromkeys(("UNITS", "parse_header", "to_si"), "units"),
    **dict.fromkeys(("CHECKS", "DataWarning", "ValidationResult", "validate", "validate_table"), "validate"),
}
__all__ = sorted(_EXPORTS)


def __getattr__(name: str):
    if name in _EXPORTS:
        return getattr(importlib.import_module(f".{_EXPORTS[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
