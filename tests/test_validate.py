"""Validation of training tables: every row-level check from a corrupted fixture, structural
errors, warnings, the rejected/summary files and the check-data command.

The fixture tests/fixtures/loop_corrupt.csv is an invented oil-gas loop (no real data) with one
deliberate error per data row; ranges are those of closure_nn.physics.checks.RANGES.
"""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from closure_nn.data.table_io import read_table
from closure_nn.data.validate import CHECKS, DataWarning, REASON_SEP, validate, validate_table
from closure_nn.physics.checks import InputError

FIXTURES = Path(__file__).parent / "fixtures"
CORRUPT = FIXTURES / "loop_corrupt.csv"

#: data row (1-based) -> (check code, column, text that must appear in the message)
EXPECTED = {
    2: ("type", "D", "'1,078' is not a number (expected m); decimal comma or thousands separator?"),
    3: ("missing", "mul", "mul is missing; a value in Pa s is required"),
    4: ("nonphysical", "vsl", "vsl = -0.05 m/s is non-physical (must be >= 0; expected [0, 50] m/s)"),
    5: ("range", "D", "D = 78 m is outside the expected range [0.001, 3] m"),
    6: ("holdup", "holdup", "holdup = 1.4 is outside [0, 1]"),
    7: ("pattern", "pattern", "'slug' is not a flow-pattern label"),
    8: ("duplicate", None, "repeats data row 1 in every input and target column"),
    9: ("duplicate_run_id", "run_id", "run_id 'r01' already used in source 'lab', campaign 'c1'"),
    10: ("empty_row", None, "the row is empty"),
    11: ("nonphysical", "rhog", "rhog = 900 kg/m3 is not below rhol = 850 kg/m3"),
    12: ("nonphysical", "vsl", "vsl = 0 and vsg = 0: no flow"),
    13: ("range", "mul", "mul = 45 Pa s is outside the expected range [1e-05, 10] Pa s"),
    14: ("range", "theta", "theta = 30 rad is outside the expected range [-1.5708, 1.5708] rad"),
    16: ("nonphysical", "vsg", "vsg = inf m/s is non-physical (must be finite"),
}


@pytest.fixture(scope="module")
def corrupt():
    return validate_table(read_table(CORRUPT))


def test_every_check_is_exercised_by_the_fixture(corrupt):
    assert {c for c, _, _ in EXPECTED.values()} == set(CHECKS)
    assert corrupt.n_rows == 16
    assert sorted(corrupt.rejected["data_row"]) == sorted(EXPECTED)
    assert corrupt.clean["run_id"].tolist() == ["r01", "r15"]


@pytest.mark.parametrize("row", sorted(EXPECTED))
def test_each_rejected_row_names_file_row_line_column_value(corrupt, row):
    check, column, text = EXPECTED[row]
    rec = corrupt.rejected.set_index("data_row").loc[row]
    assert check in rec["check"].split(",")
    # two comment/header lines before data row 1: '#' line 1, header line 2, data row 1 on line 3
    assert rec["file_line"] == row + 2
    msgs = rec["reason"].split(REASON_SEP)
    where = f"{CORRUPT}, data row {row} (file line {row + 2})" + (f", column {column!r}" if column else "")
    assert any(m.startswith(where) and text in m for m in msgs), msgs


def test_unit_slip_hints(corrupt):
    r = corrupt.rejected.set_index("data_row")["reason"]
    assert "write the unit in the header, e.g. '[mm]'" in r[5]
    assert "'[cP]'" in r[13]
    assert "'[deg]'" in r[14]
    assert "did you mean 'intermittent'?" in r[7]  # vocabulary docstring: slug is intermittent


def test_warnings_unknown_column_and_folded_pattern(corrupt):
    text = "\n".join(corrupt.warnings)
    assert "unknown column 'pgrad_sdev' kept as is; did you mean 'pgrad_sd'?" in text
    assert "'Stratified Wavy' -> 'stratified_wavy'" in text
    assert "pgrad_sdev" in corrupt.clean.columns
    assert corrupt.clean["pattern"].tolist() == ["stratified_smooth", "stratified_wavy"]


