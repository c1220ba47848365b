"""The main config keys of a command, for its ``--help``: generated from the YAML files of conf/.

Each key's default comes from the composed config (:func:`closure_nn.config.load_config`), its
meaning and unit from the trailing ``# comment`` of the key's line in the YAML file that sets it
(plus comment-only lines aligned under that comment). A comment that begins with a unit - ``[m]``
or a unit spelling of :data:`closure_nn.data.units.UNITS` followed by a comma (``Pa, target ...``)
- gives the unit column. So the help text changes when the configs change, and never has to be
copied by hand.

Which keys are shown (:func:`main_keys`): the config groups chosen in the defaults list
(``design=demo_loop``), every key with a comment in the command's own YAML file and the YAML
files it builds on (``- train`` in conf/fit.yaml), and the few keys of group files named in
:data:`GROUP_KEYS` (the trainer's epochs, batch size and learning rate).

>>> "data.train" in config_epilog("train") and "trainer.max_epochs" in config_epilog("train")
True

Hydra and the data layer (pandas, scipy) are imported inside the functions that compose a config
or list units: this module runs for ``--help``, which should not load more than it shows.
"""
from __future__ import annotations

import re
import textwrap
from dataclasses import dataclass
from pathlib import Path

from omegaconf import OmegaConf

from .config import CONF_DIR, load_config

#: command -> the config it composes (commands without a config have no entry)
CONFIG_OF: dict[str, str] = {
    "point": "point", "batch": "point", "check-data": "check_data", "synth": "synth", "fit": "fit",
    "train": "train", "evaluate": "evaluate", "audit": "audit", "map": "map", "line": "line", "demo": "demo",
}
#: keys of config-group files worth listing for a config that uses the group
GROUP_KEYS: dict[str, tuple[str, ...]] = {
    "trainer": ("max_epochs", "batch_size", "lr", "patience"),
    "solver": ("select", "entrainment"),
}
#: sub-trees whose keys are too many or too deep for a help text
SKIP_PREFIXES: tuple[str, ...] = ("fit.search.space", "grid.fluids", "fluids.", "checks.", "grid.",
                                  "fit.margins.", "stage_trainer.")
WIDTH = 100
#: commands whose closure is chosen with ``--closure baseline|PATH``: their ``closure`` group only
#: sets the baseline's correlations
CLOSURE_OPTION = frozenset({"point", "batch", "audit", "map", "line"})

_KEY_LINE = re.compile(r"^(?P<indent>\s*)(?P<key>[A-Za-z_][\w.]*)\s*:(?P<value>[^#]*?)(?:\s*(?P<hash>#)\s?(?P<comment>.*))?$")
_DEFAULT_LINE = re.compile(r"^\s*-\s*(?:(?P<group>[\w/]+)\s*:\s*(?P<option>[\w./-]+)|(?P<name>[\w./-]+))\s*(?:#\s?(?P<comment>.*))?$")
_UNIT_BRACKET = re.compile(r"^\[(?P<unit>[^\]]+)\]\s*(?P<rest>.*)$")


@dataclass(frozen=True)
class KeyDoc:
    """One key as the YAML file documents it: comment, the file it is in."""

    key: str
    comment: str
    file: Path
    mapping: bool = False  #: the key opens a mapping (a section, no value of its own)


def _package(path: Path, default: str) -> str:
    """The ``# @package X`` of a YAML file, else ``default``."""
    for line in path.read_text(encoding="utf-8").splitlines()[:3]:
        m = re.match(r"^#\s*@package\s+(\S+)", line)
        if m:
            return "" if m.group(1) == "_global_" else m.group(1)
    return default


