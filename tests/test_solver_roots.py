"""Holdup roots: no root pair missed silently, results equal to the earlier solver, chunking.

References:
* scipy.optimize.brentq (Brent 1973, *Algorithms for Minimization without Derivatives*, ch. 4)
  on sign changes of a fine scan of our combined momentum equation (Taitel & Dukler 1976,
  AIChE J. 22(1):47-55, eq. 3), one state at a time - independent of the vectorised root finder.
* tests/data/hard_root_states.csv: the same kind of reference, stored for hard states found by
  screening 2e5 random states (tests/data/make_hard_states.py).
* tests/data/solver_snapshot_v0.csv: a REGRESSION SNAPSHOT of our own solver as of commit
  cf8ff0b (not an external reference), tests/data/make_solver_snapshot.py.
"""
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import torch
from scipy.optimize import brentq, minimize_scalar

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.physics import holdup_roots
from closure_nn.physics.conditions import FIELD_NAMES, make_conditions
from closure_nn.physics.holdup_roots import find_roots, solve_separated
from closure_nn.physics.local_state import local_state
from closure_nn.physics.momentum import combined_residual, shear_stresses
from closure_nn.physics.vocabulary import CODE, STRATIFIED_SMOOTH, STRATIFIED_WAVY
from closure_nn.physics.point import FLAG_MULTIPLE_ROOTS, FLAG_ROOT_PAIR_UNRESOLVED, solve_points

DATA = Path(__file__).parent / "data"
CLOSURES = {"churchill_ah": BaselineClosure(wall="churchill", interface="andritsos_hanratty"),
            "churchill_smooth": BaselineClosure(wall="churchill", interface="smooth")}


def _scan_roots(cond1, closure, n: int = 20001) -> list[float]:
    """brentq on every sign change of our residual on an n-point scan of h/D (one state)."""
    def F(x):
        with torch.no_grad():
            s = local_state(cond1, torch.as_tensor(x, dtype=torch.float64), "stratified")
            return combined_residual(s, shear_stresses(s, closure(s))).numpy()
    xs = np.concatenate([np.logspace(-7, -3, 40, endpoint=False), np.linspace(1e-3, 1 - 1e-7, n)])
    ys = F(xs)
    f = lambda x: float(F(np.array([x]))[0])  # noqa: E731
    return [brentq(f, a, b, xtol=1e-14) for a, b, ya, yb in zip(xs[:-1], xs[1:], ys[:-1], ys[1:])
            if np.isfinite(ya) and np.isfinite(yb) and np.signbit(ya) != np.signbit(yb)]


def _read(name: str) -> pd.DataFrame:
    return pd.read_csv(DATA / name, comment="#")


def _conditions(df: pd.DataFrame):
    return make_conditions(**{k: df[k].to_numpy() for k in FIELD_NAMES})


def test_issue_example_thin_root_pair_is_found():
    # Issue 17: air-water, D 0.0402 m, vsl 0.0011 m/s, vsg 11.69 m/s, +2 deg, smooth interface:
    # roots near h/D 0.038, 0.050 and 0.46; the 40-point grid used to return only 0.46.
    closure = CLOSURES["churchill_smooth"]
    cond = make_conditions(vsl=[0.0011], vsg=[11.69], D=0.0402, theta=math.radians(2.0))
    ref = _scan_roots(cond, closure)
    assert len(ref) == 3 and ref[1] - ref[0] < 0.02
    sol = solve_separated(cond, closure)
    assert int(sol.n_roots[0]) == 3 and not bool(sol.unresolved[0])
    np.testing.assert_allclose(sol.roots[0].numpy(), ref, atol=1e-10)
    assert float(sol.frac[0]) == pytest.approx(ref[0], abs=1e-10)  # thinnest (Barnea & Taitel 1992)
    r = solve_points(cond, closure)
    assert int(r.flags[0]) & FLAG_MULTIPLE_ROOTS
    assert float(r.holdup[0]) < 0.05  # thin layer, not the ~0.47 of the thick root


