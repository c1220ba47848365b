r"""Design spaces for synthetic training sets: one sampling law per variable (conf/design/*.yaml).

A design space says, for every input of :data:`closure_nn.data.schema.INPUTS`, which values a
synthetic set should cover and how densely. It is read from a Hydra config group
(``conf/design/<name>.yaml``) or any mapping of the same shape::

    name: my_loop
    variables:                      # one entry per variable; SI unless ``unit`` is given
      vsl: {law: log_uniform, low: 0.005, high: 2.0}           # m/s
      D:   {law: choice, values: [50, 100], unit: mm}
      theta:                                                   # a mixture of two shares
        unit: deg
        law: mixture
        components:
          - {weight: 0.8, law: uniform, low: -6, high: 6}
          - {weight: 0.2, law: uniform, low: 10, high: 30}
      p: {law: uniform, low: 1.2, high: 3.0, unit: bara}
      ...
    fluid: {law: choice, values: [air_water, air_oil]}         # optional named fluid pairs
    fluids:
      air_water: {rhol: 998, mul: {law: uniform, low: 0.9, high: 1.1, unit: cP}, ...}

Laws (``u`` is a uniform number in [0, 1) from the Latin hypercube):

=================  ===========================================  ==================================
law                keys                                         value for a given u
=================  ===========================================  ==================================
``fixed``          ``value`` (a bare number means the same)     the value
``uniform``        ``low``, ``high``                            low + u (high - low)
``log_uniform``    ``low``, ``high`` (both > 0)                 low (high/low)^u
``choice``         ``values``, ``weights`` (default equal)      the value whose cumulative-weight
                   (a bare list means equal weights)            interval holds u
``mixture``        ``components``: laws with a ``weight``       component k where u falls in its
                                                                cumulative-weight interval, then
                                                                that law at the rescaled u
=================  ===========================================  ==================================

Each law is a map of one uniform number, so a Latin hypercube in u (stratified per dimension)
stays stratified through the map: each of n equal-probability intervals of a continuous
``uniform`` or ``log_uniform`` variable holds exactly one point.

Gas density: give ``rhog`` directly, or ``p``, ``T``, ``M_g`` (and optionally ``Z``, default 1)
and it is computed by :func:`closure_nn.data.schema.fill_gas_density` (p M / (Z R T)).

Fluid pairs: ``fluid`` chooses a pair by name per point; the pair's entries (numbers or laws)
override the variables of the same name. Every pair with a law for a property shares that
property's hypercube dimension.

Values a user must give are written ``???`` in the YAML; a missing one raises
:class:`~closure_nn.physics.checks.InputError` naming the key and showing the override to type.
"""
from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from omegaconf import DictConfig, ListConfig, OmegaConf

from ..config_checks import check_keys
from ..physics.checks import InputError
from .schema import COLUMN, INPUTS, fill_gas_density
from .units import to_si

#: sampled variables in hypercube-dimension order (fixed laws take no dimension)
VARIABLES: tuple[str, ...] = ("vsl", "vsg", "D", "theta", "roughness", "rhol", "rhog", "mul", "mug", "sigma",
                              "p", "T", "M_g", "Z")
#: properties a named fluid pair may set
FLUID_PROPERTIES: tuple[str, ...] = ("rhol", "rhog", "mul", "mug", "sigma", "M_g", "Z")
LAWS = ("fixed", "uniform", "log_uniform", "choice", "mixture")
#: top-level keys of a design YAML, and the keys of one law
DESIGN_KEYS = ("name", "description", "variables", "fluid", "fluids")
LAW_KEYS = ("law", "low", "high", "value", "values", "weights", "components", "unit")