def test_unknown_columns_can_be_dropped():
    res = validate_table(read_table(CORRUPT), unknown="drop")
    assert "pgrad_sdev" not in res.clean.columns
    assert any("'pgrad_sdev' dropped" in w for w in res.warnings)


def test_validate_issues_warnings_and_returns_two_frames():
    with pytest.warns(DataWarning, match="pgrad_sdev"):
        clean, rejected = validate(read_table(CORRUPT))
    assert len(clean) + len(rejected) == 16
    assert {"data_row", "check", "reason"} <= set(rejected.columns)


def test_nothing_is_lost(corrupt):
    assert len(corrupt.clean) + len(corrupt.rejected) == corrupt.n_rows


def test_write_rejected_and_summary(corrupt, tmp_path):
    paths = corrupt.write(tmp_path)
    back = pd.read_csv(paths["rejected"])
    assert back["data_row"].tolist() == corrupt.rejected["data_row"].tolist()
    summary = paths["summary"].read_text()
    assert "rows read: 16; accepted: 2; rejected: 14" in summary
    assert "duplicate_run_id" in summary and "data rows 9" in summary


def _good(**over) -> pd.DataFrame:
    base = dict(vsl=[0.1], vsg=[2.0], D=[0.05], theta=[0.0], roughness=[0.0], rhol=[998.0], rhog=[1.2],
                mul=[1e-3], mug=[1.8e-5], sigma=[0.072])
    base.update(over)
    return pd.DataFrame(base)


def test_missing_required_column_suggests_nearest_name():
    df = _good().rename(columns={"mul": "mu_l"})
    with pytest.raises(InputError, match=r"f\.csv: missing required column\(s\) 'mul' \(did you mean 'mu_l'\?\)"):
        validate_table(df, path="f.csv")


def test_missing_column_with_parenthesised_unit():
    df = _good().rename(columns={"D": "D (mm)"})
    with pytest.raises(InputError, match=r"'D' \(found 'D \(mm\)': write the unit in square brackets"):
        validate_table(df)


def test_missing_roughness_and_rhog_messages():
    with pytest.raises(InputError, match="write 0 for hydraulically smooth pipe"):
        validate_table(_good().drop(columns="roughness"))
    with pytest.raises(InputError, match=r"give p, T and M_g to compute it"):
        validate_table(_good().drop(columns="rhog"))


def test_no_data_rows_is_structural(tmp_path):
    p = tmp_path / "empty.csv"
    p.write_text(",".join(_good().columns) + "\n")
    with pytest.raises(InputError, match="no data rows"):
        validate_table(read_table(p))


def test_semicolon_csv_with_decimal_commas_is_read_and_reported(tmp_path):
    # ';' separators with ',' as decimal mark: spreadsheet CSV export in locales that write
    # decimal commas (common practice)
    p = tmp_path / "excel.csv"
    p.write_text("vsl;vsg;D\n0,1;2;0,05\n")
    df = read_table(p)
    assert df[["vsl", "vsg", "D"]].iloc[0].tolist() == [0.1, 2.0, 0.05]
    assert "separated by ';'" in df.attrs["read_notes"][0] and "decimal comma" in df.attrs["read_notes"][0]


def test_rhog_from_equation_of_state_with_default_z():
    # ISA sea level: 101 325 Pa, 288.15 K, dry air M = 0.0289644 kg/mol -> 1.225 kg/m3 (ISO 2533, common practice)
    df = _good(p=[101325.0], T=[288.15], M_g=[0.0289644]).drop(columns="rhog")
    res = validate_table(df)
    assert res.clean["rhog"][0] == pytest.approx(1.225, abs=5e-4)
    assert res.n_rhog_computed == 1
    assert any("Z = 1" in w for w in res.warnings)


def test_given_rhog_wins_over_equation_of_state():
    df = _good(p=[101325.0], T=[288.15], M_g=[0.0289644], Z=[1.0], rhog=[1.3])
    res = validate_table(df)
    assert res.clean["rhog"][0] == 1.3 and res.n_rhog_computed == 0


