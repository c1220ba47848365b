"""Strict configs: every value of a composed config checked against its allowed set or range
before any work starts, in one place.

:data:`RULES` is a declarative table per config (``conf/<name>.yaml``): dotted key -> rule. A key
segment ``*`` matches any name (the rule of the parent says which names are allowed). Allowed
choices come from the code's own registries where they exist (e.g.
:data:`closure_nn.training.loss.PATTERN_ROWS`, :data:`closure_nn.data.features.UNKNOWN_PATTERN_RULES`,
the correlation tables of :mod:`closure_nn.closures.correlations`), looked up only when a config
holds the key, so that the fast commands (point, batch, line) never import Lightning or pandas.
Physical inputs (map, audit grid) use the ranges of :data:`closure_nn.physics.checks.RANGES`.

:func:`check_config` raises :class:`~closure_nn.physics.checks.InputError` with one line::

    config <name>: <key> = <value>: expected <rule>

An unknown key names the nearest valid key (:func:`difflib.get_close_matches`);
:func:`override_error` turns Hydra's refusal of an override into the same kind of line (for a
config-group choice such as ``design=demo_lop`` it lists the group's yaml files).
:func:`check_keys` is the same test for the free-form YAML of a line or a design space.

Subtrees checked by their own parser are ``opaque`` here: ``design`` (closure_nn.data.design_space),
``line`` (closure_nn.line.definition).
"""
from __future__ import annotations

import difflib
import importlib
import math
import re
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path

from .physics.checks import RANGES, InputError

MISSING = "???"


# ------------------------------------------------------------------ rules

def _registry(ref: str | Iterable) -> tuple:
    """``'module:NAME'`` -> the names of that tuple or dict (imported on demand); else the items."""
    if isinstance(ref, str):
        mod, _, attr = ref.partition(":")
        ref = getattr(importlib.import_module(mod), attr)
    return tuple(ref)


def _is_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def show(v, unit: str = "") -> str:
    """A config value as the user would type it (text quoted, ``null``, ``true``)."""
    if v is None:
        return "null"
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return repr(v)
    if isinstance(v, float):
        return f"{v:g}" + (f" {unit}" if unit else "")
    if isinstance(v, int):
        return f"{v}" + (f" {unit}" if unit else "")
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(show(x) for x in v) + "]"
    if isinstance(v, Mapping):
        return "{" + ", ".join(f"{k}: {show(x)}" for k, x in v.items()) + "}"
    return repr(v)


class Rule:
    """A rule for one value: :meth:`ok` tests it, :meth:`text` says what is expected."""

    nullable = False

    def ok(self, v) -> bool:  # pragma: no cover - every rule overrides it
        raise NotImplementedError

    def text(self) -> str:  # pragma: no cover
        raise NotImplementedError

    def accepts(self, v) -> bool:
        return (v is None and self.nullable) or (v is not None and self.ok(v))

    def expected(self) -> str:
        return ("null or " if self.nullable else "") + self.text()


@dataclass(frozen=True)
class Choice(Rule):
    """One of a set of names; ``values`` a tuple or ``'module:NAME'`` of a registry."""

    values: object
    nullable: bool = False
    what: str = ""  # e.g. 'wall friction correlation': the message adds "(unknown <what> 'x')"

    def names(self) -> tuple:
        return _registry(self.values)

    def ok(self, v) -> bool:
        return isinstance(v, str) and v in self.names()

    def text(self) -> str:
        return "one of " + ", ".join(map(str, self.names()))


@dataclass(frozen=True)
class Number(Rule):
    """A number in a range; ``whole``: an integer; ``open_lo``/``open_hi``: strict bounds."""

    lo: float | None = None
    hi: float | None = None
    whole: bool = False
    open_lo: bool = False
    open_hi: bool = False
    nullable: bool = False
    unit: str = ""

    def ok(self, v) -> bool:
        if not _is_number(v) or (self.whole and not isinstance(v, int)) or not math.isfinite(v):
            return False
        if self.lo is not None and (v < self.lo or (self.open_lo and v == self.lo)):
            return False
        return self.hi is None or not (v > self.hi or (self.open_hi and v == self.hi))

    def text(self) -> str:
        what = "a whole number" if self.whole else "a number"
        u = f" {self.unit}" if self.unit else ""
        lo, hi = self.lo, self.hi
        if lo is not None and hi is not None:
            if not (self.open_lo or self.open_hi) and u:
                return f"{what} {lo:g} to {hi:g}{u}"
            return f"{what} in {'(' if self.open_lo else '['}{lo:g}, {hi:g}{')' if self.open_hi else ']'}{u}"
        if lo is not None:
            return f"{what} {'>' if self.open_lo else '>='} {lo:g}{u}"
        if hi is not None:
            return f"{what} {'<' if self.open_hi else '<='} {hi:g}{u}"
        return what