@dataclass(frozen=True)
class Law:
    """A sampling law mapping u in [0, 1) to values in SI (see the module table).

    >>> Law("log_uniform", low=0.01, high=1.0).ppf(np.array([0.0, 0.5]))
    array([0.01, 0.1 ])
    >>> Law("choice", values=(0.05, 0.1), weights=(3.0, 1.0)).ppf(np.array([0.7, 0.8]))
    array([0.05, 0.1 ])
    """

    kind: str
    low: float = math.nan
    high: float = math.nan
    values: tuple = ()
    weights: tuple[float, ...] = ()
    components: tuple["Law", ...] = ()

    @property
    def is_fixed(self) -> bool:
        return self.kind == "fixed" or (self.kind == "choice" and len(self.values) == 1)

    def _edges(self) -> np.ndarray:
        w = np.asarray(self.weights, dtype=np.float64)
        c = np.cumsum(w / w.sum())
        c[-1] = 1.0
        return c

    def ppf(self, u: np.ndarray) -> np.ndarray:
        """Values for uniform numbers ``u`` (shape ``(n,)``) [SI]; object array for text choices."""
        u = np.asarray(u, dtype=np.float64)
        if self.kind == "fixed":
            return np.full(u.shape, self.values[0], dtype=object if isinstance(self.values[0], str) else np.float64)
        if self.kind == "uniform":
            return self.low + u * (self.high - self.low)
        if self.kind == "log_uniform":
            return np.exp(math.log(self.low) + u * (math.log(self.high) - math.log(self.low)))
        k = np.minimum(np.searchsorted(self._edges(), u, side="right"), len(self.weights) - 1)
        if self.kind == "choice":
            vals = np.asarray(self.values, dtype=object if isinstance(self.values[0], str) else np.float64)
            return vals[k]
        # mixture: component k, u rescaled to [0, 1) inside the component's interval
        edges = np.concatenate([[0.0], self._edges()])
        out = np.empty(u.shape, dtype=np.float64)
        for j, comp in enumerate(self.components):
            m = k == j
            if m.any():
                width = edges[j + 1] - edges[j]
                out[m] = comp.ppf(np.clip((u[m] - edges[j]) / width, 0.0, np.nextafter(1.0, 0.0)))
        return out

    def cdf(self, x: np.ndarray) -> np.ndarray:
        """Inverse of :meth:`ppf` for the continuous ``uniform`` and ``log_uniform`` laws."""
        x = np.asarray(x, dtype=np.float64)
        if self.kind == "uniform":
            return (x - self.low) / (self.high - self.low)
        if self.kind == "log_uniform":
            return np.log(x / self.low) / math.log(self.high / self.low)
        raise ValueError(f"cdf is defined for uniform and log_uniform laws, not {self.kind!r}")

    def bounds(self) -> tuple[float, float]:
        """Smallest and largest value the law can give [SI] (numeric laws only)."""
        if self.kind in ("uniform", "log_uniform"):
            return self.low, self.high
        if self.kind in ("fixed", "choice"):
            v = [float(x) for x in self.values]
            return min(v), max(v)
        b = [c.bounds() for c in self.components]
        return min(lo for lo, _ in b), max(hi for _, hi in b)


def _plain(cfg: object) -> object:
    """Plain Python containers from a DictConfig/ListConfig."""
    if isinstance(cfg, (DictConfig, ListConfig)):
        return OmegaConf.to_container(cfg, resolve=True)
    return cfg


def missing_keys(cfg: object, prefix: str = "design") -> list[str]:
    """Dotted keys whose value is ``???`` (OmegaConf's missing marker) in ``cfg``.

    >>> missing_keys({"variables": {"vsl": {"low": "???", "high": 1.0}}})
    ['design.variables.vsl.low']
    """
    out: list[str] = []
    if isinstance(cfg, Mapping):
        for k, v in cfg.items():
            out += missing_keys(v, f"{prefix}.{k}")
    elif isinstance(cfg, Sequence) and not isinstance(cfg, str):
        for i, v in enumerate(cfg):
            out += missing_keys(v, f"{prefix}.{i}")
    elif cfg == "???":
        out.append(prefix)
    return out


def _num(v: object, where: str) -> float:
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise InputError(f"{where} = {v!r}; expected a number")
    x = float(v)
    if not math.isfinite(x):
        raise InputError(f"{where} = {v!r}; expected a finite number")
    return x


