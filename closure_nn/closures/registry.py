"""Build a closure from its config (conf/closure/*.yaml): one entry point for every command."""
from __future__ import annotations

from collections.abc import Mapping

from ..physics.checks import InputError
from .base import Closure
from .baseline import BaselineClosure


def build_closure(cfg: Mapping) -> Closure:
    """``kind: baseline`` -> :class:`BaselineClosure`; ``kind: bundle`` -> a trained closure bundle.

    >>> build_closure({"kind": "baseline", "wall": "churchill", "interface": "smooth"}).label
    'baseline(wall=churchill, interface=smooth, annular=wallis)'
    """
    kind = cfg.get("kind", "baseline")
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
        from .loading import load_saved_closure  # torch is imported only for a saved closure

        return load_saved_closure(cfg["path"])
    raise InputError(f"closure.kind = {kind!r}; expected 'baseline' or 'bundle'")
