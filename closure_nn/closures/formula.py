r"""A distilled closure: the baseline times a product of powers of dimensionless groups, per factor.

``closure-nn distill`` fits, for each Fanning factor k in (f_WL, f_WG, f_i), a compact formula to
a learned closure's log ratio ln(f_k / f_k,base). The formula closure evaluates

.. math::
    \ln\frac{f_k}{f_{k,\mathrm{base}}} = \mathrm{clip}\Big(c_{k,0} + \sum_j c_{k,j}\,t_j,\ -b_k,\ b_k\Big),
    \qquad\text{i.e.}\qquad
    \frac{f_k}{f_{k,\mathrm{base}}} = C_k \prod_j G_j^{\,a_{k,j}}\ (\text{inside the bound } e^{\pm b_k})

with terms :math:`t_j` from :data:`TERMS`: the natural log of a positive dimensionless group
(so its coefficient is the exponent of that group) or, for the inclination, :math:`\sin\theta`
itself (a factor :math:`e^{a\sin\theta}`). The clip at the network's own correction bound
:math:`b_k` keeps the formula exactly where the network could be, and positive and finite
everywhere. Groups are those of :func:`closure_nn.physics.groups.closure_features`; Taitel &
Dukler (1976), AIChE J. 22(1):47-55, for the Reynolds and Froude numbers of a layer.

Piecewise only where the baseline switches by a published rule (a region per piece):

* ``stratified`` / ``annular``: the separated configuration (a layer or a film), in which the
  baseline changes its interfacial correlation (Andritsos & Hanratty 1987 / Wallis 1969);
* ``stratified`` split into ``stratified_wave_free`` and ``stratified_wavy`` at the
  Andritsos & Hanratty (1987) threshold :math:`v_{SG} = 5\,\mathrm{m/s}\sqrt{\rho_{G,ref}/\rho_G}`
  (the baseline's own constants), when the baseline interface is Andritsos-Hanratty.

A factor with no piece for a state's region keeps the baseline there (ratio 1).

On disk the formula is a JSON file of our own format ``closure-nn-formula`` (version 1):
``baseline`` (the :class:`~closure_nn.closures.baseline.BaselineClosure` keywords), ``bound``
(per factor), ``terms`` (the library, for readers), ``pieces`` (per factor, a list of
``{"region": ..., "coef": {term: value}}``), optional ``domain`` and ``measured_domain`` (per
group of :data:`~closure_nn.physics.groups.FEATURE_NAMES`, ``lo`` and ``hi`` lists: the box of the
states the formula was fitted on, and the box of the learned closure's measured rows; the line
flags stations outside them as it does for a neural closure), and free-form ``text``, ``latex``,
``source``, ``fidelity`` and ``caution`` entries that the loader ignores.
"""
from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field
from pathlib import Path

import torch

from ..physics.checks import InputError
from ..physics.geometry import ANNULAR
from ..physics.groups import FEATURE_NAMES, closure_features
from ..physics.local_state import LocalState
from ..physics.momentum import FrictionFactors
from ..run_folder import write_json
from .base import Closure
from .baseline import BaselineClosure

FORMULA_FORMAT = "closure-nn-formula"
FORMULA_VERSION = 1
FACTORS = ("f_wl", "f_wg", "f_i")
LN10 = math.log(10.0)
_IX = {n: i for i, n in enumerate(FEATURE_NAMES)}

#: term name -> (feature it is computed from, transform, symbol in text, symbol in LaTeX)
#: transform 'ln10': the feature is a log10, the term its natural log; 'ln': natural log of the
#: (positive) feature; 'lin': the feature itself (sin theta: an exponential factor); 'base': the
#: baseline's own interfacial enhancement ln(f_i,base / f_WG,base) (Andritsos & Hanratty 1987:
#: 0 below their wave threshold; the same input the neural closure's f_i branch reads).
TERMS: dict[str, tuple[str, str, str, str]] = {
    "ln_Re_L": ("log10_Re_L", "ln10", "Re_L", r"\mathrm{Re}_L"),
    "ln_Re_G": ("log10_Re_G", "ln10", "Re_G", r"\mathrm{Re}_G"),
    "ln_frac": ("frac", "ln", "(h/D)", r"(h/D)"),
    "ln_Fr_L": ("Fr_L", "ln", "Fr_L", r"\mathrm{Fr}_L"),
    "ln_Fr_G": ("Fr_G", "ln", "Fr_G", r"\mathrm{Fr}_G"),
    "ln_rho_ratio": ("log10_rho_ratio", "ln10", "(rho_G/rho_L)", r"(\rho_G/\rho_L)"),
    "ln_mu_ratio": ("log10_mu_ratio", "ln10", "(mu_G/mu_L)", r"(\mu_G/\mu_L)"),
    "sin_theta": ("sin_theta", "lin", "sin(theta)", r"\sin\theta"),
    "ln_base_wave": ("", "base", "(f_i,base/f_WG,base)", r"(f_{i,\mathrm{base}}/f_{WG,\mathrm{base}})"),
}
TERM_NAMES = tuple(TERMS)
REGIONS = ("stratified", "stratified_wave_free", "stratified_wavy", "annular")
_FLOOR = 1e-30


