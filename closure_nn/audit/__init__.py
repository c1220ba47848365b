"""Consistency audit of datasets and closures (issue 5): residuals, suspect rows, closure health."""
from .dataset import CHECKS, AuditResult, AuditSettings, audit_dataset
from .residuals import MeasuredResiduals, measured_residuals, robust_z
from .scoring import Score, read_truth, recall_by_kind, score_against

__all__ = [
    "CHECKS", "AuditResult", "AuditSettings", "MeasuredResiduals", "Score", "audit_dataset",
    "measured_residuals", "read_truth", "recall_by_kind", "robust_z", "score_against",
]
