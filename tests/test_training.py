"""Training stages end to end on tiny invented data (closure_nn.training.run.train).

Sources: recovering a known reference closure from its own noise-free equilibria and held-out
error reduction by fine-tuning are common practice for surrogate and closure learning; the
reference interfacial friction is Andritsos & Hanratty (1987) with the coefficient 25 instead of
15 (our choice), the wall friction Churchill (1977). Exact resumption from a checkpoint is a
documented Lightning feature (checkpoint + seeded epoch order).
"""
from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import torch

from closure_nn.closures.baseline import BaselineClosure
from closure_nn.closures.bundle import load_bundle
from closure_nn.closures.ensemble import ClosureEnsemble
from closure_nn.closures.loading import load_saved_closure
from closure_nn.config import load_config
from closure_nn.data.features import table_conditions, table_states
from closure_nn.data.table_io import read_table, write_table
from closure_nn.physics.holdup_roots import solve_separated
from closure_nn.training.run import train

REF = BaselineClosure(wall="churchill", interface="andritsos_hanratty", interface_kwargs={"coef": 25.0})
TINY = ["trainer.progress_bar=false", "model.hidden=[8,8]", "trainer.batch_size=64", "trainer.lr=1e-2"]


def make_table(closure, n: int, seed: int, source: str) -> pd.DataFrame:
    """Noise-free stratified equilibria of ``closure`` at invented air-water conditions."""
    r = np.random.default_rng(seed)
    df = pd.DataFrame(dict(
        vsl=10 ** r.uniform(-2.3, -1.0, n), vsg=r.uniform(4.0, 15.0, n), D=r.uniform(0.04, 0.08, n),
        theta=r.uniform(-0.01, 0.01, n), roughness=10 ** r.uniform(-4.3, -3.7, n), rhol=998.0, rhog=1.2,
        mul=1e-3, mug=1.8e-5, sigma=0.072))
    sol = solve_separated(table_conditions(df), closure)
    assert bool(sol.found.all())
    df["holdup"] = sol.holdup.detach().numpy()
    df["pgrad"] = sol.pgrad.total.detach().numpy()
    df["pattern"] = "stratified_wavy"
    df["source"], df["campaign"], df["run_id"] = source, f"invented-{seed}", [f"r{i}" for i in range(n)]
    return df


@pytest.fixture(scope="module")
def tables(tmp_path_factory):
    d = tmp_path_factory.mktemp("tables")
    out = {}
    specs = {"synth": (BaselineClosure(), 60, 1, "synthetic"), "lab": (REF, 40, 2, "lab"),
             "heldout": (REF, 30, 3, "lab"), "lab_new": (REF, 30, 4, "lab")}
    for name, (closure, n, seed, source) in specs.items():
        out[name] = write_table(make_table(closure, n, seed, source), d / f"{name}.csv")
    out["root"] = d / "runs"
    return out


@pytest.fixture(scope="module")
def pretrained(tables):
    cfg = load_config("train", [f"data.train={tables['synth']}", f"run_root={tables['root']}", *TINY,
                                "trainer.max_epochs=3"])
    return train(cfg)


def test_pretrain_writes_the_run_folder_and_logs_every_term(pretrained):
    from pathlib import Path

    run = Path(pretrained["run_dir"])
    for f in ("config.yaml", "metrics.json", "metrics.csv", "CAUTION.txt", "bundle/bundle.json", "bundle/weights.pt"):
        assert (run / f).exists(), f
    assert json.loads((run / "metrics.json").read_text())["stage"] == "pretrain"
    logs = pd.read_csv(next(run.glob("logs/version_*/metrics.csv")))
    for k in ("train/phase_residual", "train/data_holdup", "train/data_pgrad", "train/prior", "train/smooth",
              "val/loss", "val/holdup_rmse"):
        assert k in logs.columns, k
    meta = load_bundle(pretrained["bundle"]).bundle_metadata
    assert meta["provenance"]["tables"][0]["source"] == {"synthetic": 48}
    assert pretrained["epochs"] == 3 and pretrained["seconds_per_epoch"] > 0


