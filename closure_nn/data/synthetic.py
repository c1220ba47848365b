r"""Synthetic training sets: Latin-hypercube points of a design space, solved with a closure.

Steps (:func:`synthesize`):

1. :func:`lhs_unit` draws ``n`` points of the unit hypercube with
   :class:`scipy.stats.qmc.LatinHypercube` (scrambled, seeded; the same seed gives the same
   points). Latin hypercube sampling: McKay, Beckman & Conover (1979), Technometrics
   21(2):239-245 -- each of the ``n`` equal-probability intervals of every dimension holds
   exactly one point.
2. :meth:`closure_nn.data.design_space.DesignSpace.sample_unit` maps them through the marginal
   laws to inputs in SI (rhog from p, T, M_g, Z where the design gives a gas state).
3. :func:`solve_table` solves the points with :func:`closure_nn.physics.point.solve_points` in
   chunks (``chunk`` rows at a time, progress bar from ``tqdm``), under ``torch.no_grad``.
4. :func:`solution_report` counts points per flow pattern and the solver flags: no
   separated-flow (stratified) root, several roots, annular rows without a film root, holdup
   left NaN.

The table has the schema columns (:mod:`closure_nn.data.schema`) in canonical order: the
inputs, the gas state where sampled, holdup, pgrad, pattern, source = ``'synthetic'``,
campaign = the design name, run_id = ``<design>-s<seed>-<row>``, n_roots.
"""
from __future__ import annotations

import math
import time
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd
import torch
from scipy.stats import qmc
from tqdm import tqdm

from ..physics.point import FLAG_ANNULAR_NO_ROOT, FLAG_MULTIPLE_ROOTS, FLAG_NO_SEPARATED_ROOT, solve_points
from ..physics.vocabulary import PATTERNS
from .design_space import DesignSpace
from .schema import INPUTS, ordered_columns, to_conditions

DEFAULT_CHUNK = 20_000


def lhs_unit(n: int, d: int, seed: int) -> np.ndarray:
    """``n`` Latin-hypercube points in ``[0, 1)^d``, deterministic by ``seed``.

    Uses :class:`scipy.stats.qmc.LatinHypercube` (scrambled: a random point inside each cell).

    >>> u = lhs_unit(5, 2, seed=0)
    >>> u.shape, sorted(np.floor(u[:, 0] * 5).astype(int).tolist())
    ((5, 2), [0, 1, 2, 3, 4])
    """
    if n < 1:
        raise ValueError(f"n must be >= 1, got {n}")
    if d == 0:
        return np.zeros((n, 0))
    return qmc.LatinHypercube(d=d, rng=np.random.default_rng(seed)).random(n)


def sample_design(space: DesignSpace, n: int, seed: int) -> pd.DataFrame:
    """Inputs of ``n`` Latin-hypercube points of ``space`` in SI (no targets yet)."""
    return space.sample_unit(lhs_unit(n, len(space.dimensions), seed))


def solve_table(df: pd.DataFrame, closure, solver: Mapping | None = None, chunk: int = DEFAULT_CHUNK,
                progress: bool = True, desc: str = "solving") -> tuple[pd.DataFrame, np.ndarray]:
    """Solve every row of an SI input table with ``closure``, ``chunk`` rows at a time.

    ``solver`` holds keyword arguments of :func:`~closure_nn.physics.point.solve_points`
    (conf/solver/*.yaml). Returns ``(targets, flags)``: a frame with holdup [-], pgrad [Pa/m],
    pattern and n_roots (index of ``df``), and the solver bit flags ``(n,)`` int64.
    Raises :class:`~closure_nn.physics.checks.InputError` for out-of-range inputs.
    """
    if chunk < 1:
        raise ValueError(f"chunk must be >= 1, got {chunk}")
    cond = to_conditions(df, check=True)
    n = len(df)
    kw = dict(solver or {})
    parts: dict[str, list[np.ndarray]] = {k: [] for k in ("holdup", "pgrad", "pattern", "n_roots", "flags")}
    starts = range(0, n, chunk)
    with torch.no_grad():
        for i in tqdm(starts, desc=desc, unit="chunk", disable=not progress, total=math.ceil(n / chunk)):
            cols = solve_points(cond[i:i + chunk], closure, **kw).to_columns()
            for k in parts:
                parts[k].append(cols[k])
    out = pd.DataFrame({
        "holdup": np.concatenate(parts["holdup"]), "pgrad": np.concatenate(parts["pgrad"]),
        "pattern": pd.Series(np.concatenate(parts["pattern"]), dtype="str"),
        "n_roots": pd.array(np.concatenate(parts["n_roots"]), dtype="Int64"),
    })
    out.index = df.index
    return out, np.concatenate(parts["flags"]).astype(np.int64)


