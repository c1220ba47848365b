r"""March the steady pressure along a line, all segments at once, with step-halving control.

Equation (steady, acceleration neglected, as in the physics core):

.. math:: \frac{dp}{ds} = -g(p, s),\qquad g = \mathrm{pgrad}(p, T(s), \theta(s), D(s);\ \text{closure})

**Step** (per segment j of length h, Heun's predictor-corrector, second order; e.g.
Hairer, Norsett & Wanner, *Solving ODEs I*, 2nd ed., Sec. II.1, from memory):

.. math::
    p^* = p_j - h\,g_j(p_j, s_j),\qquad
    p_{j+1} = p_j - \tfrac{h}{2}\left[g_j(p_j, s_j) + g_j(p^*, s_{j+1})\right]

Both evaluations use the inclination, diameter and roughness of segment j, so the kinks of the
profile sit exactly on stations.

**Sweeps** (vectorisation, our own arrangement). The recurrence above is sequential, but each
station's pressure changes only a little from one guess to the next. We therefore evaluate g at
*all* segments in one batched point solve, then update every pressure at once with a
quasi-Newton sweep: with increments Phi_j = [g_j(p_j) + g_j(p*_j)]/2, slopes
sigma_j ~ dPhi_j/dp_j (secant between sweeps; first guess -friction/p, the gas-flow scaling),

.. math:: d_{j+1} = (1 - h_j\sigma_j)\,d_j + r_j,\qquad r_j = p_j - h_j\Phi_j - p_{j+1}

for the pressure corrections d (a linear scan, cumulative products). The predictor uses the
previous sweep's g, so both evaluations of a sweep share one batch. At convergence
(max |d| < ``sweep_tol``) the pressures satisfy the Heun recurrence exactly; the scan only
speeds up getting there.

**Outlet pressure** (shooting). With the outlet pressure given, the inlet pressure is the root
of the scalar equation p_out(p_in) - p_target = 0. ``shooting='newton'`` (default) takes a
Newton step on p_in in every sweep with the tangent dp_out/dp_in = prod_j(1 - h_j sigma_j) of the
scan; ``shooting='brentq'`` runs complete inlet-pressure marches inside scipy's brentq
(Brent 1973) on a bracket. Both stop when |p_out - p_target| < ``outlet_tol``.

**Step halving.** After convergence every segment is also stepped as two half steps from the
same p_j; for a second-order method the one-step error is about 4/3 of the difference
(Richardson). Segments whose estimate exceeds ``tol * h / L`` (so that the estimates add up to
at most ``tol`` over the line) are halved, up to ``max_halvings`` times, and the march repeats
from the interpolated solution.

**Pattern switches.** The point model is discontinuous where the flow pattern changes (e.g.
stratified -> annular at a pressure-dependent boundary), so p_out(p_in) can jump by
~ h * (jump of pgrad) when one station's pattern flips. If the outlet target falls inside such a
jump no inlet pressure meets it exactly: the shooting reports the closer side
(``outlet_target_in_pattern_jump``, ``outlet_jump_Pa``, ``outlet_miss_Pa`` in the diagnostics)
and halves the segments that flipped, up to ``max_jump_halvings`` times, which shrinks the
jump. Segments that contain a switch rarely meet the step tolerance; they are halved to
``max_halvings`` (locating the switch) and counted in ``segments_over_step_tol``.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import torch
from scipy.optimize import brentq

from ..physics.checks import InputError
from .local import LocalFlow, LocalSolver, Mesh

#: lowest pressure the march accepts [Pa]; below it the line cannot pass the rates
P_MIN = 1.0e4


class _Jump(Exception):
    """Internal: the outlet target lies in a jump of p_out(p_in)."""


class LineError(InputError):
    """The march cannot produce a result (named closure, station and cause)."""


@dataclass
class MarchSettings:
    """Step control and shooting settings (``march:`` in conf/line.yaml)."""

    tol: float = 100.0  # Pa: target for the summed step-halving error estimates over the line
    max_halvings: int = 6  # halvings of a profile segment
    max_jump_halvings: int = 3  # halvings where a pattern switch makes p_out(p_in) jump (outlet mode)
    sweep_tol: float = 0.01  # Pa: convergence of the sweeps
    max_sweeps: int = 60
    outlet_tol: float = 1.0  # Pa: |p_out - target| in outlet-pressure mode
    shooting: str = "newton"  # newton | brentq
    max_stations: int = 200_000
    p_min: float = P_MIN


@dataclass
class MarchResult:
    """One closure's march: station arrays ``(n+1,)``, segment arrays ``(n,)`` (numpy, SI)."""

    mesh: Mesh
    p: np.ndarray  # station pressure [Pa]
    start: dict  # LocalFlow fields at the start of each segment, numpy (n,)
    end: dict  # ... at its end (predictor pressure), numpy (n,)
    step_error: np.ndarray  # (n,) step-halving estimate [Pa] (NaN where not checked)
    diagnostics: dict = field(default_factory=dict)
    features: np.ndarray | None = None  # (n+1, n_features) at the station states

    @property
    def h(self) -> np.ndarray:
        return self.mesh.h.numpy()


