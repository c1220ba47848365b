r"""A line definition: an elevation profile (CSV) plus fluids, temperature, rates and one pressure.

File format (our own)
---------------------
**Profile CSV** - one row per station, in flow order (inlet first). Headers are canonical names,
optionally with a field unit in square brackets (:mod:`closure_nn.data.units`); a bare name
means SI.

==============  =======  ========  ============================================================
column          SI unit  required  meaning
==============  =======  ========  ============================================================
``distance``    m        yes       distance along the pipe axis from the inlet, strictly rising
                                   (``[km]`` allowed)
``elevation``   m        yes       elevation of the pipe axis (any datum)
``D``           m        no        inner diameter of the segment that STARTS at this row
``roughness``   m        no        wall roughness of the segment that starts at this row
``section``     -        no        name of a section of the YAML ``sections`` table (gives D,
                                   roughness of the segment that starts at this row)
``T``           K        no        fluid temperature at the station (``[degC]`` allowed)
==============  =======  ========  ============================================================

Values on the last row for segment-wise columns (D, roughness, section) are not used.
Each segment between two stations is straight: inclination
:math:`\theta = \arcsin(\Delta z / \Delta s)`, positive upward, so |elevation step| must not
exceed the distance step.

**Line YAML** (``conf/line/*.yaml``, Hydra-composable, or any file given to ``closure-nn line``).
Numbers are SI; a string ``"<number> <unit>"`` gives a field unit (``"45 bara"``, ``"60 degC"``,
``"254 mm"``). Keys::

    name: Karvel Ridge tie-back      # free text
    invented: true                   # demo data must say so
    description: ...                 # free text, copied into the summary
    profile: path/to/profile.csv     # relative to this file, the working directory or the repo
    D: 0.254                         # m, where the profile has no D / section column
    roughness: 4.5e-5                # m, likewise
    sections: {}                     # optional: name -> {D: ..., roughness: ...}
    fluid:
      rhol: 760.0                    # liquid density [kg/m3], constant along the line
      mul: 6.0e-4                    # liquid viscosity [Pa s]
      sigma: 0.02                    # surface tension [N/m]
      M_g: 0.0195                    # gas molar mass [kg/mol] (from CoolProp if coolprop given)
      Z: 0.9                         # compressibility [-], constant; or null with coolprop
      coolprop: null                 # CoolProp fluid name (e.g. Methane): Z(p, T) [and mug]
      mug: 1.3e-5                    # gas viscosity [Pa s]; null with coolprop -> CoolProp
      rhog: null                     # fixed gas density [kg/m3] (no equation of state; checks)
    temperature: {inlet: 60 degC, outlet: 15 degC}   # linear in distance; omit if profile has T
    rates: {gas: 2.5e6 Sm3/d, liquid: 600 m3/d}     # or kg/s, kg/h, t/d, MSm3/d, m3/h, bbl/d
    pressure: {outlet: 42 bara}      # exactly one of inlet / outlet, absolute

Standard conditions of gas volume rates: 15 degC and 1.01325 bar (ISO 13443 reference
conditions, common practice); liquid volume rates use the constant liquid density.

The profile CSV is read by :mod:`closure_nn.line.profile`; quantities and rates are parsed by
:mod:`closure_nn.line.quantities` (``read_profile``, ``parse_quantity`` and ``parse_rate`` import
from here as well).
"""
from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import yaml
from omegaconf import DictConfig, OmegaConf

from ..config_checks import check_keys
from ..config_location import CONF_DIR
from ..fluid_properties import props_si
from ..physics.checks import InputError, check_range
from ..physics.conditions import R_UNIVERSAL
from .profile import read_profile
from .quantities import P_STD, T_STD, parse_quantity, parse_rate

#: keys of a line YAML, and of its tables (sections.<name> takes D and roughness)
LINE_KEYS = ("name", "invented", "description", "profile", "D", "roughness", "sections", "fluid", "temperature",
             "rates", "pressure")
