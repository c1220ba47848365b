"""Training data: schema, field units, validation, table I/O, splits and synthetic sets (pandas lives here)."""
from .schema import (ALWAYS, COLUMN, COLUMNS, INPUTS, PROVENANCE, TARGETS, UNCERTAINTIES, ColumnSpec,
                     fill_gas_density, glossary_markdown, to_conditions)
from .design_space import DesignSpace, Law, parse_design, parse_law
from .splits import grouped_split, group_labels, inclination_band, kfold_split, random_split
from .synthetic import SyntheticSet, lhs_unit, sample_design, solution_report, solve_table, synthesize
from .table_io import read_table, write_table
from .units import UNITS, parse_header, to_si
from .validate import CHECKS, DataWarning, ValidationResult, validate, validate_table

__all__ = [
    "ALWAYS", "CHECKS", "COLUMN", "COLUMNS", "INPUTS", "PROVENANCE", "TARGETS", "UNCERTAINTIES", "UNITS",
    "ColumnSpec", "DataWarning", "ValidationResult", "fill_gas_density", "glossary_markdown", "group_labels",
    "grouped_split", "inclination_band", "kfold_split", "parse_header", "random_split", "read_table", "to_conditions",
    "to_si", "validate", "validate_table", "write_table",
    "DesignSpace", "Law", "parse_design", "parse_law",
    "SyntheticSet", "lhs_unit", "sample_design", "solution_report", "solve_table", "synthesize",
]
