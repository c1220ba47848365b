"""One entry point that loads any closure saved on disk (torch only: no Lightning, no Hydra).

A folder holding ``ensemble.json`` is an ensemble
(:func:`closure_nn.closures.ensemble.load_ensemble`); a folder holding ``bundle.json``, or that
file itself, is one neural closure (:func:`closure_nn.closures.bundle.load_bundle`); a JSON file of
format ``closure-nn-formula`` is a distilled closure (:func:`closure_nn.closures.formula.load_formula`,
written by ``closure-nn distill``). Every command
and :func:`closure_nn.api.load_closure` load through :func:`load_saved_closure`, so a format
added here is accepted by all of them. Errors are
:class:`~closure_nn.closures.bundle.BundleError` (an ``InputError``) naming the file.
"""
from __future__ import annotations

import os
from pathlib import Path

from .base import Closure
from .bundle import load_bundle
from .ensemble import ENSEMBLE_FILE, load_ensemble
from .formula import is_formula_file, load_formula


def load_saved_closure(path: str | os.PathLike) -> Closure:
    """The closure saved at ``path`` (an ensemble folder, a bundle or a formula file), in evaluation mode."""
    p = Path(path)
    if is_formula_file(p):
        return load_formula(p).eval()
    if p.is_dir() and (p / ENSEMBLE_FILE).exists():
        return load_ensemble(p)
    return load_bundle(p)
