"""Every command writes into its own run folder: resolved config, metrics, plots, artefacts.

Outputs are written atomically: :func:`atomic_path` hands out a temporary file beside the target
and moves it into place with :func:`os.replace` only when writing succeeded, so a crash or an
error mid-write leaves either the previous file or none, never half a file. JSON is strict
(RFC 8259): NaN and infinities are written as ``null``.
"""
from __future__ import annotations

import json
import math
import os
import time
import uuid
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Iterator

from .caution import CAUTION

#: run folders made by :func:`make_run_dir` in this process, newest last (the CLI's error
#: boundary uses it to place the error log and to remove a folder a refused run left empty)
CREATED_RUN_DIRS: list[Path] = []


def make_run_dir(command: str, root: str | os.PathLike | None = None, name: str | None = None) -> Path:
    """Create ``<root>/<command>-<YYYYmmdd-HHMMSS>[-n]`` (root defaults to ./runs) and return it.

    Writes CAUTION.txt into it.
    """
    base = Path(root if root is not None else "runs")
    stem = name or f"{command}-{time.strftime('%Y%m%d-%H%M%S')}"
    path = base / stem
    n = 1
    while True:
        try:
            path.mkdir(parents=True)
            break
        except FileExistsError:
            n += 1
            path = base / f"{stem}-{n}"
    CREATED_RUN_DIRS.append(path)
    atomic_write_text(path / "CAUTION.txt", CAUTION + "\n")
    return path


def _temporary_sibling(p: Path) -> Path:
    return p.with_name(f".{p.name}.{os.getpid()}-{uuid.uuid4().hex[:8]}.part")


@contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path in the folder of ``path``; when the block ends without an error the
    temporary file replaces ``path`` in one step (:func:`os.replace`), else it is removed.

    The folder must exist. Use for writers that take a path (pandas, torch.save, matplotlib)::

        with atomic_path(out / "results.csv") as tmp:
            df.to_csv(tmp, index=False)
    """
    p = Path(path)
    tmp = _temporary_sibling(p)
    try:
        yield tmp
        os.replace(tmp, p)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def atomic_write_text(path: str | os.PathLike, text: str, encoding: str = "utf-8") -> Path:
    """Write ``text`` to ``path`` atomically (see :func:`atomic_path`); returns the path."""
    p = Path(path)
    with atomic_path(p) as tmp:
        with open(tmp, "w", encoding=encoding, newline="") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
    return p


def json_default(o: Any):
    """``json.dumps(default=...)`` hook: numpy/torch scalars and arrays, Paths."""
    if hasattr(o, "item") and getattr(o, "ndim", 0) == 0:
        return o.item()
    if hasattr(o, "tolist"):
        return o.tolist()
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"not JSON serialisable: {type(o).__name__}")


def to_jsonable(obj: Any) -> Any:
    """``obj`` with numpy/torch values as Python numbers and lists, Paths as text, tuples and sets
    as lists and every NaN or infinity as ``None`` (JSON has no such numbers).

    >>> import numpy as np
    >>> to_jsonable({"a": np.float64("nan"), "b": [1.5, float("inf")], "c": np.arange(2)})
    {'a': None, 'b': [1.5, None], 'c': [0, 1]}
    """
    if isinstance(obj, dict):
        return {(k if isinstance(k, str) else str(k)): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple, set, frozenset)):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, (str, bool, int)) or obj is None:
        return obj
    if isinstance(obj, float):
        return float(obj) if math.isfinite(obj) else None
    try:
        conv = json_default(obj)
    except TypeError:
        return obj  # json.dumps raises its own TypeError naming the type
    return to_jsonable(conv)


def dumps_json(obj: Any, indent: int | None = 2) -> str:
    """Strict JSON text of ``obj`` (see :func:`to_jsonable`)."""
    return json.dumps(to_jsonable(obj), indent=indent, allow_nan=False, default=json_default)


def write_json(path: str | os.PathLike, obj: Any) -> Path:
    """Write ``obj`` as indented strict JSON, atomically (numpy/torch values and Paths converted,
    NaN and infinities as ``null``)."""
    return atomic_write_text(path, dumps_json(obj) + "\n")
