"""Console entry point ``closure-nn``: sub-commands live in closure_nn/commands/, imported lazily
so that fast commands (point, batch, line) never import Lightning.

Arguments of the form ``key=value`` (no leading dash) are Hydra overrides of the command's config.
"""
from __future__ import annotations

import argparse
import importlib
import sys

from .physics.checks import InputError

#: command name -> (module, one-line help). Names are our own plain words.
COMMANDS: dict[str, tuple[str, str]] = {
    "point": ("closure_nn.commands.point", "solve one condition given on the command line"),
    "batch": ("closure_nn.commands.batch", "solve every row of a conditions CSV, write a results CSV"),
    "check-data": ("closure_nn.commands.check_data", "validate a measurement table and convert it to SI"),
    "synth": ("closure_nn.commands.synth", "sample a design space and write a synthetic training table"),
    "train": ("closure_nn.commands.train", "pre-train, fine-tune or update a neural closure"),
    "evaluate": ("closure_nn.commands.evaluate", "compare baseline, learned closure and a black-box regressor on held-out rows"),
    "audit": ("closure_nn.commands.audit", "consistency audit of a dataset and a closure"),
    "map": ("closure_nn.commands.map", "draw a flow-pattern map, baseline vs learned"),
    "line": ("closure_nn.commands.line", "march along a line profile: pressure, holdup, pattern, inventory"),
    "demo": ("closure_nn.commands.demo", "the end-to-end demo on the shipped invented data"),
    "export": ("closure_nn.commands.export", "write a closure bundle as an ONNX graph or plain JSON for other solvers"),
}


def _split(argv: list[str], value_options: frozenset[str] = frozenset()) -> tuple[list[str], list[str]]:
    """Split ``key=value`` overrides from the other arguments; a token right after an option that
    takes a value (``value_options``, e.g. ``--closure learned=path``) stays with that option.

    >>> _split(["--closure", "learned=b", "x=1", "--out", "d", "y=2"], frozenset({"--closure", "--out"}))
    (['--closure', 'learned=b', '--out', 'd'], ['x=1', 'y=2'])
    """
    args, overrides = [], []
    for i, a in enumerate(argv):
        after_option = i > 0 and argv[i - 1] in value_options
        (overrides if ("=" in a and not a.startswith("-") and not after_option) else args).append(a)
    return args, overrides


def _value_options(parser: argparse.ArgumentParser) -> frozenset[str]:
    """Option strings of ``parser`` that take a value (argparse ``nargs`` other than 0)."""
    return frozenset(o for act in parser._actions if act.option_strings and act.nargs != 0 for o in act.option_strings)


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    args, overrides = _split(argv)
    parser = argparse.ArgumentParser(prog="closure-nn", description=__doc__.splitlines()[0])
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, (_, help_) in COMMANDS.items():
        sub.add_parser(name, help=help_, add_help=False)
    if not args or args[0] not in COMMANDS:
        parser.print_help()
        return 0 if not args or args[0] in ("-h", "--help") else 2
    name = args[0]
    module = importlib.import_module(COMMANDS[name][0])
    cmd_parser = argparse.ArgumentParser(prog=f"closure-nn {name}", description=COMMANDS[name][1],
                                         epilog="Extra key=value arguments override the command's Hydra config.")
    module.add_arguments(cmd_parser)
    args, overrides = _split(argv, _value_options(cmd_parser))
    ns = cmd_parser.parse_args(args[1:])
    try:
        return int(module.run(ns, overrides) or 0)
    except InputError as exc:
        print(f"closure-nn {name}: error: {exc}", file=sys.stderr)
        return 2
    except FileNotFoundError as exc:
        print(f"closure-nn {name}: error: file not found: {exc.filename}", file=sys.stderr)
        return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
