"""Strict configs: every value of a composed config checked against its allowed set or range
before any work starts, in one place.

:data:`closure_nn.config_rules.RULES` is a declarative table per config (``conf/<name>.yaml``):
dotted key -> rule (the kinds of rule: :mod:`closure_nn.config_rule_types`).

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
import re
from collections.abc import Callable, Iterable, Mapping
from pathlib import Path

from omegaconf import OmegaConf
from omegaconf.errors import OmegaConfBaseException

from .config_rule_types import MapOf, Number, Opaque, Rule, _is_number, _registry, show
from .config_location import CONF_DIR
from .config_rules import RESUME_SAFE, RULES
from .physics.checks import InputError

MISSING = "???"


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
        if isinstance(cl, Mapping) and cl.get("source") == "bundle" and (cl.get("path") in (None, "")):
            eg = " (e.g. closure=learned closure.path=DIR)" if key == "closure" else ""
            raise InputError(f"{where}: {key}.path = null: expected the folder of a closure bundle when "
                             f"{key}.source = 'bundle'{eg}")
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
