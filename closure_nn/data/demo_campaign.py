r"""Generator of the INVENTED demo flow-loop campaign in data_demo/ (scenario: data_demo/README.md).

Everything here is made up for the demo: the loop (the "Tarnwick Hill two-phase loop" of the
"Ostmere Institute of Flow Studies"; neither exists), its test matrix, its fluids and its
"measurements". The measurements are the invented reference closure
(:class:`closure_nn.data.demo_reference.ReferenceClosure`, not the baseline) solved by
:func:`closure_nn.physics.point.solve_points`, plus seeded measurement noise, partial labels,
plausible pattern-label confusions near pattern boundaries and a few deliberately corrupted rows.

``python -m closure_nn.data.demo_campaign [--out data_demo] [--report]`` rewrites
``lab_campaign.csv`` and ``lab_campaign_corruptions.csv`` byte for byte (seed :data:`SEED`) and,
with ``--report``, prints how far the baseline closure is from the noise-free truth.

Steps of :func:`generate`:

1. Test matrix: two sections (50 mm acrylic, 100 mm steel), air-water and air-light oil, tilt
   -5 to +5 deg (plus +15, +30 and -15 deg on the 50 mm section), set points of v_SL x v_SG;
   some set points not run, some repeated.
2. Achieved rates (set point +-2 % liquid, +-3 % gas), section pressure and temperature, fluid
   properties at that temperature (water: density and Vogel viscosity fits, from memory; the
   light oil: invented linear/exponential fits; air: Sutherland's law, from memory), written
   with the precision a lab sheet would carry, in field units (``D [mm]``, ``mul [cP]`` ...).
3. The truth: the reference closure on exactly the written conditions (read back through
   :func:`closure_nn.data.header_units.convert_headers`, validated, in SI).
4. Noise: the spec's "holdup +-0.02 absolute, pgrad +-5 %" are expanded uncertainties with
   coverage factor k = 2 (about 95 %; JCGM 100:2008, the GUM, sec. 6.2-6.3), so the noise drawn
   is one standard uncertainty: holdup 0.01 absolute; pgrad 2.5 % plus a 1 Pa/m floor. Columns
   holdup_sd and pgrad_sd carry these one-sigma values. Each row keeps only some labels (:data:`LABEL_SETS`).
   Observed patterns: the reference pattern, but near a boundary (the pattern changes within
   +-15 % of v_SG or v_SL) the neighbouring pattern is written with probability
   :data:`P_CONFUSE`.
5. Corruptions (:data:`CORRUPTIONS`), each a realistic slip that still passes validation
   (:mod:`closure_nn.data.demo_corruptions`).

The fluid property fits live in :mod:`closure_nn.data.demo_fluids`.
"""
from __future__ import annotations

import argparse
import io
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import torch

from ..closures.baseline import BaselineClosure
from ..physics.point import solve_points
from ..physics.vocabulary import STRATIFIED_PATTERNS
from .demo_corruptions import corrupt
from .demo_fluids import M_AIR, air_viscosity, oil_properties, water_density, water_surface_tension, water_viscosity
from .demo_reference import ReferenceClosure
from .schema import to_conditions
from .header_units import convert_headers
from .validate import validate_table

SEED = 20310417
SOURCE = "lab"
DEMO_DIR = Path(__file__).resolve().parents[2] / "data_demo"
CAMPAIGN_FILE, CORRUPTIONS_FILE = "lab_campaign.csv", "lab_campaign_corruptions.csv"