@dataclass(frozen=True)
class Flag(Rule):
    def ok(self, v) -> bool:
        return isinstance(v, bool)

    def text(self) -> str:
        return "true or false"


@dataclass(frozen=True)
class Text(Rule):
    """Free text (a path, a name)."""

    what: str = "a text"
    nullable: bool = False

    def ok(self, v) -> bool:
        return isinstance(v, str) and v.strip() != ""

    def text(self) -> str:
        return self.what


@dataclass(frozen=True)
class Either(Rule):
    """Any of several rules (e.g. a number or a named model)."""

    rules: tuple
    nullable: bool = False

    def ok(self, v) -> bool:
        return any(r.accepts(v) for r in self.rules)

    def text(self) -> str:
        return " or ".join(r.expected() for r in self.rules)


@dataclass(frozen=True)
class ListOf(Rule):
    item: Rule
    min_len: int = 0
    nullable: bool = False

    def ok(self, v) -> bool:
        return isinstance(v, (list, tuple)) and len(v) >= self.min_len and all(self.item.accepts(x) for x in v)

    def text(self) -> str:
        n = f" (at least {self.min_len})" if self.min_len else ""
        return f"a list{n} of: {self.item.expected()}"


@dataclass(frozen=True)
class Axis(Rule):
    """A range ``[low, high]`` with ``0 < low < high`` (a logarithmic axis)."""

    unit: str = "m/s"

    def ok(self, v) -> bool:
        return (isinstance(v, (list, tuple)) and len(v) == 2 and all(_is_number(x) and math.isfinite(x) for x in v)
                and 0 < v[0] < v[1])

    def text(self) -> str:
        return f"[low, high] in {self.unit} with 0 < low < high (the axis is logarithmic)"


@dataclass(frozen=True)
class MapOf(Rule):
    """A mapping whose keys are names of ``keys`` (a registry) and whose values pass ``value``."""

    keys: object
    value: Rule
    nullable: bool = False

    def ok(self, v) -> bool:
        names = _registry(self.keys) if self.keys is not None else None
        return isinstance(v, Mapping) and all((names is None or k in names) and self.value.accepts(x)
                                              for k, x in v.items())

    def text(self) -> str:
        keys = "names" if self.keys is None else ", ".join(_registry(self.keys))
        return f"a mapping of {keys} to {self.value.expected()}"


@dataclass(frozen=True)
class Described(Rule):
    """``rule`` with its own wording of what is expected."""

    rule: Rule
    wording: str

    def ok(self, v) -> bool:
        return self.rule.accepts(v)

    def text(self) -> str:
        return self.wording


@dataclass(frozen=True)
class Opaque(Rule):
    """A subtree checked elsewhere (``note`` says where); any value passes here."""

    note: str = ""

    def ok(self, v) -> bool:
        return True

    def text(self) -> str:
        return self.note


def physical(name: str, scale: float = 1.0, unit: str | None = None) -> Number:
    """The range of input ``name`` in :data:`closure_nn.physics.checks.RANGES` (times ``scale``)."""
    lo, hi, u, _ = RANGES[name]
    return Number(lo * scale, hi * scale, unit=unit or u)


# ------------------------------------------------------------------ the table

NUM = Number()
POS = Number(0, open_lo=True)
NONNEG = Number(0)
WHOLE1 = Number(1, whole=True)
WHOLE0 = Number(0, whole=True)
SEED = Number(0, whole=True)
FRACTION = Number(0, 1, open_lo=True, open_hi=True)
FLAG = Flag()
PATH = Text("a path")
OPT_PATH = Text("a path", nullable=True)
NAME = Text("a name", nullable=True)
OUTPUTS = "closure_nn.closures.neural:OUTPUT_NAMES"
FEATURES = "closure_nn.physics.groups:FEATURE_NAMES"
STAGES = "closure_nn.training.run:STAGES"
TERMS = "closure_nn.training.loss:TERMS"
SELECT = Choice("closure_nn.physics.holdup_roots:SELECT_RULES")