def term_matrix(features: torch.Tensor, base_wave: torch.Tensor) -> torch.Tensor:
    """Library terms ``(*batch, len(TERM_NAMES))`` from closure features ``(*batch, F)`` and the
    baseline's ln(f_i,base / f_WG,base) ``(*batch)`` (:data:`TERMS`; logs floored at 1e-30 so a
    zero group stays finite)."""
    cols = []
    for name in TERM_NAMES:
        feat, how, _, _ = TERMS[name]
        if how == "base":
            cols.append(torch.broadcast_to(base_wave, features.shape[:-1]))
            continue
        x = features[..., _IX[feat]]
        cols.append(x * LN10 if how == "ln10" else torch.log(x.clamp_min(_FLOOR)) if how == "ln" else x)
    return torch.stack(cols, dim=-1)


def wave_threshold_mask(state: LocalState, baseline: BaselineClosure) -> torch.Tensor | None:
    r"""Bool ``(*batch)``: above the Andritsos & Hanratty (1987) wave threshold
    :math:`v_{SG} > u_t\sqrt{\rho_{G,ref}/\rho_G}` with the baseline's constants (defaults 5 m/s,
    1.2 kg/m3; :func:`closure_nn.closures.correlations.interface_andritsos_hanratty`); None when
    the baseline interface is not Andritsos-Hanratty (no published switch to split at)."""
    if baseline.interface_name != "andritsos_hanratty":
        return None
    kw = baseline.interface_kwargs
    vt = float(kw.get("u_t", 5.0)) * torch.sqrt(float(kw.get("rhog_ref", 1.2)) / state.cond.rhog)
    return state.cond.vsg > vt  # the conditions' shape; callers broadcast it to the states'


@dataclass
class Piece:
    """One formula of one factor on one region: ``coef`` maps ``'1'`` and term names to values."""

    region: str
    coef: dict[str, float] = field(default_factory=dict)

    def log_ratio(self, terms: torch.Tensor) -> torch.Tensor:
        """ln(f / f_base) before the clip, ``(*batch)``, from library terms ``(*batch, T)``."""
        out = torch.full(terms.shape[:-1], float(self.coef.get("1", 0.0)), dtype=terms.dtype)
        for name, c in self.coef.items():
            if name != "1":
                out = out + c * terms[..., TERM_NAMES.index(name)]
        return out


