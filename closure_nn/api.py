"""The Python API: a closure by name or folder, and a table of conditions solved in one call.

``load_closure`` gives the closure (the mechanistic baseline, a trained bundle or an ensemble);
``solve`` takes a pandas DataFrame of operating conditions in SI (the input columns of
:mod:`closure_nn.data.schema`) and returns it with the results of
:func:`closure_nn.physics.point.solve_points` appended under the names ``closure-nn batch``
writes (``calc_holdup``, ``calc_pgrad``, ...), so a table from either path reads the same.

Both are re-exported by the package: ``from closure_nn import load_closure, solve``.

pandas and the data layer (which loads pandas and scipy) are imported inside :func:`solve`: every
``closure-nn`` command imports this package, and most never need them.
"""
from __future__ import annotations

import os
from typing import TYPE_CHECKING

import torch

from .caution import CAUTION
from .closures.base import Closure
from .closures.baseline import BaselineClosure
from .closures.loading import load_saved_closure
from .physics.checks import InputError, check_conditions
from .physics.point import solve_points

if TYPE_CHECKING:  # pandas is imported when solve runs, not with the package
    import pandas as pd

#: the word that names the mechanistic baseline in :func:`load_closure` and :func:`solve`
BASELINE = "baseline"
#: prefix of the result columns (as ``closure-nn batch`` writes them)
RESULT_PREFIX = "calc_"


def load_closure(closure: str | os.PathLike = BASELINE) -> Closure:
    """A closure by name or folder.

    Parameters
    ----------
    closure : str or path
        ``'baseline'``: the mechanistic baseline
        ``BaselineClosure(wall='churchill')`` (Churchill 1977 wall friction, which uses the
        roughness column; Andritsos & Hanratty 1987 interface; Wallis 1969 annular interface).
        A folder: a closure bundle (``bundle.json``), or an ensemble folder (``ensemble.json``),
        detected by its description file. Write ``./baseline`` for a folder of that name.

    Returns
    -------
    Closure
        :class:`~closure_nn.closures.baseline.BaselineClosure`,
        :class:`~closure_nn.closures.neural.NeuralClosure` or
        :class:`~closure_nn.closures.ensemble.ClosureEnsemble`, in evaluation mode.

    Raises
    ------
    InputError
        (a ``ValueError``) naming the folder and what is missing or damaged.

    >>> load_closure("baseline").label
    'baseline(wall=churchill, interface=andritsos_hanratty, annular=wallis)'
    """
    if isinstance(closure, str) and closure == BASELINE:
        return BaselineClosure(wall="churchill")
    return load_saved_closure(closure)


def solve(df: "pd.DataFrame", closure: str | os.PathLike | Closure = BASELINE, select: str = "thinnest",
          entrainment: float | str = 0.0) -> "pd.DataFrame":
    r"""Holdup, pressure gradient and flow pattern for every row of a table of conditions.

    Parameters
    ----------
    df : pandas.DataFrame
        One row per condition, SI columns as in :mod:`closure_nn.data.schema`: ``vsl``, ``vsg``
        [m/s] superficial velocities; ``D`` [m]; ``theta`` [rad] inclination, positive upward;
        ``roughness`` [m] (0 for smooth pipe); ``rhol``, ``rhog`` [kg/m3] (``rhog`` may be left
        out where ``p`` [Pa], ``T`` [K], ``M_g`` [kg/mol] and optionally ``Z`` [-] are given);
        ``mul``, ``mug`` [Pa s]; ``sigma`` [N/m]. Other columns are carried through.
    closure : 'baseline', a bundle or ensemble folder, or a Closure
        See :func:`load_closure`.
    select : {'thinnest', 'thickest'}
        The stratified root taken where the equilibrium has several.
    entrainment : float or 'ishii_mishima'
        Entrained liquid fraction E [-] for annular rows, or the Ishii & Mishima (1989) correlation.

    Returns
    -------
    pandas.DataFrame
        The input columns (index reset) followed by ``calc_holdup`` [-], ``calc_pgrad`` [Pa/m]
        (-dp/dx, positive when pressure falls along the flow), its parts ``calc_pgrad_friction``
        and ``calc_pgrad_gravity`` [Pa/m], ``calc_pattern`` (a name of
        :data:`closure_nn.physics.vocabulary.PATTERNS`), ``calc_n_roots`` (stratified roots),
        ``calc_frac`` (h/D or delta/D), ``calc_separated``, ``calc_root_1..3`` [-],
        ``calc_flags`` (bits ``closure_nn.physics.point.FLAG_*``) and ``calc_flag_text``.
        ``attrs`` holds ``closure`` (its label) and ``caution``.

    Raises
    ------
    InputError
        (a ``ValueError``) for a missing column, a cell that is no number or a value outside
        the accepted ranges (:data:`closure_nn.physics.checks.RANGES`), naming the column and,
        for a value, the row by its index label.

    Example: 50 mm horizontal air-water pipe at about 1 bar (invented conditions).

    >>> import pandas as pd
    >>> rows = pd.DataFrame({"vsl": [0.05], "vsg": [3.0], "D": [0.05], "theta": [0.0], "roughness": [0.0],
    ...                      "rhol": [998.0], "rhog": [1.2], "mul": [1.0e-3], "mug": [1.8e-5], "sigma": [0.072]})
    >>> out = solve(rows)
    >>> row = out.iloc[0]
    >>> bool(0.0 < row["calc_holdup"] < 1.0), bool(row["calc_pgrad"] > 0)
    (True, True)
    >>> row["calc_pattern"].startswith("stratified")  # Taitel & Dukler (1976) map, Fig. 4 (from memory)
    True
    """
    import pandas as pd

    from .data.schema import to_conditions

    if not isinstance(df, pd.DataFrame):
        raise InputError(f"solve: expected a pandas DataFrame of conditions, got {type(df).__name__}")
    if len(df) == 0:
        raise InputError("solve: the table has no rows")
    model = closure if isinstance(closure, Closure) else load_closure(closure)
    table = df.reset_index(drop=True)
    where = str(df.attrs.get("path", "")) or "solve(df)"
    cond = to_conditions(table, check=False, where=where)
    try:
        check_conditions(cond, where=where)
    except InputError:
        for i, label in enumerate(df.index):  # name the first bad row by its index label
            try:
                check_conditions(cond[i], where="")
            except InputError as exc:
                raise InputError(f"{where}, row with index {label!r}: {exc}") from None
        raise
    with torch.no_grad():
        res = solve_points(cond, model, select=select, entrainment=entrainment)
    out = pd.concat([table, pd.DataFrame(res.to_columns()).add_prefix(RESULT_PREFIX)], axis=1)
    out.attrs.update({"closure": model.label, "caution": CAUTION})
    return out
