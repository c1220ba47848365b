"""A reader that stops early (`closure-nn batch ... | head`) ends the command quietly: no
"internal error" line, no error log, exit 0. The handling follows the Python documentation's note
on SIGPIPE (signal module, the source of the rule); otherwise a check of the tool's own error
boundary."""
from __future__ import annotations

import subprocess
import sys
import textwrap

from closure_nn import cli
from closure_nn.commands import point


def test_broken_pipe_is_not_an_internal_error(monkeypatch, tmp_path, capsys):
    def closed_pipe(args, overrides):
        raise BrokenPipeError(32, "Broken pipe")

    monkeypatch.chdir(tmp_path)
    monkeypatch.setattr(point, "run", closed_pipe)
    assert cli.main(["point", "--vsl", "0.1", "--vsg", "2", "--D", "0.05"]) == 0
    assert capsys.readouterr().err == ""
    assert not (tmp_path / cli.ERROR_LOG).exists()


def test_a_real_pipe_closed_by_its_reader(tmp_path):
    """A child that prints far more than a pipe holds, read by a reader that closes after one line."""
    code = textwrap.dedent("""
        import sys
        from closure_nn import cli
        from closure_nn.commands import point
        def flood(args, overrides):
            for i in range(200000):
                print("row", i)
            return 0
        point.run = flood
        sys.exit(cli.main(["point", "--vsl", "0.1", "--vsg", "2", "--D", "0.05"]))
    """)
    child = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=tmp_path)
    assert child.stdout.readline().startswith(b"row 0")
    child.stdout.close()  # the reader is gone
    err = child.stderr.read().decode()
    assert child.wait(timeout=120) == 0, err
    assert "internal error" not in err and "Traceback" not in err, err
