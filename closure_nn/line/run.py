"""One line run: several named closures side by side, plus an optional ensemble band.

:func:`run_line` marches the line once per closure (and once per ensemble member); each march
batches all its stations into a few point solves (see :mod:`closure_nn.line.march`), so the
cost per closure is a handful of large batched calls. :func:`write_line_run` writes the run
folder: ``stations.csv``, ``band.csv`` (ensemble), ``summary.json``, ``line.png``, and the
caution.

Out-of-domain check: a closure with a method ``in_domain(features) -> bool mask`` is asked at
every station, with ``features = closure_features(state)`` at the station's solved state
(:meth:`closure_nn.line.local.LocalSolver.features`). Stations where it answers False are
flagged in the table, the summary and the plot. Closures without the method are not checked.

Measured-data check: likewise with ``in_measured_domain(features)`` (a neural closure's domain of
its fine-tune/update rows, see :mod:`closure_nn.closures.neural`): stations outside it are where
the learned correction rests on synthetic baseline points only (or on nothing). Reported as
``out_of_measured_domain`` in the summary and ``in_measured_domain`` in ``stations.csv``.

The figure writer (closure_nn.report.line_plots.line_figure, a layer above) is passed in by the
caller (``figure=``), so this layer never imports the plotting one.
"""
from __future__ import annotations

import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import torch

from ..caution import CAUTION
from ..data.result_tables import write_result_csv
from ..physics.checks import check_conditions
from ..run_folder import atomic_write_text, write_json
from .definition import LineDefinition
from .fluid import GasModel
from .local import LocalSolver, Mesh
from .march import LineError, Marcher, MarchResult, MarchSettings
from .results import ensemble_band, ensemble_summary, station_table, summarise


@dataclass
class LineRun:
    """Results of one run: marches by closure name, ensemble members, failures, tables."""

    line: LineDefinition
    results: dict[str, MarchResult]
    members: list[MarchResult]
    in_domain: dict[str, np.ndarray]
    failures: dict[str, str] = field(default_factory=dict)
    gas: dict = field(default_factory=dict)
    #: per closure name: station mask of the measured-data domain (closures that have one)
    in_measured: dict[str, np.ndarray] = field(default_factory=dict)
    #: per closure name: False where a bundle predates the measured-data domain
    measured_recorded: dict[str, bool] = field(default_factory=dict)

    def _summarise(self, name: str, r: MarchResult) -> dict:
        s = summarise(r, self.in_domain.get(name), self.in_measured.get(name))
        if s["out_of_measured_domain"]["checked"]:
            s["out_of_measured_domain"]["recorded"] = self.measured_recorded.get(name, True)
        return s

    def stations(self):
        """All marches in one long per-station table."""
        frames = [station_table(r, name, "compare", self.in_domain.get(name), self.in_measured.get(name))
                  for name, r in self.results.items()]
        frames += [station_table(r, f"member_{i}", "member", self.in_domain.get(f"member_{i}"),
                                 self.in_measured.get(f"member_{i}")) for i, r in enumerate(self.members)]
        return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()

    def band(self):
        return ensemble_band(self.members)

    def summary(self) -> dict:
        ln = self.line
        out = {
            "line": ln.name, "invented": ln.invented, "description": ln.description, "source": ln.source,
            "length_m": float(ln.distance[-1] - ln.distance[0]), "profile_stations": int(len(ln.distance)),
            "boundary": {"at": ln.boundary, "p_Pa": ln.p_boundary}, "m_gas_kg_s": ln.m_gas,
            "m_liquid_kg_s": ln.m_liquid, "fluid": {**ln.fluid.__dict__, **self.gas},
            "closures": {name: self._summarise(name, r) for name, r in self.results.items()},
        }
        if self.members:
            ms = [self._summarise(f"member_{i}", r) for i, r in enumerate(self.members)]
            out["ensemble"] = ensemble_summary(ms)
            out["ensemble"]["out_of_domain_stations"] = [m["out_of_domain"].get("stations") for m in ms]
            out["ensemble"]["out_of_measured_domain_stations"] = [m["out_of_measured_domain"].get("stations") for m in ms]
        if self.failures:
            out["failures"] = self.failures
        out["caution"] = CAUTION
        return out


def domain_mask(closure, features: np.ndarray | None, method: str = "in_domain") -> np.ndarray | None:
    """``closure.<method>`` (``in_domain`` or ``in_measured_domain``) at finite feature rows (rows
    with NaN features count as inside); None when the closure has no such method."""
    check = getattr(closure, method, None)
    if features is None or not callable(check):
        return None
    x = torch.as_tensor(features, dtype=torch.float64)
    finite = torch.isfinite(x).all(dim=-1)
    mask = torch.ones(x.shape[0], dtype=torch.bool)
    if bool(finite.any()):
        with torch.no_grad():
            mask[finite] = torch.as_tensor(check(x[finite])).to(torch.bool).reshape(-1)
    return mask.numpy()


