"""Compose the Hydra configs in conf/ with ``key=value`` overrides (no Hydra app, no chdir).

Hydra is imported inside :func:`load_config`, when a config is composed: the CLI imports this
module for every command line, and ``closure-nn --help`` and argument errors never compose one.
"""
from __future__ import annotations

import os
from pathlib import Path

from omegaconf import OmegaConf
from omegaconf.errors import MissingMandatoryValue, OmegaConfBaseException

from .config_checks import check_config, override_error
from .config_location import CONF_DIR, CONFIG_DIR_ENV
from .physics.checks import InputError

__all__ = ["CONF_DIR", "CONFIG_DIR_ENV", "load_config", "require_complete"]


def load_config(name: str, overrides: list[str] | tuple[str, ...] = (), config_dir: str | Path | None = None):
    """Compose ``conf/<name>.yaml`` with Hydra overrides such as ``closure.wall=churchill``.

    ``config_dir``: a folder of the user's own configs (same layout as conf/: groups as
    sub-folders, e.g. ``DIR/design/my_loop.yaml``), searched BEFORE the package's, so a user adds
    or replaces a config without editing the installed tree. Returns an OmegaConf DictConfig.
    Bad overrides, unknown keys and values outside their allowed set or range
    (:func:`closure_nn.config_checks.check_config`) become :class:`InputError`.
    """
    from hydra import compose, initialize_config_dir
    from hydra.errors import HydraException

    if not (CONF_DIR / f"{name}.yaml").exists():
        raise InputError(f"no config {name!r} in {CONF_DIR}")
    extra = []
    config_dir = config_dir if config_dir is not None else (os.environ.get(CONFIG_DIR_ENV) or None)
    if config_dir is not None:
        d = Path(config_dir).resolve()
        if not d.is_dir():
            raise InputError(f"config folder {config_dir} not found (expected a folder of config groups)")
        extra = [f"hydra.searchpath=[file://{d}]"]

    def _compose(over):
        with initialize_config_dir(config_dir=str(CONF_DIR), version_base=None):
            return compose(config_name=name, overrides=[*extra, *over])

    try:
        cfg = _compose(list(overrides))
    except (HydraException, OmegaConfBaseException) as exc:
        raise override_error(name, overrides, exc, config_dir, compose=_compose) from None
    check_config(cfg, name, config_dir=config_dir)
    return cfg


def require_complete(cfg, name: str) -> None:
    """Raise :class:`InputError` naming the first ``???`` value a user still has to give."""
    try:
        OmegaConf.to_container(cfg, resolve=True, throw_on_missing=True)
    except MissingMandatoryValue as exc:
        raise InputError(f"config {name}: a value is required for {exc.full_key} (give {exc.full_key}=...)") from None
