"""Line calculation: march the steady two-fluid model along an elevation profile.

Public API (see each module's docstring):

* :func:`load_line`, :func:`line_from_config`, :class:`LineDefinition` - the line file format
  (profile CSV + YAML), :mod:`closure_nn.line.definition`;
* :class:`GasModel` - gas density and viscosity along the line, :mod:`closure_nn.line.fluid`;
* :func:`march_line`, :class:`Marcher`, :class:`MarchSettings`, :class:`MarchResult` - the sweep march with step
  halving and outlet-pressure shooting, :mod:`closure_nn.line.march`;
* :func:`run_line`, :func:`write_line_run`, :class:`LineRun` - closures side by side, ensemble
  band, out-of-domain flags, run-folder outputs, :mod:`closure_nn.line.run` (tables and
  summaries in :mod:`closure_nn.line.results`).
"""
from .definition import FluidSpec, LineDefinition, line_from_config, load_line, read_profile
from .fluid import GasModel
from .local import LocalSolver, Mesh
from .march import LineError, Marcher, MarchResult, MarchSettings, march_line
from .run import LineRun, run_line, write_line_run

__all__ = [
    "FluidSpec", "LineDefinition", "line_from_config", "load_line", "read_profile", "GasModel", "LocalSolver",
    "Mesh", "LineError", "Marcher", "MarchResult", "MarchSettings", "march_line", "LineRun", "run_line", "write_line_run",
]