def read_key_comments(path: str | Path, prefix: str = "") -> dict[str, KeyDoc]:
    """Dotted key -> its trailing comment in one YAML file (comment-only lines right after it,
    indented deeper than the key, continue the comment). Keys inside flow mappings
    (``{a: 1}``) and list items are not split.

    >>> import tempfile, os
    >>> f = os.path.join(tempfile.mkdtemp(), "x.yaml")
    >>> _ = open(f, "w").write("a:\\n  b: 1   # [m] the b\\n    # more on b\\nc: 2\\n")
    >>> {k: d.comment for k, d in read_key_comments(f).items()}
    {'a': '', 'a.b': '[m] the b more on b', 'c': ''}
    """
    p = Path(path)
    out: dict[str, KeyDoc] = {}
    stack: list[tuple[int, str]] = []  # (indent, key) of the open mappings
    last: str | None = None
    last_col = -1
    in_defaults = False
    for line in p.read_text(encoding="utf-8").splitlines():
        stripped = line.strip()
        if not stripped:
            continue
        if stripped.startswith("#"):
            col = line.index("#")
            if last is not None and col > last_col and out[last].comment:  # continues the key's comment
                d = out[last]
                out[last] = KeyDoc(d.key, f"{d.comment} {stripped.lstrip('#').strip()}".strip(), d.file)
            else:
                last = None
            continue
        if stripped.startswith("-"):
            last = None
            continue
        m = _KEY_LINE.match(line)
        if m is None:
            last = None
            continue
        indent = len(m.group("indent"))
        while stack and stack[-1][0] >= indent:
            stack.pop()
        key = m.group("key")
        if indent == 0:
            in_defaults = key == "defaults"
        if in_defaults:
            continue
        dotted = ".".join([prefix] * bool(prefix) + [k for _, k in stack] + [key])
        comment = (m.group("comment") or "").strip()
        opens = not m.group("value").strip()  # a mapping opens here
        out[dotted] = KeyDoc(dotted, comment, p, mapping=opens)
        last, last_col = dotted, indent
        if opens:
            stack.append((indent, key))
    return out


def _defaults(path: Path) -> list[tuple[str | None, str, str]]:
    """The defaults list of a YAML file as (group or None, option or config name, comment)."""
    out, inside = [], False
    for line in path.read_text(encoding="utf-8").splitlines():
        if re.match(r"^defaults\s*:", line):
            inside = True
            continue
        if inside:
            if line and not line[0].isspace() and not line.startswith("-"):
                break
            m = _DEFAULT_LINE.match(line)
            if m and m.group("name") != "_self_":
                if m.group("group"):
                    out.append((m.group("group"), m.group("option"), (m.group("comment") or "").strip()))
                elif m.group("name"):
                    out.append((None, m.group("name"), (m.group("comment") or "").strip()))
    return out


def _collect(name: str, docs: dict[str, KeyDoc], groups: dict[str, tuple[str, str]], shown: list[list[str]]) -> None:
    """Walk ``conf/<name>.yaml`` and its defaults: group choices into ``groups``, key comments into
    ``docs`` (later files win, the file itself last as ``_self_``); the keys to show are appended
    to ``shown`` as [the file's own keys, keys of the files it builds on, keys of group files]."""
    path = CONF_DIR / f"{name}.yaml"
    own, built_on, of_groups = [], [], []
    for group, option, comment in _defaults(path):
        if group is None:  # a config this one builds on (e.g. fit -> train)
            sub: list[list[str]] = []
            _collect(option, docs, groups, sub)
            built_on += [k for part in sub[:2] for k in part]
            of_groups += sub[2]
            continue
        groups[group] = (option, comment or groups.get(group, ("", ""))[1])
        gfile = CONF_DIR / group / f"{option}.yaml"
        if gfile.exists():
            pkg = _package(gfile, group)
            gdocs = read_key_comments(gfile, pkg)
            docs.update(gdocs)
            of_groups += [f"{pkg}.{k}" for k in GROUP_KEYS.get(group, ()) if f"{pkg}.{k}" in gdocs]
    this = read_key_comments(path)
    docs.update(this)
    own += [k for k, d in this.items() if d.comment and not d.mapping]
    shown += [own, built_on, of_groups]


def group_choices(group: str) -> list[str]:
    """Option names of a config group: the stems of conf/<group>/*.yaml."""
    return sorted(p.stem for p in (CONF_DIR / group).glob("*.yaml"))


def main_keys(name: str) -> tuple[dict[str, tuple[str, str]], list[KeyDoc]]:
    """Group choices (group -> (option, comment)) and the documented keys shown for ``conf/<name>.yaml``."""
    docs: dict[str, KeyDoc] = {}
    groups: dict[str, tuple[str, str]] = {}
    shown: list[list[str]] = []
    _collect(name, docs, groups, shown)
    order = list(dict.fromkeys(k for part in shown for k in part))  # own keys first, each once
    keys = [docs[k] for k in order if not k.startswith(SKIP_PREFIXES) and k not in groups and docs[k].comment]
    return groups, keys