LINE_TABLE_KEYS = {"fluid": ("rhol", "mul", "sigma", "M_g", "Z", "coolprop", "mug", "rhog"),
                   "temperature": ("inlet", "outlet"), "rates": ("gas", "liquid"), "pressure": ("inlet", "outlet")}
# extra ranges for line inputs (SI): name -> (lo, hi, unit)
_RANGES = {"T": (150.0, 600.0, "K"), "p": (1.0e4, 1.0e8, "Pa"), "M_g": (0.002, 0.2, "kg/mol"), "Z": (0.2, 2.0, "-")}


@dataclass(frozen=True)
class FluidSpec:
    """Fluid properties of a line (SI). ``Z`` or ``coolprop`` gives the gas equation of state."""

    rhol: float
    mul: float
    sigma: float
    M_g: float | None = None
    Z: float | None = 1.0
    coolprop: str | None = None
    mug: float | None = None
    rhog: float | None = None  # fixed gas density (no equation of state)


@dataclass(frozen=True)
class LineDefinition:
    """A line in SI: stations ``(N+1,)``, segments ``(N,)``, fluids, rates and one pressure."""

    name: str
    distance: np.ndarray  # (N+1,) m along the pipe
    elevation: np.ndarray  # (N+1,) m
    D: np.ndarray  # (N,) m, segment-wise
    roughness: np.ndarray  # (N,) m, segment-wise
    T: np.ndarray  # (N+1,) K at the stations
    fluid: FluidSpec
    m_gas: float  # kg/s
    m_liquid: float  # kg/s
    boundary: str  # 'inlet' | 'outlet'
    p_boundary: float  # Pa absolute
    section: np.ndarray | None = None  # (N,) section names
    invented: bool = False
    description: str = ""
    source: dict = field(default_factory=dict)

    @property
    def length(self) -> np.ndarray:
        """Segment lengths along the pipe (N,) [m]."""
        return np.diff(self.distance)

    @property
    def sin_theta(self) -> np.ndarray:
        """Segment inclinations sin(theta) = dz/ds (N,) [-], positive upward."""
        return np.diff(self.elevation) / self.length

    @property
    def n_segments(self) -> int:
        return len(self.distance) - 1


def _resolve(path: str, base_dir: Path | None) -> Path:
    p = Path(path)
    if p.is_absolute():
        return p
    for root in ([base_dir] if base_dir else []) + [Path.cwd(), CONF_DIR.parent]:
        if (root / p).exists():
            return root / p
    return p


def _segmentwise(prof: dict, cfg: Mapping, name: str, n: int, where: str) -> np.ndarray:
    """D or roughness per segment: profile column, else section table, else the YAML scalar."""
    if name in prof:
        if "section" in prof:
            raise InputError(f"{where}: the profile gives both a {name!r} and a 'section' column; use one")
        vals = prof[name][:-1]
    elif "section" in prof:
        table = cfg.get("sections") or {}
        vals = np.empty(n)
        for i, sec in enumerate(prof["section"][:-1]):
            if sec not in table:
                raise InputError(f"{where}: profile data row {i + 1}: section {sec!r} is not in the 'sections' "
                                 f"table (known: {', '.join(map(str, table)) or 'none'})")
            entry = table[sec]
            if name not in entry and cfg.get(name) is None:
                raise InputError(f"{where}: sections.{sec} has no {name!r} and there is no line-wide {name!r}")
            vals[i] = parse_quantity(entry.get(name, cfg.get(name)), "length", f"sections.{sec}.{name}", where)
    else:
        if cfg.get(name) is None:
            raise InputError(f"{where}: give {name!r} [m] in the YAML or as a profile column")
        vals = np.full(n, parse_quantity(cfg[name], "length", name, where))
    check_range(name, vals, where)
    return np.asarray(vals, dtype=np.float64)


