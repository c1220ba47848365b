"""``closure-nn line``: march a line profile with closures side by side, write a run folder.

Examples::

    closure-nn line                                   # the invented demo line, baseline closure
    closure-nn line my_line.yaml --closure baseline --closure learned=runs/train-x --ensemble runs/ens-y
    closure-nn line line=karvel_ridge march.tol=20    # Hydra overrides of conf/line.yaml

``--closure`` (repeatable) lists the closures marched side by side, in order; without it the
config's closure (the baseline) and its ``compare`` entries. ``--ensemble DIR`` marches every
member of an ensemble for the uncertainty band.

The line calculation (closure_nn.line, which loads pandas and scipy) is imported inside :func:`run`,
so that argument errors answer without loading them; nothing here loads Lightning.
"""
from __future__ import annotations

import argparse
from pathlib import Path

import torch
from omegaconf import OmegaConf

from ..caution import CAUTION
from ..closures.baseline import BaselineClosure
from ..closures.registry import build_closure, closure_source
from ..config import load_config
from ..physics.checks import InputError
from ..run_folder import make_run_dir
from .options import CLOSURE_HELP, add_out_option, deprecated, load_members
from .options import load as load_closure_spec


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("line_file", nargs="?", default=None, metavar="LINE.yaml",
                   help="line definition (profile CSV + fluids, rates, one pressure); default: the config's line")
    p.add_argument("--closure", action="append", default=[], metavar="[NAME=]baseline|PATH",
                   help="a closure marched side by side, repeatable, in order: " + CLOSURE_HELP +
                        "; NAME= names it in the tables (default: 'baseline' or the folder name). "
                        "Default: the config's closure (the baseline)")
    p.add_argument("--ensemble", nargs="+", default=[], metavar="DIR",
                   help="an ensemble folder, a training run folder of an ensemble, a bundle, or a folder of bundle "
                        "folders; every member is marched for the uncertainty band")
    p.add_argument("--no-plot", action="store_true", help="skip the PNG")
    add_out_option(p)


def _closure_from_spec(spec: str, cfg):
    if spec == "baseline" and closure_source(cfg.closure) == "baseline":
        return build_closure(cfg.closure)  # closure.wall=... overrides apply
    return load_closure_spec(spec)


def _default_name(spec: str) -> str:
    """'baseline', else the folder name (the run folder's name for ``<run>/bundle``)."""
    p = Path(spec)
    if spec == "baseline":
        return spec
    return p.resolve().parent.name if p.name == "bundle" else (p.name or spec)


def _say(text: str) -> None:
    print(text, flush=True)


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    from ..line.definition import line_from_config
    from ..line.march import MarchSettings
    from ..line.run import run_line, write_line_run
    from ..report.line_plots import line_figure

    cfg, base_dir = _config(args, overrides)
    line = line_from_config(cfg.line, base_dir=base_dir, where=str(args.line_file or "conf line"))
    closures, old_spelling = _closures(args, cfg)
    has_base = any(isinstance(c, BaselineClosure) for c in closures.values())
    _say(f"closures side by side: {', '.join(closures)}" +
         ("" if has_base else " (add --closure baseline to compare with the baseline)"))
    members = []
    for d in list(cfg.get("ensemble") or []) + list(args.ensemble):
        members += load_members(str(d))
    try:
        settings = MarchSettings(**OmegaConf.to_container(cfg.march))
    except TypeError as exc:
        raise InputError(f"march: {exc}") from None
    torch.set_num_threads(max(1, int(cfg.get("threads", 1))))
    result = run_line(line, closures, members, solver=dict(cfg.solver), settings=settings, say=_say)
    run_dir = make_run_dir("line", args.out or cfg.run_root)
    plot = cfg.plot and not args.no_plot
    _say(f"writing stations.csv{', band.csv' if members else ''}, summary.json{' and line.png' if plot else ''}")
    files = write_line_run(result, run_dir, config_yaml=OmegaConf.to_yaml(cfg), figure=line_figure if plot else None)
    _print_summary(result, line)
    print(f"results: {run_dir} ({', '.join(p.name for p in files.values())})")
    print(CAUTION)
    if old_spelling:  # once the run worked: a failure stays one line
        deprecated("closure=learned closure.path=PATH", f"--closure {old_spelling}")
    return 0 if not result.failures else 1