#: test sections: D [mm], roughness [um], inclinations [deg], v_SL and v_SG set points [m/s]
SECTIONS = {
    "050": dict(D=50.0, roughness=1.5, theta=(-15, -5, -3, -1, 0, 1, 3, 5, 15, 30),
                vsl=(0.01, 0.02, 0.05, 0.1, 0.2, 0.4, 0.7, 1.0), vsg=(0.3, 0.6, 1, 2, 3.5, 5, 8, 12, 18, 25)),
    "100": dict(D=100.0, roughness=25.0, theta=(-5, -3, -1, 0, 1, 3, 5),
                vsl=(0.01, 0.02, 0.05, 0.1, 0.2, 0.4, 0.7), vsg=(0.3, 0.6, 1, 2, 3.5, 5, 8, 12)),
}
#: fluid code -> campaign name
CAMPAIGNS = {"AW": "thl_air_water", "AO": "thl_air_light_oil"}
P_NOT_RUN, P_REPEAT = 0.08, 0.04
#: Coverage factor of the spec's quoted "+-" values. Flow-loop practice quotes an expanded
#: uncertainty U = k u with k = 2 (about 95 % coverage for a normal distribution; JCGM 100:2008,
#: "Evaluation of measurement data - Guide to the expression of uncertainty in measurement",
#: sec. 6.2-6.3), so the standard uncertainty u (one sigma, what is drawn and written) is U / k.
COVERAGE_K = 2.0
HOLDUP_U, PGRAD_U_REL = 0.02, 0.05  # [-] absolute, [-] relative: the spec's expanded uncertainties (k = 2)
HOLDUP_SD = HOLDUP_U / COVERAGE_K  # [-], one standard uncertainty, absolute: 0.01
PGRAD_SD_REL, PGRAD_SD_ABS = PGRAD_U_REL / COVERAGE_K, 1.0  # [-] one sigma (2.5 %), [Pa/m] small absolute floor
#: label sets and their shares: which of holdup (H), pgrad (P), pattern (F) a row keeps
LABEL_SETS = {"HPF": 0.35, "HP": 0.10, "H": 0.15, "P": 0.20, "F": 0.15, "HF": 0.05}
P_CONFUSE = 0.35
#: corruption kind -> number of rows (:mod:`closure_nn.data.demo_corruptions`)
CORRUPTIONS = {"swap_holdup": 2, "swap_pgrad": 2, "pgrad_mbar_as_pa": 3, "theta_sign": 3,
               "holdup_wrong_run": 2, "vsg_ft_per_s": 1}
#: [Pa/m] floor of |pgrad| in the relative pgrad error of :func:`baseline_vs_truth` (noise-free, so
#: kept apart from the noise floor PGRAD_SD_ABS; the 2 Pa/m the report has always used)
REPORT_PGRAD_FLOOR = 2.0

HEADERS = ["run_id", "campaign", "source", "D [mm]", "roughness [um]", "theta [deg]", "vsl [m/s]", "vsg [m/s]",
           "p [bara]", "T [degC]", "M_g [g/mol]", "Z", "rhol [kg/m3]", "mul [cP]", "mug [uPa s]", "sigma [mN/m]",
           "holdup [-]", "holdup_sd [-]", "pgrad [Pa/m]", "pgrad_sd [Pa/m]", "pattern"]
COMMENTS = [
    "INVENTED DEMO DATA - not measurements. A fictitious campaign on a fictitious flow loop",
    "(the 'Tarnwick Hill two-phase loop' of the 'Ostmere Institute of Flow Studies'; neither exists),",
    "generated by `python -m closure_nn.data.demo_campaign` from an invented reference closure.",
    "Do not use for engineering. Scenario, columns and the deliberately corrupted rows: data_demo/README.md.",
    "pgrad = -dp/dx (positive when pressure falls along the flow); theta positive upward; p absolute.",
]


# -- formatting ---------------------------------------------------------------------------------

def sig(x: float, digits: int = 4) -> str:
    """``x`` rounded to ``digits`` significant digits, positional notation ('' for NaN).

    >>> sig(12345.6), sig(0.0123456), sig(float("nan")), sig(-0.5)
    ('12350', '0.01235', '', '-0.5')
    """
    if not math.isfinite(x):
        return ""
    return np.format_float_positional(x, precision=digits, unique=False, fractional=False, trim="-")


def fixed(x: float, decimals: int) -> str:
    """``x`` with a fixed number of decimals ('' for NaN)."""
    return "" if not math.isfinite(x) else f"{x:.{decimals}f}"


# -- the campaign ------------------------------------------------------------------------------

