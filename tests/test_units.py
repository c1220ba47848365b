"""Field units in headers -> SI.

Conversion factors are checked against NIST Special Publication 811 (2008 edition), Thompson &
Taylor, "Guide for the Use of the International System of Units (SI)", Appendix B.8, to the
seven significant digits printed there (exact factors to 1e-15). Temperature conversions follow
SP 811 Appendix B.8 (degree Celsius, degree Fahrenheit) formulas.
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from closure_nn.data.table_io import convert_headers, read_table
from closure_nn.data.units import UNITS, canonical_unit, factor, from_si, parse_header, slip_hint, to_si
from closure_nn.physics.checks import InputError

FIXTURES = Path(__file__).parent / "fixtures"

# (dimension, unit, SI value of one unit as printed in NIST SP 811 (2008) Appendix B.8, exact?)
NIST_SP811_B8 = [
    ("length", "ft", 3.048e-01, True),  # foot -> metre
    ("length", "in", 2.54e-02, True),  # inch -> metre
    ("length", "mil", 2.54e-05, True),  # mil (0.001 in) -> metre
    ("velocity", "ft/s", 3.048e-01, True),  # foot per second -> metre per second
    ("velocity", "km/h", 2.777778e-01, False),  # kilometre per hour -> metre per second
    ("angle", "deg", 1.745329e-02, False),  # degree (of angle) -> radian
    ("pressure", "bar", 1.0e05, True),  # bar -> pascal
    ("pressure", "psi", 6.894757e03, False),  # pound-force per square inch -> pascal
    ("pressure", "atm", 1.01325e05, True),  # atmosphere, standard -> pascal
    ("dynamic viscosity", "cP", 1.0e-03, True),  # centipoise -> pascal second
    ("dynamic viscosity", "P", 1.0e-01, True),  # poise -> pascal second
    ("density", "lb/ft3", 1.601846e01, False),  # pound per cubic foot -> kilogram per cubic metre
    ("density", "g/cm3", 1.0e03, True),  # gram per cubic centimetre -> kilogram per cubic metre
    ("surface tension", "dyn/cm", 1.0e-03, True),  # dyne per centimetre -> newton per metre
]


@pytest.mark.parametrize("dimension,unit,si,exact", NIST_SP811_B8)
def test_factor_matches_nist_sp811(dimension, unit, si, exact):
    a, b = factor(unit, dimension)
    assert b == 0.0
    if exact:
        assert a == pytest.approx(si, rel=1e-15)
    else:  # SP 811 prints 7 significant digits
        assert a == pytest.approx(si, rel=5e-7)


def test_pressure_gradient_units_are_quotients_of_nist_factors():
    # NIST SP 811 (2008) B.8: psi = 6.894757E+03 Pa, ft = 3.048E-01 m; kPa/km = 1 Pa/m (SI prefixes)
    assert factor("psi/ft", "pressure gradient")[0] == pytest.approx(6.894757e3 / 0.3048, rel=1e-12)
    assert factor("psi/ft", "pressure gradient")[0] == pytest.approx(22620.59, rel=5e-7)
    assert factor("psi/100ft", "pressure gradient")[0] == pytest.approx(226.2059, rel=5e-7)
    assert factor("kPa/km", "pressure gradient") == (1.0, 0.0)
    assert factor("bar/km", "pressure gradient")[0] == pytest.approx(100.0, rel=1e-15)


def test_temperatures_nist_sp811_formulas():
    # NIST SP 811 (2008) B.8: T/K = t/degC + 273.15; T/K = (t/degF + 459.67) / 1.8
    assert float(to_si(20.0, "degC", "temperature")) == pytest.approx(293.15, abs=1e-12)
    assert float(to_si(32.0, "degF", "temperature")) == pytest.approx(273.15, abs=1e-12)
    assert float(to_si(212.0, "degF", "temperature")) == pytest.approx(373.15, abs=1e-12)
    assert float(to_si(-40.0, "degF", "temperature")) == pytest.approx(float(to_si(-40.0, "degC", "temperature")), abs=1e-12)


def test_gauge_pressure_adds_one_standard_atmosphere():
    # standard atmosphere 101 325 Pa (NIST SP 811 (2008) B.8, exact); barg/psig are our own spelling
    assert float(to_si(0.0, "barg", "pressure")) == pytest.approx(101325.0, rel=1e-15)
    assert float(to_si(1.0, "barg", "pressure")) == pytest.approx(201325.0, rel=1e-15)
    assert float(to_si(14.7, "psig", "pressure")) == pytest.approx(14.7 * 6.894757e3 + 101325.0, rel=1e-12)
    assert float(to_si(1.0, "bar", "pressure")) == float(to_si(1.0, "bara", "pressure")) == 1e5


def test_from_si_inverts_to_si_for_every_unit():
    x = np.array([-3.5, 0.0, 0.25, 7.0, 1234.5])
    for dim, units in UNITS.items():
        for u in units:
            np.testing.assert_allclose(from_si(to_si(x, u, dim), u, dim), x, rtol=1e-13, atol=1e-9)


@pytest.mark.parametrize("typed,canon", [("Pa·s", "Pa s"), ("Pa.s", "Pa s"), ("mPa s", "mPa s"), ("cp", "cP"),
                                         ("°C", "degC"), ("kg/m^3", "kg/m3"), ("µm", "um"), ("psi/100 ft", "psi/100ft")])
def test_aliases(typed, canon):
    assert canonical_unit(typed) == canon


def test_parse_header():
    assert parse_header("pgrad [psi/ft]") == ("pgrad", "psi/ft")
    assert parse_header("D") == ("D", None)
    assert parse_header("D (mm)") == ("D (mm)", None)  # only square brackets carry a unit


def test_unknown_unit_names_column_and_known_units():
    with pytest.raises(InputError, match=r"unknown unit \[furlong\] for column 'D \[furlong\]' \(length\); known units: m, mm"):
        convert_headers(pd.DataFrame({"D [furlong]": [1.0]}), where="f.csv")
    with pytest.raises(InputError, match=r"Did you mean \[ft/s\]"):
        factor("fts", "velocity", "vsg")


def test_wrong_dimension_is_an_error():
    with pytest.raises(InputError, match=r"column 'mul \[mm\]' holds a dynamic viscosity, but \[mm\] is a unit of length"):
        convert_headers(pd.DataFrame({"mul [mm]": [1.0]}), where="f.csv")
    with pytest.raises(InputError, match="takes no unit"):
        convert_headers(pd.DataFrame({"campaign [m]": ["a"]}))


def test_two_headers_for_one_column_is_an_error():
    with pytest.raises(InputError, match=r"headers 'D \[mm\]' and 'D \[in\]' both give column 'D'"):
        convert_headers(pd.DataFrame({"D [mm]": [50.0], "D [in]": [2.0]}))


def test_field_unit_fixture_reads_in_si():
    # invented fixture typed in field units; expected values from the NIST SP 811 factors above
    df = read_table(FIXTURES / "loop_field_units.csv")
    assert df["vsl"][0] == pytest.approx(0.5 * 0.3048, rel=1e-15)
    assert df["D"][0] == pytest.approx(0.0508, rel=1e-15)  # 50.8 mm = 2 in
    assert df["theta"][2] == pytest.approx(math.radians(2.0), rel=1e-15)
    assert df["mul"][0] == pytest.approx(1.002e-3, rel=1e-15)
    assert df["sigma"][0] == pytest.approx(0.0728, rel=1e-15)
    assert df["p"][0] == pytest.approx(1.5e5, rel=1e-15)
    assert df["T"][2] == pytest.approx(294.65, rel=1e-15)
    assert df["M_g"][0] == pytest.approx(0.0289647, rel=1e-15)
    assert df["holdup"][0] == pytest.approx(0.352, rel=1e-15)
    assert df["pgrad"][1] == pytest.approx(1250.0, rel=1e-15)  # kPa/km = Pa/m
    assert df.attrs["units"]["D"] == "mm"


def test_slip_hint_names_the_unit_that_fits():
    assert "'[mm]'" in slip_hint(50.0, "length", 1e-3, 3.0)
    assert "cP" in slip_hint(45.0, "dynamic viscosity", 1e-5, 10.0)
    assert slip_hint(-1.0, "velocity", 0.0, 50.0) == ""