def _under(prefix: str, table: Mapping[str, Rule]) -> dict[str, Rule]:
    return {f"{prefix}.{k}": r for k, r in table.items()}


#: conf/closure/*.yaml (closure_nn.closures.registry.build_closure); the path rule of ``bundle``
#: is in :func:`_cross_checks`
CLOSURE = {
    "kind": Choice(("baseline", "bundle")),
    "wall": Choice("closure_nn.closures.correlations:WALL", what="wall friction correlation"),
    "interface": Choice("closure_nn.closures.correlations:INTERFACE", what="interface friction correlation"),
    "annular_interface": Choice("closure_nn.closures.correlations:INTERFACE", what="interface friction correlation"),
    "interface_kwargs": MapOf(None, NUM),
    "path": PATH,
}
#: conf/solver/default.yaml (closure_nn.physics.point.solve_points)
SOLVER = {
    "select": SELECT,
    "entrainment": Described(Either((Number(0, 1, open_hi=True), Choice(("ishii_mishima",)))),
                             "a fraction in [0, 1) or ishii_mishima"),
    "n_grid": Number(4, whole=True),
    "s_wave": POS,
}
#: conf/model/*.yaml (closure_nn.closures.neural.NeuralClosure)
MODEL = {
    "mode": Choice("closure_nn.closures.neural:MODES"),
    "hidden": ListOf(WHOLE1, min_len=1),
    "activation": Choice("closure_nn.closures.neural:ACTIVATIONS"),
    "bound": Either((POS, MapOf(OUTPUTS, POS))),
    "direct_span": POS,
    "inputs": MapOf(OUTPUTS, ListOf(Choice(FEATURES), min_len=1, nullable=True), nullable=True),
    "learn": ListOf(Choice(OUTPUTS), min_len=1, nullable=True),
    "base_input": FLAG,
}
#: conf/loss/*.yaml (closure_nn.training.loss.LossSettings)
LOSS = {
    "weights": MapOf(TERMS, NONNEG),
    "prior_factors": MapOf(OUTPUTS, NONNEG),
    "default_holdup_sd": POS,
    "pgrad_rel_sd": NONNEG,
    "pgrad_sd_floor": Number(0, unit="Pa/m"),
    "pattern_margin": NONNEG,
    "pattern_tolerance": POS,
    "pattern_rows": Choice("closure_nn.training.loss:PATTERN_ROWS"),
    "prior_space": Choice("closure_nn.training.loss:PRIOR_SPACES"),
    "residual_robust_scale": Number(0, open_lo=True, nullable=True),
    "data_robust_scale": Number(0, open_lo=True, nullable=True),
    "effective_variance": FLAG,
    "select": SELECT,
    "n_grid": Number(4, whole=True),
}
_MONITORS = tuple(f"{p}/{k}" for p in ("val", "train") for k in
                  ("loss", "phase_residual", "combined_residual", "data_holdup", "data_pgrad", "pattern", "prior",
                   "smooth")) + ("val/holdup_rmse", "val/pgrad_rel_rmse")
#: conf/trainer/*.yaml (closure_nn.training.run)
TRAINER = {
    "max_epochs": Number(1, whole=True, nullable=True),
    "batch_size": Number(1, whole=True, nullable=True),
    "lr": POS,
    "weight_decay": NONNEG,
    "lr_schedule": Choice("closure_nn.training.module:LR_SCHEDULES"),
    "lr_final_factor": NONNEG,
    "gradient_clip_val": Number(0, nullable=True),
    "monitor": Choice(_MONITORS),
    "patience": Number(0, whole=True, nullable=True),
    "min_delta": NONNEG,
    "deterministic": FLAG,
    "num_threads": WHOLE1,
    "progress_bar": FLAG,
    "log_every_n_steps": WHOLE1,
    "devices": WHOLE1,
    "strategy": Choice(("auto", "ddp")),
    "backend": Choice(("gloo",)),  # CPU only: the gloo process group
    "start_method": Choice(("spawn", "fork", "forkserver", "popen")),  # Lightning's DDP launchers
}
_STAGE_TRAINER = {"max_epochs": WHOLE1, "batch_size": WHOLE1, "patience": WHOLE0}