def docs_of(name: str) -> dict[str, KeyDoc]:
    """Every documented key of ``conf/<name>.yaml`` and the files it composes."""
    docs: dict[str, KeyDoc] = {}
    _collect(name, docs, {}, [])
    return docs


def split_unit(comment: str) -> tuple[str, str]:
    """``'[m] pipe diameter'`` -> ``('m', 'pipe diameter')``; ``'Pa, target'`` -> ``('Pa', 'target')``.

    >>> split_unit("[m/s] range of the liquid axis"), split_unit("Pa, floor"), split_unit("points")
    (('m/s', 'range of the liquid axis'), ('Pa', 'floor'), ('', 'points'))
    """
    m = _UNIT_BRACKET.match(comment)
    if m:
        return m.group("unit"), m.group("rest")
    head, sep, rest = comment.partition(",")
    if sep and " " not in head.strip():
        from .data.units import UNITS

        if any(head.strip() in units for units in UNITS.values()):
            return head.strip(), rest.strip()
    return "", comment


def _value_text(cfg, key: str) -> str:
    try:
        node = OmegaConf.select(cfg, key, throw_on_missing=True)
    except Exception:  # '???' (a value the user must give) or an interpolation that cannot resolve yet
        raw = OmegaConf.to_container(cfg, resolve=False)
        for part in key.split("."):
            raw = raw.get(part) if isinstance(raw, dict) else None
        return "??? (required)" if raw == "???" else str(raw)
    if OmegaConf.is_config(node):
        node = OmegaConf.to_container(node, resolve=True)
    if node is None:
        return "null"
    if isinstance(node, bool):
        return str(node).lower()
    return str(node)


def config_epilog(command_or_config: str, width: int = WIDTH) -> str:
    """The help text of a command's main config keys (see the module docstring); '' for a
    command without a config."""
    name = CONFIG_OF.get(command_or_config, command_or_config)
    if not (CONF_DIR / f"{name}.yaml").exists():
        return ""
    note = None
    try:
        cfg = load_config(name)
    except ValueError as exc:  # the shipped config fails its checks: still show the keys, and say so
        cfg, note = _compose_unchecked(name), str(exc).splitlines()[0]
    groups, keys = main_keys(name)
    lines = [f"Config (conf/{name}.yaml; change any key with key=value on the command line):", ""]
    if note:
        lines += [f"  (note: {note})", ""]
    if groups:
        lines.append("  config groups (group=choice; choices are the files conf/<group>/*.yaml):")
        for g, (opt, comment) in groups.items():
            head = f"    {g}={opt}"
            text = f"choices: {', '.join(group_choices(g))}" + (f"; {comment}" if comment else "")
            if g == "closure" and command_or_config in CLOSURE_OPTION:
                keys_ = ", ".join(f"closure.{k}=..." for k in ("wall", "interface") if f"closure.{k}" in docs_of(name))
                text = f"the baseline's correlations ({keys_}); choose a learned closure with --closure PATH"
            lines += _wrap(head, text, width)
        lines.append("")
    lines.append("  main keys (key = default [unit]  meaning):")
    for d in keys:
        unit, meaning = split_unit(d.comment)
        head = f"    {d.key} = {_value_text(cfg, d.key)}" + (f" [{unit}]" if unit else "")
        lines += _wrap(head, meaning, width)
    return "\n".join(lines)


def _compose_unchecked(name: str):
    """``conf/<name>.yaml`` composed by Hydra without the value checks of :func:`load_config`."""
    from hydra import compose, initialize_config_dir

    with initialize_config_dir(config_dir=str(CONF_DIR), version_base=None):
        return compose(config_name=name)


def _wrap(head: str, text: str, width: int, col: int = 40) -> list[str]:
    """``head`` then ``text`` from column ``col`` (on the next line when ``head`` is longer), wrapped."""
    if len(head) >= col - 1:
        first, rest_indent = [head], " " * col
        body = textwrap.wrap(text, width - col) if text else []
        return first + [rest_indent + t for t in body]
    body = textwrap.wrap(text, width - col) or [""]
    out = [head.ljust(col) + body[0]]
    out += [" " * col + t for t in body[1:]]
    return [o.rstrip() for o in out]
