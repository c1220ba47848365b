"""The closure bundle: one directory holding a trained neural closure and everything about it.

Layout (our own format, ``format = "closure-nn-bundle"``)::

    <bundle>/
      bundle.json   metadata: format and version, model constructor arguments, feature names,
                    scaler, training-domain and measured-data-domain summaries, data provenance,
                    metrics, resolved training config, package versions, SHA-256 of the weights,
                    the caution
      weights.pt    the state dict (float64 tensors; includes scaler and domain buffers)

Bundles written before the measured-data domain existed have no ``measured_*`` buffers: they
load with an empty measured-data domain and ``closure.measured_domain_recorded = False``.

:func:`load_bundle` rebuilds the :class:`~closure_nn.closures.neural.NeuralClosure` with torch
only (no Lightning, no Hydra) and checks it: missing file or key, unparsable JSON, unknown format
version, a feature list that differs from this code's :data:`~closure_nn.physics.groups.FEATURE_NAMES`,
a checksum mismatch and weights that do not fit the model each raise :class:`BundleError` with
the file and what was expected. Any saved closure (a bundle or an ensemble folder) loads with
:func:`closure_nn.closures.loading.load_saved_closure`.

:func:`export_plain` writes the network as plain JSON (matrices, activation, scaler, output
formula) for solvers not written in Python; they compute the features and the baseline
themselves from the documented formulas.
"""
from __future__ import annotations

import hashlib
import json
import os
import platform
import shutil
import time
import uuid
from importlib.metadata import version
from pathlib import Path

import numpy
import torch
import torch.nn as nn

from ..caution import CAUTION
from ..run_folder import write_json
from ..physics.checks import InputError
from ..physics.groups import FEATURE_NAMES
from .neural import OUTPUT_NAMES, NeuralClosure

BUNDLE_FORMAT = "closure-nn-bundle"
BUNDLE_VERSION = 2
#: versions this code reads: 1 = before the measured-data domain (no ``measured_*`` buffers), 2 = with it
READABLE_VERSIONS = (1, 2)
PLAIN_FORMAT = "closure-nn-plain-mlp"
META_FILE, WEIGHTS_FILE = "bundle.json", "weights.pt"
REQUIRED_KEYS = ("format", "format_version", "model", "feature_names", "checksums")


class BundleError(InputError):
    """A bundle that cannot be loaded: corrupted, incomplete or made for other code."""


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def versions() -> dict[str, str]:
    """Versions of the packages a bundle was written with."""
    try:
        own = version("closure-nn")
    except Exception:  # not installed as a distribution
        own = "unknown"
    return {"closure_nn": own, "torch": torch.__version__, "numpy": numpy.__version__,
            "python": platform.python_version()}


def save_bundle(closure: NeuralClosure, path: str | os.PathLike, *, provenance: dict | None = None,
                metrics: dict | None = None, config: dict | None = None, domain: dict | None = None) -> Path:
    """Write ``closure`` as a bundle directory at ``path`` and return the path.

    The bundle is written into a new sibling folder and then swapped in (:func:`_swap_in`), so an
    error or a crash while saving leaves the previous bundle at ``path`` as it was. Other files
    a user kept in an existing bundle folder are carried over. Metadata is strict JSON (NaN and
    infinities as ``null``).
    """
    p = Path(path)
    if p.exists() and not p.is_dir():
        raise InputError(f"{p}: exists and is not a folder; choose another path for the bundle")
    p.parent.mkdir(parents=True, exist_ok=True)
    new = p.with_name(f".{p.name}.new-{os.getpid()}-{uuid.uuid4().hex[:8]}")
    new.mkdir()
    try:
        wpath = new / WEIGHTS_FILE
        state = {k: v.detach().clone() for k, v in closure.state_dict().items()}
        torch.save(state, wpath)
        meta = {
            "format": BUNDLE_FORMAT, "format_version": BUNDLE_VERSION,
            "created": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
            "model": closure.hparams, "label": closure.label,
            "feature_names": list(FEATURE_NAMES), "outputs": list(OUTPUT_NAMES),
            "scaler": {"mean": closure.feature_mean.tolist(), "std": closure.feature_std.tolist()},
            "domain": domain or {"n_points": int(closure.domain_points.shape[0]),
                                 "nn_threshold": float(closure.domain_threshold)},
            "measured_domain": _measured_summary(closure),
            "provenance": provenance or {}, "metrics": metrics or {}, "config": config or {},
            "versions": versions(), "checksums": {WEIGHTS_FILE: _sha256(wpath)}, "caution": CAUTION,
        }
        write_json(new / META_FILE, meta)
        _carry_over(p, new)
        _swap_in(new, p)
    except BaseException:
        shutil.rmtree(new, ignore_errors=True)
        raise
    return p