#: conf/train.yaml with its groups
TRAIN = {
    **_under("closure", CLOSURE), **_under("model", MODEL), **_under("loss", LOSS), **_under("trainer", TRAINER),
    "stage": Choice(STAGES),
    "seed": SEED,
    "init_bundle": OPT_PATH,
    "resume": OPT_PATH,
    "data.train": Text("a table path (CSV or Parquet)", nullable=True),
    "data.val": OPT_PATH,
    "data.val_fraction": FRACTION,
    "data.unknown_pattern": Choice("closure_nn.data.features:UNKNOWN_PATTERN_RULES"),
    "data.replay": ListOf(PATH),
    "data.replay_fraction": Number(0, 1, open_lo=True),
    "data.replay_weight": NONNEG,
    "finetune.lr_factor": POS,
    "finetune.freeze_layers": WHOLE0,
    "stage_trainer.*": Opaque("a stage name"),
    **_under("stage_trainer.*", _STAGE_TRAINER),
    "selection.min_gain": NONNEG,
    "selection.confidence": FRACTION,
    "selection.n_bootstrap": WHOLE1,
    "ensemble.members": WHOLE1,
    "ensemble.bootstrap": FLAG,
    "ensemble.processes": WHOLE1,
    "domain.max_points": WHOLE1,
    "domain.quantile": Number(0, 1, open_lo=True),
    "domain.factor": POS,
    "run_root": PATH,
    "run_name": NAME,
}
_WIDE_LIST = ListOf(NUM, min_len=1)