def _np(d: dict) -> dict:
    return {k: v.numpy() for k, v in d.items()}


class Marcher:
    """Sweep march of one closure on a line (see module docstring)."""

    def __init__(self, local: LocalSolver, closure, settings: MarchSettings, name: str = "closure") -> None:
        self.local, self.closure, self.set, self.name = local, closure, settings, name
        self.n_evals = 0

    # -- one batched evaluation of the start and predictor points of every segment
    def _evaluate(self, mesh: Mesh, p: torch.Tensor, q: torch.Tensor) -> tuple[LocalFlow, int]:
        n = mesh.n
        seg = torch.cat([torch.arange(n), torch.arange(n)])
        t = torch.cat([torch.zeros(n), torch.ones(n)]).double()
        flow = self.local(self.closure, mesh, seg, t, torch.cat([p[:-1], q]))
        self.n_evals += 2 * n
        bad = ~torch.isfinite(flow.pgrad)
        if bool(bad.any()):
            i = int(bad.nonzero()[0])
            j = i % n
            where = "start" if i < n else "end"
            raise LineError(f"closure {self.name!r}: no solution at the {where} of segment {j} "
                            f"(distance {float(mesh.s[j]):.1f}-{float(mesh.s[j + 1]):.1f} m, p = "
                            f"{float(torch.cat([p[:-1], q])[i]) / 1e5:.3f} bar, "
                            f"flags {int(flow.flags[i])}): the point solver found no equilibrium")
        return flow, n

    def sweeps(self, mesh: Mesh, p: torch.Tensor, outlet: float | None, slope: torch.Tensor | None = None,
               g_prev: torch.Tensor | None = None) -> dict:
        """Run sweeps from the guess ``p`` (n+1,) until converged. ``outlet`` = target outlet
        pressure (Newton shooting on the inlet pressure) or None (inlet pressure = p[0])."""
        st = self.set
        h = mesh.h
        p = p.clone()
        g_s_prev = g_prev
        phi_prev = p_prev = None
        sigma = slope
        floor_before = False
        best, since_best = math.inf, 0
        for k in range(1, st.max_sweeps + 1):
            # predictor from the previous sweep's start gradients (first sweep: p itself)
            q = p[:-1] if g_s_prev is None else p[:-1] - h * g_s_prev
            q = q.clamp_min(st.p_min)
            flow, n = self._evaluate(mesh, p, q)
            g_s, g_e = flow.pgrad[:n], flow.pgrad[n:]
            phi = 0.5 * (g_s + g_e)
            # slopes dPhi/dp: secant between sweeps, else the gas-friction scaling -friction/p
            bound = 4 * (flow.friction[:n].abs() + flow.gravity[:n].abs()) / p[:-1]
            if sigma is None:
                sigma = -flow.friction[:n] / p[:-1]
            if phi_prev is not None:
                dp = p[:-1] - p_prev[:-1]
                ok = dp.abs() > 1e-7 * p[:-1]
                sigma = torch.where(ok, (phi - phi_prev) / torch.where(ok, dp, 1.0), sigma)
            sigma = torch.maximum(torch.minimum(sigma, bound), -bound)
            a = (1 - h * sigma).clamp(0.8, 1.2)
            r = p[:-1] - h * phi - p[1:]
            logA = torch.cat([torch.zeros(1, dtype=torch.float64), torch.cumsum(torch.log(a), 0)])
            A = torch.exp(logA.clamp(-60.0, 60.0))  # A_j = prod_{m<j} a_m
            c = A * torch.cat([torch.zeros(1, dtype=torch.float64), torch.cumsum(r / A[1:], 0)])
            if outlet is None:
                d0 = 0.0
            else:
                # Newton step on p_in: the outlet the current inlet pressure gives is p_N + c_N
                d0 = float((outlet - p[-1] - c[-1]) / A[-1])
            d = A * d0 + c
            p_prev, phi_prev, g_s_prev = p, phi, g_s
            p = (p + d).clamp_min(st.p_min)
            change = float(d.abs().max())
            miss = 0.0 if outlet is None else abs(float(p[-1]) - outlet)
            if change < st.sweep_tol and miss < st.outlet_tol:
                break
            floor = bool((p <= st.p_min).any())
            if not math.isfinite(change) or (floor and floor_before):
                break  # the line cannot pass the rates from this pressure (or diverged)
            floor_before = floor
            if change < 0.5 * best:
                best, since_best = change, 0
            else:
                since_best += 1
            if outlet is not None and since_best >= 4:
                break  # stalled: the outlet target sits in a jump of p_out(p_in) (pattern switch)
        finite = bool(torch.isfinite(p).all())
        if not finite:  # diverged: only seen when the pressure collapses; report it as the floor
            p = torch.where(torch.isfinite(p), p, st.p_min).clamp_min(st.p_min)
        out = {"p": p, "flow": flow, "n": n, "sweeps": k, "converged": change < st.sweep_tol and miss < st.outlet_tol,
               "last_change": change, "slope": sigma, "g_s": g_s, "tangent": float(A[-1]),
               "floor": not finite or bool((p <= st.p_min * (1 + 1e-12)).any()),
               "stalled": outlet is not None and since_best >= 4}
        return out

    def _half_steps(self, mesh: Mesh, p: torch.Tensor, g_s: torch.Tensor, seg: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
        """Two Heun half steps over segments ``seg`` from p_j: (midpoint p, end p)."""
        h = mesh.h[seg]
        pj, k1 = p[seg], g_s[seg]
        lo = self.set.p_min
        k2 = self.local(self.closure, mesh, seg, torch.full_like(h, 0.5), (pj - 0.5 * h * k1).clamp_min(lo)).pgrad
        pm = (pj - 0.25 * h * (k1 + k2)).clamp_min(lo)
        k3 = self.local(self.closure, mesh, seg, torch.full_like(h, 0.5), pm).pgrad
        k4 = self.local(self.closure, mesh, seg, torch.ones_like(h), (pm - 0.5 * h * k3).clamp_min(lo)).pgrad
        self.n_evals += 3 * len(seg)
        return pm, (pm - 0.25 * h * (k3 + k4)).clamp_min(lo)

    def _solve(self, mesh, p, outlet, slope=None, g_prev=None) -> dict:
        if self.set.shooting not in ("newton", "brentq"):
            raise InputError(f"march.shooting = {self.set.shooting!r}; expected newton or brentq")
        tangent, k = 1.0, 0
        if outlet is None or self.set.shooting == "newton":
            out = self.sweeps(mesh, p, outlet, slope, g_prev)
            if outlet is None or out["converged"]:
                return out
            # Newton shooting did not settle (pattern switch or pressure floor): brentq on a bracket
            tangent, k, p = out["tangent"], out["sweeps"], out["p"]
        out = self._brentq(mesh, p, outlet, tangent)
        out["sweeps"] += k
        out["shooting"] = "brentq" if k == 0 else "newton+brentq"
        return out

    def _brentq(self, mesh: Mesh, p: torch.Tensor, outlet: float, tangent: float = 1.0) -> dict:
        """Inlet pressure by scipy brentq (Brent 1973) on complete inlet-pressure marches.

        If p_out(p_in) jumps over the target (a pattern switch at one station), brentq closes
        in on the jump; the closer side is returned and ``stalled`` is set."""
        st = self.set
        cache: dict[float, tuple[float, dict]] = {}
        guess = {"p": p}
        count = {"sweeps": 0}
        slope_ref = {"s": math.inf}

        def f(p_in: float) -> float:
            if p_in in cache:
                return cache[p_in][0]
            start = (guess["p"] - guess["p"][0] + p_in).clamp_min(st.p_min)
            out = self.sweeps(mesh, start, None, guess.get("slope"), guess.get("g_s"))
            count["sweeps"] += out["sweeps"]
            val = float(out["p"][-1]) - outlet
            cache[p_in] = (val, out)
            if not out["floor"]:
                guess.update(p=out["p"], slope=out["slope"], g_s=out["g_s"])
            # a jump of p_out(p_in) (pattern switch at one station): stop once it is isolated
            below = [x for x in cache if cache[x][0] < 0]
            above = [x for x in cache if cache[x][0] > 0]
            if len(cache) >= 3 and below and above:
                xa, xb = max(below), min(above)
                gap = cache[xb][0] - cache[xa][0]
                if 0 < xb - xa and gap > 5 * slope_ref["s"] * (xb - xa) and gap > st.outlet_tol:
                    raise _Jump()
            return val

        # bracket: Newton-sized first step from the guess, doubled until the sign changes
        x_a = float(p[0])
        f_a = f(x_a)
        step = -f_a / max(tangent, 0.2)
        step = math.copysign(max(abs(step), 10 * st.outlet_tol), step)
        x_b = max(x_a + step, st.p_min)
        f_b = f(x_b)
        tries = 0
        while f_a * f_b > 0:
            tries += 1
            if tries > 40 or (x_b <= st.p_min and f_b > 0):
                raise LineError(f"closure {self.name!r}: no inlet pressure between {min(x_a, x_b) / 1e5:.3f} and "
                                f"{max(x_a, x_b) / 1e5:.3f} bar gives the outlet pressure {outlet / 1e5:.3f} bar")
            x_a, f_a = x_b, f_b
            step *= 2
            x_b = max(x_a + step, st.p_min)
            f_b = f(x_b)
        (lo, f_lo), (hi, f_hi) = sorted([(x_a, f_a), (x_b, f_b)])
        slope = max(1e-3, abs((f_hi - f_lo) / (hi - lo)))
        slope_ref["s"] = slope
        if f_lo * f_hi < 0:
            try:
                brentq(f, lo, hi, xtol=st.outlet_tol / slope / 4, rtol=1e-15, maxiter=100)
            except _Jump:
                pass
        p_best = min(cache, key=lambda x: abs(cache[x][0]))
        val, out = cache[p_best]
        out = dict(out)
        out["sweeps"] = count["sweeps"]
        out["brentq_evals"] = len(cache)
        out["converged"] = out["converged"] and abs(val) < st.outlet_tol
        out["stalled"] = abs(val) >= st.outlet_tol
        if out["stalled"]:  # locate the jump: segments whose pattern differs on its two sides
            below = [x for x in cache if cache[x][0] < 0]
            above = [x for x in cache if cache[x][0] > 0]
            if below and above:
                a, b = cache[max(below)], cache[min(above)]
                n = a[1]["n"]
                pa, pb = a[1]["flow"].pattern, b[1]["flow"].pattern
                out["jump_segments"] = (pa[:n] != pb[:n]) | (pa[n:] != pb[n:])
                out["jump_Pa"] = b[0] - a[0]
        return out

    def _check_floor(self, mesh: Mesh, out: dict, p_boundary: float, boundary: str) -> None:
        if not out["floor"]:
            return
        j = int((out["p"] <= self.set.p_min).nonzero()[0])
        raise LineError(
            f"closure {self.name!r}: with the {boundary} pressure {p_boundary / 1e5:.3f} bar the pressure falls to "
            f"the floor p_min = {self.set.p_min / 1e5:g} bar at distance {float(mesh.s[j]) / 1e3:.3f} km: the line "
            "cannot pass these rates (raise the pressure, lower the rates or use a larger diameter)")

    def run(self, mesh: Mesh, p_boundary: float, boundary: str) -> MarchResult:
        """March with step control. ``boundary`` 'inlet' or 'outlet' names where p_boundary holds."""
        st = self.set
        outlet = p_boundary if boundary == "outlet" else None
        p = torch.full((mesh.n + 1,), float(p_boundary), dtype=torch.float64)
        total_len = float(mesh.s[-1] - mesh.s[0])
        sweeps_total, rounds = 0, 0
        # shoot on the profile mesh; refine with the inlet pressure held (cheap warm sweeps);
        # shoot again on the refined mesh (and halve segments whose pattern flip makes p_out jump)
        out = self._solve(mesh, p, outlet)
        shot = True
        sweeps_total += out["sweeps"]
        self._check_floor(mesh, out, p_boundary, boundary)
        check = torch.ones(mesh.n, dtype=torch.bool)
        err = torch.full((mesh.n,), float("nan"), dtype=torch.float64)
        while True:
            rounds += 1
            seg = check.nonzero(as_tuple=True)[0]
            p_m = torch.full((mesh.n,), float("nan"), dtype=torch.float64)
            if len(seg):
                pm, pe = self._half_steps(mesh, out["p"], out["g_s"], seg)
                full = out["p"][seg + 1]
                err[seg] = 4.0 / 3.0 * (full - pe).abs()
                p_m[seg] = pm
            tol_seg = st.tol * mesh.h / total_len
            fail = (err > tol_seg) & (mesh.level < st.max_halvings)
            if shot and "jump_segments" in out:  # a pattern flip makes p_out(p_in) jump: halve there
                fail = fail | (out["jump_segments"] & (mesh.level < st.max_jump_halvings))
            if not bool(fail.any()) or mesh.n + int(fail.sum()) + 1 > st.max_stations:
                if outlet is not None and not shot:
                    out = self._solve(mesh, out["p"], outlet, out["slope"], out["g_s"])
                    sweeps_total += out["sweeps"]
                    self._check_floor(mesh, out, p_boundary, boundary)
                    shot, check = True, torch.zeros(mesh.n, dtype=torch.bool)
                    continue
                break
            new, old_idx = mesh.split(fail)
            p_new = torch.where(old_idx >= 0, out["p"][old_idx.clamp_min(0)], 0.0)
            # midpoints take the half-step value of their parent segment
            parent = torch.repeat_interleave(torch.arange(mesh.n), 1 + fail.long())
            mids = (old_idx < 0).nonzero(as_tuple=True)[0]
            pm_par = p_m[parent[mids]]
            lin = 0.5 * (out["p"][parent[mids]] + out["p"][parent[mids] + 1])
            p_new[mids] = torch.where(torch.isfinite(pm_par), pm_par, lin)
            kids_of_fail = fail[parent]
            err = torch.where(kids_of_fail, float("nan"), err[parent])
            mesh, check = new, kids_of_fail
            out = self.sweeps(mesh, p_new, None, out["slope"][parent], out["g_s"][parent])
            shot = outlet is None
            sweeps_total += out["sweeps"]
            self._check_floor(mesh, out, p_boundary, boundary)
        n = out["n"]
        flow = out["flow"]
        start, end = _np(flow.take(slice(0, n))), _np(flow.take(slice(n, 2 * n)))
        tol_seg = (st.tol * mesh.h / total_len).numpy()
        e = err.numpy()
        diag = {
            "converged": out["converged"], "sweeps": sweeps_total, "refinement_rounds": rounds,
            "last_sweep_change_Pa": out["last_change"], "stations": mesh.n + 1,
            "stations_inserted": int(mesh.inserted.sum()), "max_halvings_used": int(mesh.level.max()) if mesh.n else 0,
            "step_error_sum_Pa": float(np.nansum(e)), "step_tol_Pa": st.tol,
            "segments_over_step_tol": int(np.sum(e > tol_seg)), "point_evaluations": self.n_evals,
            "pressure_floor_reached": out["floor"], "tangent_dpout_dpin": out["tangent"],
        }
        if outlet is not None:
            diag.update({"shooting": out.get("shooting", st.shooting), "outlet_target_Pa": outlet,
                         "outlet_miss_Pa": float(out["p"][-1]) - outlet,
                         "outlet_target_in_pattern_jump": bool(out.get("stalled", False)),
                         "outlet_jump_Pa": float(out.get("jump_Pa", 0.0))})
            if "brentq_evals" in out:
                diag["brentq_marches"] = out["brentq_evals"]
        res = MarchResult(mesh=mesh, p=out["p"].numpy(), start=start, end=end, step_error=e, diagnostics=diag)
        # features at the station states: segment starts, and the end of the last segment
        if callable(getattr(self.closure, "in_domain", None)):
            x = self.local.features(flow)
            idx = torch.cat([torch.arange(n), torch.tensor([2 * n - 1])])
            res.features = x[idx].numpy()
        return res


def march_line(line, closure, local: LocalSolver, settings: MarchSettings | None = None, name: str = "closure") -> MarchResult:
    """March ``line`` (a :class:`~closure_nn.line.definition.LineDefinition`) with ``closure``."""
    m = Marcher(local, closure, settings or MarchSettings(), name)
    return m.run(Mesh.from_line(line), line.p_boundary, line.boundary)
