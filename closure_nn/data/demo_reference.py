r"""The INVENTED reference closure behind the demo campaign (data_demo/): the "true" physics of a
fictitious flow loop.

This closure exists only to generate the demo data. It is deliberately *not* the baseline
(conf/closure/baseline.yaml: Taitel-Dukler wall + Andritsos-Hanratty interface), so that a
closure fine-tuned on the demo campaign has something real to learn. Its interfacial laws are
our own invention for the demo and are not taken from, nor validated against, any experiment.
Do not use it for engineering.

Wall friction (both phases): Churchill (1977) all-regime rough-wall factor on the phase
hydraulic diameter (:func:`closure_nn.closures.correlations.wall_churchill`), so wall
roughness counts, unlike in the smooth-wall baseline.

Stratified interface (invented, smooth in every argument):

.. math::
    \frac{f_i}{f_{WG}} = 1 + a \sqrt{h/D}\,\left(\frac{\mu_\mathrm{ref}}{\mu_L}\right)^{m}
    \, w \ln\!\left[1 + \exp\!\left(\frac{v_{SG}\sqrt{\rho_G/\rho_\mathrm{ref}} - u_0}{w}\right)\right]\Big/ u_0

with a = :data:`A_WAVE`, u_0 = :data:`U0_WAVE` [m/s], w = :data:`W_WAVE` [m/s],
m = :data:`M_VISC`, mu_ref = 1 mPa s, rho_ref = 1.2 kg/m3: waves grow smoothly from a gas
momentum flux well below the baseline's 5 m/s threshold, and a more viscous liquid damps them.

Annular interface (invented, the Wallis form with other constants):

.. math:: f_i = c_0 \left(1 + c_1\, \delta/D\right),\qquad c_0 = 0.004,\ c_1 = 420

>>> from closure_nn.physics.conditions import make_conditions
>>> from closure_nn.physics.local_state import local_state
>>> import torch
>>> s = local_state(make_conditions(vsl=0.05, vsg=1.0, D=0.05), torch.tensor(0.2, dtype=torch.float64), "stratified")
>>> f = ReferenceClosure()(s)
>>> bool(f.f_i > f.f_wg)
True
"""
from __future__ import annotations

import torch
import torch.nn.functional as F

from ..closures.base import Closure
from ..closures.correlations import wall_churchill
from ..physics.geometry import ANNULAR
from ..physics.local_state import LocalState
from ..physics.momentum import FrictionFactors

#: invented constants of the stratified interface law (see module docstring)
A_WAVE = 25.0
U0_WAVE = 1.5  # m/s
W_WAVE = 0.7  # m/s
M_VISC = 0.25
MU_REF = 1.0e-3  # Pa s
RHO_REF = 1.2  # kg/m3
#: invented constants of the annular interface law
C0_ANNULAR = 0.004
C1_ANNULAR = 420.0


def interface_demo_wavy(s: LocalState, f_wg: torch.Tensor) -> torch.Tensor:
    """Invented smooth wavy-interface factor f_i [-] for stratified states (module docstring)."""
    c = s.cond
    u_star = c.vsg * torch.sqrt(c.rhog / RHO_REF)
    ramp = W_WAVE * F.softplus((u_star - U0_WAVE) / W_WAVE) / U0_WAVE
    visc = (MU_REF / c.mul) ** M_VISC
    return f_wg * (1 + A_WAVE * torch.sqrt(s.geom.frac.clamp_min(0.0)) * visc * ramp)


def interface_demo_annular(s: LocalState) -> torch.Tensor:
    """Invented annular interface factor f_i = 0.004 (1 + 420 delta/D) [-]."""
    return C0_ANNULAR * (1 + C1_ANNULAR * s.geom.frac)


class ReferenceClosure(Closure):
    """The invented 'truth' of the demo flow loop (see module docstring). No parameters."""

    label = "demo_reference(wall=churchill, interface=demo_wavy, annular=demo_annular) [INVENTED]"

    def forward(self, state: LocalState) -> FrictionFactors:
        f_wl = wall_churchill(state, "liquid")
        f_wg = wall_churchill(state, "gas")
        f_i = interface_demo_annular(state) if state.kind == ANNULAR else interface_demo_wavy(state, f_wg)
        return FrictionFactors(f_wl=f_wl, f_wg=f_wg, f_i=f_i)

    def describe(self) -> dict:
        return {**super().describe(), "invented": True, "wall": "churchill",
                "interface": {"law": "demo_wavy", "a": A_WAVE, "u0": U0_WAVE, "w": W_WAVE, "m": M_VISC},
                "annular_interface": {"law": "demo_annular", "c0": C0_ANNULAR, "c1": C1_ANNULAR}}