def _config(args: argparse.Namespace, overrides: list[str]):
    """conf/line.yaml composed once, with the user's line file (and its ``line.`` overrides) in
    place of the config's line; returns the config and the folder of the line file (or None)."""
    line_over = [o for o in overrides if o.startswith("line.")]
    cfg = load_config("line", [o for o in overrides if not o.startswith("line.")] if args.line_file else overrides)
    base_dir = None
    if args.line_file:
        path = Path(args.line_file)
        if not path.exists():
            raise FileNotFoundError(2, "no such line file", str(path))
        user = OmegaConf.load(path)
        if line_over:
            user = OmegaConf.merge(user, OmegaConf.from_dotlist([o[len("line."):] for o in line_over]))
        cfg.line = user
        base_dir = path.parent
    return cfg, base_dir


def _closures(args: argparse.Namespace, cfg) -> tuple[dict, str | None]:
    """The closures marched side by side, by name in order, and the path given in the old
    spelling ``closure=learned closure.path=PATH`` (None if not used)."""
    closures = {}
    old_spelling = None
    if not args.closure:
        if closure_source(cfg.closure) == "bundle":  # the old spelling closure=learned closure.path=PATH
            if cfg.closure.get("path") is None:
                raise InputError("closure=learned needs closure.path=PATH; write --closure PATH instead")
            old_spelling = str(cfg.closure.path)
            closures[_default_name(old_spelling)] = load_closure_spec(old_spelling)
        else:
            closures[closure_source(cfg.closure)] = build_closure(cfg.closure)
        for name, ccfg in (cfg.get("compare") or {}).items():
            closures[str(name)] = build_closure(ccfg)
    for item in args.closure:
        name, _, spec = item.rpartition("=")
        name = name or _default_name(spec)
        if name in closures:
            raise InputError(f"--closure {item!r}: the name {name!r} is already used; write NAME=PATH")
        closures[name] = _closure_from_spec(spec, cfg)
    return closures, old_spelling


def _print_summary(result, line) -> None:
    """Per closure: inlet and outlet pressure, pressure drop, liquid inventory, domain and march
    notes; then the ensemble's range and any failures."""
    summ = result.summary()
    print(f"line {line.name}{' (invented)' if line.invented else ''}: {summ['length_m'] / 1e3:.2f} km, "
          f"{line.boundary} pressure {line.p_boundary / 1e5:.3f} bar given")
    for name, s in summ["closures"].items():
        ood = s["out_of_domain"]
        ood_txt = f", outside training domain at {ood['stations']} stations" if ood.get("checked") and ood["stations"] else ""
        mea = s["out_of_measured_domain"]
        if mea.get("checked"):
            ood_txt += f", outside measured data at {mea['stations']} of {mea['of']} stations"
            if not mea.get("recorded", True):
                ood_txt += " (the bundle records no measured-data domain)"
        print(f"  {name:<14} inlet {s['p_inlet_bar']:8.3f} bar  outlet {s['p_outlet_bar']:8.3f} bar  "
              f"dp {s['dp_total_Pa'] / 1e5:7.3f} bar (friction {s['dp_friction_Pa'] / 1e5:.3f}, gravity "
              f"{s['dp_gravity_Pa'] / 1e5:.3f})  liquid {s['liquid_inventory_m3']:8.1f} m3{ood_txt}")
        m = s["march"]
        if m.get("outlet_target_in_pattern_jump"):
            print(f"  {'':<14} note: the outlet target falls in a {m['outlet_jump_Pa']:.0f} Pa jump of the outlet "
                  f"pressure (a flow-pattern switch); closest solution reported, miss {m['outlet_miss_Pa']:.0f} Pa")
        elif not m["converged"]:
            print(f"  {'':<14} note: the march did not fully converge (last sweep change {m['last_sweep_change_Pa']:.3g} Pa)")
    if "ensemble" in summ:
        e = summ["ensemble"]
        print(f"  ensemble of {e['members']}: inlet {e['p_inlet_Pa']['min'] / 1e5:.3f}-{e['p_inlet_Pa']['max'] / 1e5:.3f} bar, "
              f"liquid {e['liquid_inventory_m3']['min']:.1f}-{e['liquid_inventory_m3']['max']:.1f} m3")
    for name, msg in summ.get("failures", {}).items():
        print(f"  {name}: FAILED - {msg}")
