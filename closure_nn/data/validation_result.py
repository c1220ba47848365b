"""The outcome of validating a table (:func:`closure_nn.data.validate.validate_table`): clean
rows, rejected rows with their reasons, warnings, and the plain-text summary of them."""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

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