def parse_law(spec: object, where: str, unit: str | None = None, dimension: str | None = None) -> Law:
    """Parse one law (mapping, bare number or bare list) into a :class:`Law` in SI.

    ``unit``/``dimension`` convert the numbers to SI with :func:`closure_nn.data.units.to_si`
    (a ``unit`` key inside ``spec`` wins). Text choices (fluid names) take no unit.

    >>> parse_law({"law": "choice", "values": [50, 100], "unit": "mm"}, "D", dimension="length").values
    (0.05, 0.1)
    """
    if isinstance(spec, Mapping):
        check_keys(spec, LAW_KEYS, where)  # e.g. 'unti: mm' would silently mean SI
        unit = spec.get("unit", unit)
        kind = spec.get("law", "fixed" if "value" in spec else None)
    elif isinstance(spec, (list, tuple)):
        kind, spec = "choice", {"values": list(spec)}
    else:
        kind, spec = "fixed", {"value": spec}
    if kind not in LAWS:
        raise InputError(f"{where}: law {kind!r} is not known; use one of {', '.join(LAWS)}")

    def si(x: float, key: str) -> float:
        x = _num(x, f"{where}.{key}")
        if unit is not None and dimension is not None:
            return float(to_si(x, unit, dimension, column=where))
        return x

    if kind == "fixed":
        v = spec["value"]
        return Law("fixed", values=(v if isinstance(v, str) else si(v, "value"),))
    if kind in ("uniform", "log_uniform"):
        for key in ("low", "high"):
            if key not in spec:
                raise InputError(f"{where}: law {kind} needs '{key}'")
        lo, hi = si(spec["low"], "low"), si(spec["high"], "high")
        if not lo < hi:
            raise InputError(f"{where}: low = {spec['low']} must be below high = {spec['high']}")
        if kind == "log_uniform" and lo <= 0:
            raise InputError(f"{where}: log_uniform needs low > 0, got low = {spec['low']}")
        return Law(kind, low=lo, high=hi)
    if kind == "choice":
        values = list(spec.get("values") or [])
        if not values:
            raise InputError(f"{where}: law choice needs a non-empty list 'values'")
        text = [isinstance(v, str) for v in values]
        if any(text) and not all(text):
            raise InputError(f"{where}: 'values' mixes names and numbers")
        vals = tuple(values) if all(text) else tuple(si(v, f"values.{i}") for i, v in enumerate(values))
        weights = _weights(spec.get("weights"), len(vals), where)
        return Law("choice", values=vals, weights=weights)
    comps_spec = list(spec.get("components") or [])
    if not comps_spec:
        raise InputError(f"{where}: law mixture needs a non-empty list 'components'")
    comps, weights = [], []
    for i, c in enumerate(comps_spec):
        if not isinstance(c, Mapping) or "weight" not in c:
            raise InputError(f"{where}.components.{i}: each component is a law with a 'weight'")
        weights.append(c["weight"])
        comps.append(parse_law({k: v for k, v in c.items() if k != "weight"}, f"{where}.components.{i}", unit, dimension))
    return Law("mixture", weights=_weights(weights, len(comps), where), components=tuple(comps))


def _weights(w: object, n: int, where: str) -> tuple[float, ...]:
    if w is None:
        return (1.0,) * n
    w = [_num(x, f"{where}.weights") for x in w]
    if len(w) != n:
        raise InputError(f"{where}: {len(w)} weights for {n} entries")
    if min(w) < 0 or sum(w) <= 0:
        raise InputError(f"{where}: weights must be >= 0 with a positive sum, got {w}")
    return tuple(w)


@dataclass(frozen=True)
class DesignSpace:
    """A parsed design space: laws in SI per variable, optional named fluid pairs.

    ``dimensions`` lists the hypercube dimensions in order (``'fluid'`` first of the fluid
    properties when pairs are chosen); fixed laws take none.
    """

    name: str
    laws: dict[str, Law]
    fluid: Law | None = None
    fluids: dict[str, dict[str, Law]] = field(default_factory=dict)
    description: str = ""

    @property
    def dimensions(self) -> tuple[str, ...]:
        dims: list[str] = []
        for v in VARIABLES:
            if v == "rhol" and self.fluid is not None and not self.fluid.is_fixed:
                dims.append("fluid")
            laws = [self.laws[v]] if v in self.laws else []
            laws += [p[v] for p in self.fluids.values() if v in p]
            if any(not law.is_fixed for law in laws):
                dims.append(v)
        return tuple(dims)

    def sample_unit(self, u: np.ndarray) -> pd.DataFrame:
        """Map points ``u`` of the unit hypercube, shape ``(n, len(dimensions))``, to a table.

        Columns: the inputs in SI (rhog computed from p, T, M_g, Z where not given), the gas
        state columns that were sampled, and ``fluid`` (pair name) when pairs are used.
        """
        dims = self.dimensions
        u = np.asarray(u, dtype=np.float64)
        if u.ndim != 2 or u.shape[1] != len(dims):
            raise ValueError(f"expected u of shape (n, {len(dims)}) for dimensions {dims}, got {u.shape}")
        n = u.shape[0]
        col = {d: u[:, j] for j, d in enumerate(dims)}
        zero = np.zeros(n)
        out: dict[str, np.ndarray] = {}
        names = None
        if self.fluid is not None:
            names = self.fluid.ppf(col.get("fluid", zero))
        for v in VARIABLES:
            uv = col.get(v, zero)
            vals = np.full(n, np.nan)
            have = np.zeros(n, dtype=bool)
            if v in self.laws:
                vals[:] = self.laws[v].ppf(uv)
                have[:] = True
            if names is not None:
                for pair, props in self.fluids.items():
                    if v in props:
                        m = names == pair
                        vals[m] = props[v].ppf(uv[m])
                        have |= m
            if have.any():
                out[v] = vals
        df = pd.DataFrame(out)
        if "rhog" not in df:
            df["rhog"] = np.nan
        if "Z" not in df and "p" in df:
            df["Z"] = 1.0
        df, _ = fill_gas_density(df)
        if names is not None:
            df["fluid"] = pd.Series(names, dtype="str")
        return df

    def describe(self) -> dict:
        """JSON-able summary: dimensions and the SI bounds of every numeric variable."""
        bounds = {v: list(law.bounds()) for v, law in self.laws.items()}
        for pair, props in self.fluids.items():
            for v, law in props.items():
                bounds[f"{pair}.{v}"] = list(law.bounds())
        return {"name": self.name, "dimensions": list(self.dimensions), "bounds_si": bounds,
                "fluids": list(self.fluids)}