def _check_inputs(line: LineDefinition, local: LocalSolver) -> None:
    """Range checks of the conditions at the boundary pressure on every segment."""
    mesh = Mesh.from_line(line)
    seg = torch.arange(mesh.n)
    cond = local.conditions(mesh, seg, torch.zeros(mesh.n, dtype=torch.float64),
                            torch.full((mesh.n,), line.p_boundary, dtype=torch.float64))
    check_conditions(cond, where=f"line {line.name!r} at the boundary pressure (rows are segments)")


def run_line(line: LineDefinition, closures: Mapping[str, object], ensemble: Sequence[object] = (),
             solver: Mapping | None = None, settings: MarchSettings | None = None,
             raise_errors: bool = False, say: Callable[[str], None] | None = None) -> LineRun:
    """March ``line`` with every closure of ``closures`` ({name: closure}) and every member of
    ``ensemble``. A closure whose march fails is reported in ``failures`` (or raised when
    ``raise_errors``). ``say``: called with one progress line per march (before it starts and
    when it ends)."""
    settings = settings or MarchSettings()
    gas = GasModel(line.fluid, (float(line.T.min()), float(line.T.max())))
    local = LocalSolver(line, gas, dict(solver or {}))
    _check_inputs(line, local)
    results, members, dom, failures, measured, recorded = {}, [], {}, {}, {}, {}
    jobs = [(name, c, False) for name, c in closures.items()] + [(f"member_{i}", c, True) for i, c in enumerate(ensemble)]
    mesh0 = Mesh.from_line(line)
    for k, (name, closure, is_member) in enumerate(jobs):
        t0 = time.perf_counter()
        if say is not None:
            what = "ensemble member" if is_member else "closure"
            say(f"march {k + 1}/{len(jobs)}: {what} {name} over {mesh0.n} profile segments from the "
                f"{line.boundary} pressure {line.p_boundary / 1e5:.2f} bar (step halving to {settings.tol:g} Pa) ...")
        try:
            r = Marcher(local, closure, settings, name).run(Mesh.from_line(line), line.p_boundary, line.boundary)
        except LineError as exc:
            if raise_errors:
                raise
            failures[name] = str(exc)
            if say is not None:
                say(f"  {name}: failed after {time.perf_counter() - t0:.0f} s")
            continue
        if say is not None:
            say(f"  {name}: inlet {r.p[0] / 1e5:.2f} bar, outlet {r.p[-1] / 1e5:.2f} bar, {len(r.p)} stations "
                f"({time.perf_counter() - t0:.1f} s)")
        (members.append(r) if is_member else results.__setitem__(name, r))
        mask = domain_mask(closure, r.features)
        if mask is not None:
            dom[name] = mask
        mask = domain_mask(closure, r.features, "in_measured_domain")
        if mask is not None:
            measured[name] = mask
            recorded[name] = bool(getattr(closure, "measured_domain_recorded", True))
    return LineRun(line=line, results=results, members=members, in_domain=dom, failures=failures, gas=gas.describe(),
                   in_measured=measured, measured_recorded=recorded)


def write_line_run(run: LineRun, run_dir: str | Path, config_yaml: str | None = None,
                   figure: Callable[[LineRun, pd.DataFrame, pd.DataFrame | None, Path], Path] | None = None) -> dict[str, Path]:
    """Write stations.csv, band.csv (if an ensemble ran), summary.json, CAUTION.txt and, with a
    ``figure`` writer (called with the run, the stations, the band and the path), line.png into
    ``run_dir``. The CSVs are plain tables with the SI unit in each header (``p [Pa]``)."""
    d = Path(run_dir)
    files = {}
    st = run.stations()
    # plain tables, SI with the unit in each header (closure_nn.data.result_tables); the caution is in
    # summary.json and in the run folder's CAUTION.txt, not on a line of its own above the header
    files["stations"] = write_result_csv(st, d / "stations.csv")
    band = run.band()
    if band is not None:
        files["band"] = write_result_csv(band, d / "band.csv")
    files["summary"] = write_json(d / "summary.json", run.summary())
    if not (d / "CAUTION.txt").exists():
        atomic_write_text(d / "CAUTION.txt", CAUTION + "\n")
    if config_yaml is not None:
        files["config"] = d / "config.yaml"
        files["config"].write_text(config_yaml)
    if figure is not None and len(st):
        files["plot"] = figure(run, st, band, d / "line.png")
    return files
