"""Write tests/data/solver_snapshot_v0.csv: a REGRESSION SNAPSHOT of closure-nn's own output.

Values produced by the holdup-root solver as it was before the chunked solver (commit cf8ff0b,
40-point bracketing grid, Chandrupatla refinement); not an external reference. The new solver
must reproduce them (1e-10 in h/D and holdup, 1e-9 relative in pgrad) wherever the old root
count was right. Re-running this script with a newer solver would overwrite the snapshot with
that solver's output, so it is kept only as the record of how the file was made.

Run: .venv/bin/python tests/data/make_solver_snapshot.py
"""
from __future__ import annotations

import math
from pathlib import Path

import pandas as pd
import torch

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.physics.conditions import FIELD_NAMES, make_conditions
from closure_nn.physics.holdup_roots import solve_separated
from closure_nn.physics.point import solve_points

CLOSURES = {"churchill_ah": BaselineClosure(wall="churchill", interface="andritsos_hanratty"),
            "churchill_smooth": BaselineClosure(wall="churchill", interface="smooth")}


def states(n: int, seed: int):
    g = torch.Generator().manual_seed(seed)
    r = lambda: torch.rand(n, generator=g, dtype=torch.float64)  # noqa: E731
    c = make_conditions(
        vsl=10 ** (-3 + 3 * r()), vsg=10 ** (-1 + 2.5 * r()), D=0.025 + 0.5 * r(),
        theta=torch.deg2rad(-10 + 20 * r()), roughness=5e-5 * r(), rhol=700 + 300 * r(),
        rhog=1 + 50 * r(), mul=10 ** (-3.3 + 1.5 * r()))
    # the issue-17 example (air-water, D 0.0402 m, +2 deg) and two known three-root states
    extra = make_conditions(vsl=[0.0011, 0.0013, 0.0017], vsg=[11.69, 19.1, 10.98], D=[0.0402, 0.048, 0.151],
                            theta=[math.radians(2.0), math.radians(4.48), math.radians(0.295)])
    return make_conditions(**{k: torch.cat([getattr(c, k), getattr(extra, k)]) for k in FIELD_NAMES})


def main() -> None:
    cond = states(600, seed=17)
    frames = []
    with torch.no_grad():
        for name, closure in CLOSURES.items():
            sol = solve_separated(cond, closure)
            pts = solve_points(cond, closure)
            df = pd.DataFrame({k: getattr(cond, k).numpy() for k in FIELD_NAMES})
            df.insert(0, "closure", name)
            df["n_roots"] = sol.n_roots.numpy()
            for k in range(3):
                df[f"root_{k + 1}"] = sol.roots[:, k].numpy()
            df["frac"] = sol.frac.numpy()
            df["holdup"] = sol.holdup.numpy()
            df["pgrad"] = sol.pgrad.total.numpy()
            df["point_holdup"] = pts.holdup.numpy()
            df["point_pgrad"] = pts.pgrad.total.numpy()
            df["point_pattern"] = pts.pattern.numpy()
            df["point_flags"] = pts.flags.numpy()
            frames.append(df)
    out = Path(__file__).with_name("solver_snapshot_v0.csv")
    with out.open("w") as fh:
        fh.write("# REGRESSION SNAPSHOT of closure-nn's own solver output (commit cf8ff0b), not a reference value\n")
        pd.concat(frames).to_csv(fh, index=False, float_format="%.17g")
    print(out, sum(len(f) for f in frames), "rows")


if __name__ == "__main__":
    main()