def parse_design(cfg: Mapping) -> DesignSpace:
    """Build a :class:`DesignSpace` from a design config (DictConfig or dict; see module doc).

    Raises :class:`InputError` for a ``???`` value, an unknown variable or law, a bad range,
    or an input that is given neither as a variable nor by every fluid pair.

    >>> d = parse_design({"name": "t", "variables": {"vsl": {"law": "log_uniform", "low": 0.01, "high": 1},
    ...     "vsg": {"law": "log_uniform", "low": 0.1, "high": 10}, "D": 0.05, "theta": 0, "roughness": 0,
    ...     "rhol": 998, "rhog": 1.2, "mul": 1e-3, "mug": 1.8e-5, "sigma": 0.072}})
    >>> d.dimensions
    ('vsl', 'vsg')
    """
    c = _plain(cfg)
    missing = missing_keys(c)
    name = str(c.get("name") or "design")
    if missing:
        name = "(unnamed)" if name == "???" else name
        raise InputError(f"design {name}: value(s) required but not given (??? in the YAML): "
                         f"{', '.join(missing)}; give them as overrides, e.g. {missing[0]}=<value>")
    where = f"design {name}"
    check_keys(c, DESIGN_KEYS, where)  # unknown names: the nearest valid one
    variables = c.get("variables") or {}
    check_keys(variables, VARIABLES, f"{where}.variables", what="variable")
    laws = {k: parse_law(v, f"{where}.variables.{k}", dimension=COLUMN[k].dimension) for k, v in variables.items()}
    fluid: Law | None = None
    fluids: dict[str, dict[str, Law]] = {}
    if c.get("fluid") is not None:
        fluid = parse_law(c["fluid"], f"{where}.fluid")
        if not all(isinstance(v, str) for v in fluid.values):
            raise InputError(f"{where}.fluid: a choice of fluid-pair names is expected")
        table = c.get("fluids") or {}
        for pair in fluid.values:
            if pair not in table:
                raise InputError(f"{where}.fluid: pair {pair!r} is not defined under 'fluids' "
                                 f"(defined: {', '.join(table) or 'none'})")
        for pair in fluid.values:
            props = table[pair] or {}
            check_keys(props, FLUID_PROPERTIES, f"{where}.fluids.{pair}", what="property")
            fluids[pair] = {k: parse_law(v, f"{where}.fluids.{pair}.{k}", dimension=COLUMN[k].dimension)
                            for k, v in props.items()}
    pairs = list(fluids.values()) or [{}]

    def given(v: str) -> bool:
        return v in laws or (bool(fluids) and all(v in p for p in pairs))

    gas_state = all(given(v) for v in ("p", "T", "M_g"))
    need = [v for v in INPUTS if not given(v) and not (v == "rhog" and gas_state)]
    if need:
        extra = " (or p, T and M_g)" if "rhog" in need else ""
        raise InputError(f"{where}: no law for {', '.join(need)}{extra}; add them under 'variables' "
                         "or to every fluid pair")
    return DesignSpace(name=name, laws=laws, fluid=fluid, fluids=fluids, description=str(c.get("description") or ""))

