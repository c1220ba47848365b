"""``closure-nn point``: one condition given on the command line."""
from __future__ import annotations

import argparse
import math

import torch

from ..caution import CAUTION
from ..config import load_config
from ..fluid_properties import named_fluid
from ..physics.checks import InputError, check_conditions
from ..physics.conditions import gas_density, make_conditions
from ..physics.point import solve_points
from ..run_folder import dumps_json
from .options import add_closure_option, chosen_closure

AIR_MOLAR_MASS = 0.0289647  # kg/mol, dry air (e.g. Lemmon et al. 2000, J. Phys. Chem. Ref. Data 29:331)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--vsl", type=float, required=True, help="superficial liquid velocity [m/s]")
    p.add_argument("--vsg", type=float, required=True, help="superficial gas velocity [m/s]")
    p.add_argument("--D", type=float, required=True, help="pipe inner diameter [m]")
    p.add_argument("--theta-deg", type=float, default=0.0, help="inclination [deg], + upward (default 0)")
    p.add_argument("--roughness", type=float, default=0.0, help="wall roughness [m] (default 0)")
    p.add_argument("--rhol", type=float, default=998.0, help="liquid density [kg/m3] (default 998, water)")
    p.add_argument("--rhog", type=float, default=None, help="gas density [kg/m3] (default: from --p/--T, else 1.2)")
    p.add_argument("--mul", type=float, default=1.0e-3, help="liquid viscosity [Pa s] (default 1e-3)")
    p.add_argument("--mug", type=float, default=1.8e-5, help="gas viscosity [Pa s] (default 1.8e-5)")
    p.add_argument("--sigma", type=float, default=0.072, help="surface tension [N/m] (default 0.072)")
    p.add_argument("--p", type=float, default=None, help="absolute pressure [Pa], for the gas density")
    p.add_argument("--T", type=float, default=293.15, help="temperature [K], for the gas density (default 293.15)")
    p.add_argument("--M-g", type=float, default=AIR_MOLAR_MASS, help="gas molar mass [kg/mol] (default air)")
    p.add_argument("--Z", type=float, default=1.0, help="gas compressibility factor [-] (default 1)")
    p.add_argument("--gas-fluid", default=None,
                   help="CoolProp fluid name for the gas (e.g. Methane, Nitrogen); sets rhog and mug from --p/--T")
    add_closure_option(p)
    p.add_argument("--json", action="store_true", help="print the result as JSON")


def run(args: argparse.Namespace, overrides: list[str]) -> int:
    cfg = load_config("point", overrides)
    torch.set_num_threads(int(cfg.threads))
    rhog, mug = args.rhog, args.mug
    if args.gas_fluid:
        if args.p is None:
            raise InputError("--gas-fluid needs --p (absolute pressure, Pa) and --T (K)")
        props = named_fluid(args.gas_fluid, args.p, args.T)
        rhog, mug = float(props.rho), float(props.mu)
    if rhog is None:
        rhog = float(gas_density(torch.tensor(args.p), torch.tensor(args.T), torch.tensor(args.M_g), args.Z)) if args.p else 1.2
    cond = make_conditions(vsl=[args.vsl], vsg=[args.vsg], D=args.D, theta=math.radians(args.theta_deg),
                           roughness=args.roughness, rhol=args.rhol, rhog=rhog, mul=args.mul, mug=mug,
                           sigma=args.sigma)
    check_conditions(cond, where="command line")
    closure = chosen_closure(args.closure, cfg, overrides)
    with torch.no_grad():
        res = solve_points(cond, closure, **dict(cfg.solver))
    cols = {k: (v[0].item() if hasattr(v[0], "item") else v[0]) for k, v in res.to_columns().items()}
    if args.json:
        print(dumps_json({"closure": closure.label, **cols, "caution": CAUTION}))  # strict JSON: a missing root is null
        return 0
    roots = [f"{cols[f'root_{k}']:.4f}" for k in (1, 2, 3) if cols[f"root_{k}"] == cols[f"root_{k}"]]
    print(f"closure          {closure.label}")
    print(f"flow pattern     {cols['pattern']}")
    print(f"liquid holdup    {cols['holdup']:.4f} [-]")
    print(f"-dp/dx           {cols['pgrad']:.5g} Pa/m  (friction {cols['pgrad_friction']:.5g}, gravity {cols['pgrad_gravity']:.5g})")
    print(f"stratified roots {cols['n_roots']} (h/D: {', '.join(roots) or '-'}; rule: {cfg.solver.select})")
    if cols["flag_text"]:
        print(f"flags            {cols['flag_text']}")
    print(CAUTION)
    return 0
