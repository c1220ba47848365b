"""Options shared by the commands: one spelling per concept.

``--closure baseline|PATH`` chooses a closure in every command (point, batch, audit, map, line,
evaluate). PATH is any of

* a closure bundle (a folder with ``bundle.json``),
* an ensemble (a folder with ``ensemble.json``),
* a training run folder (``closure-nn train``/``fit`` output) holding its ``bundle/``,
* (``--ensemble`` of ``closure-nn line`` only) a folder whose sub-folders are bundles.

Loading goes through :func:`closure_nn.api.load_closure`. ``--out DIR`` is everywhere the
PARENT of the new run folder. Old spellings keep working for one more version and print one
line saying what to write instead (:func:`deprecated`).
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

from ..api import load_closure
from ..closures.formula import is_formula_file
from ..closures.registry import build_closure, closure_source
from ..physics.checks import InputError

#: the word that names the mechanistic baseline (as in :func:`closure_nn.api.load_closure`)
BASELINE = "baseline"
#: files that mark a folder as a closure bundle / an ensemble
_MARKERS = ("bundle.json", "ensemble.json")

CLOSURE_HELP = ("'baseline' (the mechanistic baseline of the config) or PATH: a closure bundle, an ensemble "
                "folder, a training run folder (its bundle/ is used) or a distilled formula (distilled.json)")
OUT_HELP = "parent folder of the new run folder (default: run_root of the config, ./runs)"


def deprecated(old: str, new: str) -> None:
    """One line on stderr: ``old`` still works in this version; write ``new``. Called once the old
    spelling has worked, so that a failing run still prints a single line."""
    print(f"closure-nn: note: {old} is deprecated and goes in the next version; write {new}", file=sys.stderr)


def add_closure_option(p: argparse.ArgumentParser, help: str = CLOSURE_HELP, **kw) -> None:
    p.add_argument("--closure", default=None, metavar="baseline|PATH", help=help, **kw)


def add_out_option(p: argparse.ArgumentParser, help: str = OUT_HELP) -> None:
    p.add_argument("--out", default=None, metavar="DIR", help=help)


def _is_closure_folder(p: Path) -> bool:
    return p.is_dir() and any((p / m).is_file() for m in _MARKERS)


def closure_path(spec: str | Path) -> Path:
    """The bundle or ensemble folder that ``spec`` names: itself, or ``spec/bundle`` for a training
    run folder. A path that does not exist is returned unchanged (loading it names it as missing).

    Raises :class:`InputError` for an existing folder or file that holds no closure.
    """
    p = Path(spec)
    if not p.exists() or _is_closure_folder(p):
        return p
    if _is_closure_folder(p / "bundle"):
        return p / "bundle"
    if p.is_file() and p.name in _MARKERS:
        return p.parent
    if is_formula_file(p):
        return p
    raise InputError(f"{p}: not a closure; expected a bundle folder (bundle.json), an ensemble folder "
                     "(ensemble.json), a training run folder with bundle/ inside or a distilled formula "
                     "file (closure-nn distill)")


def load(spec: str | Path):
    """The closure ``spec`` names: ``'baseline'`` or a PATH (see :func:`closure_path`)."""
    if str(spec) == BASELINE:
        return load_closure(BASELINE)
    return load_closure(closure_path(spec))


def load_members(spec: str | Path) -> list:
    """The ensemble members behind ``spec``: an ensemble (its members), a bundle (itself), a
    training run folder (its bundle's members) or a folder whose sub-folders are bundles."""
    p = Path(spec)
    if p.is_dir() and not _is_closure_folder(p) and not _is_closure_folder(p / "bundle"):
        subs = sorted(d for d in p.iterdir() if _is_closure_folder(d))
        if subs:
            out = []
            for d in subs:
                out += load_members(d)
            return out
    c = load(p)
    return list(c.members) if hasattr(c, "members") else [c]


def _overrides_choose_closure(overrides: list[str]) -> bool:
    return any(o.split("=", 1)[0].lstrip("+~") in ("closure", "closure.path", "closure.source") and
               o.split("=", 1)[-1] != BASELINE for o in overrides)


def chosen_closure(spec: str | None, cfg, overrides: list[str]):
    """The closure of point, batch and audit: ``--closure`` (``spec``), else the config's closure.

    ``--closure baseline`` is the config's baseline (``closure.wall=...`` overrides apply).
    The old spelling ``closure=learned closure.path=PATH`` still works with a note.
    """
    if spec is not None:
        if spec == BASELINE and closure_source(cfg.closure) == BASELINE:
            return build_closure(cfg.closure)
        return load(spec)
    if _overrides_choose_closure(overrides):
        path = cfg.closure.get("path") if closure_source(cfg.closure) == "bundle" else None
        if closure_source(cfg.closure) == "bundle" and path is None:
            raise InputError("closure=learned needs closure.path=PATH; write --closure PATH instead")
        closure = load(str(path)) if path is not None else build_closure(cfg.closure)
        # the note after loading, so that a failure stays one line on stderr
        deprecated("closure=learned closure.path=PATH", f"--closure {path or 'PATH'}")
        return closure
    return build_closure(cfg.closure)