def _carry_over(old: Path, new: Path) -> None:
    """Copy what a user kept in the existing bundle folder ``old`` (anything but the metadata and
    the weights) into ``new``."""
    if not old.is_dir():
        return
    for item in old.iterdir():
        if item.name in (META_FILE, WEIGHTS_FILE):
            continue
        if item.is_dir() and not item.is_symlink():
            shutil.copytree(item, new / item.name, symlinks=True)
        else:
            shutil.copy2(item, new / item.name, follow_symlinks=False)


def _swap_in(new: Path, target: Path) -> None:
    """Put the folder ``new`` at ``target``: rename the old folder aside, rename ``new`` into
    place, delete the old one. Until the second rename the old folder is whole (it is put back if
    that rename fails); between the two renames ``target`` is absent for an instant and the old
    bundle sits beside it as ``.<name>.old-*``."""
    if not target.exists():
        os.rename(new, target)
        return
    aside = target.with_name(f".{target.name}.old-{os.getpid()}-{uuid.uuid4().hex[:8]}")
    os.rename(target, aside)
    try:
        os.rename(new, target)
    except BaseException:
        os.rename(aside, target)
        raise
    shutil.rmtree(aside, ignore_errors=True)


#: state-dict keys of the measured-data domain (absent from older bundles)
MEASURED_KEYS = ("measured_lo", "measured_hi", "measured_points", "measured_threshold")


def _measured_summary(closure: NeuralClosure) -> dict:
    """Readable summary of the measured-data domain (the points travel in the weights)."""
    n = int(closure.measured_points.shape[0])
    return {"n_points": n, "nn_threshold": float(closure.measured_threshold),
            "lo": closure.measured_lo.tolist() if n else None, "hi": closure.measured_hi.tolist() if n else None,
            "rows": "fine-tune and update stages (measured rows), not the synthetic pre-training points",
            "units": "standardised features z = (x - mean) / std"}


def read_metadata(path: str | os.PathLike) -> dict:
    """The checked ``bundle.json`` of a bundle directory (or the path of the file itself)."""
    p = Path(path)
    mpath = p if p.is_file() else p / META_FILE
    if not mpath.exists():
        raise BundleError(f"{p}: not a closure bundle ({META_FILE} is missing)")
    try:
        meta = json.loads(mpath.read_text())
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise BundleError(f"{mpath}: corrupted bundle metadata, not valid JSON ({exc})") from None
    if not isinstance(meta, dict):
        raise BundleError(f"{mpath}: corrupted bundle metadata (expected a JSON object)")
    missing = [k for k in REQUIRED_KEYS if k not in meta]
    if missing:
        raise BundleError(f"{mpath}: bundle metadata lacks the key(s) {', '.join(missing)}")
    if meta["format"] != BUNDLE_FORMAT or meta["format_version"] not in READABLE_VERSIONS:
        raise BundleError(f"{mpath}: format {meta['format']!r} version {meta['format_version']!r}; this code reads "
                          f"{BUNDLE_FORMAT!r} versions {', '.join(map(str, READABLE_VERSIONS))}")
    if list(meta["feature_names"]) != list(FEATURE_NAMES):
        raise BundleError(f"{mpath}: the bundle was trained on features {meta['feature_names']}, this code computes "
                          f"{list(FEATURE_NAMES)}; retrain or use the matching closure-nn version")
    return meta


