"""``closure-nn train``: pre-train, fine-tune or update a neural closure (conf/train.yaml).

Examples (key=value arguments are Hydra overrides)::

    closure-nn train data.train=synthetic.csv
    closure-nn train stage=finetune init_bundle=runs/train-.../bundle data.train=lab.csv
    closure-nn train resume=runs/train-.../checkpoints/last.ckpt
    closure-nn train --sweep 'model.hidden=[16,16],[32,32]' seed=0,1 data.train=synthetic.csv

``--sweep`` runs Hydra's multirun (closure_nn.training.sweep): one job per combination of the
comma-separated values, each in its own folder under <run_root>/sweep-<time>/, and a summary table.

Lightning (closure_nn.training.run) is imported inside :func:`run`, so that argument errors answer
without loading it.
"""
from __future__ import annotations

import argparse
from pathlib import Path

from omegaconf import OmegaConf

from ..caution import CAUTION
from ..config import load_config, require_complete
from ..config_checks import RESUME_SAFE, changed_keys, check_config, check_keys, flat_keys, show
from ..physics.checks import InputError
from ..training.sweep import check_jobs, plan, run_sweep


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--show-config", action="store_true",
                   help="print the composed config (with --sweep: the list of jobs) and exit")
    p.add_argument("--sweep", "-m", "--multirun", action="store_true",
                   help="Hydra multirun: comma-separated values (seed=0,1) give one job per combination; "
                        "quote list values ('model.hidden=[16,16],[32,32]')")


def _config(overrides: list[str]):
    """Compose conf/train.yaml; with ``resume=<ckpt>`` start from that run's saved config.

    A resume continues the SAME run: an override that changes the saved config is refused in one
    line naming the changed keys, except the keys of
    :data:`closure_nn.config_checks.RESUME_SAFE` (more epochs, progress bar, threads). The saved
    config.yaml is not rewritten (closure_nn.training.run.run_stage).
    """
    resume = [o.split("=", 1)[1] for o in overrides if o.startswith("resume=")]
    if not resume:
        return load_config("train", overrides)
    saved = Path(resume[-1]).resolve().parent.parent / "config.yaml"
    if not saved.exists():
        raise InputError(f"resume: {saved} not found (expected <run folder>/checkpoints/<file>.ckpt)")
    cfg = OmegaConf.load(saved)
    before = OmegaConf.to_container(cfg, resolve=True)
    check_keys([o.lstrip("+~").split("=", 1)[0] for o in overrides], flat_keys(before), f"resume: {saved}")
    try:
        cfg.merge_with_dotlist(list(overrides))
    except Exception as exc:  # OmegaConf raises several types for a bad dotlist
        raise InputError(f"config train: {str(exc).splitlines()[0]}") from None
    changed = changed_keys(before, OmegaConf.to_container(cfg, resolve=True))
    if changed:
        what = ", ".join(f"{k} ({show(a)} -> {show(b)})" for k, a, b in changed)
        raise InputError(f"resume: the overrides change the saved config of the run ({saved}): {what}; a resume "
                         f"continues the same run, only {', '.join(RESUME_SAFE)} may change (start a new run "
                         "for other settings)")
    check_config(cfg, "train")
    return cfg


def _sweep(args: argparse.Namespace, overrides: list[str]) -> int:
    """Plan the jobs, check every job's config, then hand the overrides to the Hydra app."""
    jobs = plan(overrides)
    if jobs is None:
        print("sweep: the jobs are chosen by the configured sweeper")
    elif args.show_config:
        for n, job in enumerate(jobs):
            print(f"#{n}: {' '.join(job)}")
        return 0
    else:
        check_jobs(jobs)
        print(f"sweep: {len(jobs)} job{'s' if len(jobs) != 1 else ''}")
    if args.show_config:
        return 0
    return run_sweep(overrides)


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    if args.sweep:
        return _sweep(args, overrides)
    cfg = _config(overrides)
    if args.show_config:
        print(OmegaConf.to_yaml(cfg))
        return 0
    require_complete(cfg, "train")
    from ..training.run import train

    m = train(cfg, say=print)
    print(f"stage {m['stage']}: run folder {m['run_dir']}")
    if "forgetting" in m:
        f = m["forgetting"]
        print(f"earlier data: holdup RMSE change {f['holdup_rmse']:+.4f}, pgrad relative RMS error change "
              f"{100 * f['pgrad_rel_rmse']:+.1f} percentage points")
    print(f"bundle: {m['bundle']}")
    print(CAUTION)
    return 0