RULES: dict[str, dict[str, Rule]] = {
    "point": {**_under("closure", CLOSURE), **_under("solver", SOLVER), "run_root": PATH},
    "check_data": {"run_root": PATH, "unknown_columns": Choice(("keep", "drop")),
                   "table_format": Choice(("csv", "parquet")), "unit_headers": FLAG},
    "synth": {
        **_under("closure", CLOSURE), **_under("solver", SOLVER),
        "design": Opaque("a design space (closure_nn.data.design_space.parse_design)"),
        "n": WHOLE1, "seed": SEED, "chunk": WHOLE1, "table_format": Choice(("csv", "parquet")),
        "progress": FLAG, "run_root": PATH, "run_name": NAME,
    },
    "train": TRAIN,
    "fit": {
        **TRAIN,
        "fit.synth.n": WHOLE1, "fit.synth.seed": SEED,
        "fit.margins.velocity": Number(1), "fit.margins.d_low": Number(0, 1, open_lo=True),
        "fit.margins.d_high": Number(1), "fit.margins.theta_deg": Number(0, 90, unit="deg"),
        "fit.margins.roughness": Number(1), "fit.margins.rhog": Number(1),
        "fit.margins.liquid": Number(0, 1, open_hi=True), "fit.margins.mul": Number(1),
        "fit.margins.mug": Number(0, 1, open_hi=True),
        "fit.search.trials": WHOLE0, "fit.search.seed": SEED, "fit.search.processes": WHOLE1, "fit.search.trial_max_epochs": Number(1, whole=True),
        "fit.search.space": Opaque("a mapping of config keys to {low, high, log} or {choices}"),
    },
    "evaluate": {
        **TRAIN, **_under("solver", SOLVER), **_under("kfold.trainer", TRAINER),
        "experiment.name": NAME, "experiment.seed": SEED, "experiment.lab": PATH,
        "experiment.corruptions": OPT_PATH, "experiment.exclude_corrupted": FLAG, "experiment.members": WHOLE1,
        "experiment.synth.design": Text("a design name (conf/design/<name>.yaml)"),
        "experiment.synth.n": WHOLE1, "experiment.synth.seed": SEED,
        "lab": PATH,
        "splits.random.enabled": FLAG, "splits.random.test_fraction": FRACTION, "splits.random.seed": SEED,
        "splits.grouped.enabled": FLAG, "splits.grouped.by": Choice("closure_nn.data.splits:GROUP_KEYS"),
        "splits.grouped.test_groups": ListOf(Either((NUM, Text()))), "splits.grouped.test_fraction": FRACTION,
        "splits.grouped.seed": SEED,
        "holdout": Choice(("test", "development")),
        "development.fraction": FRACTION, "development.seed": SEED,
        "kfold.k": Described(Either((Number(0, 0, whole=True), Number(2, whole=True))), "0 (off) or a whole number >= 2"),
        "kfold.seed": SEED,
        "scoring.holdup_floor": NONNEG, "scoring.pgrad_floor": Number(0, unit="Pa/m"), "scoring.oracle": FLAG,
        "boosted.enabled": FLAG,
        "blackbox.hidden": ListOf(WHOLE1, min_len=1), "blackbox.activation": Choice("closure_nn.closures.neural:ACTIVATIONS"),
        "blackbox.holdup_scale": POS, "blackbox.pgrad_scale": Number(0, open_lo=True, unit="Pa/m"),
        "plots": FLAG, "num_threads": WHOLE1, "processes": WHOLE1,
    },
    "audit": {
        **_under("closure", CLOSURE), **_under("solver", SOLVER),
        "run_root": PATH, "truth": OPT_PATH, "health": FLAG,
        **_under("checks", {"k_robust": POS, "residual_sd_floor": NONNEG, "k_sigma": POS, "holdup_sd_default": POS,
                            "pgrad_sd_rel": NONNEG, "pgrad_sd_abs": Number(0, unit="Pa/m"), "model_holdup_sd": NONNEG,
                            "model_pgrad_rel": NONNEG, "model_pgrad_abs": Number(0, unit="Pa/m"),
                            "kh_margin": NONNEG}),
        **_under("grid", {
            **_under("fluids", {k: physical(k) for k in ("rhol", "rhog", "mul", "mug", "sigma")}),
            "D": ListOf(physical("D"), min_len=1), "theta_deg": ListOf(Number(-90, 90, unit="deg"), min_len=1),
            "roughness": physical("roughness"), "vsl": Axis(), "vsg": Axis(), "n_sweep": Number(2, whole=True),
            "roots_theta_deg": ListOf(Number(-90, 90, unit="deg"), min_len=1), "roots_vsl": Axis(),
            "roots_vsg": Axis(), "n_map": Number(2, whole=True), "tiny_rate": Number(0, open_lo=True, unit="m/s"),
            "n_rates": Number(2, whole=True), "n_frac": Number(2, whole=True), "base_rates": WHOLE1,
            "base_fracs": ListOf(FRACTION, min_len=1), "sweeps": ListOf(Choice("closure_nn.audit.health:SWEEPS"), min_len=1),
            "kink_jump": POS, "kink_ratio": POS, "roots_D": Number(*RANGES["D"][:2], nullable=True, unit="m"),
            "single_phase_tol": POS}),
    },
    "map": {
        **_under("closure", CLOSURE), **_under("solver", SOLVER),
        "run_root": PATH, "learned": OPT_PATH, "D": physical("D"), "theta_deg": Number(-90, 90, unit="deg"),
        "roughness": physical("roughness"),
        **_under("fluids", {k: physical(k) for k in ("rhol", "rhog", "mul", "mug", "sigma", "g")}),
        "vsl": Axis(), "vsg": Axis(), "n": Number(2, whole=True), "data_D_rel": POS,
        "data_theta_deg": Number(0, unit="deg"),
    },
    "line": {
        **_under("closure", CLOSURE), **_under("solver", SOLVER),
        "line": Opaque("a line definition (closure_nn.line.definition)"),
        "compare": Opaque("a mapping of names to closure configs"),
        **_under("compare.*", CLOSURE),
        "ensemble": ListOf(PATH),
        **_under("march", {"tol": Number(0, open_lo=True, unit="Pa"), "max_halvings": WHOLE0,
                           "max_jump_halvings": WHOLE0, "sweep_tol": Number(0, open_lo=True, unit="Pa"),
                           "max_sweeps": WHOLE1, "outlet_tol": Number(0, open_lo=True, unit="Pa"),
                           "shooting": Choice(("newton", "brentq")), "max_stations": Number(2, whole=True),
                           "p_min": Number(0, open_lo=True, unit="Pa")}),
        "threads": WHOLE1, "plot": FLAG, "run_root": PATH,
    },
    "demo": {"run_root": PATH, "ensemble_members": WHOLE0, "ensemble_processes": WHOLE1,
             "evaluate": ListOf(Text("key=value")), "line": ListOf(Text("key=value")),
             "audit": ListOf(Text("key=value"))},
}
#: trainer settings a resumed run may change (they do not change the result of the epochs run)
RESUME_SAFE = ("trainer.max_epochs", "trainer.progress_bar", "trainer.num_threads")