def load_bundle(path: str | os.PathLike):
    """Load a bundle directory as a :class:`NeuralClosure`; the metadata is attached as
    ``closure.bundle_metadata``. Raises :class:`BundleError` (see module docstring). Any saved
    closure, ensembles included: :func:`closure_nn.closures.loading.load_saved_closure`."""
    p = Path(path)
    if not p.exists():
        raise BundleError(f"{p}: no such closure bundle")
    root = p if p.is_dir() else p.parent
    meta = read_metadata(p)
    wpath = root / WEIGHTS_FILE
    if not wpath.exists():
        raise BundleError(f"{root}: bundle weights {WEIGHTS_FILE} are missing")
    expected = meta["checksums"].get(WEIGHTS_FILE)
    actual = _sha256(wpath)
    if expected != actual:
        raise BundleError(f"{wpath}: checksum mismatch (metadata says sha256 {expected}, file has {actual}); "
                          "the weights are corrupted or belong to another bundle")
    try:
        state = torch.load(wpath, map_location="cpu", weights_only=True)
    except Exception as exc:  # torch raises several types for a damaged pickle/zip
        raise BundleError(f"{wpath}: cannot read the weights ({str(exc).splitlines()[0]})") from None
    try:
        closure = NeuralClosure(**meta["model"])
    except (TypeError, ValueError) as exc:
        raise BundleError(f"{root / META_FILE}: bad model description {meta['model']} ({exc})") from None
    if "domain_points" in state:
        closure.set_domain(state["domain_lo"], state["domain_hi"], state["domain_points"], float(state["domain_threshold"]))
    recorded = all(k in state for k in MEASURED_KEYS)
    if recorded:
        closure.set_measured_domain(*(state[k] for k in MEASURED_KEYS[:3]), float(state["measured_threshold"]))
    elif not any(k in state for k in MEASURED_KEYS):  # an older bundle: no measured-data domain recorded
        own = closure.state_dict()
        state = {**state, **{k: own[k] for k in MEASURED_KEYS}}
    try:
        closure.load_state_dict(state, strict=True)
    except RuntimeError as exc:
        first = str(exc).splitlines()[0]
        raise BundleError(f"{wpath}: the weights do not fit the model described in {META_FILE} ({first})") from None
    closure.measured_domain_recorded = recorded
    closure.bundle_metadata = meta
    closure.eval()
    return closure


def export_plain(closure: NeuralClosure, path: str | os.PathLike) -> Path:
    """Write the network as plain JSON for non-Python solvers; returns the file path.

    Evaluation (all float64), for features x (11 values, definitions in
    :mod:`closure_nn.physics.groups`) and the baseline factors f_base (f_wl, f_wg, f_i):
    ``z = (x - mean) / std``; where ``base_input`` is true, z gets a 12th entry (index 11),
    ``ln(f_base[f_i] / f_base[f_wg])``, not standardised; each branch takes ``z[inputs]``, applies its layers
    ``y = act(W y + b)`` (no activation after the last) and yields the outputs listed in
    ``outputs`` (indices into f_wl, f_wg, f_i), giving o; correction mode
    ``f = f_base * exp(bound * tanh(o))``, direct mode ``f = exp(log_f_ref + span * tanh(o / span))``;
    outputs ordered f_wl, f_wg, f_i.

    Measured-data domain (``measured_domain``): a state is inside when every z lies in
    ``[lo, hi]`` and the Euclidean distance from z to the nearest of ``points`` is at most
    ``threshold``; with no points every state is outside.
    """
    branches = []
    for branch, idx, outs in zip(closure.branches, closure.branch_inputs, closure.branch_outputs):
        layers = [{"W": m.weight.detach().tolist(), "b": m.bias.detach().tolist()} for m in branch if isinstance(m, nn.Linear)]
        branches.append({"inputs": list(idx), "outputs": list(outs), "layers": layers})
    spec = {
        "format": PLAIN_FORMAT, "format_version": 1, "feature_names": list(FEATURE_NAMES),
        "outputs": list(OUTPUT_NAMES), "activation": closure.activation, "mode": closure.mode,
        "base_input": closure.base_input, "bound": closure.bound_vec.tolist(), "direct_span": closure.direct_span, "log_f_ref": closure.log_f_ref.tolist(),
        "baseline": closure.hparams["baseline"],
        "scaler": {"mean": closure.feature_mean.tolist(), "std": closure.feature_std.tolist()},
        "branches": branches,
        "measured_domain": _plain_domain(closure),
        "activation_definitions": {"silu": "x / (1 + exp(-x))", "tanh": "tanh(x)",
                                   "softplus": "x if x > 20 else log(1 + exp(x))", "gelu": "0.5 x (1 + erf(x / sqrt(2)))"},
        "evaluation": export_plain.__doc__.split("Evaluation", 1)[1].strip(),
        "label": closure.label, "caution": CAUTION,
    }
    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    p.write_text(json.dumps(spec, indent=1) + "\n")
    return p


def _plain_domain(closure: NeuralClosure) -> dict:
    """The measured-data domain for :func:`export_plain` (plain lists, standardised units; no
    infinities, so strict JSON readers accept it)."""
    n = int(closure.measured_points.shape[0])
    return {"recorded": bool(getattr(closure, "measured_domain_recorded", True)), "n_points": n,
            "lo": closure.measured_lo.tolist() if n else None, "hi": closure.measured_hi.tolist() if n else None,
            "points": closure.measured_points.tolist(), "threshold": float(closure.measured_threshold),
            "units": "standardised features z = (x - mean) / std"}
