"""The deliberately corrupted rows of the INVENTED demo campaign (:mod:`closure_nn.data.demo_campaign`).

Each corruption is a realistic slip that still passes validation (kinds and counts in
:data:`closure_nn.data.demo_campaign.CORRUPTIONS`): two values swapped when the sheet was typed
up, pgrad typed in mbar/m under a Pa/m header, an inclination sign slip, a holdup copied from
another run, a gas rate read in ft/s. :func:`corrupt` applies them to the sheet's values in place, drawing from the
generator's random stream in a fixed order (the demo files depend on it, byte for byte).
"""
from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
import pandas as pd

FT = 0.3048  # m per international foot (exact)


class _Corrupter:
    """The sheet's values, the rows already used by a corruption, and the list written so far.

    ``H`` and ``P`` are the holdup and pgrad values as they were before any corruption.
    """

    def __init__(self, vals: pd.DataFrame, truth: pd.DataFrame, sheet: pd.DataFrame, rng: np.random.Generator):
        self.vals, self.truth, self.sheet, self.rng = vals, truth, sheet, rng
        self.n = len(vals)
        self.used = np.zeros(self.n, dtype=bool)
        self.run_id = sheet["run_id"].to_numpy()
        self.series = (sheet["campaign"] + sheet["D [mm]"] + sheet["theta [deg]"]).to_numpy()
        self.H, self.P = vals["holdup"].to_numpy(), vals["pgrad"].to_numpy()
        self.out: list[dict] = []

    def note(self, i: int, kind: str, description: str) -> None:
        self.out.append(dict(run_id=self.run_id[i], kind=kind, description=description))

    def pick(self, mask: np.ndarray) -> int:
        """A random unused row where ``mask`` holds; marks it used."""
        idx = np.flatnonzero(mask & ~self.used)
        if not len(idx):
            raise RuntimeError("demo generator: no candidate row left for a corruption")
        i = int(idx[self.rng.integers(len(idx))])
        self.used[i] = True
        return i

    def partner(self, i: int, col: np.ndarray, ok: Callable) -> int:
        """A later row of the same test series (two lines of the sheet) whose value differs clearly."""
        cand = np.flatnonzero((self.series == self.series[i]) & ~self.used & np.isfinite(col) & ok(col[i], col))
        if not len(cand):
            return -1
        j = int(cand[self.rng.integers(len(cand))])
        self.used[j] = True
        return j

    def swap(self, col: str, n_pairs: int, ok: Callable, what: str, unit: str) -> None:
        """Swap ``col`` (and its sd) between ``n_pairs`` pairs of rows of one test series."""
        done = 0
        x = self.vals[col].to_numpy()
        for _ in range(200):
            if done == n_pairs:
                return
            i = self.pick(np.isfinite(x))
            j = self.partner(i, x, ok)
            if j < 0:
                continue
            for a, b in ((i, j), (j, i)):
                self.note(a, f"swap_{col}", f"{what} of runs {self.run_id[i]} and {self.run_id[j]} swapped when the "
                                            f"sheet was typed up: {x[a]:.4g}{unit} written {x[b]:.4g}{unit}")
            pair = [col, f"{col}_sd"]
            row_i, row_j = self.vals.loc[i, pair].to_numpy(copy=True), self.vals.loc[j, pair].to_numpy(copy=True)
            self.vals.loc[i, pair], self.vals.loc[j, pair] = row_j, row_i
            x = self.vals[col].to_numpy()
            done += 1
        raise RuntimeError(f"demo generator: no pair found for swap_{col}")

    def pgrad_mbar_as_pa(self, count: int, pgrad_sd_rel: float, pgrad_sd_abs: float) -> None:
        """pgrad typed in mbar/m under the Pa/m header; the sd is computed from the value as written."""
        for _ in range(count):
            i = self.pick(np.isfinite(self.P) & (self.P > 300.0))
            old = self.vals.loc[i, "pgrad"]
            self.vals.loc[i, "pgrad"] = old / 100.0
            self.vals.loc[i, "pgrad_sd"] = math.sqrt((pgrad_sd_rel * old / 100.0) ** 2 + pgrad_sd_abs**2)
            self.note(i, "pgrad_mbar_as_pa", f"pgrad typed in mbar/m under the Pa/m header: {old:.4g} Pa/m written "
                                             f"{old / 100:.4g} (pgrad_sd computed from the written value)")

    def theta_sign(self, count: int) -> None:
        """Inclination sign slips, on rows at 3-5 deg whose pgrad is mostly gravity."""
        theta = self.vals["theta"].to_numpy()
        grav = self.truth["pgrad_gravity"].to_numpy()
        heavy = np.isfinite(self.P) & (np.abs(theta) >= 3) & (np.abs(theta) <= 5) \
            & (np.abs(grav) > 0.7 * np.abs(self.truth["pgrad"].to_numpy())) & (np.abs(self.P) > 150.0)
        for _ in range(count):
            i = self.pick(heavy)
            th = self.vals.loc[i, "theta"]
            self.vals.loc[i, "theta"] = -th
            self.note(i, "theta_sign", f"inclination sign slip: the run was at {th:+.1f} deg, written {-th:+.1f} deg")

    def holdup_wrong_run(self, count: int) -> None:
        """A holdup copied from another run of the same campaign that differs by more than 0.25."""
        H, campaign = self.H, self.sheet["campaign"].to_numpy()
        for _ in range(count):
            while True:
                i = self.pick(np.isfinite(H))
                cand = np.flatnonzero((campaign == self.sheet["campaign"].iloc[i]) & np.isfinite(H)
                                      & (np.abs(H - H[i]) > 0.25) & (np.arange(self.n) != i))
                if len(cand):
                    break
            j = int(cand[self.rng.integers(len(cand))])
            old = self.vals.loc[i, "holdup"]
            self.vals.loc[i, "holdup"] = H[j]
            self.note(i, "holdup_wrong_run",
                      f"holdup copied from run {self.run_id[j]}: measured {old:.3f}, written {H[j]:.3f}")

    def vsg_ft_per_s(self, count: int) -> None:
        """A gas rate read from a meter display in ft/s, on a labelled row at 1-8 m/s."""
        for _ in range(count):
            vsg = self.vals["vsg"].to_numpy()
            i = self.pick((vsg > 1.0) & (vsg < 8.0) & (np.isfinite(self.H) | np.isfinite(self.P)))
            old = self.vals.loc[i, "vsg"]
            self.vals.loc[i, "vsg"] = old / FT
            self.note(i, "vsg_ft_per_s",
                      f"gas rate read from a meter display in ft/s: {old:.4g} m/s written {old / FT:.4g}")

    def listing(self) -> pd.DataFrame:
        """The corruptions in sheet order: run_id, kind, description."""
        order = {r: k for k, r in enumerate(self.run_id)}
        return pd.DataFrame(sorted(self.out, key=lambda d: order[d["run_id"]]), columns=["run_id", "kind", "description"])