@dataclass
class DemoCampaign:
    """The generated campaign: the lab sheet as text, its corruption list, and the noise-free truth.

    ``sheet``: raw cells (strings) in :data:`HEADERS` order; ``truth``: SI conditions of the
    uncorrupted runs with the reference closure's holdup, pgrad and pattern (index = sheet rows).
    """

    sheet: pd.DataFrame
    corruptions: pd.DataFrame
    truth: pd.DataFrame

    def campaign_csv(self) -> str:
        buf = io.StringIO()
        for line in COMMENTS:
            buf.write(f"# {line}\n")
        self.sheet.to_csv(buf, index=False, lineterminator="\n")
        return buf.getvalue()

    def corruptions_csv(self) -> str:
        return self.corruptions.to_csv(index=False, lineterminator="\n")


def _test_matrix(rng: np.random.Generator) -> pd.DataFrame:
    rows = []
    series = [(f, s, th) for f in CAMPAIGNS for s in SECTIONS for th in SECTIONS[s]["theta"]]
    for k in rng.permutation(len(series)):  # the order in which the series were run
        fluid, sec, th = series[k]
        spec = SECTIONS[sec]
        T_day = rng.uniform(15.0, 25.0)
        for vl in spec["vsl"]:
            for vg in spec["vsg"]:
                if rng.random() < P_NOT_RUN:
                    continue
                rows.append(dict(fluid=fluid, sec=sec, theta=float(th), vsl_set=vl, vsg_set=vg, T_day=T_day))
    df = pd.DataFrame(rows)
    rep = df[rng.random(len(df)) < P_REPEAT]  # repeat points, run again at the end of the programme
    return pd.concat([df, rep], ignore_index=True)


def _sheet_conditions(m: pd.DataFrame, rng: np.random.Generator) -> pd.DataFrame:
    n = len(m)
    T_c = m["T_day"].to_numpy() + rng.normal(0.0, 0.5, n)
    vsl = m["vsl_set"].to_numpy() * (1 + rng.normal(0.0, 0.02, n))
    vsg = m["vsg_set"].to_numpy() * (1 + rng.normal(0.0, 0.03, n))
    p_bar = 1.2 + 0.04 * vsg + 0.3 * m["vsl_set"].to_numpy() + rng.normal(0.0, 0.03, n)  # loop back-pressure
    water = (m["fluid"] == "AW").to_numpy()
    oil_rho, oil_mu, oil_sigma = oil_properties(T_c)
    rhol = np.where(water, water_density(T_c), oil_rho)
    mul = np.where(water, water_viscosity(T_c), oil_mu)
    sigma = np.where(water, water_surface_tension(T_c), oil_sigma)
    count: dict[tuple[str, str], int] = {}
    run_ids = []
    for f, s in zip(m["fluid"], m["sec"]):
        count[(f, s)] = count.get((f, s), 0) + 1
        run_ids.append(f"{f}{s}-{count[(f, s)]:04d}")
    sec = m["sec"].map(SECTIONS)
    cells = {
        "run_id": run_ids, "campaign": [CAMPAIGNS[f] for f in m["fluid"]], "source": [SOURCE] * n,
        "D [mm]": [fixed(s["D"], 1) for s in sec], "roughness [um]": [fixed(s["roughness"], 1) for s in sec],
        "theta [deg]": [fixed(t, 1) for t in m["theta"]], "vsl [m/s]": [sig(x) for x in vsl],
        "vsg [m/s]": [sig(x) for x in vsg], "p [bara]": [fixed(x, 3) for x in p_bar],
        "T [degC]": [fixed(x, 1) for x in T_c], "M_g [g/mol]": [fixed(M_AIR, 2)] * n, "Z": ["1.000"] * n,
        "rhol [kg/m3]": [fixed(x, 1) for x in rhol], "mul [cP]": [fixed(x * 1e3, 3) for x in mul],
        "mug [uPa s]": [fixed(x * 1e6, 2) for x in air_viscosity(T_c)],
        "sigma [mN/m]": [fixed(x * 1e3, 1) for x in sigma],
    }
    return pd.DataFrame(cells)


