"""Where the configs are: the package's conf/ folder and the environment variable that names a
folder of the user's own configs (``closure-nn --config-dir DIR``). A leaf module, so that
composing (:mod:`closure_nn.config`) and checking (:mod:`closure_nn.config_checks`) both read it."""
from __future__ import annotations

from pathlib import Path

CONF_DIR = Path(__file__).resolve().parent.parent / "conf"
#: environment variable naming a folder of the user's own configs (``closure-nn --config-dir DIR``)
CONFIG_DIR_ENV = "CLOSURE_NN_CONFIG_DIR"
