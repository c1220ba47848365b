"""Line runs end to end: file format, side-by-side closures, ensemble band, out-of-domain
flags, run-folder outputs, and the line/point commands staying free of Lightning.

These are checks of the software's wiring, not of the physics: the physical references (the
isothermal gas-line integral, fluids.compressible.isothermal_gas, Darcy-Weisbach with hydrostatic
head, point gradient x length) are in test_line_march.py. The expected values here come from the
library's own point solver and from arithmetic on the inputs (common practice for wiring tests)."""
from __future__ import annotations

import json
import math
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest
import torch

from closure_nn.caution import CAUTION
from closure_nn.closures.baseline import BaselineClosure
from closure_nn.line.definition import load_line, parse_rate, read_profile
from closure_nn.line.march import MarchSettings
from closure_nn.line.run import run_line, write_line_run
from closure_nn.report.line_plots import line_figure
from closure_nn.physics.checks import InputError
from closure_nn.physics.groups import FEATURE_NAMES

PROFILE = """# a small invented test profile
distance [km],elevation [m],section
0.0,0.0,a
0.5,12.0,a
1.0,30.0,a
1.5,20.0,b
2.0,5.0,b
2.5,5.0,b
"""
LINE_YAML = """
name: test line (invented)
invented: true
profile: profile.csv
roughness: 4.5e-5
sections: {a: {D: 203.2 mm}, b: {D: 0.25}}
fluid: {rhol: 800.0, mul: 1.0e-3, sigma: 0.02, M_g: 18 g/mol, Z: 0.92, mug: 1.2e-5}
temperature: {inlet: 40 degC, outlet: 20 degC}
rates: {gas: 0.4 MSm3/d, liquid: 200 m3/d}
pressure: {inlet: 30 bara}
"""


@pytest.fixture()
def line_dir(tmp_path: Path) -> Path:
    (tmp_path / "profile.csv").write_text(PROFILE)
    (tmp_path / "line.yaml").write_text(LINE_YAML)
    return tmp_path


class SteepLimitedClosure(BaselineClosure):
    """Test closure: baseline friction, 'trained' only where sin(theta) < 0.03."""

    def in_domain(self, features: torch.Tensor) -> torch.Tensor:
        return features[..., FEATURE_NAMES.index("sin_theta")] < 0.03


def test_line_file_units_and_sections(line_dir):
    line = load_line(line_dir / "line.yaml")
    assert line.distance[-1] == 2500.0  # km -> m
    assert line.D.tolist() == pytest.approx([0.2032, 0.2032, 0.2032, 0.25, 0.25])  # section of the segment start
    assert line.T[0] == pytest.approx(313.15) and line.T[-1] == pytest.approx(293.15)
    assert line.p_boundary == 30e5 and line.boundary == "inlet"
    # 200 m3/d of liquid at 800 kg/m3 (common-practice conversion)
    assert line.m_liquid == pytest.approx(200 * 800 / 86400)
    # Sm3 at 15 degC, 1.01325 bar, ideal gas: rho_std = p M / (R T)
    rho_std = 101325.0 * 0.018 / (8.314462618 * 288.15)
    assert line.m_gas == pytest.approx(0.4e6 * rho_std / 86400)


def test_line_file_errors_name_row_and_column(tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("distance,elevation\n0,0\n100,1\n90,2\n")
    with pytest.raises(InputError, match=r"data row 3: distance 90 m does not rise"):
        read_profile(bad)
    bad.write_text("distance,elevation\n0,0\n10,30\n")
    with pytest.raises(InputError, match="elevation changes by 30 m over 10 m"):
        read_profile(bad)
    with pytest.raises(InputError, match="rates.gas"):
        parse_rate("3 furlongs/d", "gas", 0.8)


def test_side_by_side_ensemble_and_domain_flags(line_dir):
    line = load_line(line_dir / "line.yaml")
    closures = {"baseline": BaselineClosure(), "churchill": BaselineClosure(wall="churchill", interface="smooth"),
                "limited": SteepLimitedClosure()}
    members = [BaselineClosure(interface="andritsos_hanratty", interface_kwargs={"coef": c}) for c in (10.0, 15.0, 20.0)]
    run = run_line(line, closures, members, settings=MarchSettings(tol=50.0), raise_errors=True)
    summ = run.summary()
    assert set(summ["closures"]) == set(closures) and summ["ensemble"]["members"] == 3
    a, b = summ["closures"]["baseline"], summ["closures"]["churchill"]
    assert a["p_outlet_Pa"] != b["p_outlet_Pa"]  # two different closures really differ
    for s in summ["closures"].values():
        assert s["dp_friction_Pa"] + s["dp_gravity_Pa"] == pytest.approx(s["dp_total_Pa"], abs=1.0)
        assert sum(s["pattern_share_of_length"].values()) == pytest.approx(1.0)
        assert s["liquid_inventory_m3"] > 0
    # inventory is sum(holdup * A * length): bounded by the no-slip and full-pipe volumes
    vol = sum(math.pi * d**2 / 4 * h for d, h in zip(line.D, np.diff(line.distance)))
    assert 0 < a["liquid_inventory_m3"] < vol
    # out-of-domain: exactly the stations whose segment climbs at sin(theta) >= 0.03
    st = run.stations()
    lim = st[st["closure"] == "limited"]
    expect = np.sin(lim["theta"].to_numpy()) >= 0.03
    assert (~lim["in_domain"].to_numpy() == expect).all() and expect.any()
    ood = summ["closures"]["limited"]["out_of_domain"]
    assert ood["checked"] and ood["stations"] == int(expect.sum()) and ood["intervals_m"] == [[500.0, 500.0]]
    assert summ["closures"]["baseline"]["out_of_domain"] == {"checked": False}
    band = run.band()
    assert (band["p_min"] <= band["p_mean"] + 1e-9).all() and (band["p_mean"] <= band["p_max"] + 1e-9).all()
    assert (band["p_max"] - band["p_min"]).iloc[-1] > 0  # members differ
    files = write_line_run(run, line_dir, config_yaml="x: 1\n", figure=line_figure)
    assert {"stations", "band", "summary", "plot", "config"} <= set(files)
    assert files["plot"].stat().st_size > 10_000
    assert json.loads(files["summary"].read_text())["caution"] == CAUTION
    # plain tables (the caution is in summary.json and CAUTION.txt, not above the header)
    assert files["stations"].read_text().startswith("closure,role,station,")
    assert (line_dir / "CAUTION.txt").read_text().strip() == CAUTION


def test_line_and_point_commands_do_not_import_lightning(line_dir):
    code = textwrap.dedent(f"""
        import sys
        from closure_nn.cli import main
        rc = main(["line", {str(line_dir / 'line.yaml')!r}, "--out", {str(line_dir / 'runs')!r}, "--no-plot"])
        rc2 = main(["point", "--vsl", "0.1", "--vsg", "2", "--D", "0.1"])
        bad = sorted(m for m in sys.modules if m.split(".")[0] in ("lightning", "pytorch_lightning"))
        print("RC", rc, rc2, "LIGHTNING", bad)
    """)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300)
    assert "RC 0 0 LIGHTNING []" in out.stdout, out.stdout + out.stderr
    assert CAUTION in out.stdout
    runs = list((line_dir / "runs").glob("line-*"))
    assert len(runs) == 1 and (runs[0] / "stations.csv").exists() and (runs[0] / "CAUTION.txt").exists()
