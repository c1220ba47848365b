"""Every command writes into its own run folder: resolved config, metrics, plots, artefacts."""
from __future__ import annotations

import json
import os
import time
from pathlib import Path
from typing import Any

from .caution import CAUTION


def make_run_dir(command: str, root: str | os.PathLike | None = None, name: str | None = None) -> Path:
    """Create ``<root>/<command>-<YYYYmmdd-HHMMSS>[-n]`` (root defaults to ./runs) and return it.

    Writes CAUTION.txt into it.
    """
    base = Path(root if root is not None else "runs")
    stem = name or f"{command}-{time.strftime('%Y%m%d-%H%M%S')}"
    path = base / stem
    n = 1
    while path.exists():
        n += 1
        path = base / f"{stem}-{n}"
    path.mkdir(parents=True)
    (path / "CAUTION.txt").write_text(CAUTION + "\n")
    return path


def json_default(o: Any):
    """``json.dumps(default=...)`` hook: numpy/torch scalars and arrays, Paths."""
    if hasattr(o, "item") and getattr(o, "ndim", 0) == 0:
        return o.item()
    if hasattr(o, "tolist"):
        return o.tolist()
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"not JSON serialisable: {type(o).__name__}")


def write_json(path: str | os.PathLike, obj: Any) -> Path:
    """Write ``obj`` as indented JSON (numpy scalars and Paths converted)."""
    p = Path(path)
    p.write_text(json.dumps(obj, indent=2, default=json_default) + "\n")
    return p
