"""The project tells its history by version and date only.

House rule of closure-nn: the project's history is told by version and date (CHANGELOG.md,
docs/evaluation_log.md), never by the numbered rounds of work that produced it: no round of work
named by its number or as "this" one (examples in the first test below) in code, comments,
configs, tests or docs.
This test scans every file tracked by git (``git ls-files``; binary files, ``.venv`` and this file
skipped) and names file and line of each such phrase.

A house rule, so no outside source applies. Library names are fine: ``InferenceSession`` (onnxruntime), ``sess_options``,
``module.Session(...)`` or ``scope="session"`` (pytest) are identifiers or quoted API values, not
prose, and do not match.
"""

from __future__ import annotations

import re
import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
THIS_FILE = Path(__file__).resolve().relative_to(ROOT).as_posix()

HISTORY = re.compile(
    r"""
      \bsessions?[\s_-]*\d                      # the word followed by a number (or a range)
    | (?<![."'\w])sessions?(?:'s)?\b(?!["'(])    # the word in prose
    | \brounds?[\s-]+\d                         # round 3, rounds 1-2
    | \biterations?[\s-]+\d                     # iteration 4
    """,
    re.IGNORECASE | re.VERBOSE,
)


def _tracked_files() -> list[str]:
    if not (ROOT / ".git").exists():
        pytest.skip("not a git checkout: the tracked files are unknown")
    out = subprocess.run(["git", "ls-files", "-z"], cwd=ROOT, check=True,
                         capture_output=True).stdout
    return [p for p in out.decode("utf-8").split("\0") if p]


def _text(path: Path) -> str | None:
    """The file's text, or None for a binary file (NUL bytes outside a UTF-16 text)."""
    raw = path.read_bytes()
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        return raw.decode("utf-16", errors="replace")
    if b"\0" in raw[:8192]:
        return None
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        return raw.decode("cp1252", errors="replace")


def _hits(rel: str) -> list[str]:
    path = ROOT / rel
    if not path.is_file():  # tracked but deleted in the working tree
        return []
    text = _text(path)
    if text is None:
        return []
    return [f"{rel}:{n}: {line.strip()}" for n, line in enumerate(text.splitlines(), 1)
            if HISTORY.search(line)]


def _scanned_files() -> list[str]:
    return [p for p in _tracked_files()
            if p != THIS_FILE and not p.startswith(".venv/")]


def test_pattern_catches_numbered_rounds_and_spares_api_names():
    # examples of the phrases the house rule forbids, and of library identifiers it allows
    w = "ses" + "sion"  # spelled apart so that this file does not contain the phrases it forbids
    for bad in [f"{w.title()} 2: settings compared", f"{w}-5 demo numbers", f"{w}s 1-3",
                f"scored twice this {w}", f"(other {w}s were training)",
                f"the {w}'s last runs", "round 2 of the review", "iteration 4 of the defaults"]:
        assert HISTORY.search(bad), bad
    for ok in ["ort.InferenceSession(path, sess_options)", "requests.Session()",
               '@pytest.fixture(scope="session")', "refinement_rounds", "0.0235 rounds to 0.023",
               "three rounds each", "round(x, 3)", "Newton iterations converge"]:
        assert not HISTORY.search(ok), ok


def test_no_numbered_round_history_in_tracked_files():
    files = _scanned_files()
    assert "CHANGELOG.md" in files and "pyproject.toml" in files  # the scan sees the tree
    hits = [h for rel in files for h in _hits(rel)]
    assert not hits, ("history told by rounds of work; tell it by version and date "
                      "(CHANGELOG.md) or drop it:\n" + "\n".join(hits))

