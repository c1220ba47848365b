"""Properties that hold for every input, tested on many inputs.

(a) The point solver answers every physical state: 10^5 fuzzed states (random, inside the input
    ranges the CLI accepts, :data:`closure_nn.physics.checks.RANGES`, over several orders of
    magnitude) give a finite holdup in [0, 1] and a finite pressure gradient, or the row carries
    the flag that says no equilibrium exists (``FLAG_NO_SEPARATED_ROOT`` / ``FLAG_ANNULAR_NO_ROOT``
    of :mod:`closure_nn.physics.point`, whose docstring promises "every output is finite or
    explicitly flagged, never a silent NaN"). Holdup is a volume fraction, 0 <= H <= 1 (common
    practice).
(b) The same seed gives bitwise identical weights after a short training (seeded, deterministic
    CPU float64 training; Lightning documents ``seed_everything`` + ``deterministic=True`` for
    reproducible runs). A different seed must change them, so the comparison can fail.
(c) A training interrupted and resumed from ``last.ckpt`` ends with bitwise the same weights as an
    uninterrupted one (Lightning's documented exact resumption: weights, optimiser, scheduler and
    loop state in the checkpoint). tests/test_training.py::test_resume_after_interruption_gives_
    the_same_final_metrics compares the final METRICS to rel 1e-9 only, not the weights, so the
    bitwise check is here; the resume goes through the command (``closure-nn train resume=...``),
    which must also leave the run's saved config.yaml untouched.

The training tables are noise-free stratified equilibria of the baseline closure at invented
air-water conditions (no real data).
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import torch

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.closures.bundle import load_bundle
from closure_nn.config import load_config
from closure_nn.data.features import table_conditions
from closure_nn.data.table_io import write_table
from closure_nn.physics import vocabulary as V
from closure_nn.physics.checks import RANGES, check_conditions
from closure_nn.physics.conditions import make_conditions
from closure_nn.physics.holdup_roots import solve_separated
from closure_nn.physics.point import FLAG_ANNULAR_NO_ROOT, FLAG_NO_SEPARATED_ROOT, solve_points

N_FUZZ = 100_000
#: the flags that say "no equilibrium: no holdup or pgrad to report"
NO_ANSWER = FLAG_NO_SEPARATED_ROOT | FLAG_ANNULAR_NO_ROOT


# ------------------------------------------------------------------ (a) fuzzed states

def _log_uniform(r: np.random.Generator, lo: float, hi: float, n: int) -> np.ndarray:
    return 10 ** r.uniform(math.log10(lo), math.log10(hi), n)


def fuzzed_states(n: int, seed: int):
    """``n`` random physical states: rates over 6 and 5 decades (2 % of each exactly zero, i.e.
    single-phase), D 1 cm - 2 m, every inclination (2 % exactly horizontal, 1 % vertical up or
    down), roughness up to 1 mm, liquids from light condensate to viscous oil, gas from near
    vacuum to dense (always lighter than the liquid)."""
    r = np.random.default_rng(seed)
    vsl = _log_uniform(r, 1e-4, 20.0, n)
    vsg = _log_uniform(r, 1e-3, 200.0, n)
    vsl[r.random(n) < 0.02] = 0.0
    vsg[(r.random(n) < 0.02) & (vsl > 0)] = 0.0
    theta = r.uniform(-math.pi / 2, math.pi / 2, n)
    u = r.random(n)
    theta[u < 0.02] = 0.0
    theta[(u >= 0.02) & (u < 0.025)] = math.pi / 2
    theta[(u >= 0.025) & (u < 0.03)] = -math.pi / 2
    rhol = r.uniform(500.0, 1500.0, n)
    return make_conditions(vsl=vsl, vsg=vsg, D=_log_uniform(r, 0.01, 2.0, n), theta=theta,
                           roughness=r.uniform(0.0, 1e-3, n), rhol=rhol,
                           rhog=np.minimum(_log_uniform(r, 0.05, 300.0, n), 0.5 * rhol),
                           mul=_log_uniform(r, 1e-4, 1.0, n), mug=_log_uniform(r, 5e-6, 5e-5, n),
                           sigma=_log_uniform(r, 5e-3, 0.1, n))


#: four solver settings, a quarter of the states each
SETTINGS = [
    (dict(wall="churchill", interface="andritsos_hanratty"), dict(select="thinnest", entrainment=0.0)),
    (dict(wall="taitel_dukler", interface="smooth"), dict(select="thickest", entrainment="ishii_mishima")),
    (dict(wall="churchill", interface="wallis"), dict(select="thinnest", entrainment="ishii_mishima")),
    (dict(wall="taitel_dukler", interface="andritsos_hanratty"), dict(select="thickest", entrainment=0.3)),
]


@pytest.fixture
def one_thread():
    """One torch thread (the project's choice on a shared 2-core machine, benchmarks/README_line.md)."""
    n = torch.get_num_threads()
    torch.set_num_threads(1)
    yield
    torch.set_num_threads(n)


def test_fuzzed_states_are_answered_or_flagged(one_thread):
    cond = fuzzed_states(N_FUZZ, seed=20240611)
    check_conditions(cond)  # the fuzz stays inside the ranges the CLI accepts (RANGES)
    assert float(cond.D.min()) >= RANGES["D"][0] and float(cond.mul.max()) <= RANGES["mul"][1]
    chunks = np.array_split(np.arange(N_FUZZ), len(SETTINGS))
    n_single = 0
    for (closure_kw, solver_kw), idx in zip(SETTINGS, chunks):
        c = cond[torch.as_tensor(idx)]
        with torch.no_grad():
            res = solve_points(c, BaselineClosure(**closure_kw), n_grid=40, **solver_kw)
        finite = torch.isfinite(res.holdup) & torch.isfinite(res.pgrad.total) & \
            torch.isfinite(res.pgrad.friction) & torch.isfinite(res.pgrad.gravity)
        flagged = (res.flags & NO_ANSWER) != 0
        silent = ~finite & ~flagged
        assert not bool(silent.any()), (
            f"{int(silent.sum())} unflagged non-finite rows with {closure_kw}, {solver_kw}; first: "
            f"{ {k: float(v[silent][0]) for k, v in c.as_dict().items()} }")
        h = res.holdup[finite]
        assert bool(((h >= 0) & (h <= 1)).all()), float(h.min() if h.min() < 0 else h.max())
        assert bool(((res.pattern >= 0) & (res.pattern < len(V.PATTERNS))).all())
        # a flagged row without an answer says so in the pattern too: separated is False there
        assert not bool((res.separated & ~finite).any())
        n_single += int((c.vsl == 0).sum() + (c.vsg == 0).sum())
    assert n_single > 0.03 * N_FUZZ  # the single-phase edges were visited


# ------------------------------------------------------------------ (b), (c) training

TINY = ["trainer.progress_bar=false", "model.hidden=[8,8]", "trainer.batch_size=16", "trainer.lr=1e-2",
        "trainer.patience=0"]


@pytest.fixture(scope="module")
def table(tmp_path_factory):
    """40 noise-free stratified equilibria of the baseline at invented air-water conditions."""
    d = tmp_path_factory.mktemp("prop")
    r = np.random.default_rng(7)
    n = 40
    df = pd.DataFrame(dict(
        vsl=10 ** r.uniform(-2.3, -1.0, n), vsg=r.uniform(4.0, 15.0, n), D=r.uniform(0.04, 0.08, n),
        theta=r.uniform(-0.01, 0.01, n), roughness=10 ** r.uniform(-4.3, -3.7, n), rhol=998.0, rhog=1.2,
        mul=1e-3, mug=1.8e-5, sigma=0.072))
    sol = solve_separated(table_conditions(df), BaselineClosure(interface_kwargs={"coef": 25.0}))
    assert bool(sol.found.all())
    df["holdup"] = sol.holdup.detach().numpy()
    df["pgrad"] = sol.pgrad.total.detach().numpy()
    df["pattern"] = "stratified_wavy"
    df["source"], df["campaign"], df["run_id"] = "lab", "invented", [f"r{i}" for i in range(n)]
    return {"path": write_table(df, d / "lab.csv"), "root": d / "runs"}


def _weights(bundle) -> dict[str, torch.Tensor]:
    return {k: v.detach().clone() for k, v in load_bundle(bundle).state_dict().items()}


def _bitwise_equal(a: dict, b: dict) -> bool:
    return a.keys() == b.keys() and all(torch.equal(a[k], b[k]) for k in a)


def _train(table, *extra, callbacks=None):
    from closure_nn.training.run import train

    cfg = load_config("train", [f"data.train={table['path']}", f"run_root={table['root']}", *TINY, *extra])
    return train(cfg, callbacks=callbacks)


def test_same_seed_gives_bitwise_identical_weights(table):
    a = _weights(_train(table, "trainer.max_epochs=2", "seed=3", "run_name=seed_a")["bundle"])
    b = _weights(_train(table, "trainer.max_epochs=2", "seed=3", "run_name=seed_b")["bundle"])
    c = _weights(_train(table, "trainer.max_epochs=2", "seed=4", "run_name=seed_c")["bundle"])
    assert _bitwise_equal(a, b)
    assert not _bitwise_equal(a, c)  # the check sees a change of seed


class _Interrupt(Exception):
    pass


def _stop_at(epoch: int):
    """A Lightning callback that raises at the start of ``epoch`` (an interruption)."""
    import lightning as L

    class Stop(L.Callback):
        def on_train_epoch_start(self, trainer, pl_module):
            if trainer.current_epoch == epoch:
                raise _Interrupt

    return Stop()


def test_resume_gives_bitwise_the_weights_of_an_uninterrupted_run(table, capsys):
    from closure_nn.cli import main

    common = ["trainer.max_epochs=5", "trainer.lr_schedule=cosine", "seed=1"]
    full = _weights(_train(table, *common, "run_name=whole")["bundle"])
    with pytest.raises(_Interrupt):
        _train(table, *common, "run_name=cut", callbacks=[_stop_at(2)])
    run = table["root"] / "cut"
    saved = (run / "config.yaml").read_bytes()
    assert main(["train", f"resume={run / 'checkpoints' / 'last.ckpt'}"]) == 0, capsys.readouterr().err
    assert (run / "config.yaml").read_bytes() == saved  # a resume never rewrites the saved config
    assert _bitwise_equal(_weights(run / "bundle"), full)