class FormulaClosure(Closure):
    """``f_k = f_k,base * exp(clip(formula_k(groups), -b_k, b_k))`` (module docstring).

    Parameters
    ----------
    pieces : dict
        factor name -> list of :class:`Piece` (or ``{"region", "coef"}`` dicts).
    baseline : BaselineClosure or dict
        The baseline the formula multiplies (the learned closure's own baseline).
    bound : dict
        factor name -> b_k [-, natural log units]; default 4 for every factor.

    >>> from closure_nn.physics.conditions import make_conditions
    >>> from closure_nn.physics.local_state import local_state
    >>> s = local_state(make_conditions(vsl=0.05, vsg=[2.0, 8.0], D=0.05), torch.tensor([0.2, 0.3]), 'stratified')
    >>> fc = FormulaClosure({"f_i": [{"region": "stratified", "coef": {"1": math.log(2.0), "ln_frac": 0.5}}]})
    >>> ratio = fc(s).f_i / BaselineClosure()(s).f_i
    >>> [round(float(r), 4) for r in ratio], round(2 * 0.2 ** 0.5, 4)
    ([0.8944, 1.0954], 0.8944)
    """

    def __init__(self, pieces: dict, baseline: BaselineClosure | dict | None = None,
                 bound: dict | None = None, domain: dict | None = None, measured_domain: dict | None = None) -> None:
        super().__init__()
        self.domain = _box(domain, "domain")
        self.measured_domain = _box(measured_domain, "measured_domain")
        bad = set(pieces) - set(FACTORS)
        if bad:
            raise ValueError(f"formula: unknown factor(s) {sorted(bad)}; known: {', '.join(FACTORS)}")
        self.baseline = baseline if isinstance(baseline, BaselineClosure) else BaselineClosure(**(baseline or {}))
        self.bound = {k: float((bound or {}).get(k, 4.0)) for k in FACTORS}
        self.pieces: dict[str, list[Piece]] = {}
        for k, plist in pieces.items():
            ps = [p if isinstance(p, Piece) else Piece(str(p["region"]), {str(a): float(b) for a, b in p["coef"].items()})
                  for p in plist]
            for p in ps:
                if p.region not in REGIONS:
                    raise ValueError(f"formula {k}: unknown region {p.region!r}; known: {', '.join(REGIONS)}")
                unknown = set(p.coef) - set(TERM_NAMES) - {"1"}
                if unknown:
                    raise ValueError(f"formula {k}: unknown term(s) {sorted(unknown)}; known: 1, {', '.join(TERM_NAMES)}")
            self.pieces[k] = ps
        self.label = "formula(" + ", ".join(f"{k}: {len(v)} piece(s)" for k, v in self.pieces.items()) + ")"

    def log_ratio(self, state: LocalState, base: FrictionFactors | None = None) -> torch.Tensor:
        """ln(f_k / f_k,base) after the clip, ``(*batch, 3)`` in the order f_WL, f_WG, f_i
        (``base``: the baseline's factors at ``state``, if already evaluated)."""
        base = self.baseline(state) if base is None else base
        terms = term_matrix(closure_features(state), torch.log(base.f_i / base.f_wg))
        shape = terms.shape[:-1]
        above = wave_threshold_mask(state, self.baseline) if state.kind != ANNULAR else None
        above = None if above is None else torch.broadcast_to(above, torch.broadcast_shapes(above.shape, shape))
        cols = []
        for k in FACTORS:
            g = torch.zeros(shape, dtype=terms.dtype)
            for p in self.pieces.get(k, []):
                if p.region == "annular" and state.kind == ANNULAR or p.region == "stratified" and state.kind != ANNULAR:
                    g = p.log_ratio(terms)
                elif state.kind != ANNULAR and above is not None and p.region in ("stratified_wave_free", "stratified_wavy"):
                    on = above if p.region == "stratified_wavy" else ~above
                    g = torch.where(on, p.log_ratio(terms), g)
            cols.append(g.clamp(-self.bound[k], self.bound[k]))
        return torch.stack(cols, dim=-1)

    def forward(self, state: LocalState) -> FrictionFactors:
        base = self.baseline(state)
        g = self.log_ratio(state, base)
        return FrictionFactors(f_wl=base.f_wl * torch.exp(g[..., 0]), f_wg=base.f_wg * torch.exp(g[..., 1]),
                               f_i=base.f_i * torch.exp(g[..., 2]))

    def in_domain(self, features: torch.Tensor) -> torch.Tensor:
        """Bool ``(*batch)``: raw groups ``(*batch, F)`` inside the box of the fitting states (all
        True without a stored box)."""
        return _inside(self.domain, features)

    def in_measured_domain(self, features: torch.Tensor) -> torch.Tensor:
        """Bool ``(*batch)``: inside the box of the learned closure's measured rows (all False
        without one: nothing is known to be measured)."""
        if self.measured_domain is None:
            return torch.zeros(torch.as_tensor(features).shape[:-1], dtype=torch.bool)
        return _inside(self.measured_domain, features)

    def to_dict(self) -> dict:
        """The JSON-able description (without the free-form entries; see :func:`save_formula`)."""
        b = self.baseline
        boxes = {k: {"lo": v[0].tolist(), "hi": v[1].tolist(), "features": list(FEATURE_NAMES)}
                 for k, v in (("domain", self.domain), ("measured_domain", self.measured_domain)) if v is not None}
        return {**boxes, "format": FORMULA_FORMAT, "format_version": FORMULA_VERSION,
                "baseline": {"wall": b.wall_name, "interface": b.interface_name, "annular_interface": b.annular_name,
                             "interface_kwargs": dict(b.interface_kwargs)},
                "bound": dict(self.bound), "terms": {n: TERMS[n][2] for n in TERM_NAMES},
                "pieces": {k: [{"region": p.region, "coef": dict(p.coef)} for p in v] for k, v in self.pieces.items()}}

    def text(self, latex: bool = False) -> list[str]:
        """One line per piece: the formula as text, or as LaTeX."""
        return [piece_text(k, p, latex) for k, v in self.pieces.items() for p in v]

    def describe(self) -> dict:
        return {**super().describe(), **self.to_dict(), "text": self.text()}


