r"""Export a :class:`~closure_nn.closures.neural.NeuralClosure` as an ONNX graph (float64).

The graph is the closure's network with its feature scaler and output formula inside; the
features and the baseline factors, which need the local state of the two-fluid model (geometry,
in-situ velocities), are computed by the host solver and given to the graph.

Graph inputs (float64, batch dimension ``N`` dynamic)

=============  ==========  =====  ==============================================================
name           shape       unit   meaning
=============  ==========  =====  ==============================================================
``features``   ``(N, 11)`` mixed  the raw closure features x of the local state, in the order of
                                  :data:`~closure_nn.physics.groups.FEATURE_NAMES` (log10_Re_L,
                                  log10_Re_G, frac, Fr_L, Fr_G, asinh_We_slip, log10_rho_ratio,
                                  log10_mu_ratio, rel_rough, sin_theta, annular), NOT standardised:
                                  every group is dimensionless [-] (definitions in
                                  :mod:`closure_nn.physics.groups`)
``log_f_base`` ``(N, 3)``  [-]    ln of the baseline Fanning factors (f_WL, f_WG, f_i) of the same
                                  state, from the baseline named in the graph metadata
                                  (``baseline``, :class:`~closure_nn.closures.baseline.BaselineClosure`)
=============  ==========  =====  ==============================================================

Graph output: ``friction_factors`` ``(N, 3)`` float64, the Fanning factors f_WL, f_WG, f_i [-]:

.. math::
    z = (x - \mu)/\sigma,\qquad
    f_k = f_{k,\mathrm{base}}\,e^{\,b_k \tanh o_k(z)}\ \text{(correction mode)},\qquad
    f_k = e^{\,\ln f_{k,\mathrm{ref}} + s\tanh(o_k(z)/s)}\ \text{(direct mode)}

with the scaler mean/std (mu, sigma) and the network outputs o of
:meth:`NeuralClosure.network_outputs`; with ``base_input`` the f_i branch also reads
``ln f_i,base - ln f_WG,base`` (not standardised). ``log_f_base`` is a graph input in every mode
(the direct mode without ``base_input`` ignores it), so every exported graph has one signature.

The graph evaluates the closure's own modules (:meth:`NeuralClosure.standardise`,
:meth:`~NeuralClosure.network_outputs`, :meth:`~NeuralClosure.squash`), traced by
``torch.onnx.export(dynamo=True)`` (torch 2.13, onnxscript). Two activations need care because
ONNX Runtime (1.32, CPU) has no float64 kernel for them: softplus is written out as
``where(x > 20, x, ln(1 + e^x))`` (torch's own threshold, same values to rounding), and GELU
(which needs ``Erf``) is refused with a pointer to the plain-JSON export.

An ensemble is not one graph: :func:`export_onnx` refuses it; ``closure-nn export`` writes one
graph per member (the ensemble's factors are the geometric mean of its members', see
:class:`~closure_nn.closures.ensemble.ClosureEnsemble`).

The ONNX model metadata (``metadata_props``) holds the format name, feature names, output
names, the baseline, the closure label and the caution.

onnx, onnxscript and onnxruntime are optional and heavy: they are imported inside the functions
that export or check a graph, so the rest of closure_nn works without them.
"""
from __future__ import annotations

import copy
import json
import logging
import os
import warnings
from pathlib import Path

import torch
from torch import nn

from ..caution import CAUTION
from ..physics.checks import InputError
from ..physics.groups import FEATURE_NAMES
from .neural import OUTPUT_NAMES, NeuralClosure

ONNX_FORMAT = "closure-nn-onnx"
ONNX_FORMAT_VERSION = 1
INPUT_NAMES = ("features", "log_f_base")
OUTPUT_NAME = "friction_factors"
#: the graph's inputs and output in one line each (module docstring for the definitions)
INPUT_DESCRIPTION = {
    "features": f"(N, {len(FEATURE_NAMES)}) float64 raw closure features in the order of feature_names "
                "(closure_nn.physics.groups), not standardised",
    "log_f_base": "(N, 3) float64 ln of the baseline Fanning factors f_wl, f_wg, f_i of the same state",
}
OUTPUT_DESCRIPTION = {OUTPUT_NAME: "(N, 3) float64 Fanning factors f_wl, f_wg, f_i"}


class _Softplus(nn.Module):
    """torch's softplus (``beta``, ``threshold``) in plain ops that ONNX Runtime runs in float64."""

    def __init__(self, beta: float, threshold: float) -> None:
        super().__init__()
        self.beta, self.threshold = float(beta), float(threshold)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        bx = self.beta * x
        return torch.where(bx > self.threshold, x, torch.log(1 + torch.exp(bx)) / self.beta)


class ClosureGraph(nn.Module):
    """The exported computation as a torch module: ``(features (N, 11), log_f_base (N, 3)) ->
    friction_factors (N, 3)``, all float64 (module docstring). Holds a copy of the closure."""

    def __init__(self, closure: NeuralClosure) -> None:
        super().__init__()
        check_exportable(closure)
        self.closure = copy.deepcopy(closure).eval()
        for branch in self.closure.branches:
            for i, m in enumerate(branch):
                if isinstance(m, nn.Softplus):
                    branch[i] = _Softplus(m.beta, m.threshold)

    def forward(self, features: torch.Tensor, log_f_base: torch.Tensor) -> torch.Tensor:
        return factors_from_features(self.closure, features, log_f_base)