def test_learned_interfacial_friction_recovers_the_reference(tables):
    """Learning f_i on the reference's wall correlation: recovered to the stated tolerance
    (median 2 %, worst 20 % over the training states; measured 0.2 % and 8.4 % with the Weber
    feature log10(We), 0.23 % and 16.4 % with log10(1 + We), which is smooth at zero slip but
    compresses We < 1) where the baseline is off by > 15 % (measured median 34 %)."""
    cfg = load_config("train", [f"data.train={tables['lab']}", f"run_root={tables['root']}", *TINY,
                                "closure.wall=churchill", "model=interface", "model.hidden=[16,16]",
                                "trainer.max_epochs=150", "trainer.patience=0"])
    m = train(cfg)
    closure = load_bundle(m["bundle"])
    df = read_table(tables["lab"])
    (s,) = table_states(df, closure.baseline)
    with torch.no_grad():
        err = (closure(s).f_i / REF(s).f_i - 1).abs()
        err0 = (closure.baseline(s).f_i / REF(s).f_i - 1).abs()
    assert float(err0.median()) > 0.15
    assert float(err.median()) < 0.02 and float(err.max()) < 0.20, (float(err.median()), float(err.max()))
    # measured 0.0099 -> 0.0009 with the Weber feature log10(We) (floor 1e-30, whose rare -30 values
    # inflated the scaler and so muted the feature) and 0.0099 -> 0.0034 with log10(1 + We), smooth at
    # zero slip (no jumps of f_i inside the root finder): the criterion is 0.4 x the initial RMSE
    assert m["val"]["holdup_rmse"] < 0.4 * m["val_initial"]["holdup_rmse"]


@pytest.fixture(scope="module")
def finetuned(tables, pretrained):
    cfg = load_config("train", ["stage=finetune", f"init_bundle={pretrained['bundle']}", f"data.train={tables['lab']}",
                                f"data.val={tables['heldout']}", f"run_root={tables['root']}", *TINY,
                                "finetune.freeze_layers=1", "finetune.lr_factor=0.5", "trainer.max_epochs=40"])
    return train(cfg)


def test_finetuning_reduces_error_on_held_out_rows(finetuned):
    before, after = finetuned["val_initial"], finetuned["val"]
    assert after["n_rows"] == 30 and after["n_no_root"] == 0
    # measured: holdup RMSE 0.0122 -> 0.0085, pgrad relative RMS error 0.285 -> 0.167
    assert after["holdup_rmse"] < 0.8 * before["holdup_rmse"], (before, after)
    assert after["pgrad_rel_rmse"] < 0.7 * before["pgrad_rel_rmse"], (before, after)


def test_update_replays_earlier_rows_and_measures_forgetting(tables, finetuned):
    cfg = load_config("train", ["stage=update", f"init_bundle={finetuned['bundle']}", f"data.train={tables['lab_new']}",
                                f"data.replay=[{tables['lab']}]", "data.replay_fraction=0.5",
                                f"run_root={tables['root']}", *TINY, "trainer.max_epochs=5"])
    m = train(cfg)
    for k in ("holdup_rmse", "pgrad_rel_rmse"):
        assert m["forgetting"][k] == pytest.approx(m["replay_after"][k] - m["replay_before"][k])
        assert math.isfinite(m["forgetting"][k])
    assert m["replay_before"]["n_rows"] == 40
    roles = [t["role"] for t in load_bundle(m["bundle"]).bundle_metadata["provenance"]["tables"]]
    assert roles == ["train", "val", "replay"]


def test_finetune_replaying_the_pretraining_table_stays_closer_to_the_baseline(tables, pretrained):
    """A fine-tune that replays its synthetic pre-training rows (weighted) keeps the closure nearer
    the baseline on those rows than one that does not (rehearsal against forgetting, common
    practice); the lab rows still pull it away from the baseline."""
    common = ["stage=finetune", f"init_bundle={pretrained['bundle']}", f"data.train={tables['lab']}",
              f"run_root={tables['root']}", *TINY, "trainer.max_epochs=15", "trainer.patience=0"]
    plain = train(load_config("train", common + ["run_name=ft_plain", f"data.replay=[{tables['synth']}]",
                                                  "data.replay_weight=0.0"]))
    kept = train(load_config("train", common + ["run_name=ft_replay", f"data.replay=[{tables['synth']}]",
                                                 "data.replay_weight=1.0"]))
    # forgetting = error on the (baseline-labelled) synthetic rows after minus before
    assert kept["forgetting"]["holdup_rmse"] < plain["forgetting"]["holdup_rmse"], (kept["forgetting"], plain["forgetting"])
    assert plain["forgetting"]["holdup_rmse"] > 0
    roles = [t["role"] for t in load_bundle(kept["bundle"]).bundle_metadata["provenance"]["tables"]]
    assert roles == ["train", "val", "replay"]


class _Interrupt(Exception):
    pass


class _StopAt:
    """Lightning callback that raises at the start of a given epoch (an interruption)."""

    def __new__(cls, epoch: int):
        import lightning as L

        class Stop(L.Callback):
            def on_train_epoch_start(self, trainer, pl_module):
                if trainer.current_epoch == epoch:
                    raise _Interrupt

        return Stop()


