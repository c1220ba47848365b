"""The README's "your own data" quick start runs as written, at a small size.

The commands are read from README.md itself (the first code block after the heading "Your own
data: quick start"), so the README cannot drift from the tool. The lab table is INVENTED (noisy
rows of the demo's invented truth closure); the line is the invented demo line. Only the sizes are
reduced (a small synthetic set and few epochs for `fit`). No outside source applies: a check that
the documented workflow runs.
"""
from __future__ import annotations

import re
import shlex
from pathlib import Path

import pytest

from closure_nn.cli import main
from closure_nn.config import CONF_DIR
from invented_loop import write_lab_table

README = Path(__file__).resolve().parents[1] / "README.md"
SMALL_FIT = ["fit.synth.n=300", "stage_trainer.pretrain.max_epochs=1", "stage_trainer.finetune.max_epochs=3"]


def quick_start_commands() -> list[list[str]]:
    text = README.read_text(encoding="utf-8")
    block = text.split("## Your own data: quick start", 1)[1].split("```bash", 1)[1].split("```", 1)[0]
    cmds = []
    for line in block.strip().splitlines():
        line = line.split("#", 1)[0].strip()
        if line:
            cmds.append(shlex.split(line))
    return cmds


def test_quick_start_has_at_most_six_commands_built_on_fit():
    cmds = quick_start_commands()
    assert 1 <= len(cmds) <= 6 and all(c[0] == "closure-nn" for c in cmds)
    assert any(c[1] == "fit" for c in cmds)


@pytest.mark.filterwarnings("ignore")
def test_quick_start_runs_as_written(tmp_path, capsys):
    lab = write_lab_table(tmp_path / "my_loop.csv")
    line = CONF_DIR / "line" / "karvel_ridge.yaml"
    runs = tmp_path / "runs"
    fit_run = None
    for cmd in quick_start_commands():
        args = [a.replace("my_loop.csv", str(lab)).replace("my_line.yaml", str(line)) for a in cmd[1:]]
        if fit_run is not None:
            args = [re.sub(r"runs/fit-<time>", str(fit_run), a) for a in args]
        if args[0] == "fit":
            args += SMALL_FIT
        if args[0] not in ("point",):
            args += ["--out", str(runs / args[0])]
        rc = main(args)
        out = capsys.readouterr()
        assert rc == 0, (cmd, out.err[-2000:])
        if args[0] == "fit":
            (fit_run,) = [p for p in (runs / "fit").iterdir() if p.is_dir()]
            assert (fit_run / "bundle" / "bundle.json").is_file()
    assert fit_run is not None