@pytest.mark.parametrize("name", list(CLOSURES))
def test_root_counts_equal_the_fine_grid_reference_on_hard_states(name):
    df = _read("hard_root_states.csv")
    df = df[df.closure == name]
    # the set must contain states the 40-point grid without turn detection got wrong
    assert len(df) > 10
    cond = _conditions(df)
    rs = find_roots(cond, CLOSURES[name])
    n_ref = df.ref_n_roots.to_numpy()
    n_new = rs.n_roots.numpy()
    unres = rs.unresolved.numpy()
    # no silent miss: the count is right, or the state is flagged
    bad = (n_new != n_ref) & ~unres
    assert not bad.any(), df[bad][["vsl", "vsg", "D", "theta", "ref_n_roots"]].assign(ours=n_new[bad])
    ok = n_new == n_ref
    ref = df[["ref_root_1", "ref_root_2", "ref_root_3"]].to_numpy()
    got = rs.roots.numpy()
    np.testing.assert_allclose(got[ok], ref[ok], atol=1e-9, equal_nan=True)
    assert unres.sum() <= 0.05 * len(df)


def test_hard_state_set_holds_states_the_earlier_solver_missed():
    df = _read("hard_root_states.csv")
    assert int((df.ref_n_roots != df.old_n_roots).sum()) >= 1
    assert int((df.ref_n_roots >= 3).sum()) >= 10


@pytest.mark.parametrize("name", list(CLOSURES))
def test_results_equal_the_earlier_solver_where_its_root_count_was_right(name):
    snap = _read("solver_snapshot_v0.csv")
    snap = snap[snap.closure == name].reset_index(drop=True)
    cond = _conditions(snap)
    closure = CLOSURES[name]
    with torch.no_grad():
        sol = solve_separated(cond, closure)
        pts = solve_points(cond, closure)
    same = sol.n_roots.numpy() == snap.n_roots.to_numpy()
    assert same.mean() > 0.98
    rel = lambda a, b: np.abs(a - b) / np.maximum(np.abs(b), 1e-300)  # noqa: E731
    roots = snap[["root_1", "root_2", "root_3"]].to_numpy()
    np.testing.assert_allclose(sol.roots.numpy()[same], roots[same], atol=1e-10, rtol=0, equal_nan=True)
    np.testing.assert_allclose(sol.holdup.numpy()[same], snap.holdup.to_numpy()[same], atol=1e-10, rtol=0)
    assert rel(sol.pgrad.total.numpy()[same], snap.pgrad.to_numpy()[same]).max() < 1e-9
    # The map changed by design after the snapshot: in downward pipes a stratified layer is wavy
    # by the Froude criterion of Barnea, Shoham & Taitel (1982); smooth -> wavy there is expected,
    # every other pattern must be the snapshot's.
    got, want = pts.pattern.numpy(), snap.point_pattern.to_numpy()
    by_design = ((want == CODE[STRATIFIED_SMOOTH]) & (got == CODE[STRATIFIED_WAVY])
                 & (snap.theta.to_numpy() < 0))
    assert by_design.sum() <= 0.2 * len(snap)
    np.testing.assert_array_equal(got[same & ~by_design], want[same & ~by_design])
    np.testing.assert_allclose(pts.holdup.numpy()[same], snap.point_holdup.to_numpy()[same], atol=1e-10, rtol=0)
    assert rel(pts.pgrad.total.numpy()[same], snap.point_pgrad.to_numpy()[same]).max() < 1e-9
    np.testing.assert_array_equal(pts.flags.numpy()[same] & ~FLAG_ROOT_PAIR_UNRESOLVED,
                                  snap.point_flags.to_numpy()[same])
    # where the count changed, the new count is the independent scan's
    for i in np.nonzero(~same)[0]:
        assert len(_scan_roots(cond[i:i + 1], closure)) == int(sol.n_roots[i])


