"""Malformed inputs across the commands: one clear line, the right exit code, nothing left behind.

Each case runs in-process through ``closure_nn.cli.main`` in an empty working folder and checks:
the exit code (2 for bad input, 1 for an internal fault), exactly one line on stderr that names
the file / data row / file line / column where one applies, no traceback on the screen, and no
run folder or error log left behind by a refused run. The tables are an invented oil-gas loop
(tests/fixtures/loop_si.csv, no real data). What a CSV exported by a spreadsheet looks like
(byte-order mark, ';' separators with decimal commas, Windows-1252 text, UTF-16 "Unicode text")
is common practice.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from closure_nn.cli import ERROR_LOG, main
from closure_nn.data.table_io import read_table, write_table
from closure_nn.physics.checks import InputError

FIXTURES = Path(__file__).parent / "fixtures"
GOOD = (FIXTURES / "loop_si.csv").read_text()
LINES = GOOD.splitlines()
HEADER = LINES[1]  # line 1 is a '#' comment
ROWS = LINES[2:]
POINT = ["point", "--vsl", "0.1", "--vsg", "1", "--D", "0.05"]


def _files(d: Path) -> None:
    """Write every malformed input the cases below refer to into the folder ``d``."""
    (d / "good.csv").write_text(GOOD)
    (d / "folder.csv").mkdir()
    (d / "folder.yaml").mkdir()
    (d / "binary.csv").write_bytes(bytes(range(256)) * 4)
    (d / "empty.csv").write_text("")
    (d / "comments_only.csv").write_text("# nothing but a comment\n")
    (d / "header_only.csv").write_text(HEADER + "\n")
    (d / "header_blank_rows.csv").write_text(HEADER + "\n\n\n")
    (d / "dup_header.csv").write_text("\n".join([HEADER.replace("vsl,vsg,D", "vsl,vsl,D")] + ROWS) + "\n")
    (d / "dup_unit.csv").write_text("\n".join([HEADER.replace("vsl,vsg,D,", "vsl,vsg,D,D [mm],", 1)]
                                              + [r.replace("0.078,", "0.078,78,", 1) for r in ROWS]) + "\n")
    (d / "extra_values.csv").write_text("\n".join([HEADER, ROWS[0], ROWS[1] + ",99"] + ROWS[2:]) + "\n")
    (d / "nameless.csv").write_text("\n".join([HEADER + ","] + [r + ",7" for r in ROWS]) + "\n")
    (d / "text_vsl.csv").write_text("\n".join([HEADER] + [",".join(["fast"] + r.split(",")[1:]) for r in ROWS]) + "\n")
    (d / "big_D_row2.csv").write_text("\n".join([HEADER, ROWS[0], ROWS[1].replace("0.078", "78", 1)]) + "\n")
    (d / "no_vsg.csv").write_text("vsl,D,theta,roughness,rhol,rhog,mul,mug,sigma\n0.1,0.05,0,0,998,1.2,1e-3,1.8e-5,0.07\n")
    (d / "table.txt").write_text(GOOD)
    (d / "parquet_named.csv").write_bytes(b"PAR1" + b"\x00" * 64)
    (d / "workbook.csv").write_bytes(b"PK\x03\x04" + b"\x00" * 64)
    (d / "broken.parquet").write_text("not parquet at all\n")
    (d / "bad_utf16.csv").write_bytes(b"\xff\xfe" + "vsl,vsg".encode("utf-16-le") + b"\x00")
    (d / "bad.yaml").write_text("name: [unclosed\n")
    (d / "no_profile.yaml").write_text("name: x\nprofile: missing_profile.csv\n")
    (d / "closure.yaml").write_text("kind: bundle\npath: no_such_bundle\n")


@pytest.fixture
def work(tmp_path, monkeypatch):
    _files(tmp_path)
    monkeypatch.chdir(tmp_path)
    return tmp_path


# (id, argv, exit code, fragments the single stderr line must contain)
CASES = [
    # point: values on the command line
    ("point-required", ["point"], 2, ["required: --vsl, --vsg, --D"]),
    ("point-not-float", ["point", "--vsl", "abc", "--vsg", "1", "--D", "0.05"], 2, ["--vsl", "invalid float value: 'abc'"]),
    ("point-negative-D", ["point", "--vsl", "0.1", "--vsg", "1", "--D", "-1"], 2, ["D = -1 m", "expected 0.001 to 3 m"]),
    ("point-nan", ["point", "--vsl", "nan", "--vsg", "1", "--D", "0.05"], 2, ["vsl = nan", "not a number"]),
    ("point-heavy-gas", POINT + ["--rhog", "2000"], 2, ["rhog = 2000 kg/m3"]),
    ("point-steep", POINT + ["--theta-deg", "120"], 2, ["[-90, 90] degrees"]),
    ("point-bad-wall", POINT + ["closure.wall=bogus"], 2, ["unknown wall friction correlation 'bogus'"]),
    ("point-fluid-needs-p", POINT + ["--gas-fluid", "Methane"], 2, ["--gas-fluid needs --p"]),
    ("point-unknown-option", POINT + ["--bogus"], 2, ["unrecognized arguments: --bogus"]),
    ("point-unknown-override", POINT + ["nosuchkey=1"], 2, ["config point", "nosuchkey"]),
    ("point-solver-rule", POINT + ["solver.select=bogus"], 2, ["solver.select = 'bogus'", "thinnest, thickest"]),
    ("point-solver-grid", POINT + ["solver.n_grid=abc"], 2, ["solver.n_grid = 'abc'", "whole number >= 4"]),
    ("point-bundle-no-path", POINT + ["closure.source=bundle"], 2, ["closure.path", "closure.source = 'bundle'"]),
    ("point-bundle-missing", POINT + ["closure=learned", "closure.path=no_bundle"], 2, ["no_bundle", "no such closure bundle"]),
    # batch: a conditions table
    ("batch-missing", ["batch", "nofile.csv"], 2, ["nofile.csv: not found"]),
    ("batch-folder", ["batch", "folder.csv"], 2, ["folder.csv: is a folder"]),
    ("batch-binary", ["batch", "binary.csv"], 2, ["binary.csv: binary content"]),
    ("batch-empty", ["batch", "empty.csv"], 2, ["empty.csv: no header line"]),
    ("batch-comments-only", ["batch", "comments_only.csv"], 2, ["comments_only.csv: no header line"]),
    ("batch-header-only", ["batch", "header_only.csv"], 2, ["header_only.csv: the table has a header but no data rows"]),
    ("batch-blank-rows-only", ["batch", "header_blank_rows.csv"], 2, ["no data rows (only blank lines)"]),
    ("batch-dup-header", ["batch", "dup_header.csv"], 2, ["dup_header.csv, line 1", "'vsl' twice (columns 1 and 2"]),
    ("batch-dup-unit", ["batch", "dup_unit.csv"], 2, ["headers 'D' and 'D [mm]' both give column 'D'"]),
    ("batch-extra-values", ["batch", "extra_values.csv"], 2, ["extra_values.csv, data row 2 (file line 3)", "19 values"]),
    ("batch-nameless-column", ["batch", "nameless.csv"], 2, ["nameless.csv, line 1", "column 19", "no header"]),
    ("batch-text-column", ["batch", "text_vsl.csv"], 2, ["text_vsl.csv", "data row 1", "'vsl'", "'fast' is not a number"]),
    ("batch-range-row-2", ["batch", "big_D_row2.csv"], 2, ["big_D_row2.csv, data row 2 (file line 3)", "D = 78 m"]),
    ("batch-missing-column", ["batch", "no_vsg.csv"], 2, ["no_vsg.csv", "lacks input column(s) vsg"]),
    ("batch-suffix", ["batch", "table.txt"], 2, ["table.txt: unknown table format '.txt'"]),
    ("batch-parquet-named-csv", ["batch", "parquet_named.csv"], 2, ["parquet_named.csv: this is a Parquet file"]),
    ("batch-workbook", ["batch", "workbook.csv"], 2, ["workbook.csv", "zip archive", "export the sheet as CSV"]),
    ("batch-broken-parquet", ["batch", "broken.parquet"], 2, ["broken.parquet: cannot read as Parquet"]),
    ("batch-bad-utf16", ["batch", "bad_utf16.csv"], 2, ["bad_utf16.csv", "UTF-16"]),
    ("batch-output-folder-missing", ["batch", "good.csv", "--output", "nodir/results.csv"], 2, ["--output nodir/results.csv", "does not exist"]),
    ("batch-out-file-folder-missing", ["batch", "good.csv", "--out", "nodir/results.csv"], 2, ["--out nodir/results.csv", "does not exist"]),
    # check-data: a training table
    ("check-missing", ["check-data", "nofile.csv"], 2, ["nofile.csv: not found"]),
    ("check-folder", ["check-data", "folder.csv"], 2, ["folder.csv: is a folder"]),
    ("check-binary", ["check-data", "binary.csv"], 2, ["binary.csv: binary content"]),
    ("check-header-only", ["check-data", "header_only.csv"], 2, ["header_only.csv", "no data rows"]),
    ("check-dup-header", ["check-data", "dup_header.csv"], 2, ["dup_header.csv, line 1", "'vsl' twice"]),
    ("check-extra-values", ["check-data", "extra_values.csv"], 2, ["data row 2 (file line 3)"]),
    ("check-unknown-columns", ["check-data", "good.csv", "unknown_columns=x"], 2, ["config check_data: unknown_columns = 'x'", "expected one of keep, drop"]),
    ("check-table-format", ["check-data", "good.csv", "table_format=xls"], 2, ["config check_data: table_format = 'xls'", "expected one of csv, parquet"]),
    ("check-missing-column", ["check-data", "no_vsg.csv"], 2, ["no_vsg.csv: missing required column(s) 'vsg'"]),
    # audit
    ("audit-missing", ["audit", "nofile.csv", "--no-health"], 2, ["nofile.csv: not found"]),
    ("audit-binary", ["audit", "binary.csv", "--no-health"], 2, ["binary.csv: binary content"]),
    ("audit-nothing", ["audit"], 2, ["give a measurement table"]),
    ("audit-bad-yaml", ["audit", "good.csv", "--closure-config", "bad.yaml"], 2, ["bad.yaml, line 2", "not valid YAML"]),
    ("audit-config-missing", ["audit", "good.csv", "--closure-config", "nope.yaml"], 2, ["nope.yaml: no such file"]),
    ("audit-config-bundle", ["audit", "good.csv", "--closure-config", "closure.yaml"], 2, ["no_such_bundle"]),
    ("audit-closure-missing", ["audit", "good.csv", "--closure", "no_bundle"], 2, ["no_bundle: no such closure bundle"]),
    ("audit-closure-not-a-closure", ["audit", "good.csv", "--closure", "folder.csv"], 2, ["folder.csv: not a closure"]),
    ("audit-truth-missing", ["audit", "good.csv", "--truth", "nofile.csv", "--no-health"], 2, ["nofile.csv: not found"]),
    ("audit-truth-binary", ["audit", "good.csv", "--truth", "binary.csv", "--no-health"], 2, ["binary.csv", "corruption list lacks column(s)"]),
    # map
    ("map-data-missing", ["map", "--data", "nofile.csv"], 2, ["nofile.csv: not found"]),
    ("map-data-dup-header", ["map", "--data", "dup_header.csv"], 2, ["dup_header.csv, line 1", "twice"]),
    ("map-learned-missing", ["map", "--learned", "no_bundle"], 2, ["no_bundle: no such closure bundle"]),
    ("map-closure-missing", ["map", "--closure", "no_bundle"], 2, ["no_bundle: no such closure bundle"]),
    ("map-n-negative", ["map", "n=-3"], 2, ["config map: n = -3", "whole number >= 2"]),
    ("map-D-text", ["map", "D=abc"], 2, ["config map: D = 'abc'", "expected a number"]),
    ("map-axis-reversed", ["map", "vsl=[10,1]"], 2, ["config map: vsl", "0 < low < high"]),
    ("map-D-negative", ["map", "D=-1"], 2, ["D = -1 m"]),
    # line
    ("line-missing", ["line", "nofile.yaml"], 2, ["nofile.yaml: not found"]),
    ("line-bad-yaml", ["line", "bad.yaml"], 2, ["bad.yaml, line 2", "not valid YAML"]),
    ("line-folder", ["line", "folder.yaml"], 2, ["folder.yaml", "is a folder"]),
    ("line-closure-missing", ["line", "--closure", "no_bundle"], 2, ["no_bundle: no such closure bundle"]),
    ("line-ensemble-missing", ["line", "--ensemble", "no_bundle"], 2, ["no_bundle: no such closure bundle"]),
    ("point-closure-learned-no-path", POINT + ["closure=learned"], 2, ["closure=learned needs closure.path=PATH",
                                                                       "--closure PATH"]),
    ("point-closure-missing", POINT + ["--closure", "no_bundle"], 2, ["no_bundle: no such closure bundle"]),
    ("line-profile-missing", ["line", "no_profile.yaml"], 2, ["missing_profile.csv"]),
    ("line-bad-override", ["line", "march.bogus=1"], 2, ["march.bogus"]),
    # synth
    ("synth-n-zero", ["synth", "n=0"], 2, ["config synth: n = 0", "expected a whole number >= 1"]),
    ("synth-no-design", ["synth", "design=nope"], 2, ["design/nope"]),
    ("synth-format", ["synth", "table_format=xlsx"], 2, ["config synth: table_format = 'xlsx'", "expected one of csv, parquet"]),
    ("synth-seed", ["synth", "seed=1.5"], 2, ["seed = 1.5"]),
    # train: every case fails before training starts
    ("train-no-table", ["train"], 2, ["a value is required for data.train"]),
    ("train-missing", ["train", "data.train=nofile.csv"], 2, ["nofile.csv: not found"]),
    ("train-folder", ["train", "data.train=folder.csv"], 2, ["folder.csv: is a folder"]),
    ("train-binary", ["train", "data.train=binary.csv"], 2, ["binary.csv: binary content"]),
    ("train-bad-encoding", ["train", "data.train=bad_utf16.csv"], 2, ["bad_utf16.csv", "UTF-16"]),
    ("train-dup-header", ["train", "data.train=dup_header.csv"], 2, ["dup_header.csv, line 1", "twice"]),
    ("train-suffix", ["train", "data.train=table.txt"], 2, ["table.txt: unknown table format"]),
    # the command line itself
    ("unknown-command", ["frobnicate"], 2, ["unknown command 'frobnicate'"]),
]


def _assert_refused(capsys, work: Path, argv, code, fragments):
    rc = main(list(argv))
    out, err = capsys.readouterr()
    lines = err.strip().splitlines()
    assert rc == code, (rc, err)
    assert len(lines) == 1, err
    assert "Traceback" not in err and "Traceback" not in out
    for frag in fragments:
        assert frag in lines[0], (frag, lines[0])
    # nothing left behind: no run folder, no error log, no temporary file
    runs = work / "runs"
    assert not runs.exists() or not any(runs.iterdir()), list(runs.iterdir())
    assert not (work / ERROR_LOG).exists()
    assert not [p for p in work.rglob("*") if p.name.endswith(".part")]


@pytest.mark.parametrize("argv,code,fragments", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_refused_with_one_line(work, capsys, argv, code, fragments):
    _assert_refused(capsys, work, argv, code, fragments)


def test_case_count():
    """The brief asks for at least 40 malformed cases across the commands."""
    assert len(CASES) >= 40
    assert {c[1][0] for c in CASES} >= {"point", "batch", "check-data", "audit", "map", "line", "synth", "train"}


# --- the error boundary ------------------------------------------------------------------------

def test_debug_prints_the_traceback_then_the_line(work, capsys):
    assert main(["--debug", "batch", "folder.csv"]) == 2
    err = capsys.readouterr().err
    assert "Traceback" in err and err.strip().splitlines()[-1].startswith("closure-nn batch: error: folder.csv")


def test_internal_fault_exit_1_with_log(work, capsys, monkeypatch):
    import closure_nn.commands.synth as synth

    def broken(args, overrides):
        raise ZeroDivisionError("float division by zero")

    monkeypatch.setattr(synth, "run", broken)
    assert main(["synth"]) == 1
    out, err = capsys.readouterr()
    (line,) = err.strip().splitlines()
    assert "internal error (ZeroDivisionError: float division by zero)" in line and "please report" in line
    assert "Traceback" not in err
    log = work / ERROR_LOG
    assert str(log) in line and "Traceback" in log.read_text() and "def broken" not in line
    assert "ZeroDivisionError" in log.read_text()


def test_internal_fault_log_goes_into_the_run_folder(work, capsys, monkeypatch):
    import closure_nn.commands.synth as synth
    from closure_nn.run_folder import make_run_dir, write_json

    def half_done(args, overrides):
        d = make_run_dir("synth")
        write_json(d / "partial.json", {"rows": 3})
        raise RuntimeError("solver blew up")

    monkeypatch.setattr(synth, "run", half_done)
    assert main(["synth"]) == 1
    (line,) = capsys.readouterr().err.strip().splitlines()
    (run,) = list((work / "runs").iterdir())
    assert str(run / ERROR_LOG) in line and (run / ERROR_LOG).exists() and (run / "partial.json").exists()
    assert not (work / ERROR_LOG).exists()


def test_refused_run_removes_its_empty_run_folder(work, capsys, monkeypatch):
    import closure_nn.commands.synth as synth
    from closure_nn.run_folder import make_run_dir

    def late_refusal(args, overrides):
        make_run_dir("synth")
        raise InputError("a late refusal")

    monkeypatch.setattr(synth, "run", late_refusal)
    assert main(["synth"]) == 2
    assert capsys.readouterr().err.strip() == "closure-nn synth: error: a late refusal"
    assert not any((work / "runs").iterdir())


def test_help_still_exits_zero(capsys):
    assert main([]) == 0
    assert main(["point", "--help"]) == 0
    assert "usage" in capsys.readouterr().out


# --- tables as people have them ---------------------------------------------------------------

def _frame(path: Path) -> pd.DataFrame:
    return read_table(path)[["vsl", "vsg", "D", "rhol", "source"]]


REFERENCE = pd.DataFrame({"vsl": [0.05, 0.5], "vsg": [1.0, 3.0], "D": [0.078, 0.078], "rhol": [850.0, 850.0],
                          "source": ["lab\u00e9", "lab\u00e9"]})


@pytest.mark.parametrize("name,raw", [
    ("utf8", "vsl,vsg,D,rhol,source\n0.05,1.0,0.078,850,lab\u00e9\n0.5,3.0,0.078,850,lab\u00e9\n".encode("utf-8")),
    ("utf8-bom", b"\xef\xbb\xbf" + "vsl,vsg,D,rhol,source\n0.05,1.0,0.078,850,lab\u00e9\n0.5,3,0.078,850,lab\u00e9\n".encode()),
    ("latin1", "vsl,vsg,D,rhol,source\r\n0.05,1.0,0.078,850,lab\u00e9\r\n0.5,3,0.078,850,lab\u00e9\r\n".encode("latin-1")),
    ("utf16", "vsl\tvsg\tD\trhol\tsource\n0,05\t1\t0,078\t850\tlab\u00e9\n0,5\t3\t0,078\t850\tlab\u00e9\n".encode("utf-16")),
    ("semicolon", "vsl;vsg;D;rhol;source\n0,05;1;0,078;850;lab\u00e9\n0,5;3,0;0,078;850;lab\u00e9\n".encode()),
    ("quoted-comma", 'vsl,vsg,D,rhol,source\n"0,05",1.0,0.078,850,lab\u00e9\n0.5,3.0,"0,078",850,lab\u00e9\n'.encode()),
    ("trailing-separators", "vsl,vsg,D,rhol,source,\n0.05,1.0,0.078,850,lab\u00e9,\n0.5,3,0.078,850,lab\u00e9,,\n".encode()),
])
def test_spreadsheet_exports_read_the_same(tmp_path, name, raw):
    p = tmp_path / f"{name}.csv"
    p.write_bytes(raw)
    df = _frame(p)
    pd.testing.assert_frame_equal(df.reset_index(drop=True), REFERENCE, check_dtype=False)
    notes = " ".join(read_table(p).attrs.get("read_notes", []))
    if name in ("latin1", "utf16", "semicolon", "quoted-comma"):
        assert str(p) in notes  # what had to be assumed is reported, naming the file
    if name == "latin1":
        assert "read as Windows-1252" in notes and "file line 2" in notes


def test_latin1_degree_sign_in_a_unit_header(tmp_path):
    p = tmp_path / "temps.csv"
    p.write_bytes("vsl,T [\u00b0C]\n0.1,20\n".encode("latin-1"))
    df = read_table(p)
    assert df["T"][0] == pytest.approx(293.15)  # 20 degC = 293.15 K (ISO 80000-5, exact offset)


def test_thousands_grouping_stays_text_and_validation_says_why(tmp_path):
    from closure_nn.data.validate import validate_table

    p = tmp_path / "grouped.csv"
    p.write_text(GOOD.replace("0.05,1.0,0.078,0.0,4.5e-05,850.0", '0.05,1.0,0.078,0.0,4.5e-05,"1,850"', 1))
    res = validate_table(read_table(p))
    msg = res.rejected.set_index("data_row").loc[1, "reason"]
    assert f"{p}, data row 1 (file line 3), column 'rhol': '1,850' is not a number" in msg
    assert "thousands separator" in msg


def test_blank_lines_keep_the_file_line_numbers(tmp_path):
    from closure_nn.data.validate import validate_table

    p = tmp_path / "gaps.csv"
    p.write_text("\n".join([LINES[0], HEADER, ROWS[0], "", ROWS[1].replace("0.05", "-0.05", 1)]) + "\n")
    res = validate_table(read_table(p))
    rej = res.rejected.set_index("data_row")
    assert rej.loc[2, "reason"].startswith(f"{p}, data row 2 (file line 4)")  # the blank line
    assert rej.loc[3, "file_line"] == 5 and "vsl = -0.05" in rej.loc[3, "reason"]


_names = st.sampled_from(["vsl", "vsg", "D", "holdup", "pgrad", "extra_a", "extra_b"])
_floats = st.floats(allow_nan=False, allow_infinity=False, width=64, min_value=-1e12, max_value=1e12)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(cols=st.lists(_names, min_size=1, max_size=5, unique=True), n=st.integers(1, 6), data=st.data(),
       suffix=st.sampled_from([".csv", ".parquet"]))
def test_write_then_read_gives_the_same_frame(tmp_path, cols, n, data, suffix):
    df = pd.DataFrame({c: data.draw(st.lists(_floats, min_size=n, max_size=n)) for c in cols})
    df["run_id"] = [data.draw(st.text(alphabet="abcXYZ019 ;,\u00e9\"", min_size=1, max_size=6).filter(str.strip))
                    for _ in range(n)]
    path = tmp_path / f"t{suffix}"
    back = read_table(write_table(df, path))
    assert list(back.columns) == list(df.columns)
    for c in cols:  # shortest repr round-trips float64 exactly
        np.testing.assert_array_equal(back[c].to_numpy(np.float64), df[c].to_numpy(np.float64))
    assert back["run_id"].tolist() == [s.strip() for s in df["run_id"]]


def test_read_table_refuses_in_python_too(tmp_path):
    p = tmp_path / "dup.csv"
    p.write_text("vsl,vsg,vsl\n1,2,3\n")
    with pytest.raises(InputError, match=r"'vsl' twice \(columns 1 and 3"):
        read_table(p)
