"""Build a closure from its config (conf/closure/*.yaml): one entry point for every command."""
from __future__ import annotations

from collections.abc import Mapping

from ..physics.checks import InputError
from .base import Closure
from .baseline import BaselineClosure
from .loading import load_saved_closure


#: where a closure config's closure comes from (the key ``source`` of conf/closure/*.yaml)
SOURCES = ("baseline", "bundle")


def closure_source(cfg: Mapping) -> str:
    """``cfg['source']`` (default ``'baseline'``). Closure files written before 0.3.0 named it
    ``kind``; that spelling is still read."""
    return str(cfg.get("source", cfg.get("kind", "baseline")))


def build_closure(cfg: Mapping) -> Closure:
    """``source: baseline`` -> :class:`BaselineClosure`; ``source: bundle`` -> a saved closure
    (a bundle or an ensemble folder, ``path``).

    >>> build_closure({"source": "baseline", "wall": "churchill", "interface": "smooth"}).label
    'baseline(wall=churchill, interface=smooth, annular=wallis)'
    """
    kind = closure_source(cfg)
    if kind == "baseline":
        try:
            return BaselineClosure(
                wall=cfg.get("wall", "taitel_dukler"), interface=cfg.get("interface", "andritsos_hanratty"),
                annular_interface=cfg.get("annular_interface", "wallis"),
                interface_kwargs=dict(cfg.get("interface_kwargs") or {}),
            )
        except ValueError as exc:
            raise InputError(f"closure: {exc}") from None
    if kind == "bundle":
        return load_saved_closure(cfg["path"])
    raise InputError(f"closure.source = {kind!r}; expected 'baseline' or 'bundle'")
