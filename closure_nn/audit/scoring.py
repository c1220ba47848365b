"""Precision and recall of the audit's suspect rows against a list of known corrupted rows.

The truth list is a table with columns ``run_id, kind, description`` (e.g.
``data_demo/lab_campaign_corruptions.csv`` or :func:`closure_nn.audit.selfcheck.corrupt`).

precision = TP / (TP + FP), recall = TP / (TP + FN), counting run_ids (common practice,
e.g. the usual information-retrieval definitions). With nothing flagged precision is reported
as NaN rather than 1.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable, Mapping

import pandas as pd

from ..physics.checks import InputError

TRUTH_COLUMNS = ("run_id", "kind", "description")


@dataclass(frozen=True)
class Score:
    """Counts and rates of flagged versus truly corrupted run_ids."""

    precision: float
    recall: float
    true_positives: tuple[str, ...]
    false_positives: tuple[str, ...]
    missed: tuple[str, ...]

    def as_dict(self) -> dict:
        return {"precision": self.precision, "recall": self.recall, "tp": len(self.true_positives),
                "fp": len(self.false_positives), "fn": len(self.missed),
                "false_positives": list(self.false_positives), "missed": list(self.missed)}


def _flagged(flags) -> set[str]:
    if hasattr(flags, "flagged_run_ids"):
        return set(flags.flagged_run_ids())
    if isinstance(flags, pd.Series) and flags.dtype == bool:
        return {str(k) for k, v in flags.items() if v}
    if isinstance(flags, Mapping):
        return {str(k) for k, v in flags.items() if v}
    return {str(r) for r in flags}


def score_against(flags, truth_run_ids: Iterable) -> Score:
    """Precision and recall of ``flags`` against ``truth_run_ids``.

    ``flags``: an :class:`~closure_nn.audit.dataset.AuditResult`, a bool Series or mapping
    run_id -> flagged, or an iterable of flagged run_ids. ``truth_run_ids``: the corrupted ones.

    >>> s = score_against(["a", "b", "c"], ["a", "b", "d"])
    >>> round(s.precision, 3), round(s.recall, 3), s.missed
    (0.667, 0.667, ('d',))
    """
    flagged = _flagged(flags)
    truth = {str(r) for r in truth_run_ids}
    tp, fp, fn = flagged & truth, flagged - truth, truth - flagged
    precision = len(tp) / len(flagged) if flagged else math.nan
    recall = len(tp) / len(truth) if truth else math.nan
    return Score(precision, recall, tuple(sorted(tp)), tuple(sorted(fp)), tuple(sorted(fn)))


def read_truth(path: str | Path) -> pd.DataFrame:
    """Read a corruption list (CSV, columns ``run_id, kind, description``); '#' lines are comments."""
    p = Path(path)
    df = pd.read_csv(p, comment="#", dtype=str, keep_default_na=False)
    missing = [c for c in TRUTH_COLUMNS if c not in df.columns]
    if missing:
        raise InputError(f"{p}: corruption list lacks column(s) {', '.join(missing)}; "
                         f"expected {', '.join(TRUTH_COLUMNS)}")
    return df


def recall_by_kind(flags, truth: pd.DataFrame) -> pd.DataFrame:
    """Per corruption kind: rows, found, recall."""
    flagged = _flagged(flags)
    t = truth.assign(found=truth["run_id"].astype(str).isin(flagged))
    g = t.groupby("kind")["found"].agg(["size", "sum"]).rename(columns={"size": "rows", "sum": "found"})
    g["recall"] = g["found"] / g["rows"]
    return g.reset_index()