def _to_si(sheet: pd.DataFrame) -> pd.DataFrame:
    """The sheet as a reader sees it: numbers parsed, headers converted, validated, SI."""
    raw = sheet.copy()
    for h in raw.columns:
        if h not in ("run_id", "campaign", "source", "pattern"):
            raw[h] = pd.to_numeric(raw[h].replace("", np.nan))
    res = validate_table(convert_headers(raw), path="lab_campaign.csv")
    if len(res.rejected):
        raise RuntimeError(f"demo generator produced invalid rows:\n{res.summary_text()}")
    return res.clean


def _observed_patterns(si: pd.DataFrame, truth_pattern: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Reference patterns with confusions near boundaries (pattern change within +-15 % of a rate)."""
    cond = to_conditions(si)
    closure = ReferenceClosure()
    neighbours = []
    with torch.no_grad():
        for field, f in (("vsg", 0.85), ("vsg", 1.15), ("vsl", 0.85), ("vsl", 1.15)):
            c = cond.with_(**{field: getattr(cond, field) * f})
            neighbours.append(solve_points(c, closure).to_columns()["pattern"])
    nb = np.stack(neighbours, axis=1)
    obs = truth_pattern.copy()
    for i in range(len(obs)):
        other = [p for p in nb[i] if p != truth_pattern[i]]
        if other and rng.random() < P_CONFUSE:
            obs[i] = other[int(rng.integers(len(other)))]
    return obs


def _labels(n: int, rng: np.random.Generator) -> np.ndarray:
    sets = list(LABEL_SETS)
    return np.array(sets)[rng.choice(len(sets), size=n, p=np.array(list(LABEL_SETS.values())))]


def generate(seed: int = SEED) -> DemoCampaign:
    """Generate the whole invented campaign (deterministic by ``seed``; see module docstring)."""
    rng = np.random.default_rng(seed)
    matrix = _test_matrix(rng)
    sheet = _sheet_conditions(matrix, rng)
    si = _to_si(sheet)
    with torch.no_grad():
        res = solve_points(to_conditions(si), ReferenceClosure()).to_columns()
    truth = si.copy()
    truth["holdup"], truth["pgrad"], truth["pattern"] = res["holdup"], res["pgrad"], res["pattern"]
    truth["pgrad_gravity"] = res["pgrad_gravity"]
    n = len(si)
    H = np.clip(res["holdup"] + rng.normal(0.0, HOLDUP_SD, n), 0.0, 1.0)
    P = res["pgrad"] * (1 + rng.normal(0.0, PGRAD_SD_REL, n)) + rng.normal(0.0, PGRAD_SD_ABS, n)
    P_sd = np.sqrt((PGRAD_SD_REL * P) ** 2 + PGRAD_SD_ABS**2)
    obs = _observed_patterns(si, res["pattern"], rng)
    labels = _labels(n, rng)
    has_h = np.array(["H" in s for s in labels]) & np.isfinite(H)
    has_p = np.array(["P" in s for s in labels]) & np.isfinite(P)
    has_f = np.array(["F" in s for s in labels]) | ~(has_h | has_p)
    vals = pd.DataFrame({"holdup": np.where(has_h, H, np.nan), "holdup_sd": np.where(has_h, HOLDUP_SD, np.nan),
                         "pgrad": np.where(has_p, P, np.nan), "pgrad_sd": np.where(has_p, P_sd, np.nan),
                         "theta": matrix["theta"].to_numpy(), "vsg": si["vsg"].to_numpy()})
    vals["pattern"] = np.where(has_f, obs, "")
    vals_in = {k: vals[k].to_numpy().copy() for k in ("theta", "vsg")}
    corr = corrupt(vals, truth, sheet, rng, CORRUPTIONS, PGRAD_SD_REL, PGRAD_SD_ABS)
    sheet["holdup [-]"] = [fixed(x, 3) for x in vals["holdup"]]
    sheet["holdup_sd [-]"] = [fixed(x, 3) for x in vals["holdup_sd"]]
    sheet["pgrad [Pa/m]"] = [sig(x) for x in vals["pgrad"]]
    sheet["pgrad_sd [Pa/m]"] = [sig(x, 3) for x in vals["pgrad_sd"]]
    sheet["pattern"] = vals["pattern"].to_numpy()
    for col, key, fmt in (("theta [deg]", "theta", lambda x: fixed(x, 1)), ("vsg [m/s]", "vsg", sig)):
        changed = np.flatnonzero(vals[key].to_numpy() != vals_in[key])
        sheet.loc[changed, col] = [fmt(x) for x in vals[key].to_numpy()[changed]]
    sheet = sheet[HEADERS]
    _to_si(sheet)  # the corrupted sheet must still pass validation
    return DemoCampaign(sheet=sheet, corruptions=corr, truth=truth)


def write_demo(out_dir: str | Path = DEMO_DIR, seed: int = SEED) -> DemoCampaign:
    """Generate the campaign and write :data:`CAMPAIGN_FILE` and :data:`CORRUPTIONS_FILE` into ``out_dir``."""
    camp = generate(seed)
    write_files(camp, out_dir)
    return camp


def write_files(camp: DemoCampaign, out_dir: str | Path) -> dict[str, Path]:
    """Write a generated campaign's two files into ``out_dir`` (UTF-8, '\\n' line ends); return the paths."""
    d = Path(out_dir)
    d.mkdir(parents=True, exist_ok=True)
    paths = {"campaign": d / CAMPAIGN_FILE, "corruptions": d / CORRUPTIONS_FILE}
    paths["campaign"].write_text(camp.campaign_csv(), encoding="utf-8", newline="")
    paths["corruptions"].write_text(camp.corruptions_csv(), encoding="utf-8", newline="")
    return paths


def baseline_vs_truth(camp: DemoCampaign, closure=None) -> dict:
    """How far a closure (default: the baseline) is from the noise-free truth, on every run.

    Holdup MAE [-] and median relative holdup error [-] in the rows the reference calls stratified
    and in all rows; median relative pgrad error; share of rows with the same pattern.
    """
    closure = closure or BaselineClosure()
    t = camp.truth
    with torch.no_grad():
        b = solve_points(to_conditions(t), closure).to_columns()
    strat = t["pattern"].isin(STRATIFIED_PATTERNS).to_numpy()
    H, Hb = t["holdup"].to_numpy(np.float64), b["holdup"]
    err = np.abs(Hb - H)
    rel = err / np.maximum(H, 1e-6)
    P = t["pgrad"].to_numpy(np.float64)
    prel = np.abs(b["pgrad"] - P) / np.maximum(np.abs(P), REPORT_PGRAD_FLOOR)
    return {
        "closure": closure.label, "rows": int(len(t)), "stratified_rows": int(strat.sum()),
        "holdup_mae_stratified": float(np.nanmean(err[strat])),
        "holdup_mean_stratified": float(np.nanmean(H[strat])),
        "holdup_median_rel_err_stratified": float(np.nanmedian(rel[strat])),
        "holdup_mae_all": float(np.nanmean(err)),
        "pgrad_median_rel_err_stratified": float(np.nanmedian(prel[strat])),
        "pgrad_median_rel_err_all": float(np.nanmedian(prel)),
        "pattern_agreement": float(np.mean(b["pattern"] == t["pattern"].to_numpy())),
        "truth_patterns": {p: int((t["pattern"] == p).sum()) for p in sorted(set(t["pattern"]))},
    }


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m closure_nn.data.demo_campaign", description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=str(DEMO_DIR), help="folder to write into (default: data_demo/ of the repo)")
    ap.add_argument("--report", action="store_true", help="print the baseline's error against the noise-free truth")
    a = ap.parse_args(argv)
    camp = write_demo(a.out)
    print(f"wrote {len(camp.sheet)} runs and {len(camp.corruptions)} corrupted rows into {a.out}")
    if a.report:
        for k, v in baseline_vs_truth(camp).items():
            print(f"  {k}: {v:.4f}" if isinstance(v, float) else f"  {k}: {v}")
    return 0


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
