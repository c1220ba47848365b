"""Write tests/data/hard_root_states.csv: states whose holdup-root count is hard to get right.

Screening (run once, about 10 minutes on one core): 2e5 random states (seed 1717) for each of two
baseline closures (Churchill wall with the Andritsos-Hanratty or the smooth interface), plus the
issue-17 example (air-water, D 0.0402 m, vsl 0.0011 m/s, vsg 11.69 m/s, +2 deg). The reference
root count is independent of closure-nn's root finder: the combined residual
(closure_nn.physics.momentum.combined_residual, our one equation, float64) is evaluated on a
fine grid of 4,000 uniform points in h/D plus 40 log-spaced points below h/D = 1e-3, sign
changes are counted in numpy, and every bracket is refined with scipy.optimize.brentq one state
at a time. Candidates: every state where this reference and the solver as of commit cf8ff0b (40-point
grid, loaded from /tmp/holdup_roots_v0.py, i.e. `git show cf8ff0b:closure_nn/physics/holdup_roots.py`)
or the current solver disagree on the root count, and every state with three or more roots.
Stored: all candidates the cf8ff0b solver got wrong, plus 200 other candidates per closure.

Result of the run that wrote the file (2e5 states per closure): three or more roots in 551
(Andritsos-Hanratty) and 2,635 (smooth) states; the cf8ff0b solver's count differed from the
reference in 23 and 92 of them; the solver with turn detection in 0 and 0.

Run: .venv/bin/python tests/data/make_hard_states.py [n_states]
"""
from __future__ import annotations

import importlib.util
import math
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import torch
from scipy.optimize import brentq

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.physics.conditions import FIELD_NAMES, make_conditions
from closure_nn.physics.holdup_roots import find_roots
from closure_nn.physics.local_state import local_state
from closure_nn.physics.momentum import combined_residual, shear_stresses

CLOSURES = {"churchill_ah": BaselineClosure(wall="churchill", interface="andritsos_hanratty"),
            "churchill_smooth": BaselineClosure(wall="churchill", interface="smooth")}
FINE = np.unique(np.concatenate([np.logspace(-7, -3, 40, endpoint=False), np.linspace(1e-3, 1 - 1e-7, 4000)]))


def states(n: int, seed: int):
    rng = np.random.default_rng(seed)
    r = lambda: rng.random(n)  # noqa: E731
    c = dict(vsl=10 ** (-3 + 3 * r()), vsg=10 ** (-1 + 2.5 * r()), D=0.025 + 0.5 * r(),
             theta=np.radians(-10 + 20 * r()), roughness=5e-5 * r(), rhol=700 + 300 * r(),
             rhog=1 + 50 * r(), mul=10 ** (-3.3 + 1.5 * r()))
    ex = make_conditions(vsl=0.0011, vsg=11.69, D=0.0402, theta=math.radians(2.0))
    full = make_conditions(**c)
    return make_conditions(**{k: np.append(getattr(full, k).numpy(), getattr(ex, k).numpy()) for k in FIELD_NAMES})


def residual(cond1, closure, x: np.ndarray) -> np.ndarray:
    """Our combined residual [Pa/m] of ONE state (batch (1,)) at the h/D values x, float64."""
    with torch.no_grad():
        s = local_state(cond1, torch.as_tensor(x, dtype=torch.float64), "stratified")
        return combined_residual(s, shear_stresses(s, closure(s))).numpy()


def reference_roots(cond1, closure) -> list[float]:
    y = residual(cond1, closure, FINE)
    ok = np.isfinite(y)
    cells = np.nonzero(ok[:-1] & ok[1:] & (np.signbit(y[:-1]) != np.signbit(y[1:])))[0]
    f = lambda x: float(residual(cond1, closure, np.array([x]))[0])  # noqa: E731
    return [brentq(f, FINE[i], FINE[i + 1], xtol=1e-14) for i in cells]


def fine_counts(cond, closure, chunk: int = 100) -> np.ndarray:
    """Sign changes on the fine grid (a pre-screen, the same grid as reference_roots)."""
    out = []
    x = torch.as_tensor(FINE)
    with torch.no_grad():
        for i in range(0, cond.shape[0], chunk):
            c = cond[i:i + chunk].unsqueeze(-1)
            s = local_state(c, x.expand(c.shape[0], -1), "stratified")
            y = combined_residual(s, shear_stresses(s, closure(s))).numpy()
            ok = np.isfinite(y)
            out.append((ok[:, :-1] & ok[:, 1:] & (np.signbit(y[:, :-1]) != np.signbit(y[:, 1:]))).sum(1))
    return np.concatenate(out)


def main(n: int = 200_000) -> None:
    spec = importlib.util.spec_from_file_location("closure_nn.physics.holdup_roots_v0", "/tmp/holdup_roots_v0.py")
    old = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = old
    spec.loader.exec_module(old)
    cond = states(n, 1717)
    rows = []
    for name, closure in CLOSURES.items():
        n_new = find_roots(cond, closure).n_roots.numpy()
        _, n_old = old.find_all_roots(cond, closure)
        n_old = n_old.numpy()
        n_fine = fine_counts(cond, closure)
        cand = np.nonzero((n_fine != n_old) | (n_fine != n_new) | (n_fine >= 3))[0]
        print(name, "fine-grid 3+ roots:", int((n_fine >= 3).sum()), "old != fine:", int((n_old != n_fine).sum()),
              "new != fine:", int((n_new != n_fine).sum()), flush=True)
        for i in cand:
            ref = reference_roots(cond[i:i + 1], closure)
            row = {"closure": name, **{k: float(getattr(cond, k)[i]) for k in FIELD_NAMES},
                   "ref_n_roots": len(ref), "old_n_roots": int(n_old[i])}
            for k in range(3):
                row[f"ref_root_{k + 1}"] = ref[k] if k < len(ref) else float("nan")
            rows.append(row)
    out = Path(__file__).with_name("hard_root_states.csv")
    df = pd.DataFrame(rows)
    # keep the file small: every state the earlier solver got wrong + 200 others per closure (seeded)
    wrong = df.ref_n_roots != df.old_n_roots
    others = [g.sample(min(len(g), 200), random_state=0) for _, g in df[~wrong].groupby("closure")]
    df = pd.concat([df[wrong], *others]).sort_index()
    with out.open("w") as fh:
        fh.write("# Hard states for the holdup-root count; reference = fine-grid scan + scipy brentq "
                 "(tests/data/make_hard_states.py)\n")
        df.to_csv(fh, index=False, float_format="%.17g")
    print(out, len(df), "rows;", "old count wrong:", int((df.ref_n_roots != df.old_n_roots).sum()))


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 200_000)