# ------------------------------------------------------------------ checking

def nearest(word: str, names: Iterable[str]) -> str | None:
    """The closest of ``names`` to ``word`` (difflib ratio >= 0.6), else None.

    >>> nearest("solver.selct", ["solver.select", "solver.n_grid"])
    'solver.select'
    """
    hit = difflib.get_close_matches(word, list(names), n=1, cutoff=0.6)
    return hit[0] if hit else None


def unknown_key_message(key: str, known: Iterable[str], what: str = "key", listing: Iterable[str] | None = None) -> str:
    """``unknown key '<key>'; did you mean '<nearest>'? (known: ...)``; ``listing``: the names
    to list (default ``known``), shown when there are at most 24."""
    known = sorted(set(map(str, known)))
    listing = known if listing is None else sorted(set(listing))
    leaf = key.rsplit(".", 1)[-1]
    near = nearest(key, known) or nearest(leaf, known)
    hint = f"; did you mean {near!r}?" if near else ""
    shown = f" (known: {', '.join(listing)})" if 0 < len(listing) <= 24 else ""
    return f"unknown {what} {key!r}{hint}{shown}"


def check_keys(given: Iterable, known: Iterable[str], where: str, what: str = "key") -> None:
    """Raise :class:`InputError` for the first name of ``given`` not in ``known`` (a user's YAML).

    >>> check_keys(["rhol", "sigma"], ["rhol", "mul", "sigma"], "line x.yaml, fluid")
    >>> check_keys(["sigam"], ["rhol", "mul", "sigma"], "line")
    Traceback (most recent call last):
    ...
    closure_nn.physics.checks.InputError: line: unknown key 'sigam'; did you mean 'sigma'? (known: mul, rhol, sigma)
    """
    known = tuple(known)
    for k in given:
        if k not in known:
            raise InputError(f"{where}: {unknown_key_message(str(k), known, what)}")


def _match(pattern: str, key: str) -> bool:
    p, k = pattern.split("."), key.split(".")
    return len(p) == len(k) and all(a == "*" or a == b for a, b in zip(p, k))


def _rule_for(table: Mapping[str, Rule], key: str) -> Rule | None:
    """The rule of ``key``: its own, a ``*`` pattern's, or the value rule of a mapping parent."""
    if key in table:
        return table[key]
    hit = next((r for p, r in table.items() if "*" in p and _match(p, key)), None)
    if hit is None and "." in key:
        parent, leaf = key.rsplit(".", 1)
        up = _rule_for(table, parent)
        if isinstance(up, MapOf) and (up.keys is None or leaf in _registry(up.keys)):
            return up.value
    return hit


def _is_prefix(table: Mapping[str, Rule], key: str) -> bool:
    n = key.count(".") + 1
    return any(p.count(".") >= n and _match(".".join(p.split(".")[:n]), key) for p in table)


def _siblings(table: Mapping[str, Rule], parent: str) -> list[str]:
    n = parent.count(".") + 1 if parent else 0
    out = set()
    for p in table:
        parts = p.split(".")
        if len(parts) > n and (not parent or _match(".".join(parts[:n]), parent)) and parts[n] != "*":
            out.add(".".join([parent, parts[n]]) if parent else parts[n])
    return sorted(out)


def _walk(node: Mapping, table: Mapping[str, Rule], where: str, prefix: str = "") -> None:
    for k, v in node.items():
        key = f"{prefix}{k}"
        if v == MISSING:
            continue  # a value the user must still give: closure_nn.config.require_complete names it
        rule = _rule_for(table, key)
        if isinstance(rule, MapOf) and isinstance(v, Mapping):  # item by item: the key that is wrong
            names = _registry(rule.keys) if rule.keys is not None else None
            for k2, v2 in v.items():
                if names is not None and k2 not in names:
                    raise InputError(f"{where}: {unknown_key_message(f'{key}.{k2}', [f'{key}.{n}' for n in names])}")
                _walk({k2: v2}, {f"{key}.{k2}": rule.value}, where, key + ".")
            continue
        if rule is not None and not isinstance(rule, Opaque):
            if not rule.accepts(v):
                unit = getattr(rule, "unit", "") if _is_number(v) else ""
                hint = (" (write numbers like 1.0e-3 with a dot, else YAML reads them as text)"
                        if isinstance(v, str) and _float_text(v) else "")
                if getattr(rule, "what", ""):
                    hint = f" (unknown {rule.what} {show(v)})"
                raise InputError(f"{where}: {key} = {show(v, unit)}: expected {rule.expected()}{hint}")
            continue
        if isinstance(v, Mapping) and _is_prefix(table, key):
            _walk(v, table, where, key + ".")
            continue
        if rule is None:
            raise InputError(f"{where}: {unknown_key_message(key, _siblings(table, prefix[:-1]))}")