def _box(spec: dict | None, what: str) -> tuple[torch.Tensor, torch.Tensor] | None:
    """``{"lo": [...], "hi": [...]}`` (one value per feature, None for an open side) as tensors."""
    if spec is None:
        return None
    lo = torch.tensor([-math.inf if v is None else float(v) for v in spec["lo"]], dtype=torch.float64)
    hi = torch.tensor([math.inf if v is None else float(v) for v in spec["hi"]], dtype=torch.float64)
    if lo.shape != (len(FEATURE_NAMES),) or hi.shape != lo.shape:
        raise ValueError(f"{what}: expected lo and hi with one value per feature ({len(FEATURE_NAMES)})")
    return lo, hi


def _inside(box, features) -> torch.Tensor:
    x = torch.as_tensor(features, dtype=torch.float64)
    if box is None:
        return torch.ones(x.shape[:-1], dtype=torch.bool)
    return ((x >= box[0]) & (x <= box[1])).all(dim=-1)


_FACTOR_TEX = {"f_wl": ("f_WL", r"f_{WL}"), "f_wg": ("f_WG", r"f_{WG}"), "f_i": ("f_i", r"f_{i}")}


def piece_text(factor: str, p: Piece, latex: bool = False) -> str:
    """``f_i / f_i,base = 2.31 * Re_G^-0.102 * (h/D)^0.61   [stratified]`` (or the LaTeX form)."""
    plain, tex = _FACTOR_TEX[factor]
    lead = math.exp(p.coef.get("1", 0.0))
    mant, _, expo = f"{lead:.4g}".partition("e")
    parts, tparts = [f"{lead:.4g}"], [rf"{mant}\times 10^{{{int(expo)}}}" if expo else mant]
    for name in TERM_NAMES:
        a = p.coef.get(name)
        if a is None:
            continue
        _, how, sym, tsym = TERMS[name]
        if how == "lin":
            parts.append(f"exp({a:.3g} {sym})")
            tparts.append(rf"e^{{{a:.3g}\,{tsym}}}")
        else:
            parts.append(f"{sym}^{a:.3g}")
            tparts.append(f"{tsym}^{{{a:.3g}}}")
    where = p.region.replace("_", " ")
    if p.region == "annular":  # the level of a film is its thickness
        parts = [s.replace("(h/D)", "(delta/D)") for s in parts]
        tparts = [s.replace("(h/D)", r"(\delta/D)") for s in tparts]
    if latex:
        return rf"\frac{{{tex}}}{{{tex[:-1]},\mathrm{{base}}}}}} = " + r"\,".join(tparts) + rf"\quad\text{{({where})}}"
    return f"{plain} / {plain},base = " + " * ".join(parts) + f"   [{where}]"


def save_formula(closure: FormulaClosure, path: str | os.PathLike, **extra) -> Path:
    """Write ``closure`` as a ``closure-nn-formula`` JSON file (atomic), with free-form ``extra``
    entries (text, latex, source, fidelity, caution)."""
    p = Path(path)
    write_json(p, {**closure.to_dict(), "text": closure.text(), "latex": closure.text(latex=True), **extra})
    return p


def is_formula_file(path: str | os.PathLike) -> bool:
    """True for a JSON file whose ``format`` is ``closure-nn-formula`` (cheap check for loaders)."""
    p = Path(path)
    if not (p.is_file() and p.suffix.lower() == ".json"):
        return False
    try:
        return json.loads(p.read_text(encoding="utf-8")).get("format") == FORMULA_FORMAT
    except (ValueError, UnicodeDecodeError, AttributeError):
        return False


def load_formula(path: str | os.PathLike) -> FormulaClosure:
    """Read a ``closure-nn-formula`` JSON file; :class:`InputError` naming the file if it is not one."""
    p = Path(path)
    try:
        meta = json.loads(p.read_text(encoding="utf-8"))
    except (ValueError, UnicodeDecodeError) as exc:
        raise InputError(f"{p}: not a formula closure, not valid JSON ({exc})") from None
    if not isinstance(meta, dict) or meta.get("format") != FORMULA_FORMAT:
        raise InputError(f"{p}: format {meta.get('format') if isinstance(meta, dict) else None!r}, expected {FORMULA_FORMAT!r}")
    if meta.get("format_version") != FORMULA_VERSION:
        raise InputError(f"{p}: {FORMULA_FORMAT} version {meta.get('format_version')!r}; this code reads {FORMULA_VERSION}")
    try:
        fc = FormulaClosure(meta["pieces"], baseline=meta.get("baseline"), bound=meta.get("bound"),
                            domain=meta.get("domain"), measured_domain=meta.get("measured_domain"))
    except (KeyError, TypeError, ValueError) as exc:
        raise InputError(f"{p}: bad formula description ({exc})") from None
    fc.formula_metadata = meta
    return fc
