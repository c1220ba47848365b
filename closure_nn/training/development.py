"""The end of every training stage: baseline, start and trained closure on the validation rows, and
the do-no-harm choice of what ships (closure_nn.training.scoring.no_harm), with the closing lines."""
from __future__ import annotations

import pandas as pd
from omegaconf import DictConfig

from ..closures.ensemble import ClosureEnsemble
from .scoring import NoHarmSettings, no_harm, predict_table, score_table


#: measures of the closing message and of ``metrics.json`` ``development``
HEADLINE = ("holdup_mae", "pgrad_within_20")


def _headline(s: dict) -> dict:
    keys = ("holdup_mae", "holdup_mape", "pgrad_mape", "pgrad_within_20", "pattern_accuracy", "n_holdup", "n_pgrad")
    return {k: s.get(k) for k in keys}


def development_selection(cfg: DictConfig, members: list, member_metrics: list[dict], val_df: pd.DataFrame,
                          init=None) -> tuple[list, dict]:
    """Score baseline, starting point and trained closure(s) on the validation rows through the
    point solver, and apply the do-no-harm rule to each fine-tuned / updated member."""
    solver = {"select": cfg.loss.select, "n_grid": int(cfg.loss.n_grid)}
    base = members[0].baseline
    scores = {"rows": int(len(val_df)), "baseline": _headline(score_table(predict_table(base, val_df, solver), val_df))}
    selection: dict = {"rule": "none (pre-training)", "members": []}
    starts = None
    if cfg.stage in ("finetune", "update"):
        starts = list(init.members) if isinstance(init, ClosureEnsemble) else [init]
        sel = cfg.get("selection") or {}
        rule = NoHarmSettings(min_gain=float(sel.get("min_gain", 0.02)), confidence=float(sel.get("confidence", 0.95)),
                              n_bootstrap=int(sel.get("n_bootstrap", 200)), seed=int(cfg.seed))
        selection["rule"] = (f"adopt where the gain over the start exceeds {rule.min_gain:g} and its paired-bootstrap "
                             f"lower bound ({rule.confidence:g}) is above zero")
    shipped = []
    for m, (closure, mm) in enumerate(zip(members, member_metrics)):
        new_pred = predict_table(closure, val_df, solver)
        entry = {"member": m, "trained": _headline(score_table(new_pred, val_df))}
        if starts is not None:
            start = starts[m % len(starts)]
            start_pred = predict_table(start, val_df, solver)
            entry["start"] = _headline(score_table(start_pred, val_df))
            decision = no_harm(new_pred, start_pred, val_df, rule)
            entry.update(decision.to_dict())
            closure = closure if decision.adopt else start
        shipped.append(closure)
        selection["members"].append(entry)
        mm["development"] = entry
    first = selection["members"][0]
    scores.update({"start": first.get("start"), "trained": first["trained"],
                   "shipped": first["trained"] if first.get("adopt", True) else first.get("start")})
    lines = []
    fmt = lambda s: f"holdup MAE {s['holdup_mae']:.4f}, pgrad within +-20 % {_pct(s['pgrad_within_20'])}"  # noqa: E731
    lines.append(f"validation rows ({len(val_df)}): baseline {fmt(scores['baseline'])}")
    if first.get("start"):
        lines.append(f"  before (start)  {fmt(first['start'])}")
    lines.append(f"  after           {fmt(first['trained'])}")
    if starts is not None:
        kept = [e["member"] for e in selection["members"] if not e["adopt"]]
        lines.append(first["reason"] if len(members) == 1 else
                     f"{len(members) - len(kept)} of {len(members)} member(s) adopted"
                     + (f"; member(s) {', '.join(map(str, kept))} kept their start (no gain beyond the noise)" if kept else ""))
    return shipped, {"scores": scores, "selection": selection, "lines": lines}


def _pct(x) -> str:
    return "n/a" if x is None or x != x else f"{100 * x:.1f} %"