def test_missing_rhog_on_a_row_without_gas_state():
    df = pd.concat([_good(p=[1e5], T=[290.0], M_g=[0.029]), _good(vsl=[0.2], p=[np.nan], T=[290.0], M_g=[0.029])])
    df["rhog"] = [np.nan, np.nan]
    res = validate_table(df)
    assert len(res.clean) == 1
    assert "rhog is missing" in res.rejected["reason"][0] and "p, T and M_g on this row" in res.rejected["reason"][0]


def test_typed_value_is_quoted_in_field_units(tmp_path):
    p = tmp_path / "mm.csv"
    cols = _good().rename(columns={"D": "D [mm]"})
    cols["D [mm]"] = [5000.0]
    cols.to_csv(p, index=False)
    res = validate_table(read_table(p))
    assert "D = 5 m (typed as 5000 mm) is outside the expected range [0.001, 3] m" in res.rejected["reason"][0]


def test_provenance_filled_and_reported():
    res = validate_table(_good(), path="loopX.csv")
    assert res.clean[["source", "campaign", "run_id"]].iloc[0].tolist() == ["loopX", "loopX", "1"]
    assert sum("not given" in w for w in res.warnings) == 3


def test_negative_uncertainty_and_non_integer_roots():
    res = validate_table(_good(holdup_sd=[-0.01], n_roots=[1.5]))
    reason = res.rejected["reason"][0]
    assert "holdup_sd = -0.01 is non-physical (must be >= 0" in reason
    assert "n_roots = 1.5 is not a whole number" in reason


def test_clean_table_has_canonical_columns_and_dtypes():
    res = validate_table(read_table(FIXTURES / "loop_si.csv"))
    assert len(res.rejected) == 0 and len(res.clean) == 6
    assert res.clean["vsl"].dtype == np.float64
    assert str(res.clean["pattern"].dtype) == "str"
    assert list(res.clean.columns[:10]) == ["vsl", "vsg", "D", "theta", "roughness", "rhol", "rhog", "mul", "mug", "sigma"]


def test_check_data_command_writes_run_folder(tmp_path, capsys):
    from closure_nn.cli import main

    rc = main(["check-data", str(CORRUPT), "--out", str(tmp_path)])
    assert rc == 0
    out = capsys.readouterr().out
    assert "16 rows, 2 accepted, 14 rejected" in out
    (run,) = list(tmp_path.iterdir())
    for name in ("data_si.csv", "rejected.csv", "validation_summary.txt", "summary.json", "config.yaml", "CAUTION.txt"):
        assert (run / name).exists(), name
    assert len(read_table(run / "data_si.csv")) == 2
    assert json.loads((run / "summary.json").read_text())["rejected_by_check"]["duplicate"] == 1
    assert main(["check-data", str(CORRUPT), "--out", str(tmp_path), "--strict"]) == 1


def test_check_data_command_parquet_override(tmp_path):
    from closure_nn.cli import main

    assert main(["check-data", str(FIXTURES / "loop_field_units.csv"), "--out", str(tmp_path), "table_format=parquet"]) == 0
    (run,) = list(tmp_path.iterdir())
    assert len(pd.read_parquet(run / "data_si.parquet")) == 5


def test_check_data_structural_error_exit_code(tmp_path, capsys):
    from closure_nn.cli import main

    p = tmp_path / "bad.csv"
    _good().rename(columns={"vsg": "vgs"}).to_csv(p, index=False)
    assert main(["check-data", str(p), "--out", str(tmp_path / "runs")]) == 2
    assert "missing required column(s) 'vsg' (did you mean 'vgs'?)" in capsys.readouterr().err


def test_check_data_does_not_import_lightning(tmp_path):
    code = ("import sys; from closure_nn.cli import main; "
            f"rc = main(['check-data', {str(FIXTURES / 'loop_si.csv')!r}, '--out', {str(tmp_path)!r}]); "
            "assert rc == 0; assert not any(m.split('.')[0] in ('lightning', 'pytorch_lightning') for m in sys.modules)")
    subprocess.run([sys.executable, "-c", code], check=True, capture_output=True)
