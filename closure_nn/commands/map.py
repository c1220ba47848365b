"""``closure-nn map``: a flow-pattern map of the baseline (filled) and optionally another closure
(``--closure PATH``, dashed boundaries), with the rows of a measurement table drawn by their
observed pattern.

Writes ``pattern_map.png``, ``pattern_map.csv`` (grid codes as names), ``summary.json`` and the
resolved config into a run folder. With ``--bands`` (needs ``--data``) also ``pattern_bands.png``:
every row of the table, one panel per inclination band, each observation solved at its own
conditions by the drawn closure, with its score per band (``band_scores`` in summary.json;
closure_nn.report.pattern_bands).

pandas and the data layer (which loads pandas and scipy) are imported inside :func:`run`, so that
``closure-nn map --help`` and argument errors answer without loading them.
"""
from __future__ import annotations

import argparse
import math

import numpy as np
from omegaconf import OmegaConf

from ..caution import CAUTION
from ..closures.registry import build_closure
from ..config import load_config
from ..physics.checks import InputError, check_conditions
from ..physics.conditions import make_conditions
from ..physics.vocabulary import PATTERNS
from ..report.pattern_bands import band_accuracy, plot_pattern_bands
from ..report.pattern_map import compute_pattern_map, disagreement, plot_pattern_map
from ..run_folder import make_run_dir, write_json
from .options import CLOSURE_HELP, add_closure_option, add_out_option, deprecated, load


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--data", default=None, help="measurement table to overlay (.csv or .parquet)")
    add_closure_option(p, help="the closure whose region boundaries are drawn dashed over the baseline's filled "
                               "regions: " + CLOSURE_HELP + " (default: the baseline alone)")
    p.add_argument("--bands", action="store_true",
                   help="with --data: also pattern_bands.png, one panel per inclination band with every row of the "
                        "table and the closure's score per band (the --closure one if given, else the baseline)")
    p.add_argument("--learned", default=None, help=argparse.SUPPRESS)  # old spelling of --closure
    add_out_option(p)


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    import pandas as pd

    from ..data.result_tables import write_result_csv
    from ..data.table_io import read_table
    from ..data.validate import validate_table

    cfg = load_config("map", overrides)
    fluids = {k: _number(v, f"fluids.{k}") for k, v in OmegaConf.to_container(cfg.fluids, resolve=True).items()}
    kw = dict(D=_number(cfg.D, "D"), theta_deg=_number(cfg.theta_deg, "theta_deg"), fluids=fluids,
              roughness=_number(cfg.roughness, "roughness"), vsl=_axis(cfg.vsl, "vsl"), vsg=_axis(cfg.vsg, "vsg"),
              n=_count(cfg.n), solver=dict(cfg.solver))
    check_conditions(make_conditions(vsl=list(cfg.vsl), vsg=list(cfg.vsg), D=kw["D"], theta=math.radians(kw["theta_deg"]),
                                     roughness=kw["roughness"], **fluids), where="map config")
    spec, old = args.closure, None
    if spec is None and (args.learned or cfg.learned):  # the old spellings --learned PATH, learned=PATH
        spec = str(args.learned or cfg.learned)
        old = "--learned PATH" if args.learned else "learned=PATH"
    base_closure = build_closure(cfg.closure)
    other_closure = None if spec in (None, "baseline") else load(spec)
    base = compute_pattern_map(base_closure, **kw)
    other = compute_pattern_map(other_closure, **kw) if other_closure is not None else None
    if args.bands and not args.data:
        raise InputError("map --bands scores observations per inclination band: give the table with --data FILE")
    data, note, df = None, "", None
    if args.data:
        val = validate_table(read_table(args.data), path=args.data)
        df = val.clean
        near = ((df["D"] / kw["D"] - 1).abs() <= float(cfg.data_D_rel)) & \
               ((np.degrees(df["theta"]) - kw["theta_deg"]).abs() <= float(cfg.data_theta_deg))
        data = df[near]
        note = (f"Points: {len(data)} of {len(df)} valid rows of {args.data} with D within "
                f"{100 * float(cfg.data_D_rel):g} % and inclination within {float(cfg.data_theta_deg):g} deg of the map.")
    run_dir = make_run_dir("map", args.out or cfg.run_root)
    (run_dir / "config.yaml").write_text(OmegaConf.to_yaml(cfg))
    png = plot_pattern_map(base, run_dir / "pattern_map.png", other=other, data=data, data_note=note)
    grid = pd.DataFrame({"vsl": np.repeat(base.vsl, len(base.vsg)), "vsg": np.tile(base.vsg, len(base.vsl)),
                         "pattern": [PATTERNS[int(c)] for c in base.codes.ravel()]})
    if other is not None:
        grid["pattern_learned"] = [PATTERNS[int(c)] for c in other.codes.ravel()]
    write_result_csv(grid, run_dir / "pattern_map.csv")  # headers with units: vsl [m/s], vsg [m/s]
    summary = {"closure": base.label, "learned": other.label if other else None, **{k: v for k, v in kw.items() if k != "solver"},
               "share_disagreeing": disagreement(base, other) if other else None,
               "data_points": 0 if data is None else len(data), "caution": CAUTION}
    if args.bands:
        summary["band_scores"] = _bands(other_closure or base_closure, df, run_dir, kw, args.data)
    write_json(run_dir / "summary.json", summary)
    print(f"pattern map of {base.label}: {png}")
    if other is not None:
        print(f"learned closure {other.label} differs on {100 * summary['share_disagreeing']:.1f} % of the grid")
    if note:
        print(note)
    print(CAUTION)
    if old:  # once the run worked: a failure stays one line
        deprecated(old, f"--closure {spec}")
    return 0


def _bands(closure, df, run_dir, kw: dict, source: str) -> list[dict]:
    """Band figure and scores of every row of ``df`` (closure_nn.report.pattern_bands)."""
    fluids = {k: v for k, v in kw["fluids"].items() if k not in df}
    data = df.assign(**fluids) if fluids else df
    scores = band_accuracy(closure, data, solver=kw["solver"])
    plot_pattern_bands(closure, data, run_dir / "pattern_bands.png", fluids=kw["fluids"], solver=kw["solver"],
                       data_note=f"Points: every valid row of {source}.")
    for s in scores:
        print(f"  {s['band'][0]:+g} to {s['band'][1]:+g} deg: {s['correct']} of {s['n']} observed patterns reproduced")
    return [{**s, "band": list(s["band"]), "accuracy": s["accuracy"] if s["n"] else None} for s in scores]


def _number(value, key: str) -> float:
    """``value`` of the map config as a float, else InputError naming the key."""
    try:
        return float(value)
    except (TypeError, ValueError):
        raise InputError(f"config map: {key} = {value!r}; expected a number") from None


def _axis(value, key: str) -> tuple[float, float]:
    """An axis range ``[low, high]`` [m/s] with 0 < low < high."""
    vals = [_number(v, key) for v in (value if not isinstance(value, (str, int, float)) else [value])]
    if len(vals) != 2 or not 0 < vals[0] < vals[1]:
        raise InputError(f"config map: {key} = {vals}; expected [low, high] in m/s with 0 < low < high "
                         "(the axis is logarithmic)")
    return vals[0], vals[1]


def _count(value) -> int:
    """Grid points per axis: a whole number >= 2."""
    if isinstance(value, bool) or not isinstance(value, int) or value < 2:
        raise InputError(f"config map: n = {value!r}; expected a whole number >= 2 (grid points per axis)")
    return value