def _float_text(v: str) -> bool:
    try:
        float(v)
        return True
    except ValueError:
        return False


def _cross_checks(c: Mapping, table: Mapping[str, Rule], where: str, config_dir) -> None:
    """Rules between keys: a bundle closure needs its path; search-space keys are settings;
    a design name has its yaml file."""
    closures = [("closure", c.get("closure"))] + [(f"compare.{k}", v) for k, v in (c.get("compare") or {}).items()]
    for key, cl in closures:
        if isinstance(cl, Mapping) and cl.get("kind") == "bundle" and (cl.get("path") in (None, "")):
            eg = " (e.g. closure=learned closure.path=DIR)" if key == "closure" else ""
            raise InputError(f"{where}: {key}.path = null: expected the folder of a closure bundle when "
                             f"{key}.kind = 'bundle'{eg}")
    space = ((c.get("fit") or {}).get("search") or {}).get("space") or {}
    for key, spec in space.items():
        rule = _rule_for(table, key)
        if rule is None or isinstance(rule, Opaque):
            numeric = [p for p, r in table.items() if isinstance(r, Number)]
            raise InputError(f"{where}: fit.search.space: {unknown_key_message(key, numeric)}")
        ok = isinstance(spec, Mapping) and (
            (set(spec) == {"choices"} and isinstance(spec["choices"], list) and spec["choices"]
             and all(rule.accepts(x) for x in spec["choices"]))
            or (set(spec) in ({"low", "high"}, {"low", "high", "log"}) and all(_is_number(spec[b]) for b in ("low", "high"))
                and spec["low"] < spec["high"] and rule.accepts(spec["low"]) and rule.accepts(spec["high"])
                and isinstance(spec.get("log", False), bool) and not (spec.get("log") and spec["low"] <= 0)))
        if not ok:
            raise InputError(f"{where}: fit.search.space.{key} = {show(spec)}: expected {{low, high, log}} with "
                             f"low < high (low > 0 with log: true) or {{choices: [...]}}, each value "
                             f"{rule.expected()}")
    design = ((c.get("experiment") or {}).get("synth") or {}).get("design")
    if isinstance(design, str) and design not in group_choices("design", config_dir):
        raise InputError(f"{where}: experiment.synth.design = {design!r}: expected one of "
                         f"{', '.join(group_choices('design', config_dir))}")


def check_config(cfg, name: str, config_dir: str | Path | None = None) -> None:
    """Check every value of the composed config ``cfg`` of ``conf/<name>.yaml`` against
    :data:`RULES`; raise :class:`InputError` with one line for the first bad value or unknown key.
    ``???`` values are left to :func:`closure_nn.config.require_complete`."""
    from omegaconf import OmegaConf
    from omegaconf.errors import OmegaConfBaseException

    table = RULES.get(name)
    if table is None:
        return
    where = f"config {name}"
    try:
        c = OmegaConf.to_container(cfg, resolve=True) if OmegaConf.is_config(cfg) else cfg
    except OmegaConfBaseException as exc:
        raise InputError(f"{where}: {str(exc).splitlines()[0]}") from None
    _walk(c, table, where)
    _cross_checks(c, table, where, config_dir)


# ------------------------------------------------------------------ overrides Hydra refused

def group_choices(group: str, config_dir: str | Path | None = None) -> list[str]:
    """Names of the yaml files of config group ``group`` in conf/ and in ``config_dir``."""
    from .config import CONF_DIR

    dirs = [CONF_DIR / group] + ([Path(config_dir) / group] if config_dir is not None else [])
    return sorted({p.stem for d in dirs if d.is_dir() for p in d.glob("*.yaml")})


