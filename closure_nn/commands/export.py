"""``closure-nn export``: write a closure bundle as an ONNX graph or as plain JSON for other solvers.

``closure-nn export BUNDLE --format onnx|json [--out DIR]`` makes a run folder under DIR
(default ``runs``) with ``closure.onnx`` or ``closure.json`` (an ensemble: one
``member_<i>.onnx``/``.json`` per member) and ``export.json``, which names the source bundle,
the files, the graph inputs and, for an ensemble, how the members combine. Formats:
:mod:`closure_nn.closures.export_onnx` and docs/closure_json_format.md.
"""
from __future__ import annotations

import argparse
from pathlib import Path

from ..caution import CAUTION
from ..closures.bundle import export_plain
from ..closures.ensemble import ClosureEnsemble
from ..closures.export_onnx import (INPUT_DESCRIPTION, OUTPUT_DESCRIPTION, check_exportable, check_onnx,
                                    export_onnx)
from ..closures.loading import load_saved_closure
from ..closures.neural import NeuralClosure
from ..physics.checks import InputError
from ..physics.groups import FEATURE_NAMES
from ..run_folder import make_run_dir, write_json

FORMATS = ("onnx", "json")
ENSEMBLE_RULE = "f_k = exp(mean over members of ln f_k,member): the geometric mean of the members' factors"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("bundle", help="closure bundle folder (bundle.json + weights.pt) or ensemble folder (ensemble.json)")
    p.add_argument("--format", required=True, help="onnx (an ONNX graph, float64) or json (plain JSON, "
                                                   "docs/closure_json_format.md)")
    p.add_argument("--out", metavar="DIR", default=None, help="parent of the run folder (default: runs)")


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    fmt = str(args.format).lower()
    if fmt not in FORMATS:
        raise InputError(f"--format {args.format!r}: expected one of {', '.join(FORMATS)}")
    if overrides:
        raise InputError(f"export takes no key=value settings, got {' '.join(overrides)}")
    src = Path(args.bundle)
    if not src.is_dir():
        raise InputError(f"{src}: not a closure bundle folder (no such folder)")
    closure = load_saved_closure(src)  # BundleError (an InputError) names the file and what is wrong
    members = list(closure.members) if isinstance(closure, ClosureEnsemble) else [closure]
    bad = [type(m).__name__ for m in members if not isinstance(m, NeuralClosure)]
    if bad:
        raise InputError(f"{src}: only neural closures export, found {', '.join(bad)}")
    if fmt == "onnx":
        for m in members:
            check_exportable(m)
    names = [f"member_{i}" for i in range(len(members))] if isinstance(closure, ClosureEnsemble) else ["closure"]
    run_dir = make_run_dir("export", args.out)
    files, checks = [], {}
    for name, m in zip(names, members):
        path = run_dir / f"{name}.{fmt}"
        if fmt == "onnx":
            export_onnx(m, path)
            checks[path.name] = check_onnx(m, path)
        else:
            export_plain(m, path)
        files.append(path.name)
    summary = {
        "source": str(src.resolve()), "format": fmt, "files": files, "closure": closure.label,
        "inputs": INPUT_DESCRIPTION, "outputs": OUTPUT_DESCRIPTION,
        "feature_names": list(FEATURE_NAMES),
        "baseline": {f: m.hparams["baseline"] for f, m in zip(files, members)},
        "source_checksums": {f: getattr(m, "bundle_metadata", {}).get("checksums", {}) for f, m in zip(files, members)},
        "format_doc": ("closure_nn/closures/export_onnx.py (module docstring)" if fmt == "onnx"
                       else "docs/closure_json_format.md"),
        "caution": CAUTION,
    }
    if isinstance(closure, ClosureEnsemble):
        summary["ensemble"] = {"members": len(members), "combination": ENSEMBLE_RULE}
    if fmt == "onnx":
        summary["onnxruntime_check"] = {
            "max_abs_diff_vs_torch": checks,
            "inputs": "256 random rows, features within +-3 scaler standard deviations, seed 0",
            "null": "onnxruntime is not installed"}
    write_json(run_dir / "export.json", summary)
    for f in files:
        print(f"wrote {run_dir / f}")
    if isinstance(closure, ClosureEnsemble):
        print(f"ensemble of {len(members)} members: {ENSEMBLE_RULE}")
    worst = [v for v in checks.values() if v is not None]
    if worst:
        print(f"ONNX Runtime vs torch on 256 random inputs: max |difference| {max(worst):.2e}")
    print(CAUTION)
    return 0