def _fluid(cfg: Mapping, where: str) -> FluidSpec:
    f = cfg.get("fluid")
    if not f:
        raise InputError(f"{where}: the line needs a 'fluid' table (rhol, mul, sigma, M_g, Z, mug)")
    q = {}
    for key, dim in (("rhol", "density"), ("mul", "dynamic viscosity"), ("sigma", "surface tension")):
        if f.get(key) is None:
            raise InputError(f"{where}: fluid.{key} is missing")
        q[key] = parse_quantity(f[key], dim, f"fluid.{key}", where)
        check_range(key, [q[key]], f"{where}, fluid")
    opt = {}
    for key, dim in (("M_g", "molar mass"), ("Z", "dimensionless"), ("mug", "dynamic viscosity"), ("rhog", "density")):
        opt[key] = None if f.get(key) is None else parse_quantity(f[key], dim, f"fluid.{key}", where)
    cp = f.get("coolprop")
    if opt["rhog"] is None and cp is None:
        for key in ("M_g", "Z"):
            if opt[key] is None:
                raise InputError(f"{where}: fluid.{key} is missing (or give fluid.coolprop, or a fixed fluid.rhog)")
            lo, hi, unit = _RANGES[key]
            if not lo <= opt[key] <= hi:
                raise InputError(f"{where}: fluid.{key} = {opt[key]:g} {unit} is outside [{lo:g}, {hi:g}] {unit}")
    if opt["mug"] is None and cp is None:
        raise InputError(f"{where}: fluid.mug is missing (or give fluid.coolprop for CoolProp viscosities)")
    if opt["mug"] is not None:
        check_range("mug", [opt["mug"]], f"{where}, fluid")
    if opt["rhog"] is not None:
        check_range("rhog", [opt["rhog"]], f"{where}, fluid")
    return FluidSpec(**q, M_g=opt["M_g"], Z=opt["Z"], coolprop=None if cp is None else str(cp), mug=opt["mug"],
                     rhog=opt["rhog"])


def _temperature(prof: dict, cfg: Mapping, where: str) -> np.ndarray:
    t = cfg.get("temperature")
    s = prof["distance"]
    if "T" in prof:
        if t:
            raise InputError(f"{where}: the profile has a 'T' column and the YAML a 'temperature' table; give one")
        T = prof["T"]
    else:
        if not t or t.get("inlet") is None:
            raise InputError(f"{where}: give temperature: {{inlet: ..., outlet: ...}} or a 'T' profile column")
        T_in = parse_quantity(t["inlet"], "temperature", "temperature.inlet", where)
        T_out = parse_quantity(t.get("outlet", t["inlet"]), "temperature", "temperature.outlet", where)
        T = T_in + (T_out - T_in) * (s - s[0]) / (s[-1] - s[0])
    lo, hi, _ = _RANGES["T"]
    if not ((T >= lo) & (T <= hi)).all():
        raise InputError(f"{where}: temperature {float(T[(T < lo) | (T > hi)][0]):g} K is outside [{lo:g}, {hi:g}] K "
                         "(a bare number is K; write '20 degC' for Celsius)")
    return np.asarray(T, dtype=np.float64)


def gas_standard_density(f: FluidSpec) -> float:
    r"""Gas density at standard conditions (15 degC, 1.01325 bar) [kg/m3], for Sm3 rates.

    :math:`\rho_{std} = p_{std} M / (Z_{std} R T_{std})` with Z_std = 1 (ideal gas; Z is within
    0.3 % of 1 for natural gas at 1 atm, common practice) unless CoolProp gives it.

    >>> round(gas_standard_density(FluidSpec(rhol=800, mul=1e-3, sigma=0.02, M_g=0.016043, Z=0.9, mug=1e-5)), 4)
    0.6785
    """
    if f.coolprop is not None:
        PropsSI = props_si(f.coolprop, "or give fluid.Z and fluid.mug")
        try:
            return float(PropsSI("D", "T", T_STD, "P", P_STD, f.coolprop))
        except ValueError as exc:
            raise InputError(f"fluid.coolprop = {f.coolprop!r}: {str(exc).splitlines()[0]}") from None
    M = f.M_g if f.M_g is not None else 0.0
    if f.rhog is not None and f.M_g is None:
        raise InputError("a fixed fluid.rhog needs fluid.M_g to convert Sm3 gas rates; give rates.gas in kg/s")
    return P_STD * M / (R_UNIVERSAL * T_STD)