def solution_report(pattern: pd.Series, flags: np.ndarray, holdup: np.ndarray) -> dict:
    """Counts per flow pattern (every vocabulary label, zeros included) and per solver flag.

    >>> r = solution_report(pd.Series(["annular", "intermittent"]), np.array([0, 3]), np.array([0.1, np.nan]))
    >>> r["patterns"]["annular"], r["no_separated_root"], r["several_roots"], r["holdup_nan"]
    (1, 1, 1, 1)
    """
    flags = np.asarray(flags, dtype=np.int64)
    counts = {p: int((pattern == p).sum()) for p in PATTERNS}
    other = int(len(pattern) - sum(counts.values()))
    rep = {
        "n": int(len(pattern)),
        "patterns": counts,
        "no_separated_root": int(((flags & FLAG_NO_SEPARATED_ROOT) != 0).sum()),
        "several_roots": int(((flags & FLAG_MULTIPLE_ROOTS) != 0).sum()),
        "annular_no_film_root": int(((flags & FLAG_ANNULAR_NO_ROOT) != 0).sum()),
        "holdup_nan": int(np.isnan(np.asarray(holdup, dtype=np.float64)).sum()),
    }
    if other:
        rep["patterns"]["(none)"] = other
    return rep


@dataclass
class SyntheticSet:
    """A synthetic table (SI, schema columns) and its report (see :func:`solution_report`)."""

    table: pd.DataFrame
    report: dict

    def report_text(self) -> str:
        r = self.report
        lines = [f"synthetic set {r['design']!r}: {r['n']} points, seed {r['seed']}, closure {r['closure']}",
                 "points per flow pattern:"]
        lines += [f"  {p:<20s} {c:8d}  ({100 * c / max(r['n'], 1):5.1f} %)" for p, c in r["patterns"].items() if c]
        lines.append(f"no separated-flow (stratified) root: {r['no_separated_root']}")
        lines.append(f"several stratified roots:            {r['several_roots']}")
        lines.append(f"annular without film root:           {r['annular_no_film_root']}")
        lines.append(f"holdup not defined (NaN):            {r['holdup_nan']}")
        lines.append(f"time: {r['seconds']:.1f} s ({r['points_per_s']:.0f} points/s)")
        return "\n".join(lines)


def synthesize(space: DesignSpace, n: int, seed: int, closure, solver: Mapping | None = None,
               chunk: int = DEFAULT_CHUNK, progress: bool = True) -> SyntheticSet:
    """Sample ``n`` points of ``space`` (seeded Latin hypercube) and solve them with ``closure``.

    >>> from closure_nn.closures.baseline import BaselineClosure
    >>> from closure_nn.data.design_space import parse_design
    >>> d = parse_design({"name": "tiny", "variables": {"vsl": {"law": "log_uniform", "low": 0.01, "high": 0.5},
    ...     "vsg": {"law": "log_uniform", "low": 0.5, "high": 20}, "D": 0.05, "theta": 0, "roughness": 0,
    ...     "rhol": 998, "rhog": 1.2, "mul": 1e-3, "mug": 1.8e-5, "sigma": 0.072}})
    >>> s = synthesize(d, 50, seed=0, closure=BaselineClosure(), progress=False)
    >>> len(s.table), sum(s.report["patterns"].values()), s.table["source"].iloc[0], s.table["run_id"].iloc[0]
    (50, 50, 'synthetic', 'tiny-s0-01')
    """
    t0 = time.perf_counter()
    inputs = sample_design(space, n, seed)
    targets, flags = solve_table(inputs, closure, solver, chunk=chunk, progress=progress,
                                 desc=f"synth {space.name}")
    table = pd.concat([inputs.drop(columns=["fluid"], errors="ignore"), targets], axis=1)
    width = len(str(n))
    table["source"] = pd.Series(["synthetic"] * n, dtype="str")
    table["campaign"] = pd.Series([space.name] * n, dtype="str")
    table["run_id"] = pd.Series([f"{space.name}-s{seed}-{i + 1:0{width}d}" for i in range(n)], dtype="str")
    table = table[ordered_columns(table.columns)]
    seconds = time.perf_counter() - t0
    report = {"design": space.name, "seed": int(seed), "closure": getattr(closure, "label", type(closure).__name__),
              **solution_report(table["pattern"], flags, table["holdup"].to_numpy(np.float64)),
              "seconds": seconds, "points_per_s": n / max(seconds, 1e-12),
              "fluids": ({f: int((inputs["fluid"] == f).sum()) for f in space.fluids} if "fluid" in inputs else {}),
              "inputs_si_min": {c: float(table[c].min()) for c in INPUTS},
              "inputs_si_max": {c: float(table[c].max()) for c in INPUTS}}
    return SyntheticSet(table=table, report=report)
