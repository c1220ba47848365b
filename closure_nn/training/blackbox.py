r"""A direct black-box regressor: a plain MLP from the input columns straight to holdup and pgrad.

This is the comparison model of the evaluation (:mod:`closure_nn.pipeline.evaluate`): no
momentum balance, no closure, no flow pattern - just a regression of the two measured targets on
the operating condition. It is trained on the same rows and with the same budget (epochs, batch
size, learning rate, early stopping on a held-back share of the training rows) as the fine-tuned
closure, so the comparison measures what the physics structure adds.

Inputs (10, standardised with the training rows' mean and standard deviation):

.. math:: \log_{10} v_{SL},\ \log_{10} v_{SG},\ \log_{10} D,\ \sin\theta,\ \epsilon/D,\
          \log_{10}\rho_L,\ \log_{10}\rho_G,\ \log_{10}\mu_L,\ \log_{10}\mu_G,\ \log_{10}\sigma

(SI inside the logs; superficial velocities floored at 1e-6 m/s).

Outputs: the holdup through a logistic function, :math:`\hat H = 1/(1 + e^{-o_1})`, so it stays
in [0, 1]; the pressure gradient through a signed log, :math:`\hat p = p_0 \sinh(o_2)` with
:math:`p_0` = ``pgrad_scale`` [Pa/m], i.e. the network regresses
:math:`\operatorname{asinh}(p/p_0)` - logarithmic for :math:`|p| \gg p_0`, linear and
sign-preserving near zero (downhill flows can have negative -dp/dx).

Loss: mean squared error of :math:`(\hat H - H)/\sigma_H` and of
:math:`\operatorname{asinh}(\hat p/p_0) - \operatorname{asinh}(p/p_0)` over the rows where each
target is measured (rows with only one target count for that one), :math:`\sigma_H` =
``holdup_scale``. Plain torch, float64, Adam; seeded.
"""
from __future__ import annotations

import copy
import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
import torch
from torch import nn

from ..closures.neural import ACTIVATIONS

#: input columns (SI) of the regressor, in order
INPUT_COLUMNS = ("vsl", "vsg", "D", "theta", "roughness", "rhol", "rhog", "mul", "mug", "sigma")
_LOG_COLUMNS = ("D", "rhol", "rhog", "mul", "mug", "sigma")
_V_FLOOR = 1e-6  # m/s
_O2_MAX = math.asinh(1e7 / 1.0)  # output clamp: |pgrad| <= 1e7 p_0


def input_matrix(df: pd.DataFrame) -> torch.Tensor:
    """Raw (not yet standardised) inputs ``(N, 10)`` float64 of an SI table (module docstring)."""
    col = {c: pd.to_numeric(df[c], errors="coerce").to_numpy(np.float64) for c in INPUT_COLUMNS}
    x = [np.log10(np.maximum(col["vsl"], _V_FLOOR)), np.log10(np.maximum(col["vsg"], _V_FLOOR)),
         np.log10(col["D"]), np.sin(col["theta"]), col["roughness"] / col["D"]]
    x += [np.log10(col[c]) for c in _LOG_COLUMNS[1:]]
    return torch.as_tensor(np.stack(x, axis=1))


@dataclass
class BlackBoxSettings:
    """Size and budget of the regressor (``conf/evaluate.yaml``: ``blackbox``)."""

    hidden: tuple = (64, 64)
    activation: str = "silu"
    max_epochs: int = 200
    batch_size: int = 64
    lr: float = 3e-3
    weight_decay: float = 0.0
    patience: int = 20  # epochs without validation improvement; 0: no early stopping
    val_fraction: float = 0.2
    holdup_scale: float = 0.02  # [-] sigma_H of the loss
    pgrad_scale: float = 10.0  # [Pa/m] p_0 of the signed log
    seed: int = 0