def test_results_do_not_depend_on_the_chunk_size(monkeypatch):
    snap = _read("solver_snapshot_v0.csv")
    cond = _conditions(snap)
    closure = CLOSURES["churchill_ah"]
    a = find_roots(cond, closure, chunk=4096)
    monkeypatch.setattr(holdup_roots, "REFINE_CHUNK", 29)  # brackets refined 29 at a time
    b = find_roots(cond, closure, chunk=97, grid_chunk=13)
    assert torch.equal(a.n_roots, b.n_roots) and torch.equal(a.unresolved, b.unresolved)
    np.testing.assert_allclose(a.roots.numpy(), b.roots.numpy(), atol=1e-11, rtol=0, equal_nan=True)


def test_states_at_a_tangency_are_flagged_or_counted_right():
    # Walk vsg to the fold where two roots of the issue-17 state meet and vanish. Independent of
    # our root finder: the local minimum of F in 0.1 < h/D < 0.4 by scipy's bounded Brent search
    # (Brent 1973, ch. 5) and brentq on vsg for the vsg at which that minimum is zero. Below the
    # fold there are three roots, above it one; the solver must count right or flag the state.
    closure = CLOSURES["churchill_smooth"]

    def cond(vsg):
        return make_conditions(vsl=[0.0011], vsg=[vsg], D=0.0402, theta=math.radians(2.0))

    def F(vsg, x):
        with torch.no_grad():
            s = local_state(cond(vsg), torch.tensor([x], dtype=torch.float64), "stratified")
            return float(combined_residual(s, shear_stresses(s, closure(s)))[0])

    def lowest(vsg):
        return minimize_scalar(lambda x: F(vsg, x), bounds=(0.1, 0.4), method="bounded", options={"xatol": 1e-12}).fun

    assert lowest(11.69) < 0 < lowest(30.0)
    fold = brentq(lowest, 11.69, 30.0, xtol=1e-14, rtol=1e-15)
    for d in (-1e-3, -1e-6, -1e-9, 1e-9, 1e-6, 1e-3):
        rs = find_roots(cond(fold * (1 + d)), closure)
        n_ref = 3 if d < 0 else 1
        assert int(rs.n_roots[0]) == n_ref or bool(rs.unresolved[0]), (d, rs)


def test_point_solver_in_chunks_equals_one_batch_with_gradients():
    # chunking is bookkeeping only: values and implicit gradients must not change
    closure = CLOSURES["churchill_ah"]
    vsl = torch.tensor([0.01, 0.02, 0.5, 0.0, 0.003], dtype=torch.float64, requires_grad=True)
    cond = make_conditions(vsl=vsl, vsg=[2.0, 20.0, 1.0, 5.0, 11.0], D=0.05, theta=math.radians(1.0))
    one = solve_points(cond, closure, entrainment="ishii_mishima")
    (g_one,) = torch.autograd.grad(torch.nan_to_num(one.holdup).sum(), vsl)
    parts = solve_points(cond, closure, entrainment="ishii_mishima", chunk=2)
    (g_parts,) = torch.autograd.grad(torch.nan_to_num(parts.holdup).sum(), vsl)
    for a, b in ((one.holdup, parts.holdup), (one.pgrad.total, parts.pgrad.total), (g_one, g_parts)):
        np.testing.assert_allclose(a.detach().numpy(), b.detach().numpy(), rtol=1e-12, atol=0, equal_nan=True)
    assert torch.equal(one.pattern, parts.pattern) and torch.equal(one.flags, parts.flags)
    assert float(g_one.abs().sum()) > 0
    empty = find_roots(make_conditions(vsl=torch.zeros(0), vsg=torch.zeros(0), D=0.05), closure)
    assert empty.roots.shape == (0, 3)
