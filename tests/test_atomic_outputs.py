"""Atomic outputs: a failed or interrupted write leaves the previous file or bundle, never half of one.

Sources: write-to-a-temporary-file-then-rename is the POSIX rename(2) guarantee (the target names
either the old or the new file, IEEE Std 1003.1-2017, rename()); strict JSON has no NaN or
Infinity tokens (RFC 8259, section 6), so a strict parser must read every file we write.
"""
from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import torch

import closure_nn.closures.bundle as bundle_mod
from closure_nn.closures.bundle import load_bundle, save_bundle
from closure_nn.closures.neural import NeuralClosure
from closure_nn.data.table_io import read_table, write_table
from closure_nn.physics.checks import InputError
from closure_nn.run_folder import atomic_path, atomic_write_text, write_json


def _strict_load(path: Path):
    """json.loads that refuses NaN/Infinity (RFC 8259 has no such numbers)."""
    def refuse(token):
        raise ValueError(f"non-standard JSON number {token}")

    return json.loads(path.read_text(), parse_constant=refuse)


def _leftovers(folder: Path) -> list[Path]:
    return [p for p in folder.rglob("*") if p.name.startswith(".") or p.name.endswith(".part")]


def test_write_json_is_strict_json(tmp_path):
    p = write_json(tmp_path / "m.json", {"a": float("nan"), "b": [1.0, float("inf"), -np.inf],
                                          "c": np.float32(2.5), "d": torch.tensor([1.0, float("nan")]),
                                          "e": Path("x"), 3: (1, 2)})
    assert _strict_load(p) == {"a": None, "b": [1.0, None, None], "c": 2.5, "d": [1.0, None], "e": "x", "3": [1, 2]}


def test_failed_json_write_keeps_the_previous_file(tmp_path):
    p = write_json(tmp_path / "m.json", {"ok": 1})
    with pytest.raises(TypeError):
        write_json(p, {"bad": object()})
    assert _strict_load(p) == {"ok": 1}
    assert _leftovers(tmp_path) == []


def test_atomic_path_removes_the_temporary_file_on_error(tmp_path):
    p = atomic_write_text(tmp_path / "a.txt", "old\n")
    with pytest.raises(RuntimeError):
        with atomic_path(p) as tmp:
            tmp.write_text("half")
            raise RuntimeError("crash mid-write")
    assert p.read_text() == "old\n" and _leftovers(tmp_path) == []


def test_failed_table_write_keeps_the_previous_table(tmp_path, monkeypatch):
    df = pd.DataFrame({"vsl": [0.1, 0.2], "vsg": [1.0, 2.0]})
    p = write_table(df, tmp_path / "t.csv")

    def crash(self, *a, **k):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(pd.DataFrame, "to_csv", crash)
    with pytest.raises(OSError):
        write_table(df * 2, p)
    monkeypatch.undo()
    pd.testing.assert_frame_equal(read_table(p)[["vsl", "vsg"]], df)
    assert _leftovers(tmp_path) == []


def _closure(seed: int) -> NeuralClosure:
    net = NeuralClosure(hidden=(4,), baseline={"wall": "churchill"})
    g = torch.Generator().manual_seed(seed)
    with torch.no_grad():
        for prm in net.parameters():
            prm.copy_(torch.randn(prm.shape, generator=g, dtype=prm.dtype))
    return net


def _weights(c) -> list[torch.Tensor]:
    return [p.detach().clone() for p in c.parameters()]


@pytest.mark.parametrize("where", ["metadata", "swap"])
def test_crash_during_resave_keeps_the_previous_bundle(tmp_path, monkeypatch, where):
    path = tmp_path / "bundle"
    save_bundle(_closure(0), path, metrics={"holdup_rmse": 0.05})
    before = _weights(load_bundle(path))
    if where == "metadata":  # the new weights are written, the metadata write fails
        def crash(*a, **k):
            raise OSError(28, "No space left on device")

        monkeypatch.setattr(bundle_mod, "write_json", crash)
        expected = OSError
    else:  # the old bundle is renamed aside, then putting the new one in place fails
        real = bundle_mod.os.rename
        calls = []

        def rename(src, dst):
            calls.append((src, dst))
            if len(calls) == 2:
                raise KeyboardInterrupt  # as if the user pressed Ctrl-C between the two renames
            return real(src, dst)

        monkeypatch.setattr(bundle_mod.os, "rename", rename)
        expected = KeyboardInterrupt
    with pytest.raises(expected):
        save_bundle(_closure(1), path, metrics={"holdup_rmse": 0.01})
    monkeypatch.undo()
    after = load_bundle(path)
    assert all(torch.equal(a, b) for a, b in zip(before, _weights(after)))
    assert after.bundle_metadata["metrics"]["holdup_rmse"] == 0.05
    assert _leftovers(tmp_path) == []


def test_resave_replaces_the_bundle_and_keeps_a_users_file(tmp_path):
    path = tmp_path / "bundle"
    save_bundle(_closure(0), path)
    (path / "notes.txt").write_text("rig 2 campaign\n")
    save_bundle(_closure(1), path, metrics={"nan_metric": math.nan})
    new = load_bundle(path)
    assert all(torch.equal(a, b) for a, b in zip(_weights(new), _weights(_closure(1))))
    assert (path / "notes.txt").read_text() == "rig 2 campaign\n"
    assert _strict_load(path / "bundle.json")["metrics"]["nan_metric"] is None
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bundle"]


def test_bundle_path_that_is_a_file_is_refused(tmp_path):
    f = tmp_path / "bundle"
    f.write_text("not a folder")
    with pytest.raises(InputError, match="exists and is not a folder"):
        save_bundle(_closure(0), f)
    assert f.read_text() == "not a folder"


def test_point_json_is_strict(capsys):
    from closure_nn.cli import main

    # a single stratified root: roots 2 and 3 are absent and must be null, not NaN (RFC 8259)
    assert main(["point", "--vsl", "0.01", "--vsg", "1", "--D", "0.1", "--json"]) == 0
    out = capsys.readouterr().out
    def refuse(token):
        raise ValueError(token)
    data = json.loads(out, parse_constant=refuse)
    assert data["root_3"] is None