def test_resume_after_interruption_gives_the_same_final_metrics(tables):
    # with the cosine schedule, so the scheduler state must come back from the checkpoint too
    common = [f"data.train={tables['lab']}", f"run_root={tables['root']}", *TINY, "trainer.max_epochs=6",
              "trainer.patience=0", "trainer.lr_schedule=cosine"]
    full = train(load_config("train", common + ["run_name=full"]))
    with pytest.raises(_Interrupt):
        train(load_config("train", common + ["run_name=cut"]), callbacks=[_StopAt(3)])
    last = tables["root"] / "cut" / "checkpoints" / "last.ckpt"
    assert last.exists()
    resumed = train(load_config("train", common + ["run_name=cut", f"resume={last}"]))
    assert resumed["run_dir"] == str(tables["root"] / "cut")
    for part in ("val", "train"):
        for k in ("holdup_rmse", "pgrad_rel_rmse"):
            assert resumed[part][k] == pytest.approx(full[part][k], rel=1e-9, abs=1e-12)
    assert resumed["best_val_loss"] == pytest.approx(full["best_val_loss"], rel=1e-9)


def test_cosine_schedule_decays_to_the_final_learning_rate(tables):
    """Cosine annealing (Loshchilov & Hutter 2017, eq. 5): lr_t = lr_min + (lr - lr_min)(1 + cos(pi t / T)) / 2."""
    import lightning as L

    seen: list[float] = []

    class Record(L.Callback):
        def on_train_epoch_start(self, trainer, pl_module):
            seen.append(trainer.optimizers[0].param_groups[0]["lr"])

    T, lr, final = 4, 1e-2, 0.1
    train(load_config("train", [f"data.train={tables['lab']}", f"run_root={tables['root']}", *TINY, "run_name=cos",
                                f"trainer.max_epochs={T}", "trainer.patience=0", "trainer.lr_schedule=cosine",
                                f"trainer.lr_final_factor={final}"]), callbacks=[Record()])
    lo = lr * final
    want = [lo + (lr - lo) * (1 + math.cos(math.pi * t / T)) / 2 for t in range(T)]
    assert seen == pytest.approx(want, rel=1e-12)
    with pytest.raises(ValueError, match="lr_schedule"):
        train(load_config("train", [f"data.train={tables['lab']}", f"run_root={tables['root']}", *TINY,
                                    "run_name=bad", "trainer.lr_schedule=steps"]))


def test_ensemble_members_give_a_spread(tables):
    cfg = load_config("train", [f"data.train={tables['lab']}", f"run_root={tables['root']}", *TINY,
                                "trainer.max_epochs=4", "ensemble.members=2", "ensemble.bootstrap=true"])
    m = train(cfg)
    ens = load_saved_closure(m["bundle"])
    assert isinstance(ens, ClosureEnsemble) and len(ens) == 2
    assert [mm["seed"] for mm in m["members"]] == [0, 1]
    assert m["ensemble"]["val_holdup_std_mean"] > 0
    pred = ens.predict(table_conditions(read_table(tables["heldout"])))
    assert bool((pred.holdup_std > 0).all()) and bool(pred.found.all())
    # the same members trained side by side in two spawned processes (seeded alike)
    par = train(load_config("train", [f"data.train={tables['lab']}", f"run_root={tables['root']}", *TINY,
                                      "trainer.max_epochs=4", "ensemble.members=2", "ensemble.bootstrap=true",
                                      "ensemble.processes=2"]))
    assert [mm["seed"] for mm in par["members"]] == [0, 1]
    for a, b in zip(m["members"], par["members"]):
        assert b["val"]["holdup_rmse"] == pytest.approx(a["val"]["holdup_rmse"], rel=1e-12)
    pp = load_saved_closure(par["bundle"]).predict(table_conditions(read_table(tables["heldout"])))
    assert torch.allclose(pp.holdup, pred.holdup, rtol=1e-12, atol=0)


@pytest.mark.ddp
def test_ddp_with_two_cpu_processes(tables):
    """Select with ``-m ddp``. Two spawned gloo processes train a tiny job; ranks agree on data."""
    cfg = load_config("train", [f"data.train={tables['lab']}", f"run_root={tables['root']}", *TINY,
                                "trainer=ddp", "trainer.max_epochs=2", "model.hidden=[4]", "trainer.batch_size=16"])
    m = train(cfg)
    assert m["epochs"] == 2 and math.isfinite(m["val"]["holdup_rmse"])
    assert load_bundle(m["bundle"]).bundle_metadata["config"]["trainer"]["devices"] == 2


def test_cli_train_needs_a_table_and_runs(tables, capsys):
    from closure_nn.cli import main

    assert main(["train"]) == 2
    assert "data.train" in capsys.readouterr().err
    assert main(["train", f"data.train={tables['lab']}", f"run_root={tables['root']}", *TINY,
                 "trainer.max_epochs=1", "run_name=cli"]) == 0
    assert (tables["root"] / "cli" / "bundle" / "bundle.json").exists()