def factors_from_features(closure: NeuralClosure, features: torch.Tensor, log_f_base: torch.Tensor) -> torch.Tensor:
    """Fanning factors ``(*batch, 3)`` from raw features ``(*batch, 11)`` and ln baseline factors
    ``(*batch, 3)``: the closure's own evaluation (:meth:`NeuralClosure.evaluate`) entered after the
    feature and baseline computation; what the exported graph computes."""
    c = closure
    z = c.standardise(features)
    if c.base_input:
        z = torch.cat([z, (log_f_base[..., 2] - log_f_base[..., 1]).unsqueeze(-1)], dim=-1)
    g = c.squash(c.network_outputs(z))
    if c.mode == "correction":
        return torch.exp(log_f_base) * torch.exp(g)
    return torch.exp(c.log_f_ref + g)


def check_exportable(closure: NeuralClosure) -> None:
    """Raise :class:`~closure_nn.physics.checks.InputError` unless ``closure`` can be exported to
    ONNX here: one neural closure, not GELU, with ``onnx`` and ``onnxscript`` installed."""
    if not isinstance(closure, NeuralClosure):
        raise InputError(f"ONNX export takes one neural closure, got {type(closure).__name__} "
                         "(an ensemble is exported member by member: closure-nn export ENSEMBLE --format onnx)")
    if closure.activation == "gelu":
        raise InputError("ONNX export: the closure uses GELU, whose Erf has no float64 kernel in ONNX Runtime; "
                         "use --format json (docs/closure_json_format.md)")
    try:
        import onnx  # noqa: F401
        import onnxscript  # noqa: F401  (the dynamo exporter needs it)
    except ImportError as exc:
        raise InputError(f"ONNX export needs the packages onnx and onnxscript ({exc.name} is missing): "
                         "pip install 'closure-nn[export]'") from None


def metadata(closure: NeuralClosure) -> dict[str, str]:
    """String metadata written into the ONNX model (``metadata_props``)."""
    return {"format": ONNX_FORMAT, "format_version": str(ONNX_FORMAT_VERSION),
            "inputs": json.dumps(INPUT_DESCRIPTION), "outputs": json.dumps(OUTPUT_DESCRIPTION),
            "feature_names": json.dumps(list(FEATURE_NAMES)), "output_names": json.dumps(list(OUTPUT_NAMES)),
            "mode": closure.mode, "baseline": json.dumps(closure.hparams["baseline"]),
            "label": closure.label, "caution": CAUTION}


def export_onnx(closure: NeuralClosure, path: str | os.PathLike) -> Path:
    """Write ``closure`` as an ONNX model at ``path`` (module docstring: inputs, output, units).

    Raises :class:`~closure_nn.physics.checks.InputError` for an ensemble, a GELU closure or a
    missing ``onnx``/``onnxscript`` install. Returns the path.
    """
    graph = ClosureGraph(closure)  # check_exportable first
    import onnx

    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    x = graph.closure.feature_mean.expand(2, -1).clone()
    lf = torch.log(torch.tensor([[0.005, 0.005, 0.01]] * 2, dtype=torch.float64))
    batch = torch.export.Dim("batch")
    quiet = logging.getLogger("torch.onnx")
    level = quiet.level
    quiet.setLevel(logging.ERROR)  # the exporter logs every optional torchvision op it skips
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            torch.onnx.export(graph, (x, lf), str(p), dynamo=True, input_names=list(INPUT_NAMES),
                              output_names=[OUTPUT_NAME], dynamic_shapes={name: {0: batch} for name in INPUT_NAMES},
                              external_data=False, verbose=False)
    finally:
        quiet.setLevel(level)
    model = onnx.load(str(p))
    del model.metadata_props[:]
    for k, v in metadata(closure).items():
        model.metadata_props.add(key=k, value=v)
    model.doc_string = (f"closure-nn neural closure {closure.label}: Fanning factors f_wl, f_wg, f_i from raw "
                        "closure features and ln baseline factors (float64). " + CAUTION)
    onnx.checker.check_model(model)
    onnx.save(model, str(p))
    return p


def check_onnx(closure: NeuralClosure, path: str | os.PathLike, n: int = 256, seed: int = 0) -> float | None:
    """Max |f_onnx - f_torch| [-] over ``n`` random inputs (features within +-3 scaler standard
    deviations of the scaler mean, ln f_base around typical levels), evaluated with ONNX Runtime;
    None when ``onnxruntime`` is not installed."""
    try:
        import onnxruntime as ort
    except ImportError:
        return None
    g = torch.Generator().manual_seed(seed)
    f64 = dict(dtype=torch.float64)
    x = closure.feature_mean + closure.feature_std * (6 * torch.rand(n, len(FEATURE_NAMES), generator=g, **f64) - 3)
    lf = torch.log(torch.tensor([0.005, 0.005, 0.01], **f64)) + torch.randn(n, 3, generator=g, **f64)
    sess = ort.InferenceSession(str(path), providers=["CPUExecutionProvider"])
    (got,) = sess.run([OUTPUT_NAME], {INPUT_NAMES[0]: x.numpy(), INPUT_NAMES[1]: lf.numpy()})
    with torch.no_grad():
        want = factors_from_features(closure, x, lf).numpy()
    return float(abs(got - want).max())
