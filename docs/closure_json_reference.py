"""Reference evaluator of a closure-nn plain-JSON closure (docs/closure_json_format.md), numpy only.

    python docs/closure_json_reference.py closure.json features.csv log_f_base.csv

features: (N, 11) raw closure features in the order of spec["feature_names"]; log_f_base: (N, 3)
ln of the baseline Fanning factors f_wl, f_wg, f_i. Prints (N, 3) Fanning factors f_wl, f_wg, f_i.
"""
from __future__ import annotations

import json
import math
import sys

import numpy as np

ACTIVATIONS = {
    "silu": lambda x: x / (1.0 + np.exp(-x)),
    "tanh": np.tanh,
    "softplus": lambda x: np.where(x > 20.0, x, np.log1p(np.exp(np.minimum(x, 20.0)))),  # torch: linear above 20
    "gelu": lambda x: 0.5 * x * (1.0 + np.vectorize(math.erf)(x / math.sqrt(2.0))),
}


def load(path: str) -> dict:
    """Read and check a plain-JSON closure."""
    with open(path) as fh:
        spec = json.load(fh)
    if spec.get("format") != "closure-nn-plain-mlp" or spec.get("format_version") != 1:
        raise ValueError(f"{path}: not a closure-nn plain-JSON closure of format version 1")
    return spec


def friction_factors(spec: dict, features: np.ndarray, log_f_base: np.ndarray) -> np.ndarray:
    """Fanning factors (N, 3) from raw features (N, 11) and ln baseline factors (N, 3), float64."""
    x = np.asarray(features, dtype=np.float64)
    lfb = np.asarray(log_f_base, dtype=np.float64)
    z = (x - np.asarray(spec["scaler"]["mean"])) / np.asarray(spec["scaler"]["std"])
    if spec["base_input"]:  # ln(f_i,base / f_wg,base), not standardised, as input index 11
        z = np.concatenate([z, lfb[:, 2:3] - lfb[:, 1:2]], axis=1)
    act = ACTIVATIONS[spec["activation"]]
    o = np.zeros((x.shape[0], 3))
    for branch in spec["branches"]:
        y = z[:, branch["inputs"]]
        for i, layer in enumerate(branch["layers"]):
            y = y @ np.asarray(layer["W"]).T + np.asarray(layer["b"])
            if i < len(branch["layers"]) - 1:
                y = act(y)
        o[:, branch["outputs"]] = y
    if spec["mode"] == "correction":
        return np.exp(lfb) * np.exp(np.asarray(spec["bound"]) * np.tanh(o))
    s = spec["direct_span"]
    return np.exp(np.asarray(spec["log_f_ref"]) + s * np.tanh(o / s))


def in_measured_domain(spec: dict, features: np.ndarray) -> np.ndarray:
    """Bool (N,): inside the measured-data domain (box and nearest-point distance, standardised)."""
    d = spec["measured_domain"]
    x = np.asarray(features, dtype=np.float64)
    if not d["n_points"]:
        return np.zeros(x.shape[0], dtype=bool)
    z = (x - np.asarray(spec["scaler"]["mean"])) / np.asarray(spec["scaler"]["std"])
    box = ((z >= np.asarray(d["lo"])) & (z <= np.asarray(d["hi"]))).all(axis=1)
    dist = np.sqrt(((z[:, None, :] - np.asarray(d["points"])[None]) ** 2).sum(axis=-1)).min(axis=1)
    return box & (dist <= d["threshold"])


if __name__ == "__main__":
    spec = load(sys.argv[1])
    x = np.loadtxt(sys.argv[2], delimiter=",", ndmin=2)
    lfb = np.loadtxt(sys.argv[3], delimiter=",", ndmin=2)
    np.savetxt(sys.stdout, friction_factors(spec, x, lfb), delimiter=",", fmt="%.17g")
