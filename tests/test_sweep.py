"""Training sweeps with Hydra's multirun (closure_nn.training.sweep, ``closure-nn train --sweep``).

Source: Hydra's documented multirun behaviour (Hydra 1.3 documentation, "Multi-run" and
"Customizing working directory pattern", hydra.cc, read 2026-12-02): ``--multirun`` with comma-separated values
launches one job per combination, numbered in the order of the cartesian product (first key
slowest); each job has its own output folder ``hydra.sweep.dir/hydra.sweep.subdir`` (subdir
``${hydra.job.num}``) holding ``.hydra/overrides.yaml``; a failed job fails the multirun. The
training table is noise-free stratified equilibria of our baseline at invented air-water
conditions (plumbing only, no physics is checked here).
"""
from __future__ import annotations

import csv
import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from omegaconf import OmegaConf

from closure_nn.cli import main
from closure_nn.closures.baseline import BaselineClosure
from closure_nn.closures.bundle import load_bundle
from closure_nn.data.features import table_conditions
from closure_nn.data.table_io import write_table
from closure_nn.physics.holdup_roots import solve_separated

TINY = ["trainer.progress_bar=false", "trainer.max_epochs=2", "trainer.batch_size=64", "trainer.lr=1e-2"]


@pytest.fixture(scope="module")
def table(tmp_path_factory) -> Path:
    r = np.random.default_rng(7)
    n = 24
    df = pd.DataFrame(dict(
        vsl=10 ** r.uniform(-2.3, -1.0, n), vsg=r.uniform(4.0, 15.0, n), D=r.uniform(0.04, 0.08, n),
        theta=0.0, roughness=1e-4, rhol=998.0, rhog=1.2, mul=1e-3, mug=1.8e-5, sigma=0.072))
    sol = solve_separated(table_conditions(df), BaselineClosure())
    assert bool(sol.found.all())
    df["holdup"] = sol.holdup.detach().numpy()
    df["pgrad"] = sol.pgrad.total.detach().numpy()
    df["pattern"] = "stratified_wavy"
    return write_table(df, tmp_path_factory.mktemp("sweep_table") / "table.csv")


@pytest.fixture
def keep_logging():
    """Hydra sets up logging for every job; put the root logger back for the other tests."""
    from closure_nn.training.sweep import restored_logging

    with restored_logging():
        yield


def _summary(sweep: Path) -> list[dict[str, str]]:
    with open(sweep / "summary.csv", newline="") as fh:
        return list(csv.DictReader(fh))


def test_cli_sweep_runs_one_job_folder_per_value_and_a_summary(table, tmp_path, capsys):
    root = tmp_path / "runs"
    rc = main(["train", "--sweep", "model.hidden=[4],[6]", f"data.train={table}", f"run_root={root}", *TINY])
    out = capsys.readouterr().out
    assert rc == 0
    (sweep,) = root.glob("sweep-*")
    assert sorted(p.name for p in sweep.iterdir() if p.is_dir()) == ["0", "1"]
    assert (sweep / "multirun.yaml").exists()
    widths = {"0": [4], "1": [6]}  # job numbers in the order of the values
    rows = _summary(sweep)
    assert [r["job"] for r in rows] == ["0", "1"] and [r["model.hidden"] for r in rows] == ["[4]", "[6]"]
    for job, hidden in widths.items():
        folder = sweep / job
        assert f"model.hidden={hidden}".replace(" ", "") in OmegaConf.load(folder / ".hydra" / "overrides.yaml")
        run = folder / "train"
        saved = OmegaConf.load(run / "config.yaml")
        assert list(saved.model.hidden) == hidden and Path(saved.run_root) == folder
        assert list(load_bundle(run / "bundle").hidden) == hidden  # the swept value reached the network
        metrics = json.loads((run / "metrics.json").read_text())
        record = json.loads((folder / "job.json").read_text())
        assert record["status"] == "completed"
        # the job's return value (Hydra's JobReturn) is the best monitored validation loss
        assert record["objective"] == pytest.approx(metrics["best_val_loss"])
        row = rows[int(job)]
        assert row["status"] == "completed" and row["run_folder"] == f"{job}/train"
        assert float(row["best val/loss"]) == pytest.approx(metrics["best_val_loss"])
        assert int(row["epochs"]) == metrics["epochs"] == 2
    md = (sweep / "summary.md").read_text()
    assert "| job | model.hidden |" in md and "CAUTION" in md
    assert "| 0 | [4] | completed |" in out and "| 1 | [6] | completed |" in out
    assert sys.argv[0] != "closure-nn train --sweep"  # Hydra's argv handed back


def test_cli_sweep_checks_every_job_before_launching(tmp_path, capsys):
    root = tmp_path / "runs"
    assert main(["train", "--sweep", "seed=0,1", f"run_root={root}"]) == 2
    assert "data.train" in capsys.readouterr().err
    assert not root.exists()
    assert main(["train", "--sweep", "--show-config", "seed=0,1", "model=correction,direct", "data.train=x.csv"]) == 0
    jobs = [line for line in capsys.readouterr().out.splitlines() if line.startswith("#")]
    assert jobs == ["#0: seed=0 model=correction data.train=x.csv", "#1: seed=0 model=direct data.train=x.csv",
                    "#2: seed=1 model=correction data.train=x.csv", "#3: seed=1 model=direct data.train=x.csv"]


def test_module_entry_a_failed_job_fails_the_sweep_and_is_in_the_summary(table, tmp_path, monkeypatch, keep_logging):
    from closure_nn.training import sweep

    root = tmp_path / "runs"
    missing = tmp_path / "missing.csv"
    monkeypatch.setattr(sys, "argv", ["sweep", "-m", f"data.train={table},{missing}", f"run_root={root}",
                                      *TINY, "trainer.max_epochs=1"])
    with pytest.raises(SystemExit) as exc:
        sweep.main()
    assert exc.value.code == 1
    (folder,) = root.glob("sweep-*")
    rows = _summary(folder)
    assert [r["status"] for r in rows] == ["completed", "failed"]
    assert rows[1]["error"].startswith("FileNotFoundError") and rows[1]["run_folder"] == ""
    assert (folder / "0" / "train" / "bundle" / "bundle.json").exists()