class BlackBoxRegressor(nn.Module):
    """``model.predict(df) -> {'holdup': (N,), 'pgrad': (N,)}`` numpy arrays; fit with :meth:`fit`.

    >>> rng = np.random.default_rng(0)
    >>> df = pd.DataFrame({c: np.full(40, v) for c, v in zip(INPUT_COLUMNS, (0.1, 2.0, 0.05, 0.0, 0.0, 998.0,
    ...                    1.2, 1e-3, 1.8e-5, 0.072))}).assign(vsl=10 ** rng.uniform(-2, 0, 40))
    >>> df["holdup"], df["pgrad"] = 0.5, 100.0
    >>> bb = BlackBoxRegressor(BlackBoxSettings(hidden=(8,), max_epochs=300, lr=2e-2, patience=0)).fit(df)
    >>> p = bb.predict(df.iloc[:2])
    >>> bool(abs(p["holdup"][0] - 0.5) < 0.05), bool(abs(p["pgrad"][0] / 100 - 1) < 0.1)
    (True, True)
    """

    def __init__(self, settings: BlackBoxSettings | None = None) -> None:
        super().__init__()
        self.settings = s = settings or BlackBoxSettings()
        layers: list[nn.Module] = []
        width = len(INPUT_COLUMNS)
        for h in s.hidden:
            layers += [nn.Linear(width, int(h)), ACTIVATIONS[s.activation]()]
            width = int(h)
        layers.append(nn.Linear(width, 2))
        self.net = nn.Sequential(*layers).double()
        self.register_buffer("x_mean", torch.zeros(len(INPUT_COLUMNS), dtype=torch.float64))
        self.register_buffer("x_std", torch.ones(len(INPUT_COLUMNS), dtype=torch.float64))
        self.history: list[dict] = []
        self.label = f"black-box MLP {list(s.hidden)}"

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        """Raw outputs ``(N, 2)``: holdup logit and asinh(pgrad / p_0), from raw inputs ``(N, 10)``."""
        return self.net((x - self.x_mean) / self.x_std)

    def _loss(self, out: torch.Tensor, H: torch.Tensor, P: torch.Tensor) -> torch.Tensor:
        s = self.settings
        mh, mp = torch.isfinite(H), torch.isfinite(P)
        total = torch.zeros((), dtype=torch.float64)
        if mh.any():
            total = total + (((torch.sigmoid(out[mh, 0]) - H[mh]) / s.holdup_scale) ** 2).mean()
        if mp.any():
            total = total + ((out[mp, 1] - torch.asinh(P[mp] / s.pgrad_scale)) ** 2).mean()
        return total

    def fit(self, df: pd.DataFrame) -> "BlackBoxRegressor":
        """Train on the rows of ``df`` with a measured holdup or pgrad (module docstring)."""
        s = self.settings
        H = torch.as_tensor(pd.to_numeric(df.get("holdup", pd.Series(np.nan, index=df.index)), errors="coerce").to_numpy(np.float64, copy=True))
        P = torch.as_tensor(pd.to_numeric(df.get("pgrad", pd.Series(np.nan, index=df.index)), errors="coerce").to_numpy(np.float64, copy=True))
        x = input_matrix(df)
        keep = (torch.isfinite(H) | torch.isfinite(P)) & torch.isfinite(x).all(dim=1)
        x, H, P = x[keep], H[keep], P[keep]
        n = x.shape[0]
        if n < 2:
            raise ValueError(f"black-box regressor: {n} row(s) with a measured target; need at least 2")
        g = torch.Generator().manual_seed(int(s.seed))
        torch.manual_seed(int(s.seed))
        for m in self.net:  # seeded re-initialisation
            if isinstance(m, nn.Linear):
                m.reset_parameters()
        perm = torch.randperm(n, generator=g)
        n_val = min(max(int(round(s.val_fraction * n)), 1 if s.val_fraction > 0 else 0), n - 1)
        val, tr = perm[:n_val], perm[n_val:]
        self.x_mean.copy_(x[tr].mean(dim=0))
        sd = x[tr].std(dim=0)
        self.x_std.copy_(torch.where(sd > 1e-9, sd, torch.ones_like(sd)))  # a constant input stays unscaled
        opt = torch.optim.Adam(self.net.parameters(), lr=float(s.lr), weight_decay=float(s.weight_decay))
        best, best_state, stale = math.inf, copy.deepcopy(self.net.state_dict()), 0
        self.history = []
        for epoch in range(int(s.max_epochs)):
            self.net.train()
            order = tr[torch.randperm(len(tr), generator=g)]
            tot, nb = 0.0, 0
            for i in range(0, len(order), int(s.batch_size)):
                b = order[i:i + int(s.batch_size)]
                opt.zero_grad()
                loss = self._loss(self(x[b]), H[b], P[b])
                loss.backward()
                opt.step()
                tot, nb = tot + float(loss.detach()), nb + 1
            with torch.no_grad():
                vl = float(self._loss(self(x[val]), H[val], P[val])) if n_val else tot / nb
            self.history.append({"epoch": epoch, "train_loss": tot / nb, "val_loss": vl})
            if vl < best:
                best, best_state, stale = vl, copy.deepcopy(self.net.state_dict()), 0
            else:
                stale += 1
                if s.patience and stale >= int(s.patience):
                    break
        self.net.load_state_dict(best_state)
        self.net.eval()
        return self

    def predict(self, df: pd.DataFrame) -> dict[str, np.ndarray]:
        """Holdup [-] and pgrad [Pa/m] ``(N,)`` for the conditions of an SI table."""
        with torch.no_grad():
            out = self(input_matrix(df))
        o2 = out[:, 1].clamp(-_O2_MAX, _O2_MAX)  # finite even far outside the data
        return {"holdup": torch.sigmoid(out[:, 0]).numpy(),
                "pgrad": (self.settings.pgrad_scale * torch.sinh(o2)).numpy()}