def corrupt(vals: pd.DataFrame, truth: pd.DataFrame, sheet: pd.DataFrame, rng: np.random.Generator,
            counts: dict[str, int], pgrad_sd_rel: float, pgrad_sd_abs: float) -> pd.DataFrame:
    """Apply ``counts`` (corruption kind -> number of rows) to ``vals`` in place; return the list
    (run_id, kind, description).

    ``vals``: holdup, holdup_sd, pgrad, pgrad_sd, theta, vsg of the sheet's rows; ``truth``: the
    noise-free pgrad and its gravity part [Pa/m]; ``sheet``: run_id, campaign, ``D [mm]``,
    ``theta [deg]`` as written; ``pgrad_sd_rel`` [-] and ``pgrad_sd_abs`` [Pa/m]: the pgrad noise
    (one sigma) that gives a corrupted pgrad its sd.
    """
    c = _Corrupter(vals, truth, sheet, rng)
    c.swap("holdup", counts["swap_holdup"] // 2, lambda a, b: np.abs(b - a) > 0.25, "holdup", "")
    c.swap("pgrad", counts["swap_pgrad"] // 2,
           lambda a, b: (np.abs(b) > 4 * np.abs(a)) | (np.abs(a) > 4 * np.abs(b)), "pgrad", " Pa/m")
    c.pgrad_mbar_as_pa(counts["pgrad_mbar_as_pa"], pgrad_sd_rel, pgrad_sd_abs)
    c.theta_sign(counts["theta_sign"])
    c.holdup_wrong_run(counts["holdup_wrong_run"])
    c.vsg_ft_per_s(counts["vsg_ft_per_s"])
    return c.listing()
