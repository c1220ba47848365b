"""Schema table, to_conditions, glossary and exact CSV <-> Parquet round trips."""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import torch
from hypothesis import given, settings
from hypothesis import strategies as st

from closure_nn.data.schema import ALWAYS, COLUMN, COLUMNS, INPUTS, glossary_markdown, to_conditions
from closure_nn.data.table_io import read_table, write_table
from closure_nn.data.validate import validate_table
from closure_nn.physics.checks import RANGES, InputError
from closure_nn.physics.conditions import FIELD_NAMES
from closure_nn.physics.vocabulary import PATTERNS

FIXTURES = Path(__file__).parent / "fixtures"


def test_input_ranges_come_from_physics_ranges():
    # one table of ranges: the schema must not carry its own copy for the Conditions fields
    for name in INPUTS:
        lo, hi, unit, note = RANGES[name]
        assert COLUMN[name].range == (lo, hi) and COLUMN[name].unit == unit and COLUMN[name].range_note == note
    assert set(INPUTS) == set(FIELD_NAMES) - {"g"}


def test_column_names_are_the_team_contract():
    names = [c.name for c in COLUMNS]
    assert names == ["vsl", "vsg", "D", "theta", "roughness", "rhol", "rhog", "mul", "mug", "sigma", "p", "T", "M_g",
                     "Z", "holdup", "pgrad", "pattern", "holdup_sd", "pgrad_sd", "source", "campaign", "run_id",
                     "n_roots"]
    assert set(ALWAYS) >= {"holdup", "pgrad", "pattern", "source", "campaign", "run_id"}


def test_glossary_has_one_row_per_column():
    md = glossary_markdown().splitlines()
    assert len(md) == 2 + len(COLUMNS)
    assert any(line.startswith("| `pgrad` | Pa/m |") and "psi/ft" in line for line in md)
    assert all(p in glossary_markdown() for p in PATTERNS)


def test_to_conditions_float64_and_isa_gas_density():
    # ISA sea level density 1.225 kg/m3 at 101 325 Pa, 288.15 K (ISO 2533; common practice)
    df = pd.DataFrame({"vsl": [0.1, 0.2], "vsg": [2.0, 3.0], "D": [0.05, 0.05], "theta": [0.0, 0.1],
                       "roughness": [0.0, 1e-5], "rhol": [998.0, 998.0], "rhog": [np.nan, 5.0], "mul": [1e-3, 1e-3],
                       "mug": [1.8e-5, 1.8e-5], "sigma": [0.072, 0.072], "p": [101325.0, 101325.0],
                       "T": [288.15, 288.15], "M_g": [0.0289644, 0.0289644]})
    c = to_conditions(df)
    assert c.vsl.dtype == torch.float64 and tuple(c.shape) == (2,)
    assert float(c.rhog[0]) == pytest.approx(1.225, abs=5e-4)
    assert float(c.rhog[1]) == 5.0
    assert float(c.theta[1]) == 0.1


def test_to_conditions_checks_ranges():
    df = validate_table(read_table(FIXTURES / "loop_si.csv")).clean
    df.loc[0, "D"] = 50.0
    with pytest.raises(InputError, match="loop_si.csv.*D = 50 m"):
        to_conditions(df, where="loop_si.csv")


def _validated() -> pd.DataFrame:
    df = validate_table(read_table(FIXTURES / "loop_si.csv")).clean
    df["n_roots"] = pd.array([1, 3, None, 1, 1, 0], dtype="Int64")
    df.loc[2, "pattern"] = np.nan  # a missing target
    df.attrs["comments"] = ["Invented scenario for tests: not a real campaign."]
    return df


@pytest.mark.parametrize("unit_headers", [False, True])
def test_round_trip_csv_parquet_exact(tmp_path, unit_headers):
    df = _validated()
    a = read_table(write_table(df, tmp_path / "a.csv", unit_headers=unit_headers))
    b = read_table(write_table(a, tmp_path / "b.parquet", unit_headers=unit_headers))
    c = read_table(write_table(b, tmp_path / "c.csv"))
    for back in (a, b, c):
        pd.testing.assert_frame_equal(back, df, check_exact=True)
        assert back.attrs["comments"] == df.attrs["comments"]


def test_round_trip_keeps_unknown_columns(tmp_path):
    df = _validated()
    df["operator"] = ["ab", "cd", "ef", "gh", None, "ij"]
    for name in ("x.csv", "x.parquet"):
        pd.testing.assert_frame_equal(read_table(write_table(df, tmp_path / name)), df, check_exact=True)


@settings(max_examples=40, deadline=None)
@given(st.lists(st.floats(allow_nan=False, allow_infinity=False, width=64), min_size=1, max_size=20))
def test_round_trip_any_float64(tmp_path_factory, values):
    d = tmp_path_factory.mktemp("rt")
    df = pd.DataFrame({"pgrad": np.array(values, dtype=np.float64)})
    for name in ("v.csv", "v.parquet"):
        back = read_table(write_table(df, d / name))
        assert np.array_equal(back["pgrad"].to_numpy(), df["pgrad"].to_numpy())


def test_unknown_suffix_and_missing_file(tmp_path):
    with pytest.raises(InputError, match="use .csv or .parquet"):
        read_table(tmp_path / "t.xlsx")
    with pytest.raises(FileNotFoundError):
        read_table(tmp_path / "none.csv")


def test_corrupt_parquet_is_an_input_error(tmp_path):
    p = tmp_path / "bad.parquet"
    p.write_bytes(b"not parquet at all")
    with pytest.raises(InputError, match="cannot read as Parquet"):
        read_table(p)


def test_text_numbers_in_provenance_stay_text(tmp_path):
    p = tmp_path / "ids.csv"
    p.write_text("vsl,run_id,campaign\n0.1,007,12\n")
    df = read_table(p)
    assert df["run_id"][0] == "007" and df["campaign"][0] == "12"
    assert math.isclose(df["vsl"][0], 0.1)


def test_to_conditions_on_unvalidated_table_names_bad_cell(tmp_path):
    p = tmp_path / "raw.csv"
    p.write_text("vsl,vsg,D,theta,roughness,rhol,rhog,mul,mug,sigma\n"
                 "0.1,2,0.05,0,0,998,1.2,0.001,1.8e-5,0.072\n0.1,2,0.05,0,0,998,1.2,1 cP,1.8e-5,0.072\n")
    with pytest.raises(InputError, match=r"raw\.csv: data row 2, column 'mul': '1 cP' is not a number"):
        to_conditions(read_table(p))
    with pytest.raises(InputError, match="lacks input column.s. sigma"):
        to_conditions(read_table(p).drop(columns="sigma"))


def test_range_note_only_on_the_side_it_explains():
    # the physics note for D explains a too-large diameter; a 0.5 mm bore gets no such note
    from closure_nn.data.validate import validate_table as vt

    base = dict(vsl=[0.1, 0.1], vsg=[2.0, 2.0], D=[0.0005, 30.0], theta=[0.0, 0.0], roughness=[0.0, 0.0],
                rhol=[998.0, 998.0], rhog=[1.2, 1.2], mul=[1e-3, 1e-3], mug=[1.8e-5, 1.8e-5], sigma=[0.072, 0.072])
    r = vt(pd.DataFrame(base)).rejected["reason"].tolist()
    note = RANGES["D"][3]
    assert note not in r[0] and note in r[1]
