"""Compose the Hydra configs in conf/ with ``key=value`` overrides (no Hydra app, no chdir)."""
from __future__ import annotations

from pathlib import Path

from .physics.checks import InputError

CONF_DIR = Path(__file__).resolve().parent.parent / "conf"


def load_config(name: str, overrides: list[str] | tuple[str, ...] = ()):
    """Compose ``conf/<name>.yaml`` with Hydra overrides such as ``closure.wall=churchill``.

    Returns an OmegaConf DictConfig. Bad overrides become :class:`InputError`.
    """
    from hydra import compose, initialize_config_dir
    from hydra.errors import HydraException
    from omegaconf.errors import OmegaConfBaseException

    if not (CONF_DIR / f"{name}.yaml").exists():
        raise InputError(f"no config {name!r} in {CONF_DIR}")
    try:
        with initialize_config_dir(config_dir=str(CONF_DIR), version_base=None):
            return compose(config_name=name, overrides=list(overrides))
    except (HydraException, OmegaConfBaseException) as exc:
        raise InputError(f"config {name}: {str(exc).splitlines()[0]}") from None


def require_complete(cfg, name: str) -> None:
    """Raise :class:`InputError` naming the first ``???`` value a user still has to give."""
    from omegaconf import OmegaConf
    from omegaconf.errors import MissingMandatoryValue

    try:
        OmegaConf.to_container(cfg, resolve=True, throw_on_missing=True)
    except MissingMandatoryValue as exc:
        raise InputError(f"config {name}: a value is required for {exc.full_key} (give {exc.full_key}=...)") from None
