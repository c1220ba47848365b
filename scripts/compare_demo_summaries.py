"""Compare the numbers of two demo runs value by value (a regression check of our own output).

    python scripts/compare_demo_summaries.py RUN_A RUN_B

RUN_A, RUN_B: demo run folders (or their summary.json). Every number, text and list entry of the
two summaries is compared exactly, except timings and folder names; the differing values are
listed. Used to show that a refactor leaves the demo's results bitwise unchanged
(docs/evaluation_log.md, 2026-12-03): run `closure-nn demo` (or a small-budget demo) before and
after the change with the same seeds, then compare.
"""
from __future__ import annotations

import json
import sys
from pathlib import Path

SKIP = ("seconds", "run_dir")


def flat(d, prefix: str = "") -> dict:
    if isinstance(d, dict):
        return {k2: v2 for k, v in d.items() for k2, v2 in flat(v, f"{prefix}{k}.").items()}
    if isinstance(d, list):
        return {k2: v2 for i, v in enumerate(d) for k2, v2 in flat(v, f"{prefix}{i}.").items()}
    return {prefix.rstrip("."): d}


def load(p: str) -> dict:
    path = Path(p)
    return json.loads((path / "summary.json" if path.is_dir() else path).read_text())


def main(a: str, b: str) -> int:
    fa, fb = flat(load(a)), flat(load(b))
    keys = sorted(k for k in set(fa) | set(fb) if not k.startswith(SKIP) and ".plot" not in k)
    diff = [(k, fa.get(k), fb.get(k)) for k in keys if fa.get(k) != fb.get(k)]
    print(f"{len(keys)} values compared, {len(diff)} differ")
    for k, x, y in diff:
        print(f"  {k}: {x!r} -> {y!r}")
    return 1 if diff else 0


if __name__ == "__main__":
    sys.exit(main(*sys.argv[1:3]))