def flat_keys(node, prefix: str = "") -> list[str]:
    """Every dotted key of a plain nested mapping, inner keys included."""
    out = []
    if isinstance(node, Mapping):
        for k, v in node.items():
            out.append(f"{prefix}{k}")
            out += flat_keys(v, f"{prefix}{k}.")
    return out


def override_error(name: str, overrides: Iterable[str], exc: Exception, config_dir=None,
                   compose: Callable | None = None) -> InputError:
    """One line for an override Hydra refused: the nearest valid key of an unknown key, the
    available choices of an unknown config-group option, else Hydra's first line."""
    first = str(exc).splitlines()[0]
    where = f"config {name}"
    m = re.search(r"Could not find '([^']+)/([^'/]+)'", str(exc))
    if m:
        group, choice = m.group(1), m.group(2)
        choices = group_choices(group, config_dir)
        near = nearest(choice, choices)
        hint = f"; did you mean {near!r}?" if near else ""
        return InputError(f"{where}: {group} = {choice!r}: expected one of {', '.join(choices) or '(none)'} "
                          f"(no file {group}/{choice}.yaml in conf/{' or ' + str(config_dir) if config_dir else ''}){hint}")
    m = re.search(r"Could not (?:override|append to config|delete from config)[^']*'([^']+)'", str(exc))
    if m and compose is not None:
        key = m.group(1)
        others = [o for o in overrides if o.lstrip("+~").split("=", 1)[0] != key]
        try:
            base = compose(others)
        except Exception:  # another override is bad too: fall back to the defaults
            base = compose([])
        from omegaconf import OmegaConf

        known = flat_keys(OmegaConf.to_container(base, resolve=False))
        parent = key.rsplit(".", 1)[0] if "." in key else ""
        table = RULES.get(name, {})
        rule = _rule_for(table, parent) if parent else None
        free = isinstance(rule, Opaque) or (isinstance(rule, MapOf) and rule.keys is None)
        if isinstance(rule, MapOf) and rule.keys is not None:
            known = [f"{parent}.{n}" for n in _registry(rule.keys)]
        elif free:  # a free mapping: a new name is added with '+'
            return InputError(f"{where}: {key!r} is not in the config yet; add it with +{key}=VALUE")
        other = _other_group_hint(key, config_dir)
        if other:
            return InputError(f"{where}: unknown key {key!r}{other}")
        level = [k for k in known if (k.rsplit(".", 1)[0] if "." in k else "") == parent]
        return InputError(f"{where}: {unknown_key_message(key, known, listing=level)}")
    return InputError(f"{where}: {first}")


def _other_group_hint(key: str, config_dir) -> str:
    """' (closure.path is a key of closure=learned)' when another option of the group has the key."""
    from omegaconf import OmegaConf

    from .config import CONF_DIR

    group, _, rest = key.partition(".")
    if not rest:
        return ""
    for option in group_choices(group, config_dir):
        for d in [CONF_DIR] + ([Path(config_dir)] if config_dir else []):
            p = d / group / f"{option}.yaml"
            if p.exists():
                try:
                    node = OmegaConf.to_container(OmegaConf.load(p), resolve=False)
                except Exception:  # a broken yaml of another option is not this error
                    continue
                if rest in flat_keys(node):
                    return f" ({key} is a key of {group}={option}: give {group}={option} first)"
    return ""


def changed_keys(saved: Mapping, merged: Mapping, safe: Iterable[str] = RESUME_SAFE) -> list[tuple[str, object, object]]:
    """(key, saved value, new value) of every dotted key whose value differs between two plain
    configs, except the ``safe`` keys and ``resume``.

    >>> changed_keys({"seed": 0, "trainer": {"max_epochs": 5, "lr": 0.01}, "resume": None},
    ...              {"seed": 1, "trainer": {"max_epochs": 9, "lr": 0.01}, "resume": "x.ckpt"})
    [('seed', 0, 1)]
    """
    a, b = _flat_values(saved), _flat_values(merged)
    skip = set(safe) | {"resume"}
    return [(k, a.get(k, MISSING), b.get(k, MISSING)) for k in sorted(set(a) | set(b))
            if k not in skip and a.get(k, MISSING) != b.get(k, MISSING)]


def _flat_values(node, prefix: str = "") -> dict:
    out = {}
    if isinstance(node, Mapping) and node:
        for k, v in node.items():
            out.update(_flat_values(v, f"{prefix}{k}."))
    elif prefix:
        out[prefix[:-1]] = node
    return out
