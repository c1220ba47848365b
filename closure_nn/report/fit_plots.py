"""Figures of ``closure-nn fit`` (matplotlib, Agg): the parity of the development rows."""
from __future__ import annotations

from pathlib import Path

import numpy as np

from .training_plots import parity_figure


def fit_figures(kept: dict, run: str | Path) -> list[str]:
    """``parity_development.png`` in ``run``: baseline, pre-trained and shipped closure against the
    development rows, with each closure's holdup MAE and pgrad share within +-20 % in the legend.

    ``kept``: ``{'predictions': {name: predictions}, 'rows': development rows, 'scores': {name: measures}}``.
    """
    rows = kept["rows"].reset_index(drop=True)
    how = (f"{len(rows)} development rows: a seeded share of the accepted lab rows, held back from the fine-tune; "
           "every closure solved by the point solver with its predicted flow pattern.")
    path = parity_figure(rows, kept["predictions"], np.ones(len(rows), dtype=bool), Path(run) / "parity_development.png",
                         "closure-nn fit: development rows", how, scores=kept["scores"])
    return [str(path)]