def line_from_config(cfg: Mapping, base_dir: str | Path | None = None, where: str = "line") -> LineDefinition:
    """Build a :class:`LineDefinition` from a parsed line YAML (dict or DictConfig).

    ``base_dir`` is the directory of the YAML file, for a relative ``profile`` path.
    """
    if isinstance(cfg, DictConfig):
        cfg = OmegaConf.to_container(cfg, resolve=True)
    check_keys(cfg, LINE_KEYS, where)  # a misspelled key: the nearest valid name
    for table, known in LINE_TABLE_KEYS.items():
        if isinstance(cfg.get(table), Mapping):
            check_keys(cfg[table], known, f"{where}, {table}")
    for sec, entry in (cfg.get("sections") or {}).items():
        if isinstance(entry, Mapping):
            check_keys(entry, ("D", "roughness"), f"{where}, sections.{sec}")
    if not cfg.get("profile"):
        raise InputError(f"{where}: 'profile' (path of the profile CSV) is missing")
    prof_path = _resolve(str(cfg["profile"]), Path(base_dir) if base_dir else None)
    prof = read_profile(prof_path)
    n = len(prof["distance"]) - 1
    fluid = _fluid(cfg, where)
    T = _temperature(prof, cfg, where)
    rates = cfg.get("rates") or {}
    for ph in ("gas", "liquid"):
        if rates.get(ph) is None:
            raise InputError(f"{where}: rates.{ph} is missing (write 0 for a single-phase line)")
    m_gas = parse_rate(rates["gas"], "gas", gas_standard_density(fluid), where)
    m_liq = parse_rate(rates["liquid"], "liquid", fluid.rhol, where)
    if m_gas == 0 and m_liq == 0:
        raise InputError(f"{where}: both rates are zero; nothing flows")
    pr = cfg.get("pressure") or {}
    given = [k for k in ("inlet", "outlet") if pr.get(k) is not None]
    if len(given) != 1 or set(pr) - {"inlet", "outlet"}:
        raise InputError(f"{where}: 'pressure' needs exactly one of inlet / outlet (absolute), got {dict(pr)}")
    p = parse_quantity(pr[given[0]], "pressure", f"pressure.{given[0]}", where)
    lo, hi, _ = _RANGES["p"]
    if not lo <= p <= hi:
        raise InputError(f"{where}: pressure.{given[0]} = {p:g} Pa is outside [{lo:g}, {hi:g}] Pa (a bare number is Pa; "
                         "write '45 bara')")
    return LineDefinition(
        name=str(cfg.get("name") or Path(prof_path).stem), distance=prof["distance"], elevation=prof["elevation"],
        D=_segmentwise(prof, cfg, "D", n, where), roughness=_segmentwise(prof, cfg, "roughness", n, where), T=T,
        fluid=fluid, m_gas=m_gas, m_liquid=m_liq, boundary=given[0], p_boundary=p,
        section=prof["section"][:-1] if "section" in prof else None, invented=bool(cfg.get("invented", False)),
        description=str(cfg.get("description") or ""), source={"profile": str(prof_path)},
    )


def load_line(path: str | Path) -> LineDefinition:
    """Read a line YAML file (format in the module docstring)."""
    path = Path(path)
    try:
        cfg = yaml.safe_load(path.read_text())
    except yaml.YAMLError as exc:
        raise InputError(f"{path}: not valid YAML ({str(exc).splitlines()[0]})") from None
    if not isinstance(cfg, dict):
        raise InputError(f"{path}: expected a YAML mapping (name, profile, fluid, rates, pressure, ...)")
    line = line_from_config(cfg, base_dir=path.parent, where=str(path))
    return line
