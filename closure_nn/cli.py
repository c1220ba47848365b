"""Console entry point ``closure-nn``: sub-commands live in closure_nn/commands/, imported lazily
so that fast commands (point, batch, line) never import Lightning. The help text of a command's
config keys (only with ``--help``) and pandas (only to recognise its parse errors) are imported
where they are used, for the same reason.

Arguments of the form ``key=value`` (no leading dash) are Hydra overrides of the command's config.
"""
from __future__ import annotations

import argparse
import errno
import importlib
import json
import os
import re
import shutil
import sys
import tempfile
import time
import traceback
from pathlib import Path

import torch

from .allocator import keep_freed_memory
from .config import CONFIG_DIR_ENV
from .physics.checks import InputError
from .run_folder import CREATED_RUN_DIRS

#: file that takes the traceback of an internal error (in the run folder, else the current folder)
ERROR_LOG = "closure-nn-error.log"

#: command name -> (module, one-line help). Names are our own plain words.
COMMANDS: dict[str, tuple[str, str]] = {
    "point": ("closure_nn.commands.point", "solve one condition given on the command line"),
    "batch": ("closure_nn.commands.batch", "solve every row of a conditions CSV, write a results CSV"),
    "check-data": ("closure_nn.commands.check_data", "validate a measurement table and convert it to SI"),
    "synth": ("closure_nn.commands.synth", "sample a design space and write a synthetic training table"),
    "fit": ("closure_nn.commands.fit", "lab table -> validated closure bundle (pre-train, fine-tune, check, report)"),
    "train": ("closure_nn.commands.train", "pre-train, fine-tune or update a neural closure"),
    "evaluate": ("closure_nn.commands.evaluate", "compare baseline, learned closure and a black-box regressor on held-out rows"),
    "audit": ("closure_nn.commands.audit", "consistency audit of a dataset and a closure"),
    "map": ("closure_nn.commands.map", "draw a flow-pattern map, baseline vs learned"),
    "line": ("closure_nn.commands.line", "march along a line profile: pressure, holdup, pattern, inventory"),
    "demo": ("closure_nn.commands.demo", "the end-to-end demo on the shipped invented data"),
    "export": ("closure_nn.commands.export", "write a closure bundle as an ONNX graph or plain JSON for other solvers"),
    "distill": ("closure_nn.commands.distill", "a learned closure as a compact formula per friction factor, with its fidelity"),
    "plan": ("closure_nn.commands.plan", "rank candidate flow-loop test points by what the ensemble does not know; choose a diverse batch"),
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
    """Run ``closure-nn [--debug] COMMAND ...``; returns the exit code.

    Every failure ends as ONE line on stderr (see :func:`_report`): exit 2 for bad input (a file,
    a value, an option), 1 for an internal fault, whose traceback goes to a log file. ``--debug``
    before the command (or ``CLOSURE_NN_DEBUG=1``) also prints the traceback.
    """
    argv = list(sys.argv[1:] if argv is None else argv)
    debug = os.environ.get("CLOSURE_NN_DEBUG", "") not in ("", "0")
    while argv and argv[0] in ("--debug", "--config-dir"):
        if argv[0] == "--debug":
            debug, argv = True, argv[1:]
        else:  # a folder of the user's own config groups, searched before the package's (closure_nn.config)
            if len(argv) < 2:
                print("closure-nn: error: --config-dir needs a folder", file=sys.stderr)
                return 2
            os.environ[CONFIG_DIR_ENV], argv = argv[1], argv[2:]
    name = argv[0] if argv and argv[0] in COMMANDS else ""
    n_runs = len(CREATED_RUN_DIRS)
    try:
        args, overrides = _split(argv)
        parser = _Parser(prog="closure-nn", description=__doc__.splitlines()[0],
                         epilog="--debug before the command prints the full traceback of an error; "
                                "--config-dir DIR before it adds a folder of your own config groups.")
        sub = parser.add_subparsers(dest="command", metavar="COMMAND")
        for cmd, (_, help_) in COMMANDS.items():
            sub.add_parser(cmd, help=help_, add_help=False)
        if not args or args[0] in ("-h", "--help"):
            parser.print_help()
            return 0
        if args[0] not in COMMANDS:
            raise _UsageError(f"closure-nn: error: unknown command {args[0]!r}; commands: {', '.join(COMMANDS)} "
                              "(see 'closure-nn --help')")
        name = args[0]
        module = importlib.import_module(COMMANDS[name][0])
        cmd_parser = _Parser(prog=f"closure-nn {name}", description=COMMANDS[name][1],
                             epilog=_epilog(name, args[1:]), formatter_class=argparse.RawDescriptionHelpFormatter)
        module.add_arguments(cmd_parser)
        args, overrides = _split(argv, _value_options(cmd_parser))
        ns = cmd_parser.parse_args(args[1:])
        # one torch thread unless a command's setting asks for more (`threads`, `trainer.num_threads`):
        # two threads on busy cores were up to 35x slower (benchmarks/README.md, Threads)
        torch.set_num_threads(1)
        keep_freed_memory()  # glibc malloc: reuse freed tensor memory (closure_nn/allocator.py)
        return int(module.run(ns, overrides) or 0)
    except BrokenPipeError:  # the reader of a pipe stopped early (`closure-nn ... | head`): not a fault
        return _reader_gone()
    except BaseException as exc:  # the error boundary: one line, a code, the traceback in a log
        return _report(exc, name, debug, CREATED_RUN_DIRS[n_runs:])


def _reader_gone() -> int:
    """Point stdout at the null device so that the interpreter's last flush cannot fail again
    (the handling the Python documentation recommends for SIGPIPE, signal module, "Note on
    SIGPIPE"); exit quietly with 0, as the output asked for was taken."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError, AttributeError):  # stdout without a file descriptor (e.g. in tests)
        pass
    return 0


def _epilog(name: str, args: list[str]) -> str:
    """The epilog of a command's help: with -h/--help, its main config keys generated from conf/
    (:func:`closure_nn.config_help.config_epilog`); a config that cannot be composed leaves a note."""
    base = "Extra key=value arguments override the command's Hydra config."
    if not any(a in ("-h", "--help") for a in args):
        return base
    try:
        from .config_help import config_epilog

        keys = config_epilog(name)
    except Exception as exc:  # the help must show even when a config is broken
        keys = f"(the config keys cannot be listed: {_one_line(str(exc))})"
    return f"{keys}\n\n{base}" if keys else base


class _UsageError(Exception):
    """A command line the argument parser refused; the message is the whole line to print."""


class _Parser(argparse.ArgumentParser):
    """An argument parser whose errors are one line (no usage block) and do not exit."""

    def error(self, message: str):  # argparse calls this for every bad command line
        raise _UsageError(f"{self.prog}: error: {message} (see '{self.prog} --help')")


#: OSError numbers that describe the user's files or disk, not a fault of the code
_ENV_ERRNOS = frozenset(getattr(errno, n) for n in ("ENOENT", "EISDIR", "ENOTDIR", "EACCES", "EPERM", "ENOSPC",
                                                    "EROFS", "EDQUOT", "ENAMETOOLONG", "EEXIST", "ENOTEMPTY",
                                                    "ELOOP", "EXDEV") if hasattr(errno, n))
#: modules whose frames show that an exception arose while reading a user's file
_READER_MODULES = ("pandas.io.", "pyarrow.", "yaml.", "json.", "csv", "omegaconf.", "tomllib")
#: local variable names that hold the file being read, looked up in the traceback
_PATH_NAMES = ("path", "p", "file", "filename", "fname", "src", "mpath", "wpath")


def _frames(exc: BaseException) -> list:
    tb, out = exc.__traceback__, []
    while tb is not None:
        out.append(tb.tb_frame)
        tb = tb.tb_next
    return out


def _file_in_traceback(exc: BaseException) -> str | None:
    """The deepest local variable of the traceback that names an existing file (the file being read)."""
    for frame in reversed(_frames(exc)):
        for key in _PATH_NAMES:
            v = frame.f_locals.get(key)
            if isinstance(v, (str, os.PathLike)) and str(v) and os.path.exists(v):
                return str(v)
    return None


def _one_line(text: str) -> str:
    return re.sub(r"\s*\n\s*", " ", str(text)).strip()


def _is_yaml_error(exc: BaseException) -> bool:
    return any(c.__module__.startswith("yaml") and c.__name__ == "YAMLError" for c in type(exc).__mro__)


def _input_message(exc: BaseException) -> str | None:
    """The one-line message for a bad-input exception, or None for an internal fault."""
    fname = getattr(exc, "filename", None)
    if isinstance(exc, InputError):
        return str(exc)
    if isinstance(exc, FileNotFoundError):
        return f"{fname}: not found (no such file or folder); check the path" if fname else f"not found: {exc}"
    if isinstance(exc, IsADirectoryError):
        return f"{fname}: is a folder; a file was expected here"
    if isinstance(exc, NotADirectoryError):
        return f"{fname}: a part of this path is a file where a folder was expected"
    if isinstance(exc, PermissionError):
        return f"{fname}: permission denied; check the access rights of the file or folder"
    if isinstance(exc, OSError) and exc.errno in _ENV_ERRNOS:
        return f"{fname or ''}{': ' if fname else ''}{exc.strerror}"
    where = _file_in_traceback(exc)
    at = f"{where}: " if where else ""
    if isinstance(exc, UnicodeDecodeError):
        return (f"{at}cannot read as {exc.encoding} text (byte 0x{exc.object[exc.start]:02x} at byte {exc.start}); "
                "save the file as UTF-8")
    if isinstance(exc, json.JSONDecodeError):
        return f"{at}not valid JSON ({exc.msg} at line {exc.lineno}, column {exc.colno})"
    if _is_yaml_error(exc):
        mark = getattr(exc, "problem_mark", None)
        loc = f"{mark.name}, line {mark.line + 1}, column {mark.column + 1}: " if mark is not None else at
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        return f"{loc}not valid YAML ({problem}); check the indentation, colons and brackets there"
    try:
        import pandas as pd

        if isinstance(exc, (pd.errors.ParserError, pd.errors.EmptyDataError)):
            return f"{at}cannot read as CSV ({str(exc).splitlines()[0]})"
    except ImportError:  # pragma: no cover - pandas is a dependency
        pass
    if isinstance(exc, ValueError):
        reading = [f for f in _frames(exc) if f.f_globals.get("__name__", "").startswith(_READER_MODULES)
                   or f.f_code.co_name.startswith(("read_", "load_", "_read", "_load"))]
        if reading:
            return f"{at}cannot read the file: {str(exc).splitlines()[0] if str(exc) else type(exc).__name__}"
    return None


def _log_path(run_dirs: list[Path]) -> Path:
    """The run folder this invocation made (newest first), else the current folder."""
    for d in reversed(run_dirs):
        if d.is_dir():
            return d.resolve() / ERROR_LOG
    return Path.cwd() / ERROR_LOG


def _write_log(exc: BaseException, command: str, run_dirs: list[Path]) -> Path:
    """Write the full traceback; the current folder, else the temporary folder, when the run folder
    cannot take it."""
    text = (f"closure-nn {command} failed at {time.strftime('%Y-%m-%d %H:%M:%S')}\n"
            f"command line: {' '.join(sys.argv)}\npython {sys.version.split()[0]} on {sys.platform}\n\n"
            + "".join(traceback.format_exception(exc)))
    for path in (_log_path(run_dirs), Path.cwd() / ERROR_LOG, Path(tempfile.gettempdir()) / ERROR_LOG):
        try:
            path.write_text(text, encoding="utf-8")
            return path
        except OSError:
            continue
    return Path("(no writable folder for the log)")


def _drop_empty_runs(run_dirs: list[Path]) -> None:
    """Remove run folders of this invocation that hold nothing but the caution and the config."""
    for d in run_dirs:
        try:
            if d.is_dir() and {f.name for f in d.iterdir()} <= {"CAUTION.txt", "config.yaml"}:
                shutil.rmtree(d)
        except OSError:
            pass


def _report(exc: BaseException, command: str, debug: bool, run_dirs: list[Path]) -> int:
    """Print one line for ``exc`` on stderr and return the exit code: 2 bad input, 1 internal
    fault (traceback written to :data:`ERROR_LOG`), 130 interrupted."""
    prog = f"closure-nn {command}" if command else "closure-nn"
    if isinstance(exc, SystemExit):  # --help, or a command that exits itself
        return exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    if isinstance(exc, _UsageError):
        print(_one_line(exc), file=sys.stderr)
        return 2
    if debug:
        traceback.print_exception(exc, file=sys.stderr)
    if isinstance(exc, KeyboardInterrupt):
        _drop_empty_runs(run_dirs)
        print(f"{prog}: interrupted", file=sys.stderr)
        return 130
    msg = _input_message(exc)
    if msg is not None:
        _drop_empty_runs(run_dirs)
        print(f"{prog}: error: {_one_line(msg)}", file=sys.stderr)
        return 2
    log = _write_log(exc, command, run_dirs)
    _drop_empty_runs([d for d in run_dirs if d != log.parent])
    first = _one_line(str(exc).splitlines()[0] if str(exc).strip() else "")
    print(f"{prog}: internal error ({type(exc).__name__}{': ' + first if first else ''}); this is a fault of "
          f"closure-nn, please report it; traceback in {log}", file=sys.stderr)
    return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
